"""The `prunetrail` command with the viewer's subcommands added to tracer's parser.

`tracer` never imports the viewer, so the script entry point lives here: `main()` takes
`tracer.cli.build_parser()` and lets each module in `REGISTRARS` add its subcommand (the
viewer's `view` here; more viewer commands register the same way), then runs the chosen
command with the same one-line errors and exit codes as the rest of the CLI.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import re
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from rich.text import Text

from tracer.base import InputError
from tracer.cli import build_parser as tracer_parser
from tracer.cli import run_command
from tracer.cli._args import count, path_prefix
from tracer.cli._console import out
from tracer.cli.check import add_memory_option
from tui import demo, serve
from tui.loading import start_loading

if TYPE_CHECKING:
    from tui.app import PrunetrailApp

#: Longest side of a headless screenshot, in cells.
MAX_SIZE = 1000
#: Headless screenshots wait for the re-check of trails up to this many nodes.
SCREENSHOT_WAITS_UP_TO = 1 << 20
#: Seconds a headless screenshot waits for the background work at most.
SCREENSHOT_WAIT_SECONDS = 30.0

_VIEW_EPILOG = """\
examples:
  prunetrail view run.trail
  prunetrail view run.trail --prefix '0 5 2' --filter 'depth 4..8 and is prune'
  prunetrail view run.trail --filter wrong
  prunetrail view run.trail --at 1234 --screenshot node1234.svg --size 160x48
  prunetrail view solver_trace.jsonl

Inside the viewer, ? lists every key, the filter language and the stop list; the
command palette (ctrl+p) lists every action. Keys can be remapped in
~/.config/prunetrail/keys.toml (or the file named by $PRUNETRAIL_KEYS):
  [keys]
  next = "j,down"

A trail without an end frame is followed as it grows. A cut or corrupt trail opens with
everything readable and a notice saying where it stops.

exit status: 0 closed normally (or screenshot written); 2 bad input."""


def screen_size(text: str) -> tuple[int, int]:
    """Parse "160x48" (columns x rows)."""
    match = re.fullmatch(r"\s*(\d{1,4})\s*[xX]\s*(\d{1,4})\s*", text)
    if match is None:
        raise argparse.ArgumentTypeError(f"expected COLUMNSxROWS such as 160x48, not {text!r}")
    cols, rows = int(match.group(1)), int(match.group(2))
    if not (20 <= cols <= MAX_SIZE and 8 <= rows <= MAX_SIZE):
        raise argparse.ArgumentTypeError(f"size must be 20..{MAX_SIZE} x 8..{MAX_SIZE}")
    return cols, rows


def register_view(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `view` command."""
    p = sub.add_parser(
        "view",
        help="open a trail in the terminal viewer (step, filter, run to a stop, re-check)",
        description="Replay a recorded search node by node: a virtual list of every node, "
        "the bound's arithmetic, a map, a branch outline; filter by path prefix, depth, "
        "decision, wrong records or bound/incumbent ratio; run to stop conditions; the "
        "re-check runs in the background and marks wrong records as it finds them.",
        epilog=_VIEW_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("trail", metavar="RUN", help="a .trail file (or a JSON Lines trace, .jsonl)")
    p.add_argument("--at", type=count, metavar="ID", help="node id to start on")
    p.add_argument(
        "--prefix",
        type=path_prefix,
        metavar="P",
        help="show only the subtree under a path prefix such as '0 5 2'",
    )
    p.add_argument("--filter", metavar="EXPR", help="filter expression (see ? in the viewer)")
    p.add_argument(
        "--screenshot",
        metavar="OUT.svg",
        help="render the screen headless, write it as SVG and exit",
    )
    p.add_argument(
        "--size",
        type=screen_size,
        default=(160, 48),
        metavar="COLSxROWS",
        help="screen size for --screenshot (default: 160x48)",
    )
    add_memory_option(p, jsonl_streams=False)
    serve.add_serve_options(p)
    p.set_defaults(run=run_view)


#: Each adds one subcommand to the `prunetrail` parser.
REGISTRARS: tuple[Callable[[argparse._SubParsersAction[argparse.ArgumentParser]], None], ...] = (
    register_view,
    demo.register,
)


def build_parser() -> argparse.ArgumentParser:
    """tracer's parser with the viewer's subcommands added."""
    parser = tracer_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    for register in REGISTRARS:
        register(sub)
    return parser


def run_view(args: argparse.Namespace) -> int:
    """Open the viewer, or write one headless screenshot."""
    if args.serve:
        return serve.serve_view(args)
    shot = args.screenshot
    # The trail is read while the viewer's libraries load (they load only for this command).
    loading = start_loading(args.trail, follow=shot is None, memory_mb=args.memory_mb)
    from tui.app import PrunetrailApp

    prefix = " ".join(map(str, args.prefix)) if args.prefix else None
    app = PrunetrailApp(loading, at=args.at, prefix=prefix, filter=args.filter)
    if shot is None:
        app.run()
        return 0
    target = Path(shot)
    if not target.parent.is_dir():
        raise InputError(target, "the folder to write the screenshot into does not exist")
    asyncio.run(_screenshot(app, target, args.size))
    out.print(Text(f"wrote {target}"))
    return 0


async def _screenshot(app: PrunetrailApp, target: Path, size: tuple[int, int]) -> None:
    """Render `app` headless at `size`, let small trails finish re-checking, save the SVG."""
    async with app.run_test(size=size) as pilot:
        await pilot.pause()
        if app.model.count <= SCREENSHOT_WAITS_UP_TO:
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(app.workers.wait_for_complete(), SCREENSHOT_WAIT_SECONDS)
        await pilot.pause()
        app.save_screenshot(target.name, str(target.parent.resolve()))


def main(argv: Sequence[str] | None = None) -> int:
    """Run one `prunetrail` command; returns the exit status."""
    return run_command(build_parser().parse_args(argv))
