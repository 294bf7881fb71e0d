"""`prunetrail check`: the independent re-check of every record, with a CI-friendly exit."""

from __future__ import annotations

import argparse
from typing import Any

from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table
from rich.text import Text

from tracer.analysis import KINDS, REL_TOL, Finding, RecheckReport, TreeIndex, recheck
from tracer.base import SOURCE_ID, SOURCE_LINE, Trail
from tracer.cli._args import count, id_range
from tracer.cli._console import emit_json, err, out
from tracer.trails import open_trail

EXIT_WRONG = 1
#: Every record read checks, but the trail is incomplete (cut short, or no end frame).
EXIT_INCOMPLETE = 4

_EPILOG = f"""\
kinds of wrong record: {", ".join(KINDS)}.
Integer metrics are compared exactly; float metrics within a relative {REL_TOL:g}.

examples:
  prunetrail check run.trail
  prunetrail check run.trail --first 5 --range 1000:2000
  prunetrail check trace.jsonl --json

exit status: 0 every record checks, 1 some record is wrong, 2 unreadable input,
4 every record read checks but the trail is incomplete (cut short, or no end frame: a
live or crashed run); --json says so in its "complete" key."""


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `check` command."""
    p = sub.add_parser(
        "check",
        help="re-check every record of a trail independently",
        description="Recompute every recorded number (partial length, spanning tree, both "
        "links, bound) and judge every decision again against the incumbent in force, with "
        "an implementation written apart from the search. Accepts .trail and .jsonl files.",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("trail", help="a .trail file, or a .jsonl trace from another solver")
    p.add_argument(
        "--first",
        type=count,
        default=10,
        metavar="N",
        help="show the first N wrong records (default: 10)",
    )
    p.add_argument(
        "--range",
        type=id_range,
        metavar="A:B",
        dest="id_range",
        help="check only node ids A..B-1",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    """Check a trail and report."""
    trail = open_trail(args.trail)
    if trail.notice and not args.json:
        err.print(Text(f"note: {trail.notice}", style="yellow"))
    index = TreeIndex(trail.columns, trail.best)
    complete = trail.end is not None and trail.notice is None
    start, stop = args.id_range or (0, None)
    progress = Progress(
        TextColumn("checking"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        console=err,
        transient=True,
        disable=not err.is_terminal,
    )
    with progress:
        task = progress.add_task("check", total=None)

        def show(done: int, total: int) -> None:
            progress.update(task, completed=done, total=total)

        report = recheck(trail, index, start=start, stop=stop, first=args.first, on_progress=show)
    if args.json:
        result: dict[str, Any] = {
            "trail": args.trail,
            **report.to_json(),
            "complete": complete,
            "notice": trail.notice,
        }
        for finding in result["first"]:
            finding.update(_source(trail, finding["id"]))
        emit_json(result)
    else:
        _print_report(args.trail, report, trail)
    if not report.ok:
        return EXIT_WRONG
    return 0 if complete else EXIT_INCOMPLETE


def _source(trail: Trail, node: int) -> dict[str, int]:
    """The id the solver gave an imported node and the line it came from ({} if ours)."""
    if SOURCE_ID not in trail.columns:
        return {}
    return {
        "source_id": int(trail.columns[SOURCE_ID][node]),
        "source_line": int(trail.columns[SOURCE_LINE][node]),
    }


def _value(value: Any) -> Text:
    return Text("-" if value is None else str(value))


def _print_report(name: str, report: RecheckReport, trail: Trail) -> None:
    span = f"ids {report.start}..{report.stop - 1}" if report.nodes_checked else "no records"
    if report.ok:
        out.print(
            Text(f"{name}: all {report.nodes_checked:,} records check ({span})", style="green")
        )
        return
    out.print(
        Text(
            f"{name}: {report.wrong:,} of {report.nodes_checked:,} records are wrong ({span})",
            style="red",
        )
    )
    kinds = Table("kind", "wrong records", title="wrong records by kind", title_justify="left")
    for kind, wrong in report.by_kind.items():
        if wrong:
            kinds.add_row(Text(kind), Text(f"{wrong:,}"))
    out.print(kinds)
    if report.first:
        out.print(_findings_table(report.first, trail))


def _findings_table(findings: list[Finding], trail: Trail) -> Table:
    imported = SOURCE_ID in trail.columns
    table = Table(
        "id",
        *(["solver id", "line"] if imported else []),
        "kind",
        "field",
        "recorded",
        "recomputed",
        "path",
        "what is wrong",
        title=f"first {len(findings)} findings",
        title_justify="left",
    )
    for f in findings:
        source = [Text(str(v)) for v in _source(trail, f.id).values()]
        table.add_row(
            Text(str(f.id)),
            *source,
            Text(f.kind),
            Text(f.field),
            _value(f.recorded),
            _value(f.recomputed),
            Text(" ".join(str(c) for c in f.path)),
            Text(f.detail),
        )
    return table
