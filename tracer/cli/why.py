"""`prunetrail why`: where a tour's branch was cut in a trail, and which number was to blame.

The analysis (`tracer.analysis.explain`) never runs the search; when `--optimal` is asked
of an instance too large for the exact-completion oracle, this command runs the engine's
own clean search (default bound, no fault) here, in the command layer, and hands the tour
it finds to the analysis.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import Any

from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn
from rich.table import Table
from rich.text import Text

from tracer.analysis import (
    ORACLE_MAX_CITIES,
    CompletionTable,
    OracleSizeError,
    TreeIndex,
    WhyReport,
    completion_table,
    explain,
    path_remainder,
    stream_explain,
)
from tracer.base import COMPLETE, INTERRUPTED, Instance, PrunetrailError, Trail
from tracer.cli._args import count
from tracer.cli._console import emit_json, err, out
from tracer.cli._signals import stop_requests
from tracer.cli.check import add_memory_option, sized_trace
from tracer.formats import format_instance, load_tour
from tracer.search import SearchSettings, make_start, run_search
from tracer.trails import BlockFile

#: The branch of the reference tour was lost to a wrong number, rule or incumbent.
EXIT_LOST = 1

_EPILOG = f"""\
verdicts (culprit): partial, tree, link_in, link_out, penalty (that recorded part was wrong),
bound_rule (pruned with a bound below the incumbent), inadmissible_bound (every number
right, but the bound exceeds the best tour through the node), incumbent (the incumbent in
force was wrong), none (the tour was completed, or its branch was pruned rightly).

With up to {ORACLE_MAX_CITIES} cities an exact Held-Karp table gives every node's best
possible completion: --optimal uses its optimum, and harmful prunes anywhere in the tree
are listed. Above that, --optimal runs the search itself (default bound, no fault).

examples:
  prunetrail why faulty.trail
  prunetrail why run.trail --tour best.tour
  prunetrail why run.trail --optimal --export-remainder left.tsp
  prunetrail why trace.jsonl --json

