"""Benchmark: import and check of a 1-million-line JSON Lines trace, the current importer
against the previous one (the stdlib `json` one), side by side in one run.

The previous importer is loaded from git (`tracer/trails/jsonl.py` at `OLD_COMMIT`) as a
module of its own, so both read the same file in the same process. "import + check" is
`read_jsonl` then the independent re-check, as `prunetrail check trace.jsonl` does. A third
row reads with the compiled lane switched off, so every node line takes the msgspec-typed
path: what each lane is worth.

Run: python tests/bench/bench_jsonl.py
"""

from __future__ import annotations

import importlib.util
import math
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from types import ModuleType
from typing import Any

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.foreign_traces import solve_to_trail, write_jsonl  # noqa: E402
from tracer.analysis import TreeIndex, recheck  # noqa: E402
from tracer.formats.load import load_instance  # noqa: E402
from tracer.search.driver import SearchSettings  # noqa: E402
from tracer.trails import jsonl  # noqa: E402
from tracer.trails._jsonl_scan import UNSUPPORTED  # noqa: E402

#: The commit whose importer is the baseline (json.loads and a check per field).
OLD_COMMIT = "8483669"
NODES = 1_000_000
REPEATS = 3
TARGET = 5.0


def old_importer() -> ModuleType:
    """The previous `tracer/trails/jsonl.py`, loaded from git as a separate module."""
    source = subprocess.run(
        ["git", "show", f"{OLD_COMMIT}:tracer/trails/jsonl.py"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=True,
    ).stdout
    spec = importlib.util.spec_from_loader("old_jsonl", loader=None)
    assert spec is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules["old_jsonl"] = module  # dataclasses look their module up by name
    exec(compile(source, "old_jsonl.py", "exec"), module.__dict__)
    return module


def typed_only(path: Path) -> Any:
    """`read_jsonl` with the compiled lane reading nothing: every line takes the typed path."""

    def nothing(buf: Any, pos: int, *args: Any) -> tuple[int, int, int, int]:
        return pos, args[5], 0, UNSUPPORTED  # args[5]: the row it would start at

    lane = jsonl.scan_nodes
    jsonl.scan_nodes = nothing  # type: ignore[assignment]
    try:
        return jsonl.read_jsonl(path)
    finally:
        jsonl.scan_nodes = lane


def timed(read: Any, path: Path) -> tuple[float, float, int]:
    """Seconds to read, seconds to re-check, and the node count."""
    began = time.perf_counter()
    trail = read(path)
    read_s = time.perf_counter() - began
    began = time.perf_counter()
    report = recheck(trail, TreeIndex(trail.columns, trail.best))
    check_s = time.perf_counter() - began
    assert report.wrong == 0, report.by_kind
    return read_s, check_s, trail.count


def main() -> list[dict[str, str]]:
    """Measure both importers on the same trace; print the table; return summary rows."""
    folder = Path(tempfile.mkdtemp())
    instance = load_instance(ROOT / "tests" / "data" / "gr17.tsp")
    trail = solve_to_trail(instance, folder / "g.trail", SearchSettings(max_nodes=NODES))
    trace = folder / "gr17.jsonl"
    lines = write_jsonl(trail, trace)
    size = trace.stat().st_size
    print(f"trace: gr17 (TSPLIB), first {trail.count:,} nodes of the search, {lines:,} lines, ")
    print(f"{size / 1e6:.0f} MB, parent ids, every bound part given\n")
    old = old_importer()
    warm = folder / "warm.jsonl"  # compiled helpers load their cache outside the clock
    write_jsonl(solve_to_trail(instance, folder / "w.trail", SearchSettings(max_nodes=2000)), warm)
    for read in (old.read_jsonl, typed_only, jsonl.read_jsonl):
        timed(read, warm)
    readers = {
        "previous (json)": old.read_jsonl,
        "typed path only (msgspec)": typed_only,
        "current (compiled lane + msgspec)": jsonl.read_jsonl,
    }
    results: dict[str, tuple[float, float]] = {}
    load = Path("/proc/loadavg").read_text().split()[0]
    for _ in range(REPEATS):  # interleaved, best of REPEATS: a busy moment counts less
        for name, read in readers.items():
            read_s, check_s, count = timed(read, trace)
            assert count == trail.count
            best = results.get(name, (math.inf, math.inf))
            if read_s + check_s < sum(best):
                results[name] = (read_s, check_s)
    load += " → " + Path("/proc/loadavg").read_text().split()[0]
    print(f"best of {REPEATS}, runs interleaved; 1-minute load average {load}\n")
    rows = []
    for name, (read_s, check_s) in results.items():
        total = read_s + check_s
        rows.append(
            f"| {name} | {read_s:.2f} s | {check_s:.2f} s | {total:.2f} s "
            f"| {lines / total / 1e6:.2f} M |"
        )
    print("| importer | import | check | import + check | lines/s |")
    print("|---|---:|---:|---:|---:|")
    print("\n".join(rows))
    old_total = sum(results["previous (json)"])
    new_total = sum(results["current (compiled lane + msgspec)"])
    ratio = old_total / new_total
    print(f"\nimport + check, current / previous: {ratio:.1f}× faster (target ≥ {TARGET:g}×)")
    return [
        {
            "measure": f"JSON Lines import + check, {lines / 1e6:.1f} M lines",
            "value": f"{lines / new_total / 1e6:.2f} M lines/s, {ratio:.1f}× the previous",
            "target": f"≥ {TARGET:g}× the previous importer",
        }
    ]


if __name__ == "__main__":
    main()
