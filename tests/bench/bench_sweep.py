"""Benchmark: cutoff-sweep throughput, and what a process pool (or Dask) buys on this machine.

Run: python tests/bench/bench_sweep.py
One plan (TSPLIB burma14 and gr17, two uniform and two clustered random 11-city instances,
cutoffs 0-5, three timed runs per cell plus one counted run) is executed in this process,
in a pool of 2 worker processes, and on a 2-process Dask LocalCluster on loopback, in
turn, best of two passes each. Wall time includes starting the pool or cluster (spawned
workers import numpy and numba and load the compiled search from numba's cache; the Dask
cluster is started once, before the passes). "Σ search s" adds up the runs' own search
times: when it grows with the workers, the workers are competing for the cores.
"""

from __future__ import annotations

import os
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


def _timed(jobs: list, **how: object) -> tuple[float, int, float]:
    """Wall seconds, nodes searched, and the sum of the runs' own search seconds."""
    began = time.perf_counter()
    table = SweepTable(jobs)
    nodes, searching = 0, 0.0
    for outcome in execute(jobs, **how):  # type: ignore[arg-type]
        table.add(outcome)
        nodes += outcome.nodes
        searching += outcome.seconds
    assert len(table.rows) == len(jobs) // (REPEAT + 1)
    return time.perf_counter() - began, nodes, searching


def main() -> list[dict[str, str]]:
    jobs = _plan()
    list(execute(jobs[:2], workers=1))  # load the compiled search in this process
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
    load_before = os.getloadavg()[0]
    best: dict[str, tuple[float, int, float]] = {}
    for _ in range(PASSES):
        for name, how in setups.items():
            got = _timed(jobs, **how)
            if name not in best or got[0] < best[name][0]:
                best[name] = got
    if cluster is not None:
        cluster.close()
    base = best["in process"][0]
    print(
        f"{len(jobs)} runs ({len(jobs) // (REPEAT + 1)} cells), best of {PASSES} passes; "
        f"1-minute load average {load_before:.1f} before, {os.getloadavg()[0]:.1f} after\n"
    )
    print("| executor | wall s | runs/s | M nodes/s | Σ search s | speed-up |")
    print("|---|---:|---:|---:|---:|---:|")
    for name, (seconds, nodes, searching) in best.items():
        print(
            f"| {name} | {seconds:.2f} | {len(jobs) / seconds:.1f} | "
            f"{nodes / seconds / 1e6:.1f} | {searching:.2f} | {base / seconds:.2f} |"
        )
    pooled = best["pool, 2 workers"][0]
    return [
        {"measure": "sweep runs/s, in process", "value": f"{len(jobs) / base:.1f}", "target": "—"},
        {
            "measure": "sweep pool speed-up, 2 workers",
            "value": f"{base / pooled:.2f}",
            "target": "—",
        },
    ]


if __name__ == "__main__":
    main()
