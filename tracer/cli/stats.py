"""`prunetrail stats`: where a search spends itself, depth by depth."""

from __future__ import annotations

import argparse
import math

from rich import box
from rich.table import Column, Table
from rich.text import Text

from tracer.analysis import (
    FINAL_INCUMBENT,
    ORACLE_MAX_CITIES,
    CompletionTable,
    DepthStats,
    TreeIndex,
    best_completions,
    completion_table,
    depth_stats,
    format_length,
    stream_stats,
)
from tracer.base import DECISION_NAMES, Decision, InputError, Instance, Trail
from tracer.cli import _plot
from tracer.cli._console import emit_json, err, out
from tracer.cli.check import add_memory_option, sized_trace
from tracer.trails import BlockFile

#: Improvements listed in the human report (all of them go to --json).
_SHOWN_IMPROVEMENTS = 12

_EPILOG = f"""\
Tightness is bound ÷ the best possible completion of the node, from the exact-completion
oracle, for instances of up to {ORACLE_MAX_CITIES} cities; for larger ones (or with
--no-oracle) it is bound ÷ the final incumbent, and the report says so.
Effective branching factor: the b of a uniform tree as big and as deep as this one.

examples:
  prunetrail stats run.trail
  prunetrail stats run.trail --no-oracle --no-chart
  prunetrail stats trace.jsonl --json

exit status: 0 success, 2 unreadable input."""


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `stats` command."""
    p = sub.add_parser(
        "stats",
        help="per-depth counts, prune rates and bound tightness of a trail",
        description="Per depth of the search tree: nodes, each decision's count, the prune "
        "rate, bound evaluations and the bound's mean and worst tightness; the effective "
        "branching factor; the incumbent's improvements; a chart of nodes per depth.",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("trail", help="a .trail file, or a .jsonl trace from another solver")
    p.add_argument(
        "--no-oracle",
        action="store_true",
        help="measure tightness against the final incumbent even for a small instance",
    )
    p.add_argument("--no-chart", action="store_true", help="leave out the chart")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    add_memory_option(p)
    p.set_defaults(run=run)


def _table(instance: Instance, quiet: bool) -> CompletionTable | None:
    """The exact-completion table, or None when the instance is too large for it."""
    if instance.n > ORACLE_MAX_CITIES:
        return None
    try:
        with err.status("building the exact-completion table", spinner="dots"):
            return completion_table(instance)
    except InputError as exc:
        if not quiet:
            err.print(Text(f"note: {exc.message}; tightness is against the final incumbent"))
        return None


def run(args: argparse.Namespace) -> int:
    """Compute and print a trace's per-depth figures."""
    with sized_trace(args.trail, args.memory_mb) as trail:
        return _stats(args, trail)


def _stats(args: argparse.Namespace, trail: Trail | BlockFile) -> int:
    """Compute and print an opened trace's per-depth figures; the exit status."""
    if trail.notice and not args.json:
        err.print(Text(f"note: {trail.notice}", style="yellow"))
    table = None if args.no_oracle else _table(trail.header.instance, args.json)
    if isinstance(trail, Trail):
        completions = (
            None
            if table is None
            else best_completions(trail, TreeIndex(trail.columns, trail.best), table)
        )
        stats = depth_stats(trail, completions)
    else:
        stats = stream_stats(trail, table)
    if args.json:
        emit_json({"trail": args.trail, "notice": trail.notice, **stats.to_json()})
        return 0
    _print_report(args.trail, trail, stats)
    if not args.no_chart and stats.total:
        depths = list(range(stats.max_depth + 1))
        series = {
            name: [int(v) for v in stats.decisions[: len(depths), code]]
            for code, name in enumerate(DECISION_NAMES)
        }
        out.print(
            _plot.stacked_bars(
                depths,
                series,
                title="nodes per depth, by decision",
                xlabel="depth",
                width=out.width,
            )
        )
    return 0


def compact(count: int) -> str:
    """A count in at most six characters: 43 945 as "43.9k", 2 505 081 as "2.51M"."""
    if count < 100_000:
        return f"{count:,}"
    for unit, scale in (("k", 1e3), ("M", 1e6), ("G", 1e9)):
        if count < 1000 * scale or unit == "G":
            value = count / scale
            return f"{value:.3g}{unit}" if value < 100 else f"{value:.0f}{unit}"
    return str(count)


def _ratio(value: float) -> str:
    return "—" if math.isnan(value) else f"{value:.3f}"


def _print_report(name: str, trail: Trail | BlockFile, stats: DepthStats) -> None:
    inst = trail.header.instance
    out.print(
        Text(
            f"{name}: {inst.name}, {inst.n} cities, {stats.total:,} nodes, "
            f"{int(stats.bound_evaluations.sum()):,} bound evaluations, "
            f"effective branching factor {stats.effective_branching_factor:.2f}"
        )
    )
    if stats.tightness_source == FINAL_INCUMBENT:
        reference = format_length(stats.reference_length, stats.integral)
        basis = f"bound ÷ final incumbent {reference} (no oracle)"
    else:
        basis = "bound ÷ best possible completion (oracle)"
    table = Table(
        "depth",
        *(Column(h, justify="right") for h in ("nodes", "expand", "prune", "skip", "tours")),
        *(Column(h, justify="right") for h in ("pruned", "bounds", "mean", "worst", "branch")),
        title=f"per depth; tightness: {basis}",
        caption="tours: complete paths (improvements below); branch: children per node "
        "descended into; mean, worst: bound tightness (1 = exact)",
        title_justify="left",
        caption_justify="left",
        box=box.SIMPLE_HEAD,
        padding=(0, 0),
        show_edge=False,
    )
    rate, branching = stats.prune_rate, stats.branching
    for d in range(stats.max_depth + 1):
        c = stats.decisions[d]
        table.add_row(
            str(d),
            compact(int(stats.nodes[d])),
            compact(int(c[Decision.EXPAND])),
            compact(int(c[Decision.PRUNE])),
            compact(int(c[Decision.SKIP])),
            compact(int(c[Decision.TOUR] + c[Decision.TOUR_BETTER])),
            "—" if math.isnan(rate[d]) else f"{rate[d]:.0%}",
            compact(int(stats.bound_evaluations[d])),
            _ratio(float(stats.tightness_mean[d])),
            _ratio(float(stats.tightness_worst[d])),
            "—" if math.isnan(branching[d]) else f"{branching[d]:.2f}",
        )
    out.print(table)
    improvements = stats.improvements
    if not improvements:
        out.print(Text("no tour was found"))
        return
    shown = Table("node", "depth", "length", title="incumbent improvements", title_justify="left")
    for update in improvements[:_SHOWN_IMPROVEMENTS]:
        shown.add_row(
            "start tour" if update.node < 0 else str(update.node),
            "—" if update.depth is None else str(update.depth),
            format_length(update.length, stats.integral),
        )
    out.print(shown)
    if len(improvements) > _SHOWN_IMPROVEMENTS:
        out.print(Text(f"… and {len(improvements) - _SHOWN_IMPROVEMENTS} more (see --json)"))
