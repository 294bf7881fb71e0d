"""Time the exact-completion oracle; print a Markdown table for tests/bench/README.md.

Run as `python tests/bench/bench_oracle.py [TRAIL]`. Two figures against their targets:

- the Held–Karp table of a 20-city instance (seeded random cities, TSPLIB's EUC_2D rule):
  build time (best of three, after a warm-up that compiles) and peak memory traced by
  `tracemalloc` during one build (numpy reports its allocations to it), beside the table's
  own bytes;
- best completions of every node of a 10-million-node trail: TSPLIB gr17 searched at
  cutoff 8 with `--max-nodes 10000000` (built with `prunetrail solve` into a temporary
  folder unless a trail path is given), in nodes per second (best of three).
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

from tracer.analysis import TreeIndex, best_completions, completion_table
from tracer.base import Instance
from tracer.trails import open_trail

GR17 = Path(__file__).resolve().parents[1] / "data" / "gr17.tsp"
NODES = 10_000_000
REPEATS = 3


def _cities(n: int) -> Instance:
    coords = np.random.default_rng(20).uniform(0.0, 1000.0, size=(n, 2))
    return Instance(name=f"random{n}", metric="EUC_2D", coords=coords)


def _table_figures(n: int) -> tuple[float, int, int]:
    """Best build time, traced peak bytes and table bytes for an n-city table."""
    instance = _cities(n)
    _ = instance.matrix
    completion_table(_cities(8))  # compile (cached after the first run on a machine)
    best = float("inf")
    for _ in range(REPEATS):
        began = time.perf_counter()
        table = completion_table(instance)
        best = min(best, time.perf_counter() - began)
    del table
    tracemalloc.start()
    table = completion_table(instance)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return best, peak, table.nbytes


def _trail(given: str | None, folder: Path) -> Path:
    if given is not None:
        return Path(given)
    path = folder / "gr17-10M.trail"
    subprocess.run(
        [
            sys.executable,
            "-m",
            "tracer.cli",
            "solve",
            str(GR17),
            "--cutoff",
            "8",
            "--max-nodes",
            str(NODES),
            "-o",
            str(path),
        ],
        check=False,
        stdout=subprocess.DEVNULL,
    )
    return path


def main() -> list[dict[str, str]]:
    """Measure and print the table; return the summary rows for `run_all.py`."""
    seconds, peak, size = _table_figures(20)
    with tempfile.TemporaryDirectory() as tmp:
        trail = open_trail(_trail(sys.argv[1] if len(sys.argv) > 1 else None, Path(tmp)))
        index = TreeIndex(trail.columns, trail.best)
        table = completion_table(trail.header.instance)
        best_completions(trail, index, table)  # compile
        best = float("inf")
        for _ in range(REPEATS):
            began = time.perf_counter()
            completions = best_completions(trail, index, table)
            best = min(best, time.perf_counter() - began)
        known = int(np.isfinite(completions).sum())
    rate = trail.count / best
    print("| figure | measured | target |")
    print("|---|---:|---:|")
    print(f"| table, n = 20: build time | {seconds:.2f} s | < 3 s |")
    print(f"| table, n = 20: peak traced memory | {peak / 2**20:.1f} MB | < 200 MB |")
    print(f"| table, n = 20: table itself | {size / 2**20:.1f} MB | |")
    print(
        f"| completions, gr17 trail of {trail.count:,} nodes | {best:.2f} s, "
        f"{rate / 1e6:.1f} M nodes/s | ≥ 5 M nodes/s |"
    )
    print(f"\n{known:,} of {trail.count:,} nodes got a completion; optimum {table.optimum:g}")
    return [
        {"measure": "oracle table, n = 20", "value": f"{seconds:.2f} s", "target": "< 3 s"},
        {
            "measure": "oracle table, n = 20, peak memory",
            "value": f"{peak / 2**20:.1f} MB",
            "target": "< 200 MB",
        },
        {
            "measure": f"oracle completions ({trail.count / 1e6:.0f} M nodes)",
            "value": f"{rate / 1e6:.1f} M nodes/s",
            "target": ">= 5 M nodes/s",
        },
    ]


if __name__ == "__main__":
    main()
