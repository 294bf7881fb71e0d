"""Time each start-tour construction and improvement; print a Markdown table.

Run as `python tests/bench/bench_start_tours.py`. Two instances: 1,000 cities drawn
uniformly (seeded) from a 10,000 by 10,000 square under EUC_2D, and TSPLIB's kroA100.
Each improvement starts from the nearest-neighbour tour and is timed alone. A time is the
best of a few runs, so a busy moment on a shared machine counts less; "% above nn"
compares lengths within one instance, which is the figure to read across machines.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from functools import partial
from pathlib import Path

import numpy as np

from tracer.base.metrics import IntArray, Matrix, distance_matrix
from tracer.formats.load import load_instance
from tracer.search.improve import IMPROVEMENTS
from tracer.search.tours import CONSTRUCTIONS, nearest_neighbour, tour_length

SEED = 20_240_601
CITIES = 1_000
REPEATS = 3
KROA100 = Path(__file__).resolve().parents[1] / "data" / "kroA100.tsp"


def _best_time(run: Callable[[], IntArray]) -> tuple[float, IntArray]:
    """The fastest of `REPEATS` runs, in seconds, and the tour it returned."""
    best = float("inf")
    tour = run()
    for _ in range(REPEATS):
        began = time.perf_counter()
        tour = run()
        best = min(best, time.perf_counter() - began)
    return best, tour


def _rows(name: str, matrix: Matrix) -> list[str]:
    """One table row per construction, then per improvement of the nearest-neighbour tour."""
    nn_tour = nearest_neighbour(matrix)
    nn_length = tour_length(matrix, nn_tour)
    steps: list[tuple[str, Callable[[], IntArray]]] = [
        (key, partial(build, matrix)) for key, build in CONSTRUCTIONS.items()
    ]
    steps += [
        (f"nn → {key}", partial(improve, matrix, nn_tour))
        for key, improve in IMPROVEMENTS.items()
        if key != "none"
    ]
    rows = []
    for step, run in steps:
        seconds, tour = _best_time(run)
        length = tour_length(matrix, tour)
        above = 100.0 * (length / nn_length - 1.0)
        rows.append(f"| {name} | {step} | {seconds:.3f} | {length} | {above:+.1f} |")
    return rows


def main() -> list[dict[str, str]]:
    """Measure both instances, print the table, and return the 1,000-city time of the
    start tour `solve` uses by default."""
    coords = np.random.default_rng(SEED).uniform(0.0, 10_000.0, size=(CITIES, 2))
    instances = [
        (f"uniform{CITIES} (seed {SEED})", distance_matrix(coords, "EUC_2D")),
        ("kroA100", load_instance(KROA100).matrix),
    ]
    print("| instance | step | seconds | length | % above nn |")
    print("|---|---|---:|---:|---:|")
    summary = []
    for name, matrix in instances:
        for row in _rows(name, matrix):
            print(row, flush=True)
            if name == instances[0][0] and "nn → 2opt+oropt" in row:
                seconds = row.split("|")[3].strip()
                summary.append(
                    {"measure": f"{name}: nn → 2opt+oropt", "value": f"{seconds} s", "target": ""}
                )
    return summary


if __name__ == "__main__":
    main()
