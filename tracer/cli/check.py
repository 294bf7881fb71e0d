"""`prunetrail check`: the independent re-check of every record, with a CI-friendly exit."""

from __future__ import annotations

import argparse
import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table
from rich.text import Text

from tracer.analysis import (
    KINDS,
    REL_TOL,
    Finding,
    RecheckReport,
    TreeIndex,
    in_memory_bytes,
    recheck,
    stream_recheck,
    values_at,
)
from tracer.base import DEFAULT_MEMORY_MB, SOURCE_ID, SOURCE_LINE, FileKind, Trail, sniff
from tracer.cli._args import count, id_range
from tracer.cli._console import emit_json, err, out
from tracer.trails import BlockFile, open_blocks, open_trail, stream_jsonl

EXIT_WRONG = 1
#: Bytes of memory reading a JSON Lines trace whole and analysing it takes, per byte of the
#: file, rounded up. A node costs some 200 bytes however long its line (measured: `check`
#: of 1 M gr17 nodes peaked 193 MB above the command's own 173 MB, 1.3 a byte at 154-byte
#: lines, 2.3 at 87-byte lines without bound parts); the shortest node line is 72 bytes.
JSONL_MEMORY_FACTOR = 3
#: Every record read checks, but the trail is incomplete (cut short, or no end frame).
EXIT_INCOMPLETE = 4

