"""Time the independent re-check against the search it checks; print a Markdown table.

Run as `python tests/bench/bench_recheck.py`. TSPLIB's gr17 with the nn+2opt+oropt start
tour, fully recorded, at two cutoffs. For each: the search alone (no recording), then the
re-check of its trail with the tree index already built (the index is timed on its own
line: the viewer and every other analysis share it). A time is the best of a few runs, so
a busy moment on a shared machine counts less; the ratio check/search, taken side by side
in one run, is the figure to read across machines.
"""

from __future__ import annotations

import sys
import tempfile
import time
from collections.abc import Callable
from functools import partial
from pathlib import Path
from typing import Any

import numpy as np

from tracer.analysis.rechecking import recheck
from tracer.analysis.tree_index import TreeIndex
from tracer.base.frames import EndInfo
from tracer.base.instance import Instance
from tracer.formats.load import load_instance
from tracer.search.driver import SearchSettings, StartTour, run_search, trail_header
from tracer.search.tours import start_tour, tour_length
from tracer.trails.reader import Trail, read_trail
from tracer.trails.writer import TrailWriter

GR17 = Path(__file__).resolve().parents[1] / "data" / "gr17.tsp"
CUTOFFS = (0, 4)
REPEATS = 3


def _best_time(run: Callable[[], Any]) -> tuple[float, Any]:
    """The fastest of `REPEATS` runs after one warm-up, in seconds, and the last result."""
    result = run()
    best = float("inf")
    for _ in range(REPEATS):
        began = time.perf_counter()
        result = run()
        best = min(best, time.perf_counter() - began)
    return best, result


def _record(path: Path, instance: Instance, settings: SearchSettings, start: StartTour) -> Trail:
    """Run the search into a trail file and read it back."""
    writer = TrailWriter(path, trail_header(instance, settings, start, "prunetrail"))
    result = run_search(instance, settings, start=start, sink=writer)
    writer.close(
        EndInfo(
            result.status,
            result.nodes,
            result.recorded,
            result.decisions,
            result.seconds,
            result.length,
            result.tour,
        )
    )
    return read_trail(path)


def _row(
    folder: Path, instance: Instance, start: StartTour, cutoff: int
) -> tuple[str, float, float]:
    """One table row: the search alone, then the tree index and the re-check of its trail."""
    settings = SearchSettings(cutoff=cutoff)
    searched, result = _best_time(partial(run_search, instance, settings, start=start))
    trail = _record(folder / f"gr17-{cutoff}.trail", instance, settings, start)
    assert trail.count == result.nodes
    indexed, index = _best_time(partial(TreeIndex, trail.columns, trail.best))
    checked, report = _best_time(partial(recheck, trail, index))
    nodes = trail.count
    line = (
        f"| {cutoff} | {nodes:,} | {searched:.3f} | {nodes / searched / 1e6:.2f} M "
        f"| {indexed:.3f} | {checked:.3f} | {nodes / checked / 1e6:.2f} M "
        f"| {checked / searched:.2f} | {report.wrong} |"
    )
    return line, nodes / checked, checked / searched


def main() -> list[dict[str, str]]:
    """Measure both cutoffs, print the table, and return the cutoff-0 figures."""
    instance = load_instance(GR17)
    tour = start_tour(instance.matrix)
    start = StartTour("nn+2opt+oropt", tour, tour_length(instance.matrix, tour))
    print(
        "| cutoff | nodes | search s | search nodes/s | index s | check s | check nodes/s "
        "| check/search | wrong |"
    )
    print("|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    summary = []
    with tempfile.TemporaryDirectory() as folder:
        for cutoff in CUTOFFS:
            line, rate, ratio = _row(Path(folder), instance, start, cutoff)
            print(line, flush=True)
            if cutoff == 0:
                summary = [
                    {
                        "measure": "re-check, gr17 cutoff 0",
                        "value": f"{rate / 1e6:.2f} M nodes/s",
                        "target": "≥ 2 M",
                    },
                    {
                        "measure": "re-check time ÷ search time, cutoff 0",
                        "value": f"{ratio:.2f}",
                        "target": "",
                    },
                ]
    print(f"\nPython {sys.version.split()[0]}, numpy {np.__version__}")
    return summary


if __name__ == "__main__":
    main()
