"""Benchmark: opening a 100-million-node trail by its block index vs reading it into memory.

Figures: the time and peak memory to open (by the written index, by scanning, and by
`read_trail` + `TreeIndex`), and the latency of a step (one record's columns), a prefix
jump (the node for a path) and a subtree end at random nodes, lazily and in memory.

Run: python tests/bench/bench_blocks.py [nodes]
"""

from __future__ import annotations

import sys
import tempfile
import time
import tracemalloc
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from tracer.analysis.lazy_tree import lazy_view
from tracer.analysis.tree_index import TreeIndex
from tracer.base.frames import EndInfo
from tracer.formats.load import load_instance
from tracer.search.driver import SearchSettings, make_start, run_search, trail_header
from tracer.trails import open_blocks, scan_blocks
from tracer.trails.reader import read_trail
from tracer.trails.writer import TrailWriter

DATA = Path(__file__).resolve().parents[1] / "data"
NODES = 100_000_000
PROBES = 200


def measured(work: Callable[[], Any]) -> tuple[Any, float, int]:
    """(result, seconds, peak traced bytes) of one call."""
    tracemalloc.start()
    began = time.perf_counter()
    result = work()
    seconds = time.perf_counter() - began
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return result, seconds, peak


def per_call(work: Callable[[int], Any], nodes: list[int]) -> float:
    """Mean seconds of `work(node)` over the nodes."""
    began = time.perf_counter()
    for node in nodes:
        work(node)
    return (time.perf_counter() - began) / len(nodes)


def main() -> list[dict[str, str]]:
    nodes = int(sys.argv[1]) if len(sys.argv) > 1 else NODES
    instance = load_instance(DATA / "gr17.tsp")
    settings = SearchSettings(cutoff=6, max_nodes=nodes)
    start = make_start(instance, "nn", "2opt+oropt")
    path = Path(tempfile.mkdtemp()) / "large.trail"
    writer = TrailWriter(path, trail_header(instance, settings, start, "bench"))
    began = time.perf_counter()
    r = run_search(instance, settings, start, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length))
    solved = time.perf_counter() - began
    size = path.stat().st_size
    print(
        f"trail: gr17, cutoff 6, first {r.nodes:,} nodes, {size / 1e6:.0f} MB "
        f"({size / r.nodes:.2f} B/node), solved and written in {solved:.1f} s\n"
    )
    scan_blocks(path, use_index=False)  # warm the page cache
    lazy, by_index, index_peak = measured(lambda: open_blocks(path))
    scanned, by_scan, scan_peak = measured(lambda: scan_blocks(path, use_index=False))
    assert lazy.index.from_index and scanned.total == lazy.count == r.recorded
    trail, read, read_peak = measured(lambda: read_trail(path))
    tree, built, tree_peak = measured(lambda: TreeIndex(trail.columns, trail.best))
    rng = np.random.default_rng(1)
    probes = rng.integers(0, lazy.count, PROBES).tolist()
    lazy_tree = lazy.tree
    lazy_index = lazy_view(lazy)[1]  # the viewer's tree index on a block-read trail
    step = per_call(lambda n: [lazy.column(c.name, n, n + 1) for c in lazy.header.columns], probes)
    mem_step = per_call(lambda n: [trail.columns[c.name][n] for c in lazy.header.columns], probes)
    paths = [tree.path(n) for n in probes]
    jump = per_call(lambda i: lazy_index.node_for_prefix(paths[i]), list(range(PROBES)))
    mem_jump = per_call(lambda i: tree.node_for_prefix(paths[i]), list(range(PROBES)))
    end = per_call(lazy_tree.subtree_end, probes)
    mem_end = per_call(lambda n: int(tree.end[n]), probes)
    assert all(lazy_tree.subtree_end(n) == int(tree.end[n]) for n in probes[:20])
    print("| measure | lazy (block index) | in memory | lazy / in memory |")
    print("|---|---:|---:|---:|")
    print(
        f"| open: written index | {by_index * 1e3:.1f} ms | {read + built:.2f} s "
        f"(read {read:.2f} + index {built:.2f}) | {by_index / (read + built):.4f} |"
    )
    print(f"| open: scanning instead | {by_scan:.2f} s | | {by_scan / (read + built):.3f} |")
    print(
        f"| peak memory to open | index {index_peak / 1e6:.1f} MB, scan {scan_peak / 1e6:.1f} MB "
        f"| {(read_peak + tree_peak) / 1e6:.0f} MB | {index_peak / (read_peak + tree_peak):.4f} |"
    )
    print(
        f"| step: one record's columns, cold | {step * 1e3:.2f} ms | {mem_step * 1e6:.1f} µs "
        f"| {step / mem_step:.0f} |"
    )
    print(
        f"| prefix jump: node for a path | {jump * 1e3:.2f} ms | {mem_jump * 1e3:.3f} ms "
        f"| {jump / mem_jump:.1f} |"
    )
    print(f"| subtree end | {end * 1e3:.2f} ms | {mem_end * 1e6:.1f} µs | {end / mem_end:.0f} |")
    print(
        f"| block cache after the probes | {lazy.cache_used / 1e6:.1f} MB of "
        f"{lazy.cache_limit / 1e6:.0f} MB | | |"
    )
    print(f"\nblocks: {lazy.index.blocks}; load: {Path('/proc/loadavg').read_text().strip()}")
    where = f"{r.nodes / 1e6:.0f} M nodes"
    return [
        {
            "measure": f"open by the written index, {where}",
            "value": f"{by_index * 1e3:.1f} ms, {index_peak / 1e6:.1f} MB "
            f"(whole: {read + built:.1f} s)",
            "target": "",
        },
        {
            "measure": f"lazy step, cold, {where}",
            "value": f"{step * 1e3:.2f} ms",
            "target": "≤ 25 ms",
        },
        {
            "measure": f"lazy prefix jump, {where}",
            "value": f"{jump * 1e3:.2f} ms",
            "target": "≤ 25 ms",
        },
    ]


if __name__ == "__main__":
    main()
