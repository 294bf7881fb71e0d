"""`prunetrail import`: a JSON Lines trace from another solver, turned into a trail."""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.text import Text

from tracer.cli._console import emit_json, out
from tracer.trails import import_jsonl

_EPILOG = """\
The JSON Lines format (one object per line: a header, then node, best and end lines) is
specified with a complete example in tracer/TRAIL_FORMAT.md. Ids may be any distinct
integers in visit order; they are renumbered to depth-first pre-order and the visit order
is kept, so a best-first search is judged against the incumbent in force at each visit.

examples:
  prunetrail import solver-trace.jsonl -o run.trail
  prunetrail check run.trail

exit status: 0 imported; 2 bad input (the message names the line and the field)."""


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `import` command."""
    p = sub.add_parser(
        "import",
        help="turn a JSON Lines trace from another solver into a trail",
        description="Read a trace printed by your own solver (JSON Lines, any language) and "
        "write it as a trail that check and the viewer read.",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("source", help="the JSON Lines trace (.jsonl)")
    p.add_argument(
        "-o",
        "--output",
        metavar="RUN.trail",
        help="trail to write (default: the source's name with .trail)",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    """Import a trace and report what it held."""
    target = Path(args.output or Path(args.source).with_suffix(".trail").name)
    trail = import_jsonl(args.source, target)
    report = {
        "source": args.source,
        "trail": str(target),
        "nodes": trail.count,
        "visit_order": trail.header.solver.visit_order,
        "status": None if trail.end is None else trail.end.status,
        "trail_bytes": target.stat().st_size,
        "notice": trail.notice,
    }
    if args.json:
        emit_json(report)
    else:
        order = ", visit order kept" if report["visit_order"] else ""
        out.print(
            Text(
                f"imported {report['nodes']:,} nodes{order} into {target} "
                f"({report['trail_bytes']:,} bytes)"
            )
        )
        if trail.notice:
            out.print(Text(f"note: {trail.notice}", style="yellow"))
    return 0
