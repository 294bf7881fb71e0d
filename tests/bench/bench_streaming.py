"""Streaming `check` against in-memory `check` on a 100 M-node trail; print a Markdown table.

Run as `python tests/bench/bench_streaming.py [--big] [--keep DIR]`. The trail is written
by `prunetrail solve` here: gr17 at cutoff 6 (about 105 M nodes, 210 MB). Each check is
`prunetrail check TRAIL --json` in a process of its own, read whole (`--memory-mb` large)
or block by block (`--memory-mb 1`); its wall time (best of `REPEATS`) gives the rate and
its peak resident memory is the child's `ru_maxrss`. Both reports must be equal. With
`--big`, ulysses16 at cutoff 6 (about 2 G nodes, 4 GB on disk) is written too and checked
by streaming only, against the same in-memory rate; the file is deleted afterwards unless
`--keep` names a folder.

Targets (issue 13): streaming check of a >= 2 G-node trail with peak memory under 1.5 GB
and at least 80% of the in-memory rate measured on 100 M nodes in the same run.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

DATA = Path(__file__).resolve().parents[1] / "data"
REPEATS = 2
#: Targets: streaming rate ÷ in-memory rate, and peak memory of the streaming check.
RATE_TARGET = 0.80
PEAK_TARGET_GB = 1.5
_RUN = (
    "import resource, subprocess, sys, time\n"
    "began = time.perf_counter()\n"
    "done = subprocess.run(sys.argv[1:], stdout=subprocess.PIPE)\n"
    "took = time.perf_counter() - began\n"
    "peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss\n"
    "sys.stderr.write(f'{took} {peak * 1024} {done.returncode}\\n')\n"
    "sys.stdout.buffer.write(done.stdout)\n"
)


def _solve(instance: str, cutoff: int, path: Path) -> int:
    """Write the trail with `prunetrail solve`; its node count."""
    out = subprocess.run(
        [
            "prunetrail",
            "solve",
            str(DATA / instance),
            "-o",
            str(path),
            "--cutoff",
            str(cutoff),
            "--json",
        ],
        check=True,
        stdout=subprocess.PIPE,
    )
    return int(json.loads(out.stdout)["recorded"])


def _check(path: Path, memory_mb: int) -> tuple[float, int, dict[str, object]]:
    """One `check --json` in a fresh process: (seconds, peak bytes, report)."""
    command = ["prunetrail", "check", str(path), "--json", "--memory-mb", str(memory_mb)]
    done = subprocess.run([sys.executable, "-c", _RUN, *command], capture_output=True)
    took, peak, code = done.stderr.decode().split()[-3:]
    if int(code) not in (0, 1, 4):
        raise RuntimeError(f"check failed ({code}): {done.stderr.decode()}")
    report = json.loads(done.stdout)
    return float(took), int(peak), report


def _best(path: Path, memory_mb: int, repeats: int) -> tuple[float, int, dict[str, object]]:
    """The fastest of `repeats` checks, the largest peak among them, and the report."""
    runs = [_check(path, memory_mb) for _ in range(repeats)]
    return min(r[0] for r in runs), max(r[1] for r in runs), runs[-1][2]


def _row(what: str, nodes: int, seconds: float, peak: int, base_rate: float | None) -> str:
    rate = nodes / seconds
    ratio = f"{rate / base_rate:.2f}" if base_rate else "—"
    return (
        f"| {what} | {nodes / 1e6:,.0f} M | {seconds:.1f} | {rate / 1e6:.2f} M/s "
        f"| {ratio} | {peak / 2**30:.2f} GB |"
    )


def main() -> list[dict[str, str]]:
    """Build the trails, check them both ways, print the table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--big", action="store_true", help="also the 2 G-node ulysses16 trail")
    parser.add_argument("--keep", type=Path, help="write the trails here and keep them")
    args = parser.parse_args()
    folder = args.keep or Path(tempfile.mkdtemp(prefix="bench-streaming-"))
    folder.mkdir(parents=True, exist_ok=True)
    load_before = Path("/proc/loadavg").read_text().split()[:3]
    rows: list[str] = []
    small = folder / "gr17-6.trail"
    nodes = _solve("gr17.tsp", 6, small)
    whole_s, whole_peak, whole = _best(small, 1 << 20, REPEATS)
    stream_s, stream_peak, streamed = _best(small, 1, REPEATS)
    assert streamed == whole, "the streaming report differs from the in-memory one"
    base = nodes / whole_s
    rows.append(_row("gr17 c6, in memory", nodes, whole_s, whole_peak, None))
    rows.append(_row("gr17 c6, streaming", nodes, stream_s, stream_peak, base))
    summary = [
        {
            "measure": f"streaming check ÷ in-memory rate, {nodes / 1e6:.0f} M nodes",
            "value": f"{whole_s / stream_s:.2f} (peak {stream_peak / 2**30:.2f} GB, "
            f"in memory {whole_peak / 2**30:.2f})",
            "target": f"≥ {RATE_TARGET}",
        }
    ]
    verdict = [f"streaming ÷ in-memory rate on 100 M nodes: {whole_s / stream_s:.2f}"]
    if args.big:
        big = folder / "ulysses16-6.trail"
        try:
            many = _solve("ulysses16.tsp", 6, big)
            big_s, big_peak, report = _check(big, 1)
            assert report["wrong"] == 0
            rows.append(_row("ulysses16 c6, streaming", many, big_s, big_peak, base))
            ratio = many / big_s / base
            verdict.append(
                f"2 G-node streaming: rate ratio {ratio:.2f} (target >= {RATE_TARGET}), peak "
                f"{big_peak / 2**30:.2f} GB (target < {PEAK_TARGET_GB} GB)"
            )
        finally:
            if args.keep is None:
                big.unlink(missing_ok=True)
    if args.keep is None:
        small.unlink(missing_ok=True)
        os.rmdir(folder)
    load_after = Path("/proc/loadavg").read_text().split()[:3]
    print(f"load average (1, 5, 15 min) before: {load_before}, after: {load_after}")
    print("| trail, check | nodes | seconds | rate | ÷ in-memory rate | peak memory |")
    print("|---|---:|---:|---:|---:|---:|")
    print("\n".join(rows))
    print()
    print("\n".join(verdict))
    return summary


if __name__ == "__main__":
    began = time.perf_counter()
    main()
    print(f"(benchmark took {time.perf_counter() - began:.0f} s)")
