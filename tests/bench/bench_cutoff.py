"""Benchmark: the small-remainder cutoff's effect on search time, to choose the default.

Run: python tests/bench/bench_cutoff.py
For each TSPLIB instance and cutoff 0..6: nodes, and seconds with every node recorded to a
trail (what `prunetrail solve` does by default), the best of two runs. Start tour
nn+2opt+oropt. The last table
gives each cutoff's time relative to the best cutoff of that instance, and their geometric
mean across instances: the default is the cutoff with the lowest mean.
"""

from __future__ import annotations

import math
import tempfile
import time
from pathlib import Path

from tracer.base.frames import EndInfo
from tracer.formats.load import load_instance
from tracer.search.driver import SearchSettings, make_start, run_search, trail_header
from tracer.trails.writer import TrailWriter

DATA = Path(__file__).resolve().parents[1] / "data"
INSTANCES = ("burma14", "ulysses16", "gr17", "gr21", "gr24", "fri26", "bayg29")
CUTOFFS = range(7)
REPEATS = 2  # best of two: the machine is shared


def timed_run(name: str, cutoff: int, path: Path) -> tuple[int, float]:
    instance = load_instance(DATA / f"{name}.tsp")
    start = make_start(instance, "nn", "2opt+oropt")
    settings = SearchSettings(cutoff=cutoff)
    began = time.perf_counter()
    writer = TrailWriter(path, trail_header(instance, settings, start, "bench"))
    r = run_search(instance, settings, start, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length))
    return r.nodes, time.perf_counter() - began


def main() -> list[dict[str, str]]:
    tmp = Path(tempfile.mkdtemp()) / "sweep.trail"
    timed_run("burma14", 0, tmp)  # compile / load the cache
    seconds: dict[str, list[float]] = {}
    print("| instance | " + " | ".join(f"cutoff {c}" for c in CUTOFFS) + " |")
    print("|---|" + "---:|" * len(CUTOFFS))
    for name in INSTANCES:
        row = [min(timed_run(name, c, tmp) for _ in range(REPEATS)) for c in CUTOFFS]
        seconds[name] = [s for _, s in row]
        cells = " | ".join(f"{n / 1e6:.2f} M, {s:.2f} s" for n, s in row)
        print(f"| {name} | {cells} |", flush=True)
    print("\ntime relative to the instance's fastest cutoff:\n")
    print("| instance | " + " | ".join(f"cutoff {c}" for c in CUTOFFS) + " |")
    print("|---|" + "---:|" * len(CUTOFFS))
    for name, times in seconds.items():
        best = min(times)
        print(f"| {name} | " + " | ".join(f"{t / best:.2f}" for t in times) + " |")
    means = [
        math.exp(sum(math.log(seconds[n][c] / min(seconds[n])) for n in seconds) / len(seconds))
        for c in CUTOFFS
    ]
    print("| geometric mean | " + " | ".join(f"{m:.2f}" for m in means) + " |")
    lowest = min(CUTOFFS, key=lambda c: means[c])
    print(f"\nlowest mean: cutoff {lowest}")
    default = SearchSettings().cutoff
    return [
        {
            "measure": "cutoff with the lowest geometric-mean time",
            "value": f"{lowest} (default {default}: {means[default]:.2f}× the fastest)",
            "target": "the default",
        }
    ]


if __name__ == "__main__":
    main()
