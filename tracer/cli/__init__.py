"""The `prunetrail` command: one parser, a module per group of subcommands.

Our own errors (`PrunetrailError`: bad input, impossible requests) print as one line and
exit 2; anything else is a bug and keeps its traceback.
"""

from __future__ import annotations

import argparse
import signal
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from types import FrameType
from typing import Any

from rich.text import Text

from tracer import __version__
from tracer.base import InputError, PrunetrailError
from tracer.cli import check, importing, solve, tours
from tracer.cli import compare as compare_command
from tracer.cli import stats as stats_command
from tracer.cli import sweep as sweep_command
from tracer.cli import why as why_command
from tracer.cli._console import emit_json, err

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130

_DESCRIPTION = (
    "Record every node of a branch-and-bound search for the travelling salesman problem, "
    "re-check every recorded number independently, and find where a search went wrong."
)
_EPILOG = """\
a first session:
  prunetrail info scenarios/orchard_rounds.tsp
  prunetrail solve scenarios/orchard_rounds.tsp -o orchard.trail
  prunetrail check orchard.trail
  prunetrail solve scenarios/orchard_rounds.tsp --fault stale-keys -o faulty.trail
  prunetrail check faulty.trail --first 3

exit status: 0 success; 1 check found wrong records; 2 bad input or usage;
3 solve stopped at a limit; 4 check: every record read checks but the trail is
incomplete (cut short, or no end frame); 130 interrupted (Ctrl-C).
With --json, an error is also one JSON object on stdout: error, file, line, offset.
Each command's --help lists its own options and exit codes."""


def build_parser() -> argparse.ArgumentParser:
    """The full command-line parser."""
    parser = argparse.ArgumentParser(
        prog="prunetrail",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"prunetrail {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    solve.register(sub)
    check.register(sub)
    why_command.register(sub)
    importing.register(sub)
    tours.register(sub)
    stats_command.register(sub)
    compare_command.register(sub)
    sweep_command.register(sub)
    return parser


@contextmanager
def _terminate_as_interrupt() -> Iterator[None]:
    """SIGTERM stops a command as Ctrl-C does, so files being written are closed cleanly.

    (`solve` installs its own polite handler for both while it searches.)
    """

    def handler(signum: int, frame: FrameType | None) -> None:
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread: leave signals alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def error_json(command: str, exc: PrunetrailError) -> dict[str, Any]:
    """The one JSON object `--json` prints for an error: what, in which file, where."""
    if isinstance(exc, InputError):
        return {
            "command": command,
            "error": exc.message,
            "file": exc.path,
            "line": exc.line,
            "offset": exc.offset,
        }
    return {"command": command, "error": str(exc), "file": None, "line": None, "offset": None}


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; returns the exit status."""
    return run_command(build_parser().parse_args(argv))


def run_command(args: argparse.Namespace) -> int:
    """Run the parsed command: our errors as one line (and, with --json, one JSON object),
    Ctrl-C and SIGTERM as "interrupted"; returns the exit status."""
    try:
        with _terminate_as_interrupt():
            status: int = args.run(args)
    except PrunetrailError as exc:
        err.print(Text(f"prunetrail {args.command}: {exc}", style="red"))
        if getattr(args, "json", False):
            emit_json(error_json(args.command, exc))
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        err.print(Text(f"prunetrail {args.command}: interrupted", style="yellow"))
        return EXIT_INTERRUPTED
    return status
