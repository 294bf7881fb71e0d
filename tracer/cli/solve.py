"""`prunetrail solve`: run the recorded exact search and write its trail."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from rich.progress import BarColumn, Progress, SpinnerColumn, TextColumn, TimeElapsedColumn
from rich.table import Table
from rich.text import Text

from tracer import __version__
from tracer.base import (
    COMPLETE,
    INTERRUPTED,
    LIMIT,
    PENALTIES,
    TREE_LINKS,
    EndInfo,
    PrunetrailError,
)
from tracer.cli._args import count, path_prefix, seconds
from tracer.cli._console import emit_json, err, out
from tracer.cli._signals import stop_requests
from tracer.cli.tours import add_start_options
from tracer.formats import load_instance
from tracer.search import (
    BOUNDS,
    DEFAULT_CUTOFF,
    DEFAULT_PENALTY_STEPS,
    DEFAULT_ROOT_STEPS,
    FAULTS,
    ORDERS,
    RECORD_MODES,
    STEP_RULES,
    SearchResult,
    SearchSettings,
    make_start,
    run_search,
    trail_header,
    validate,
)
from tracer.search import Progress as SearchProgress
from tracer.trails import TrailWriter

EXIT_LIMIT = 3
EXIT_INTERRUPTED = 130

_EPILOG = (
    "examples:\n"
    "  prunetrail solve scenarios/orchard_rounds.tsp -o orchard.trail\n"
    "  prunetrail solve scenarios/lantern_ferry.tsp --cutoff 0 --json\n"
    "  prunetrail solve big.tsp --time-limit 60 --record decisions\n"
    "  prunetrail solve eil51.tsp --bound penalties --cutoff 2\n"
    "  prunetrail solve run.tsp --record-under '0 5 2' --start none\n\n"
    "planted faults (--fault), each a classic bound mistake made on purpose:\n"
    + "\n".join(f"  {name:<16} {text}" for name, (_, text) in FAULTS.items())
    + (
        "\n\nexit status: 0 search complete (the tour is optimal), 3 stopped at --max-nodes or "
        "--time-limit,\n130 interrupted (Ctrl-C or SIGTERM; the trail is closed and readable), "
        "2 bad input."
    )
)


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `solve` command."""
    p = sub.add_parser(
        "solve",
        help="run the recorded exact search and write a trail",
        description="Run the depth-first branch and bound (bound: partial length + minimum "
        "spanning tree over the unvisited cities + the two cheapest links; with --bound "
        "penalties the same over lengths raised by a penalty per city, less the penalties), "
        "recording every node into a trail file. Ctrl-C stops cleanly: the trail keeps every "
        "node so far.",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("instance", help="TSPLIB .tsp file or CSV city list (symmetric)")
    p.add_argument(
        "-o",
        "--output",
        metavar="RUN.trail",
        help="trail file to write (default: the instance file's name with .trail, here)",
    )
    p.add_argument("--no-trail", action="store_true", help="search without writing a trail")
    p.add_argument(
        "--cutoff",
        type=count,
        default=DEFAULT_CUTOFF,
        metavar="K",
        help="small-remainder cutoff: with K or fewer unvisited cities no bound is "
        f"computed (default: {DEFAULT_CUTOFF}, measured fastest on TSPLIB instances)",
    )
    p.add_argument(
        "--order",
        choices=ORDERS,
        default="nearest",
        help="child order: nearest city first, or by city number (default: nearest)",
    )
    add_start_options(p, allow_none=True)
    p.add_argument(
        "--bound",
        choices=BOUNDS,
        default=TREE_LINKS,
        help="tree+links; penalties (tree+links with a penalty per unvisited city, raised by "
        "subgradient steps: far fewer nodes from about 20 cities on); or none for full "
        "enumeration (teaching, tests)",
    )
    p.add_argument(
        "--penalty-steps",
        type=count,
        default=DEFAULT_PENALTY_STEPS,
        metavar="N",
        help=f"penalties bound: subgradient steps at each node (default: {DEFAULT_PENALTY_STEPS})",
    )
    p.add_argument(
        "--root-steps",
        type=count,
        default=DEFAULT_ROOT_STEPS,
        metavar="N",
        help=f"penalties bound: steps at the root (default: {DEFAULT_ROOT_STEPS})",
    )
    p.add_argument(
        "--step-rule",
        choices=list(STEP_RULES),
        default="gap",
        help="penalties bound: step size from the gap to the incumbent, shrinking each step",
    )
    p.add_argument(
        "--max-nodes", type=count, metavar="N", help="stop after N nodes (status: limit)"
    )
    p.add_argument(
        "--time-limit", type=seconds, metavar="S", help="stop after S seconds (status: limit)"
    )
    p.add_argument(
        "--record",
        choices=RECORD_MODES,
        default="all",
        help="all numbers; decisions (tree shape and decisions only); or none",
    )
    p.add_argument(
        "--record-under",
        type=path_prefix,
        metavar="PREFIX",
        help="record only the subtree under a path prefix such as '0 5 2' (and the path to it)",
    )
    p.add_argument(
        "--fault",
        choices=list(FAULTS),
        metavar="NAME",
        help="plant one classic bound mistake (listed below)",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def _progress_display(settings: SearchSettings) -> tuple[Progress, Any]:
    limited = settings.max_nodes is not None or settings.time_limit is not None
    columns: list[Any] = [SpinnerColumn(), TextColumn("searching")]
    if limited:
        columns.append(BarColumn())
    columns += [
        TextColumn("{task.fields[nodes]:>13,} nodes"),
        TextColumn("incumbent {task.fields[incumbent]}"),
        TextColumn("{task.fields[rate]:>7} nodes/s"),
        TimeElapsedColumn(),
    ]
    progress = Progress(*columns, console=err, transient=True, disable=not err.is_terminal)
    if settings.max_nodes is not None:
        total: float | None = float(settings.max_nodes)
    else:
        total = settings.time_limit
    task = progress.add_task("search", total=total, nodes=0, incumbent="-", rate="-")
    return progress, task


def _rate(nodes: int, seconds: float) -> str:
    if seconds <= 0:
        return "-"
    rate = nodes / seconds
    return f"{rate / 1e6:.1f}M" if rate >= 1e6 else f"{rate / 1e3:.0f}k"


def _number(value: float | None, integral: bool) -> int | float | None:
    if value is None:
        return None
    return round(value) if integral else value


def run(args: argparse.Namespace) -> int:
    """Run the search, write the trail, print the result."""
    instance = load_instance(args.instance)
    settings = SearchSettings(
        cutoff=args.cutoff,
        order=args.order,
        bound=args.bound,
        fault=args.fault,
        max_nodes=args.max_nodes,
        time_limit=args.time_limit,
        record=args.record,
        record_under=args.record_under,
        penalty_steps=args.penalty_steps,
        root_steps=args.root_steps,
        step_rule=args.step_rule,
    )
    validate(instance, settings)
    start = make_start(instance, args.start, args.improve)
    default = Path(args.instance).with_suffix(".trail").name
    trail_path = None if args.no_trail else Path(args.output or default)
    writer: TrailWriter | None = None
    if trail_path is not None:
        try:
            writer = TrailWriter(
                trail_path, trail_header(instance, settings, start, f"prunetrail {__version__}")
            )
        except OSError as exc:
            raise PrunetrailError(f"cannot write {trail_path}: {exc.strerror or exc}") from None
    progress, task = _progress_display(settings)

    def show(p: SearchProgress) -> None:
        done = p.nodes if settings.max_nodes is not None else p.seconds
        incumbent = "-" if p.incumbent == float("inf") else _number(p.incumbent, instance.integral)
        progress.update(
            task, completed=done, nodes=p.nodes, incumbent=incumbent, rate=_rate(p.nodes, p.seconds)
        )

    result: SearchResult | None = None
    try:
        with stop_requests() as stop, progress:
            result = run_search(
                instance, settings, start, sink=writer, on_progress=show, should_stop=stop
            )
    finally:
        trail_bytes = None
        if writer is not None:
            if result is None:  # a crash or a second Ctrl-C: keep what was recorded
                writer.close(EndInfo(INTERRUPTED, 0, writer.nodes_written, {}, 0.0, None))
            else:
                trail_bytes = writer.close(
                    EndInfo(
                        status=result.status,
                        nodes=result.nodes,
                        recorded=result.recorded,
                        decisions=result.decisions,
                        seconds=result.seconds,
                        length=result.length,
                        tour=result.tour,
                    )
                )
    report = {
        "instance": instance.name,
        "n": instance.n,
        "length": _number(result.length, instance.integral),
        "tour": result.tour,
        "status": result.status,
        "optimal": result.status == COMPLETE and result.length is not None,
        "nodes": result.nodes,
        "recorded": result.recorded,
        "decisions": result.decisions,
        "seconds": round(result.seconds, 6),
        "trail": None if trail_path is None else str(trail_path),
        "trail_bytes": trail_bytes,
        "start": None
        if start is None
        else {"method": start.method, "length": _number(start.length, instance.integral)},
        "settings": {
            "cutoff": settings.cutoff,
            "order": settings.order,
            "bound": settings.bound,
            "fault": settings.fault,
            "record": settings.record,
            "record_under": None if settings.record_under is None else list(settings.record_under),
            "max_nodes": settings.max_nodes,
            "time_limit": settings.time_limit,
            **(
                {
                    "penalty_steps": settings.penalty_steps,
                    "root_steps": settings.root_steps,
                    "step_rule": settings.step_rule,
                }
                if settings.bound == PENALTIES
                else {}
            ),
        },
    }
    if args.json:
        emit_json(report)
    else:
        _print_summary(report)
    return {COMPLETE: 0, LIMIT: EXIT_LIMIT}.get(result.status, EXIT_INTERRUPTED)


def _print_summary(report: dict[str, Any]) -> None:
    table = Table(show_header=False, box=None)
    status = report["status"]
    verdict = {
        COMPLETE: "complete: the tour is optimal",
        LIMIT: "stopped at a limit",
        INTERRUPTED: "interrupted",
    }[status]
    table.add_row("instance", Text(f"{report['instance']} ({report['n']} cities)"))
    table.add_row("status", Text(verdict, style="green" if status == COMPLETE else "yellow"))
    if report["start"]:
        table.add_row(
            "start tour", Text(f"{report['start']['method']}: {report['start']['length']}")
        )
    table.add_row("best length", Text(str(report["length"])))
    if report["tour"]:
        table.add_row("tour", Text(" ".join(str(c) for c in report["tour"])))
    table.add_row("nodes", Text(f"{report['nodes']:,}"))
    table.add_row(
        "decisions", Text(", ".join(f"{k} {v:,}" for k, v in report["decisions"].items()))
    )
    table.add_row("seconds", Text(f"{report['seconds']:.3f}"))
    if report["trail"]:
        size = report["trail_bytes"] or 0
        per = f", {size / report['recorded']:.1f} B/node" if report["recorded"] else ""
        table.add_row("trail", Text(f"{report['trail']} ({size:,} bytes{per})"))
    out.print(table)
