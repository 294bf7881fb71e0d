"""The `prunetrail` command: one parser, a module per group of subcommands.

Our own errors (`PrunetrailError`: bad input, impossible requests) print as one line and
exit 2; anything else is a bug and keeps its traceback.
"""

from __future__ import annotations

import argparse
from collections.abc import Sequence

from rich.text import Text

from tracer import __version__
from tracer.base import PrunetrailError
from tracer.cli import check, importing, solve, tours
from tracer.cli._console import err

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
3 solve stopped at a limit; 130 interrupted (Ctrl-C).
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
    importing.register(sub)
    tours.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; returns the exit status."""
    args = build_parser().parse_args(argv)
    try:
        status: int = args.run(args)
    except PrunetrailError as exc:
        err.print(Text(f"prunetrail {args.command}: {exc}", style="red"))
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        err.print(Text(f"prunetrail {args.command}: interrupted", style="yellow"))
        return EXIT_INTERRUPTED
    return status