exit status: 0 the tour was completed or rightly pruned, 1 its branch was lost (culprit
other than none), 2 bad input, 130 interrupted."""


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `why` command."""
    p = sub.add_parser(
        "why",
        help="find where a tour's branch was cut, and why",
        description="Follow a reference tour (the optimum by default) down the recorded "
        "search tree, in both directions, to the node where its branch ended; show that "
        "node's bound part by part beside the incumbent in force and the true cost of "
        "finishing the branch, and name what was wrong.",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("trail", help="a .trail file, or a .jsonl trace from another solver")
    which = p.add_mutually_exclusive_group()
    which.add_argument("--tour", metavar="FILE.tour", help="the reference tour (TSPLIB tour file)")
    which.add_argument(
        "--optimal",
        action="store_true",
        help="use an optimal tour (the default when no --tour is given)",
    )
    p.add_argument(
        "--export-remainder",
        metavar="FILE.tsp",
        help="write the cut node's unvisited cities and its path's two ends as a TSPLIB instance",
    )
    p.add_argument(
        "--oracle-memory",
        type=count,
        default=1024,
        metavar="MB",
        help="largest exact-completion table to build, in MB (default: 1024; 0 turns the "
        "oracle off)",
    )
    p.add_argument(
        "--harmful", type=count, default=10, metavar="N", help="list N harmful prunes (default 10)"
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    add_memory_option(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    """Explain a trace against a reference tour and report."""
    with sized_trace(args.trail, args.memory_mb) as trail:
        return _why(args, trail)


def _why(args: argparse.Namespace, trail: Trail | BlockFile) -> int:
    """Explain an opened trace against a reference tour and report; the exit status."""
    if trail.count == 0:
        raise PrunetrailError(f"{args.trail}: the trail holds no nodes")
    if trail.notice and not args.json:
        err.print(Text(f"note: {trail.notice}", style="yellow"))
    instance = trail.header.instance
    table = _table(instance, args.oracle_memory, quiet=args.json)
    if args.tour is not None:
        tour: list[int] | None = [int(c) for c in load_tour(args.tour, instance)]
    elif table is None:
        tour = _clean_search(instance, quiet=args.json)
    else:
        tour = None
    if isinstance(trail, Trail):
        index = TreeIndex(trail.columns, trail.best)
        report = explain(trail, index, tour=tour, table=table, harmful_shown=args.harmful)
    else:
        report = stream_explain(trail, tour=tour, table=table, harmful_shown=args.harmful)
    exported = None
    if args.export_remainder:
        exported = _export(instance, report, Path(args.export_remainder))
    if args.json:
        emit_json(
            {
                "trail": args.trail,
                **report.to_json(),
                "oracle": table is not None,
                "remainder": exported,
            }
        )
    else:
        _print(args.trail, trail, report, table, exported)
    return 0 if report.culprit == "none" else EXIT_LOST


def _table(instance: Instance, megabytes: int, *, quiet: bool) -> CompletionTable | None:
    """The completion table, or None (with a note) when it is off or refused."""
    if megabytes == 0 or instance.n > ORACLE_MAX_CITIES:
        return None
    try:
        return completion_table(instance, memory_limit_bytes=megabytes * 1024 * 1024)
    except OracleSizeError as exc:
        if not quiet:
            err.print(Text(f"note: no exact completions: {exc.message}", style="yellow"))
        return None


def _clean_search(instance: Instance, *, quiet: bool) -> list[int]:
    """An optimal tour from the engine's own search, default bound and no fault."""
    settings = SearchSettings(record="none")
    start = make_start(instance, "nn", "2opt+oropt")
    progress = Progress(
        SpinnerColumn(),
        TextColumn("finding the optimum with a clean search"),
        TimeElapsedColumn(),
        console=err,
        transient=True,
        disable=quiet or not err.is_terminal,
    )
    progress.add_task("search", total=None)
    with stop_requests() as stop, progress:
        result = run_search(instance, settings, start, should_stop=stop)
    if result.status == INTERRUPTED:
        raise KeyboardInterrupt
    if result.status != COMPLETE or result.tour is None:
        raise PrunetrailError(
            f"the clean search of {instance.name} stopped ({result.status}) before proving "
            "its tour optimal; give the reference tour with --tour"
        )
    return list(result.tour)


def _export(instance: Instance, report: WhyReport, path: Path) -> str:
    """Write the sub-problem left at the reported node as TSPLIB text; returns the path."""
    sub, _ = path_remainder(instance, report.path, report.node)
    try:
        path.write_text(format_instance(sub), encoding="utf-8")
    except OSError as exc:
        raise PrunetrailError(f"cannot write {path}: {exc.strerror or exc}") from None
    return str(path)


def _shown(value: float | None, integral: bool) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    if math.isinf(value):
        return "inf"
    if integral and float(value).is_integer():
        return f"{int(value):,}"
    return f"{value:,.6g}"


def _print(
    name: str,
    trail: Trail | BlockFile,
    report: WhyReport,
    table: CompletionTable | None,
    exported: str | None,
) -> None:
    integral = trail.header.instance.integral
    reference = "the optimal tour" if table is not None else "the reference tour"
    out.print(
        Text(f"{name}: {reference}, length {_shown(report.tour_length, integral)}", style="bold")
    )
    out.print(Text("  " + " ".join(str(c) for c in report.tour)))
    where = report.cut_node if report.cut_node is not None else report.node
    facts = Table.grid(padding=(0, 2))
    facts.add_column(style="bold")
    facts.add_column()
    rows: list[tuple[str, Any]] = [
        ("node", where),
        ("path", " ".join(str(c) for c in report.path)),
        ("decision", report.decision),
        ("bound", report.bound),
        ("incumbent", report.incumbent if report.incumbent is not None else math.inf),
        ("best through it", report.completion),
    ]
    for label, value in rows:
        text = value if isinstance(value, str) else _shown(value, integral)
        facts.add_row(Text(label), Text(str(text)))
    out.print(facts)
    if report.parts:
        parts = Table("part", "recorded", "recomputed", "true", title_justify="left")
        for part, values in report.parts.items():
            parts.add_row(
                Text(part),
                *(
                    Text(_shown(values.get(k), integral))
                    for k in ("recorded", "recomputed", "true")
                ),
            )
        out.print(parts)
    style = "green" if report.culprit == "none" else "red"
    out.print(Text(f"culprit: {report.culprit}", style=f"bold {style}"))
    out.print(Text(report.explanation))
    if report.harmful_count is not None:
        _print_harmful(report, integral)
    if report.first_inadmissible is not None:
        out.print(
            Text(
                f"first node whose bound is not a lower bound: {report.first_inadmissible}",
                style="red",
            )
        )
    if exported is not None:
        out.print(Text(f"remainder written to {exported}"))


def _print_harmful(report: WhyReport, integral: bool) -> None:
    if not report.harmful_count:
        out.print(Text("no harmful prunes: every prune kept the best tour", style="green"))
        return
    shown = len(report.harmful_prunes)
    table = Table(
        "id",
        "bound",
        "best",
        "incumbent",
        "path",
        title=f"harmful prunes: {report.harmful_count:,} (first {shown})",
        title_justify="left",
    )
    for prune in report.harmful_prunes:
        table.add_row(
            Text(str(prune["id"])),
            Text(_shown(prune["bound"], integral)),
            Text(_shown(prune["completion"], integral)),
            Text(_shown(prune["incumbent"], integral)),
            Text(" ".join(str(c) for c in prune["path"])),
        )
    out.print(table)
