"""Benchmark: the viewer on a trail of at least 2 G nodes, opened block by block.

The trail is ulysses16 at cutoff 6, written by `prunetrail solve` here (about 2 G nodes,
5.4 GB; kept in the temp folder between runs). It is opened as written (the block index is
in its end frame) and as a copy cut after its last node block (no end frame, no index: the
viewer scans its first `FIRST_BYTES` and indexes the rest in the background).

Measured, each in its own process, in one run:
- the first screen from process start, started as `prunetrail view` starts, for both;
- per-key latency (step, page, prefix filter, decision filter, jump to node) with the
  Pilot harness of `bench_viewer` (`press` + `pause`), for the viewer without background
  work and for an empty Textual app: the issue's comparison;
- key-to-frame latency (from sending the key to the next frame handed to the display) for
  the same keys: without background work, with the streaming re-check running, and on the
  cut copy while it is being indexed. Pilot's `pause` waits for an idle process, which a
  busy background pass never gives, so these are timed to the frame instead (no
  empty-app comparison: an empty app draws no frame for these keys).

Targets (issue 13, with issue 9's): first screen within 2 s of launch; a prefix jump and a
step within 25 ms of the empty app's.

Run: python tests/bench/bench_viewer_large.py [--repeats R] [--trail PATH]
     [--instance NAME --cutoff C --memory-mb MB]  (smaller trails: a lower --memory-mb
     makes the viewer read them block by block)
"""

from __future__ import annotations

import time

T0 = time.perf_counter()

import argparse  # noqa: E402
import asyncio  # noqa: E402
import json  # noqa: E402
import os  # noqa: E402
import shutil  # noqa: E402
import statistics  # noqa: E402
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


def make_trail(folder: Path, instance: str, cutoff: int) -> Path:
    """The instance's trail at `cutoff`, as `prunetrail solve` writes it (kept between runs)."""
    path = folder / f"{instance}-{cutoff}.trail"
    if path.exists():
        return path
    partial = folder / f"{instance}-{cutoff}-partial.trail"
    solve = ["prunetrail", "solve", str(DATA / f"{instance}.tsp"), "-o", str(partial)]
    subprocess.run([*solve, "--cutoff", str(cutoff)], check=True, stdout=subprocess.DEVNULL)
    partial.rename(path)
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