_EPILOG = f"""\
kinds of wrong record: {", ".join(KINDS)}.
Integer metrics are compared exactly; float metrics within a relative {REL_TOL:g}.

examples:
  prunetrail check run.trail
  prunetrail check run.trail --first 5 --range 1000:2000
  prunetrail check trace.jsonl --json
  prunetrail check trace.jsonl --strict

Root findings (a value wrong although everything it is computed from is right) are
listed first, each with the count of knock-on findings it explains. Missed prunes
(descending where the rule prunes: time lost, no tour lost) are counted apart and do not
make the exit status 1 unless --strict.

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
    p.add_argument(
        "--strict",
        action="store_true",
        help="count missed prunes (descending although the bound or the path had reached "
        "the incumbent) as wrong decisions",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    add_memory_option(p)
    p.set_defaults(run=run)


def _scratch_dir(path: str) -> str | None:
    """Where a temporary trail goes: beside the trace (the system's temp folder is often
    memory-backed, which the memory setting is there to spare), else the temp folder."""
    folder = Path(path).resolve().parent
    return str(folder) if os.access(folder, os.W_OK | os.X_OK) else None


def add_memory_option(p: argparse.ArgumentParser, *, jsonl_streams: bool = True) -> None:
    """The --memory-mb option of the commands that can read a trail block by block
    (`jsonl_streams`: a large .jsonl goes through a temporary trail, as for `check`)."""
    jsonl = (
        "a .jsonl in depth-first pre-order goes through a temporary trail, other orders are "
        "read whole"
        if jsonl_streams
        else "a .jsonl is read whole"
    )
    p.add_argument(
        "--memory-mb",
        type=count,
        default=DEFAULT_MEMORY_MB,
        metavar="MB",
        help="read a trace whole when that takes at most MB megabytes, else block by "
        f"block in bounded memory, with the same results; {jsonl} "
        f"(default: {DEFAULT_MEMORY_MB})",
    )


def open_sized(path: str, memory_mb: int) -> Trail | BlockFile:
    """The trace in memory when it fits in `memory_mb`, else the .trail opened block by
    block (a JSON Lines trace, or a trail with a corrupt frame, is read whole as ever)."""
    if sniff(path) != FileKind.TRAIL:
        return open_trail(path)
    blocks = open_blocks(path)
    fits = in_memory_bytes(blocks.header, blocks.count) <= memory_mb * (1 << 20)
    if blocks.corrupt is None and not fits:
        return blocks
    blocks.close()
    return open_trail(path)


@contextmanager
def sized_trace(path: str, memory_mb: int) -> Iterator[Trail | BlockFile]:
    """`open_sized` for the length of the block; a JSON Lines trace too large to read whole
    is turned by the streamed import into a trail in a temporary folder and opened block by
    block, the folder removed however the block is left (an error, Ctrl-C, SIGTERM)."""
    if not _jsonl_too_large(path, memory_mb):
        trace = open_sized(path, memory_mb)
        if isinstance(trace, BlockFile):
            with trace:
                yield trace
        else:
            yield trace
        return
    with tempfile.TemporaryDirectory(prefix=".prunetrail-", dir=_scratch_dir(path)) as folder:
        streamed = _streamed(path, Path(folder))
        if streamed is not None:
            with streamed:
                yield streamed
            return
    yield open_trail(path)  # not in pre-order: read whole, as the import does


def _jsonl_too_large(path: str, memory_mb: int) -> bool:
    """Whether `path` is a JSON Lines trace whose whole-file analysis needs more than
    `memory_mb` megabytes (by its size and `JSONL_MEMORY_FACTOR`)."""
    if sniff(path) != FileKind.JSON_LINES:
        return False
    return os.path.getsize(path) * JSONL_MEMORY_FACTOR > memory_mb * (1 << 20)


def _streamed(path: str, folder: Path) -> BlockFile | None:
    """The trace imported block by block into `folder` and opened so, or None when its
    order needs the whole-file reading (a line wrong in itself raises, naming its line)."""
    target = folder / (Path(path).stem + ".trail")
    summary = stream_jsonl(path, target)
    if summary is None:
        return None
    blocks = open_blocks(target)
    blocks.notice = summary.notice  # the trace's (the trail's would call it a crashed run)
    return blocks


def run(args: argparse.Namespace) -> int:
    """Check a trace and report."""
    with sized_trace(args.trail, args.memory_mb) as trail:
        return _check(args, trail)


def _check(args: argparse.Namespace, trail: Trail | BlockFile) -> int:
    """Check an opened trace and report; the exit status."""
    if trail.notice and not args.json:
        err.print(Text(f"note: {trail.notice}", style="yellow"))
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

        if isinstance(trail, Trail):
            report = recheck(
                trail,
                TreeIndex(trail.columns, trail.best),
                start=start,
                stop=stop,
                first=args.first,
                on_progress=show,
                strict=args.strict,
            )
        else:
            report = stream_recheck(
                trail,
                start=start,
                stop=stop,
                first=args.first,
                on_progress=show,
                strict=args.strict,
            )
    sources = _sources(trail, report)
    if args.json:
        result: dict[str, Any] = {
            "trail": args.trail,
            **report.to_json(),
            "complete": complete,
            "notice": trail.notice,
        }
        for key in ("first", "first_roots", "first_missed"):
            for finding in result[key]:
                finding.update(sources.get(finding["id"], {}))
        emit_json(result)
    else:
        _print_report(args.trail, report, sources)
    if not report.ok:
        return EXIT_WRONG
    return 0 if complete else EXIT_INCOMPLETE


def _sources(trail: Trail | BlockFile, report: RecheckReport) -> dict[int, dict[str, int]]:
    """For each listed finding's node of an imported trace, the id its solver gave it and
    the line it came from (nothing for our own trails)."""
    ids = {f.id for f in (*report.first, *report.first_roots, *report.first_missed)}
    if trail.header.column(SOURCE_ID) is None or not ids:
        return {}
    if isinstance(trail, Trail):
        cols = trail.columns
        return {
            i: {"source_id": int(cols[SOURCE_ID][i]), "source_line": int(cols[SOURCE_LINE][i])}
            for i in ids
        }
    with open_blocks(trail.path) as again:
        found = values_at(again, sorted(ids), (SOURCE_ID, SOURCE_LINE))
    return {
        i: {"source_id": int(v[SOURCE_ID]), "source_line": int(v[SOURCE_LINE])}
        for i, v in found.items()
    }


def _value(value: Any) -> Text:
    return Text("-" if value is None else str(value))


#: Reasons short enough for an 80-column table, by finding kind (the full sentence, the
#: path, the arithmetic and any hint follow the table).
_SHORT = {
    "structure": "structure",
    "partial": "not parent's + edge",
    "tree": "not the MST weight",
    "link_in": "not the cheapest in",
    "link_out": "not the cheapest out",
    "bound": "not the parts' sum",
    "decision": "wrong decision",
    "missed_prune": "missed prune",
    "tour": "bad best frame",
}


def _print_report(name: str, report: RecheckReport, sources: dict[int, dict[str, int]]) -> None:
    span = f"ids {report.start}..{report.stop - 1}" if report.nodes_checked else "no records"
    if report.ok:
        out.print(
            Text(f"{name}: all {report.nodes_checked:,} records check ({span})", style="green")
        )
    else:
        knock_ons = report.knock_on_count
        out.print(
            Text(
                f"{name}: {report.wrong:,} of {report.nodes_checked:,} records are wrong ({span})",
                style="red",
            )
        )
        out.print(
            Text(
                f"{report.roots:,} root finding{'s' * (report.roots != 1)}, "
                f"{knock_ons:,} knock-on{'s' * (knock_ons != 1)} of them"
            )
        )
        kinds = ", ".join(f"{kind} {n:,}" for kind, n in report.by_kind.items() if n)
        out.print(Text(f"wrong records by kind: {kinds}"))
        if report.first_roots:
            out.print(_findings_table("root findings", report.first_roots, report))
            _print_notes(report.first_roots, sources)
        knock = [f for f in report.first if not f.root]
        if knock:
            out.print(_findings_table("knock-on findings", knock, report))
        if not report.first_roots and report.first:  # only frames, say; show them plainly
            out.print(_findings_table("findings", report.first, report))
            _print_notes(report.first, sources)
    if report.missed_prunes and not report.strict:
        out.print(
            Text(
                f"missed prunes: {report.missed_prunes:,} nodes descended although the rule "
                "prunes them (time lost, no tour lost; --strict counts them as wrong)",
                style="yellow",
            )
        )
        out.print(_findings_table("first missed prunes", report.first_missed, report))
        _print_notes(report.first_missed, sources)


def _findings_table(title: str, findings: list[Finding], report: RecheckReport) -> Table:
    roots = all(f.root for f in findings)
    table = Table(
        "id",
        "field",
        "recorded",
        "recomputed",
        "knock-ons" if roots else "root",
        "reason",
        title=f"{title} (first {len(findings)})",
        title_justify="left",
        box=None,
        padding=(0, 1),
        pad_edge=False,
        header_style="bold",
    )
    for f in findings:
        link = report.knock_ons.get(f.id, 0) if f.root else f.root_id
        table.add_row(
            Text(str(f.id)),
            Text(f.field),
            _value(f.recorded),
            _value(f.recomputed),
            _value(link),
            Text(_SHORT.get(f.kind, f.kind)),
        )
    return table


def _print_notes(findings: list[Finding], sources: dict[int, dict[str, int]]) -> None:
    """Under a table: what is wrong in full (with the arithmetic of a decision), the path
    (and for an imported trace the solver's own id and line), and any hint."""
    notes = Table.grid(padding=(0, 1))
    notes.add_column(justify="right", no_wrap=True)
    notes.add_column()
    for f in findings:
        text = Text(f.detail)
        text.append(f"\npath {' '.join(str(c) for c in f.path)}", style="dim")
        given = sources.get(f.id)
        if given:
            text.append(
                f" · solver id {given['source_id']}, line {given['source_line']}", style="dim"
            )
        if f.hint:
            text.append(f"\nhint: {f.hint}", style="cyan")
        notes.add_row(Text(f"{f.id}:"), text)
    out.print(notes)
