"""Benchmark: reading a 10-million-node trail (speed and peak memory), and the index.

Run: python tests/bench/bench_reader.py
"""

from __future__ import annotations

import tempfile
import time
import tracemalloc
from pathlib import Path

from tracer.analysis.tree_index import TreeIndex
from tracer.base.frames import EndInfo
from tracer.formats.load import load_instance
from tracer.search.driver import SearchSettings, make_start, run_search, trail_header
from tracer.trails.reader import read_trail
from tracer.trails.writer import TrailWriter

DATA = Path(__file__).resolve().parents[1] / "data"
NODES = 10_000_000


def main() -> list[dict[str, str]]:
    instance = load_instance(DATA / "gr17.tsp")
    settings = SearchSettings(cutoff=5, max_nodes=NODES)
    start = make_start(instance, "nn", "2opt+oropt")
    path = Path(tempfile.mkdtemp()) / "ten-million.trail"
    writer = TrailWriter(path, trail_header(instance, settings, start, "bench"))
    r = run_search(instance, settings, start, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length))
    size = path.stat().st_size
    print(
        f"trail: gr17, cutoff 5, first {r.nodes:,} nodes, {size / 1e6:.1f} MB on disk "
        f"({size / r.nodes:.2f} B/node)\n"
    )
    read_trail(path)  # warm the page cache
    times = []
    for _ in range(3):
        began = time.perf_counter()
        trail = read_trail(path)
        times.append(time.perf_counter() - began)
        del trail
    best = min(times)
    tracemalloc.start()
    trail = read_trail(path)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    decoded = sum(a.nbytes for a in trail.columns.values())
    print("| measure | value |")
    print("|---|---:|")
    print(f"| read, best of 3 | {best:.3f} s |")
    print(f"| records/s | {trail.count / best / 1e6:.1f} M |")
    print(f"| decoded columns | {decoded / 1e6:.0f} MB |")
    print(f"| peak traced memory while reading | {peak / 1e6:.0f} MB |")
    print(f"| peak / decoded | {peak / decoded:.2f} |")
    began = time.perf_counter()
    index = TreeIndex(trail.columns, trail.best)
    built = time.perf_counter() - began
    print(f"| tree index build (parents, ends, counts) | {built:.3f} s |")
    began = time.perf_counter()
    for node in range(0, trail.count, trail.count // 1000):
        index.node_for_prefix(index.path(node))
    print(f"| path + prefix lookup, 1000 nodes | {time.perf_counter() - began:.3f} s |")
    nodes = f"{trail.count / 1e6:.0f} M nodes"
    return [
        {
            "measure": f"read rate, {nodes}",
            "value": f"{trail.count / best / 1e6:.1f} M records/s",
            "target": "≥ 25 M",
        },
        {"measure": "bytes a node on disk", "value": f"{size / r.nodes:.2f}", "target": "≤ 6"},
        {
            "measure": f"peak memory reading / decoded columns, {nodes}",
            "value": f"{peak / decoded:.2f}",
            "target": "≤ 1.2",
        },
    ]


if __name__ == "__main__":
    main()