async def frames(app: Any, repeats: int) -> dict[str, Any]:
    """Per-key latency from sending the key to the next frame handed to the display.

    Pilot's `pause` waits for the process to go idle, which never happens while a
    background pass (the re-check, the indexing) keeps a core busy; so with the background
    work running, each key is timed from the moment it is sent to the first frame drawn
    after it that shows the key's effect (the cursor or the rows changed), the way a person
    sees it: a frame the background work asked for before the key was handled is not it.
    """
    from textual import events

    drawn = [0]
    display = app._display

    def state() -> tuple[int, str, int]:
        return app.cursor, app.model.filter.text, len(app.model.rows)

    armed = [state()]

    def counted(screen: Any, renderable: Any) -> None:
        if renderable is not None and state() != armed[0]:
            drawn[0] += 1
        display(screen, renderable)

    app._display = counted

    async def timed(key: str) -> float:
        armed[0] = state()
        before, began = drawn[0], time.perf_counter()
        event = events.Key(key, None)
        event.set_sender(app)
        app._driver.send_message(event)
        while drawn[0] == before:
            if time.perf_counter() - began > 30:
                raise RuntimeError(f"no frame 30 s after {key}")
            await asyncio.sleep(0.0005)
        took = time.perf_counter() - began
        await asyncio.sleep(0.15)  # let the frame settle before the next key
        return took

    async def typed(pilot: Any, key: str, selector: str, text: str) -> None:
        await pilot.press(key)
        app.screen.query_one(selector).value = text
        await asyncio.sleep(0.3)

    timings: dict[str, list[float]] = {case: [] for case in bench_viewer.CASES}
    async with app.run_test(size=bench_viewer.SIZE) as pilot:
        await asyncio.sleep(1.0)
        count = app.model.count
        prefix = " ".join(map(str, app.model.index.path(count // 2)[:3]))
        for rep in range(repeats):
            timings["step"].append(await timed("down"))
            timings["page"].append(await timed("pagedown"))
            for case, text in (("prefix filter", prefix), ("decision filter", "is prune")):
                await typed(pilot, "f", "#filter", text)
                timings[case].append(await timed("enter"))
                app.apply_filter("")
                await asyncio.sleep(0.3)
            target = (count * 3 // 4 - rep * 1000) % count
            await typed(pilot, "i", "#goto-id", str(target))
            timings["jump to node"].append(await timed("enter"))
        checked, count = app.model.checked, app.model.count
    ms = {case: 1000 * statistics.median(t) for case, t in timings.items()}
    return {"ms": ms, "checked": checked, "count_at_end": count}


def child(kind: str, path: str, repeats: int, memory_mb: int) -> None:
    """One measured process: the empty app, or the viewer driven by keys (Pilot harness,
    no background work), timed to its frames (background work running), or its first
    screen."""
    if kind == "empty":
        bench_viewer.child("empty", path, repeats)
        return
    from tui.loading import start_loading

    quiet = kind.endswith("quiet")
    loading = start_loading(path, follow=not quiet, memory_mb=memory_mb)
    from tui.app import PrunetrailApp

    app = PrunetrailApp(loading, background=not quiet)
    if kind == "first-screen":
        result = asyncio.run(bench_viewer.first_screen(app))
    elif kind.startswith("frames"):
        result = asyncio.run(frames(app, repeats))
    else:
        result = asyncio.run(bench_viewer.drive(app, True, repeats))
    result["blocks"] = app.model.blocks is not None
    result["count"] = app.model.count
    print(json.dumps(result))


def _run(kind: str, path: Path, repeats: int, memory_mb: int = 0) -> dict[str, Any]:
    cmd = [sys.executable, __file__, "--child", kind, "--trail", str(path)]
    cmd += ["--repeats", str(repeats), "--memory-mb", str(memory_mb or 1)]
    done = subprocess.run(cmd, capture_output=True, text=True)
    if done.returncode:
        raise RuntimeError(f"{kind} on {path.name} failed:\n{done.stderr[-3000:]}")
    result: dict[str, Any] = json.loads(done.stdout.strip().splitlines()[-1])
    return result


def main(argv: list[str] | None = None) -> list[dict[str, str]]:
    """Run the children side by side; print the tables; return the summary rows."""
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--repeats", type=int, default=15)
    parser.add_argument(
        "--child", choices=("empty", "viewer-quiet", "frames", "frames-quiet", "first-screen")
    )
    parser.add_argument("--trail", help="the big trail (default: built in the temp folder)")
    parser.add_argument("--instance", default="ulysses16", help="tests/data instance to solve")
    parser.add_argument("--cutoff", type=int, default=6)
    parser.add_argument(
        "--memory-mb", type=int, default=2048, help="the viewer's memory setting (as `view`)"
    )
    args = parser.parse_args([] if argv is None else argv)
    if args.child:
        child(args.child, args.trail, args.repeats, args.memory_mb)
        return []
    folder = Path(tempfile.gettempdir()) / "prunetrail-bench-viewer-large"
    folder.mkdir(exist_ok=True)
    if shutil.disk_usage(folder).free < 12 << 30:
        raise SystemExit("needs about 12 GB free in the temp folder")
    began = time.perf_counter()
    written = Path(args.trail) if args.trail else make_trail(folder, args.instance, args.cutoff)
    cut = cut_copy(written)
    print(f"trails ready in {time.perf_counter() - began:.0f} s ({os.getloadavg()[0]:.1f} load)")
    empty = _run("empty", written, args.repeats)
    rows: list[dict[str, str]] = []
    launches = {
        label: _run("first-screen", path, args.repeats, args.memory_mb)
        for label, path in (("as written", written), ("cut, no index", cut))
    }
    nodes = launches["as written"]["count"]
    size = f"{nodes / 1e9:.2f} G" if nodes >= 10**8 else f"{nodes:,}"
    for label, launch in launches.items():
        assert launch["blocks"], "the big trail should open block by block"
        print(
            f"first screen, {label}: {launch['first_screen_s']:.2f} s "
            f"({launch['count']:,} nodes in the first snapshot)"
        )
        rows.append(
            {
                "measure": f"viewer first screen, {size} nodes, {label}",
                "value": f"{launch['first_screen_s']:.2f} s",
                "target": f"≤ {FIRST_SCREEN_TARGET:.0f} s",
            }
        )
    quiet = _run("viewer-quiet", written, args.repeats, args.memory_mb)
    calm = _run("frames-quiet", written, args.repeats, args.memory_mb)
    busy = _run("frames", written, args.repeats, args.memory_mb)
    still = _run("frames", cut, args.repeats, args.memory_mb)
    print()
    print(
        "| key | empty app (Pilot) | viewer, no background work (Pilot) | excess "
        "| key to frame, no background work | key to frame, re-check running "
        "| key to frame, indexing running (cut copy) |"
    )
    print("|---|---:|---:|---:|---:|---:|---:|")
    for case in bench_viewer.CASES:
        e, q = empty["ms"][case], quiet["ms"][case]
        print(
            f"| {case} | {e:.0f} ms | {q:.0f} ms | {q - e:+.0f} ms "
            f"| {calm['ms'][case]:.0f} ms | {busy['ms'][case]:.0f} ms "
            f"| {still['ms'][case]:.0f} ms |"
        )
    print(
        f"peak RSS, no background work: {quiet['peak_rss_mb']:.0f} MB; decoded-block "
        f"cache at most {quiet['columns_mb']:.0f} MB, block index {quiet['index_mb']:.1f} MB"
    )
    print(
        f"re-checked during the key presses: {busy['checked']:,}; indexed by their end "
        f"(cut copy): {still['count_at_end']:,} nodes"
    )
    worst = max(quiet["ms"][c] - empty["ms"][c] for c in bench_viewer.CASES)
    slowest = max(max(busy["ms"].values()), max(still["ms"].values()))
    rows += [
        {
            "measure": f"viewer worst key excess, {size} nodes (no background work)",
            "value": f"{worst:+.0f} ms",
            "target": f"≤ {KEY_TARGET_MS:.0f} ms",
        },
        {
            "measure": f"viewer slowest key to frame, {size} nodes, background work running",
            "value": f"{slowest:.0f} ms",
            "target": "(no target; shown for scale)",
        },
    ]
    print(f"load after: {os.getloadavg()[0]:.1f}")
    return rows


if __name__ == "__main__":
    main(sys.argv[1:])
