"""`prunetrail import`: a JSON Lines trace from another solver, turned into a trail."""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.text import Text

from tracer.cli._console import emit_json, out
from tracer.trails import STREAM_CHUNK_BYTES, ImportSummary, import_jsonl, stream_jsonl

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
    p.add_argument(
        "--chunk-mb",
        type=float,
        default=STREAM_CHUNK_BYTES / 2**20,
        metavar="MB",
        help="a trace in depth-first pre-order is written as it is read, this many MB of "
        "lines at a time, so memory stays a small multiple of it (default %(default)g); "
        "other orders are read whole",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    """Import a trace (streamed where its order allows) and report what it held."""
    target = Path(args.output or Path(args.source).with_suffix(".trail").name)
    chunk = max(int(args.chunk_mb * 2**20), 1 << 16)
    summary = stream_jsonl(args.source, target, chunk)
    if summary is None:
        trail = import_jsonl(args.source, target)
        summary = ImportSummary(trail.count, trail.header, trail.end, trail.notice)
    report = {
        "source": args.source,
        "trail": str(target),
        "nodes": summary.count,
        "visit_order": summary.header.solver.visit_order,
        "status": None if summary.end is None else summary.end.status,
        "trail_bytes": target.stat().st_size,
        "notice": summary.notice,
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
        if summary.notice:
            out.print(Text(f"note: {summary.notice}", style="yellow"))
    return 0
