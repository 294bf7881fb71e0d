"""Benchmark: the viewer on a 10-million-node trail against an empty Textual app.

First screen time (from the child process's first line, imports included, to the first
drawn screen; once with the imports first, once started as `prunetrail view` starts, the
trail read while the viewer's libraries load), per-key latency (Pilot `press` + `pause`,
median of repeats) for a step, a page, a prefix filter, a decision filter and a jump to a
node, and memory (RSS) against the trail's decoded columns plus the tree index. Each app
runs in its own child process, driven by the same harness, in the same run, so the figures
are side by side. The first screen is stamped when the app hands its first rendered frame
to the (headless) display: Pilot's `pause` waits for the process to go idle, which with
the background re-check running takes up to a second after the screen is drawn.
The filter and go-to rows time the enter that closes the prompt line, the text already
typed and drawn (a pause after setting it, as a person's typing is drawn before enter).

Run: python tests/bench/bench_viewer.py [--nodes N] [--repeats R]
"""

from __future__ import annotations

import time

T0 = time.perf_counter()

import argparse  # noqa: E402
import asyncio  # noqa: E402
import json  # noqa: E402
import os  # noqa: E402
import resource  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
DATA = ROOT / "tests" / "data"
SIZE = (160, 48)
CASES = ("step", "page", "prefix filter", "decision filter", "jump to node")


def _rss_mb() -> float:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 1e6


def make_trail(nodes: int) -> Path:
    """gr17 at cutoff 6, the first `nodes` nodes (cached in the temp folder)."""
    from tracer.base import EndInfo
    from tracer.formats import load_instance
    from tracer.search import SearchSettings, make_start, run_search, trail_header
    from tracer.trails import TrailWriter

    path = Path(tempfile.gettempdir()) / f"prunetrail-bench-viewer-{nodes}.trail"
    if path.exists():
        return path
    instance = load_instance(DATA / "gr17.tsp")
    settings = SearchSettings(cutoff=6, max_nodes=nodes)
    start = make_start(instance, "nn", "2opt+oropt")
    writer = TrailWriter(path, trail_header(instance, settings, start, "bench"))
    r = run_search(instance, settings, start, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length))
    return path


def stamp_first_frame(app: Any, out: dict[str, Any]) -> None:
    """Record in `out` the seconds from process start to the app's first rendered frame."""
    display = app._display

    def first(screen: Any, renderable: Any) -> None:
        if renderable is not None and "first_screen_s" not in out:
            out["first_screen_s"] = time.perf_counter() - T0
        display(screen, renderable)

    app._display = first


async def _press(pilot: Any, key: str) -> float:
    began = time.perf_counter()
    await pilot.press(key)
    await pilot.pause()
    return time.perf_counter() - began


