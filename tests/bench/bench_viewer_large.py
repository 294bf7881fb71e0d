"""Benchmark: the viewer on a trail of at least 2 G nodes, opened block by block.

The trail is ulysses16 at cutoff 6, written by `prunetrail solve` here (about 2 G nodes,
5 GB; cached in the temp folder). It is opened twice: as written (the block index is in its
end frame) and as a copy cut after its last node block (no end frame, no index: the viewer
scans its first `FIRST_BYTES` and indexes the rest in the background). For each: the first
screen from process start, started as `prunetrail view` starts, and per-key latency for a
step, a page, a prefix filter, a decision filter and a jump to a node, against an empty
Textual app driven by the same Pilot harness in the same run (`bench_viewer.drive`), with
the background work (index, re-check) running as a user would have it. Also peak RSS.

Targets (issue 13, with issue 9's): first screen within 2 s of launch; a prefix jump and a
step within 25 ms of the empty app's.

Run: python tests/bench/bench_viewer_large.py [--repeats R] [--trail PATH]
"""

from __future__ import annotations

import time

T0 = time.perf_counter()

import argparse  # noqa: E402
import asyncio  # noqa: E402
import json  # noqa: E402
import os  # noqa: E402
import shutil  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import bench_viewer  # noqa: E402

DATA = HERE.parents[1] / "tests" / "data"
FIRST_SCREEN_TARGET = 2.0
KEY_TARGET_MS = 25.0


def make_trail(folder: Path) -> Path:
    """ulysses16 at cutoff 6, as `prunetrail solve` writes it (kept between runs)."""
    path = folder / "ulysses16-6.trail"
    if path.exists() and path.stat().st_size > 1 << 30:
        return path
    subprocess.run(
        ["prunetrail", "solve", str(DATA / "ulysses16.tsp"), "-o", str(path), "--cutoff", "6"],
        check=True,
        stdout=subprocess.DEVNULL,
    )
    return path


def cut_copy(path: Path) -> Path:
    """A copy of the trail ending after its last node block: no end frame, no index."""
    from tracer.trails import open_blocks

    target = path.with_name(path.stem + "-no-index.trail")
    with open_blocks(path) as blocks:
        stop = int(blocks.index.values("stop")[-1])
    if target.exists() and target.stat().st_size == stop:
        return target
    with open(path, "rb") as src, open(target, "wb") as dst:
        left = stop
        while left:
            chunk = src.read(min(left, 64 << 20))
            dst.write(chunk)
            left -= len(chunk)
    return target


def child(kind: str, path: str, repeats: int) -> None:
    """One measured process: the empty app, the viewer driven by keys, or its first screen."""
    if kind == "empty":
        bench_viewer.child("empty", path, repeats)
        return
    from tui.loading import start_loading

    loading = start_loading(path)
    from tui.app import PrunetrailApp

    app = PrunetrailApp(loading)
    if kind == "first-screen":
        result = asyncio.run(bench_viewer.first_screen(app))
    else:
        result = asyncio.run(bench_viewer.drive(app, True, repeats))
    result["blocks"] = app.model.blocks is not None
    result["count"] = app.model.count
    print(json.dumps(result))


def _run(kind: str, path: Path, repeats: int) -> dict[str, Any]:
    cmd = [sys.executable, __file__, "--child", kind, "--trail", str(path)]
    done = subprocess.run([*cmd, "--repeats", str(repeats)], capture_output=True, text=True)
    if done.returncode:
        raise RuntimeError(f"{kind} on {path.name} failed:\n{done.stderr[-3000:]}")
    result: dict[str, Any] = json.loads(done.stdout.strip().splitlines()[-1])
    return result


def main(argv: list[str] | None = None) -> list[dict[str, str]]:
    """Run the children side by side; print the tables; return the summary rows."""
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--repeats", type=int, default=15)
    parser.add_argument("--child", choices=("empty", "viewer", "first-screen"))
    parser.add_argument("--trail", help="the big trail (default: built in the temp folder)")
    args = parser.parse_args([] if argv is None else argv)
    if args.child:
        child(args.child, args.trail, args.repeats)
        return []
    folder = Path(tempfile.gettempdir()) / "prunetrail-bench-viewer-large"
    folder.mkdir(exist_ok=True)
    if shutil.disk_usage(folder).free < 12 << 30:
        raise SystemExit("needs about 12 GB free in the temp folder")
    began = time.perf_counter()
    written = Path(args.trail) if args.trail else make_trail(folder)
    cut = cut_copy(written)
    print(f"trails ready in {time.perf_counter() - began:.0f} s ({os.getloadavg()[0]:.1f} load)")
    empty = _run("empty", written, args.repeats)
    rows: list[dict[str, str]] = []
    print("| trail | nodes | first screen | key | empty app | viewer | excess |")
    print("|---|---:|---:|---|---:|---:|---:|")
    for label, path in (("as written (index in end frame)", written), ("cut, no index", cut)):
        launch = _run("first-screen", path, args.repeats)
        keyed = _run("viewer", path, args.repeats)
        assert launch["blocks"] and keyed["blocks"], "the big trail should open block by block"
        for case in bench_viewer.CASES:
            e, v = empty["ms"][case], keyed["ms"][case]
            print(
                f"| {label} | {launch['count']:,} | {launch['first_screen_s']:.2f} s | {case} "
                f"| {e:.0f} ms | {v:.0f} ms | {v - e:+.0f} ms |"
            )
        print(f"| {label}: peak RSS | | | | | {keyed['peak_rss_mb']:.0f} MB | |")
        worst = max(keyed["ms"][c] - empty["ms"][c] for c in bench_viewer.CASES)
        rows += [
            {
                "measure": f"viewer first screen, {launch['count'] / 1e9:.2f} G nodes, {label}",
                "value": f"{launch['first_screen_s']:.2f} s",
                "target": f"≤ {FIRST_SCREEN_TARGET:.0f} s",
            },
            {
                "measure": f"viewer worst key excess, 2 G nodes, {label}",
                "value": f"{worst:+.0f} ms",
                "target": f"≤ {KEY_TARGET_MS:.0f} ms",
            },
        ]
    print(f"load after: {os.getloadavg()[0]:.1f}")
    return rows


if __name__ == "__main__":
    main(sys.argv[1:])
