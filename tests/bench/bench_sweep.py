"""Benchmark: cutoff-sweep throughput, and what a process pool (or Dask) buys on this machine.

Run: python tests/bench/bench_sweep.py
One plan (TSPLIB burma14 and gr17, two uniform and two clustered random 11-city instances,
cutoffs 0-5, three timed runs per cell plus one counted run) is executed in this process,
in a pool of 2 worker processes, and on a 2-process Dask LocalCluster on loopback, in
turn, best of two passes each. Wall time includes starting the pool or cluster (spawned
workers import numpy and numba and load the compiled search from numba's cache).
"""

from __future__ import annotations

import time
from pathlib import Path

from tracer.formats.load import load_instance
from tracer.search.driver import SearchSettings, make_start
from tracer.search.sweep import SweepTable, execute, plan, random_instances

DATA = Path(__file__).resolve().parents[1] / "data"
CUTOFFS = range(6)
REPEAT = 3
PASSES = 2


def _plan() -> list:
    instances = [load_instance(DATA / f"{name}.tsp") for name in ("burma14", "gr17")]
    instances += random_instances(11, 2, 1)
    cells = [(i.name, i, make_start(i, "nn", "2opt+oropt")) for i in instances]
    return plan(cells, list(CUTOFFS), REPEAT, SearchSettings())


def _timed(jobs: list, **how: object) -> tuple[float, int, int]:
    began = time.perf_counter()
    table = SweepTable(jobs)
    nodes = 0
    for outcome in execute(jobs, **how):  # type: ignore[arg-type]
        table.add(outcome)
        nodes += outcome.nodes
    return time.perf_counter() - began, nodes, len(table.rows)


def main() -> None:
    jobs = _plan()
    _timed(jobs[:2], workers=1)  # load the compiled search in this process
    setups: dict[str, dict[str, object]] = {
        "in process": {"workers": 1},
        "pool, 2 workers": {"workers": 2},
    }
    cluster = None
    try:
        import distributed

        cluster = distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, host="127.0.0.1", dashboard_address=None
        )
        setups["Dask LocalCluster, 2 processes"] = {"dask_address": cluster.scheduler_address}
    except ImportError:
        print("distributed is not installed: the Dask row is left out")
    best: dict[str, tuple[float, int, int]] = {}
    for _ in range(PASSES):
        for name, how in setups.items():
            got = _timed(jobs, **how)
            if name not in best or got[0] < best[name][0]:
                best[name] = got
    if cluster is not None:
        cluster.close()
    base = best["in process"][0]
    print(f"{len(jobs)} runs ({len(jobs) // (REPEAT + 1)} cells), best of {PASSES} passes\n")
    print("| executor | wall s | runs/s | M nodes/s | speed-up |")
    print("|---|---:|---:|---:|---:|")
    for name, (seconds, nodes, _) in best.items():
        print(
            f"| {name} | {seconds:.2f} | {len(jobs) / seconds:.1f} | "
            f"{nodes / seconds / 1e6:.1f} | {base / seconds:.2f} |"
        )


if __name__ == "__main__":
    main()