async def drive(app: Any, viewer: bool, repeats: int) -> dict[str, Any]:
    """The shared harness: first screen, then each case `repeats` times."""
    out: dict[str, Any] = {}
    stamp_first_frame(app, out)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        out["first_pause_s"] = time.perf_counter() - T0
        out["rss_first_screen_mb"] = _rss_mb()
        timings: dict[str, list[float]] = {case: [] for case in CASES}
        prefix = "0"
        if viewer:
            index = app.model.index
            prefix = " ".join(map(str, index.path(app.model.count // 2)[:3]))
        for rep in range(repeats):
            timings["step"].append(await _press(pilot, "down"))
            timings["page"].append(await _press(pilot, "pagedown"))
            for case, text in (("prefix filter", prefix), ("decision filter", "is prune")):
                if viewer:
                    await pilot.press("f")
                    app.screen.query_one("#filter").value = text
                    await pilot.pause()  # the typed text is drawn before enter is pressed
                timings[case].append(await _press(pilot, "enter"))
                if viewer:
                    app.apply_filter("")
                    await pilot.pause()
            if viewer:
                await pilot.press("i")
                target = (app.model.count * 3 // 4 - rep * 1000) % app.model.count
                app.screen.query_one("#goto-id").value = str(target)
                await pilot.pause()
            timings["jump to node"].append(await _press(pilot, "enter"))
        out["ms"] = {case: 1000 * statistics.median(t) for case, t in timings.items()}
        out["rss_after_keys_mb"] = _rss_mb()
        if viewer:
            model = app.model
            if model.blocks is None:
                out["columns_mb"] = sum(a.nbytes for a in model.trail.columns.values()) / 1e6
                out["index_mb"] = (model.index.parent.nbytes + model.index.end.nbytes) / 1e6
            else:  # a trail read block by block holds only its cache of decoded blocks
                out["columns_mb"] = model.blocks.cache_peak / 1e6
                out["index_mb"] = model.blocks.index.table.nbytes / 1e6
            out["rechecked"] = model.checked
    out["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e3
    return out


async def first_screen(app: Any) -> dict[str, Any]:
    """Seconds from process start to the first drawn screen (rows included), then quit."""
    out: dict[str, Any] = {}
    stamp_first_frame(app, out)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        assert app.model.count > 0
    return out


def child(kind: str, path: str, repeats: int) -> None:
    """One measured process: the viewer (with or without background work) or an empty app."""
    if kind == "first-screen":  # as `prunetrail view` starts: reading begins before imports
        from tui.loading import start_loading

        loading = start_loading(path)
        from tui.app import PrunetrailApp

        print(json.dumps(asyncio.run(first_screen(PrunetrailApp(loading)))))
        return
    from textual.app import App

    base = _rss_mb()
    if kind == "empty":
        app: Any = App()
        viewer = False
    else:
        import numpy as np

        from tracer.analysis import TreeIndex
        from tracer.base import CITY, DECISION, DEPTH
        from tui.app import PrunetrailApp

        one = {name: np.zeros(1, dtype=np.uint8) for name in (CITY, DEPTH, DECISION)}
        TreeIndex(one, [])  # numba's runtime loads once per process: part of the baseline
        base = _rss_mb()
        app = PrunetrailApp(path, background=kind == "viewer")
        viewer = True
    result = asyncio.run(drive(app, viewer, repeats))
    result["rss_before_open_mb"] = base
    print(json.dumps(result))


def main(argv: list[str] | None = None) -> list[dict[str, str]]:
    """Run the three children side by side; print the tables; return the summary rows."""
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--nodes", type=int, default=10_000_000)
    parser.add_argument("--repeats", type=int, default=15)
    parser.add_argument("--child", choices=("empty", "viewer", "viewer-quiet", "first-screen"))
    parser.add_argument("--trail")
    args = parser.parse_args([] if argv is None else argv)
    if args.child:
        child(args.child, args.trail, args.repeats)
        return []
    path = make_trail(args.nodes)
    print(f"trail: gr17, cutoff 6, first {args.nodes:,} nodes ({path.stat().st_size / 1e6:.0f} MB)")
    runs: dict[str, dict[str, Any]] = {}
    for kind in ("empty", "viewer", "viewer-quiet", "first-screen"):
        cmd = [sys.executable, __file__, "--child", kind, "--trail", str(path)]
        cmd += ["--repeats", str(args.repeats)]
        done = subprocess.run(cmd, capture_output=True, text=True, check=True)
        runs[kind] = json.loads(done.stdout.strip().splitlines()[-1])
    empty, busy, quiet = runs["empty"], runs["viewer"], runs["viewer-quiet"]
    launch = runs["first-screen"]
    print()
    print(
        "| key (press + pause, median) | empty app | viewer, re-check running | excess "
        "| viewer, no background work | excess |"
    )
    print("|---|---:|---:|---:|---:|---:|")
    for case in CASES:
        e, b, q = empty["ms"][case], busy["ms"][case], quiet["ms"][case]
        print(
            f"| {case} | {e:.0f} ms | {b:.0f} ms | {b - e:+.0f} ms | {q:.0f} ms | {q - e:+.0f} ms |"
        )
    print()
    budget = quiet["columns_mb"] + quiet["index_mb"]
    print("| measure | value |")
    print("|---|---:|")
    print(f"| first screen, from process start (empty app) | {empty['first_screen_s']:.2f} s |")
    seconds = busy["first_screen_s"]
    print(f"| first screen, from process start (viewer, imports first) | {seconds:.2f} s |")
    print(
        "| first screen, from process start (viewer started as `prunetrail view` is: "
        f"reading begins before the viewer's imports) | {launch['first_screen_s']:.2f} s |"
    )
    print(f"| decoded columns + index (parent, end) | {budget:.0f} MB |")
    before = busy["rss_before_open_mb"]
    print(f"| RSS before opening (libraries loaded, numba initialised) | {before:.0f} MB |")
    for label, run in (("re-check running", busy), ("no background work", quiet)):
        grown = run["peak_rss_mb"] - run["rss_before_open_mb"]
        print(f"| peak RSS, {label} | {run['peak_rss_mb']:.0f} MB |")
        print(
            f"| peak RSS − RSS before opening, {label} | {grown:.0f} MB ({grown / budget:.2f}×) |"
        )
        print(f"| peak RSS / (columns + index), {label} | {run['peak_rss_mb'] / budget:.2f}× |")
    print(f"| nodes re-checked by the end of the key presses | {busy['rechecked']:,} |")
    worst = max(quiet["ms"][c] - empty["ms"][c] for c in CASES)
    grown = quiet["peak_rss_mb"] - quiet["rss_before_open_mb"]
    return [
        {
            "measure": "viewer first screen, 10 M nodes",
            "value": f"{launch['first_screen_s']:.2f} s",
            "target": "≤ 2 s",
        },
        {
            "measure": "viewer worst key excess over an empty app",
            "value": f"{worst:+.0f} ms",
            "target": "≤ 25 ms",
        },
        {
            "measure": "viewer memory growth / (columns + index)",
            "value": f"{grown / budget:.2f}×",
            "target": "≤ 1.5×",
        },
    ]


if __name__ == "__main__":
    main(sys.argv[1:])
