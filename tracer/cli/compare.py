"""`prunetrail compare`: did my change help? Two trails of one instance side by side."""

from __future__ import annotations

import argparse

from rich import box
from rich.table import Column, Table
from rich.text import Text

from tracer.analysis import Comparison, compare_trails, format_length
from tracer.base import DECISION_NAMES
from tracer.cli._console import emit_json, err, out
from tracer.cli.stats import compact
from tracer.trails import open_trail

EXIT_DIFFERENT = 1

_EPILOG = """\
Nodes are matched by path (children by city), so two searches that try children in
another order still line up; the first difference is the first node, in A's path order,
whose decision, bound, set of children or child order differs.

examples:
  prunetrail compare before.trail after.trail
  prunetrail compare clean.trail faulty.trail --json

exit status: 0 the two searches are the same, 1 they differ, 2 unreadable input or
trails of different instances."""


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `compare` command."""
    p = sub.add_parser(
        "compare",
        help="compare two trails of one instance: counts, ratios, first difference",
        description="Compare two searches of the same instance: node counts per depth and "
        "decision with their ratio (B ÷ A), and the first node in path order where the "
        "two differ, with how (decision, bound, children, child order).",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("a", metavar="A", help="the first trail (.trail or .jsonl)")
    p.add_argument("b", metavar="B", help="the second trail, of the same instance")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    """Compare two trails and report."""
    a, b = open_trail(args.a), open_trail(args.b)
    for name, trail in ((args.a, a), (args.b, b)):
        if trail.notice and not args.json:
            err.print(Text(f"note: {name}: {trail.notice}", style="yellow"))
    comparison = compare_trails(a, b)
    if args.json:
        emit_json({"a": args.a, "b": args.b, **comparison.to_json()})
    else:
        _print_report(args.a, args.b, comparison, a.header.instance.integral)
    return 0 if comparison.first is None else EXIT_DIFFERENT


def _times(b: int, a: int) -> str:
    if a == 0:
        return "—" if b == 0 else "new"
    return f"{b / a:.2f}"


def _print_report(name_a: str, name_b: str, c: Comparison, integral: bool) -> None:
    total_a, total_b = c.counts_a.sum(axis=0), c.counts_b.sum(axis=0)
    inst = c.instance
    out.print(
        Text(
            f"A {name_a}: {int(total_a.sum()):,} nodes; B {name_b}: {int(total_b.sum()):,} "
            f"nodes (B ÷ A {_times(int(total_b.sum()), int(total_a.sum()))}); "
            f"instance {inst['name']}, {inst['n']} cities"
        )
    )
    totals = Table(
        "decision",
        *(Column(h, justify="right") for h in ("A", "B", "B ÷ A")),
        title="decisions",
        title_justify="left",
        box=box.SIMPLE_HEAD,
    )
    for code, name in enumerate(DECISION_NAMES):
        a, b = int(total_a[code]), int(total_b[code])
        totals.add_row(name, f"{a:,}", f"{b:,}", _times(b, a))
    out.print(totals)
    depths = Table(
        "depth",
        *(Column(h, justify="right") for h in ("A nodes", "B nodes", "B ÷ A")),
        *(Column(f"{h} ×", justify="right") for h in ("expand", "prune", "skip", "tours")),
        title="per depth (× columns: each decision's B ÷ A)",
        title_justify="left",
        box=box.SIMPLE_HEAD,
        padding=(0, 1),
    )
    for d in range(c.counts_a.shape[0]):
        ca, cb = c.counts_a[d], c.counts_b[d]
        if not ca.sum() and not cb.sum():
            continue
        tours_a, tours_b = int(ca[3] + ca[4]), int(cb[3] + cb[4])
        depths.add_row(
            str(d),
            compact(int(ca.sum())),
            compact(int(cb.sum())),
            _times(int(cb.sum()), int(ca.sum())),
            *(_times(int(cb[code]), int(ca[code])) for code in range(3)),
            _times(tours_b, tours_a),
        )
    out.print(depths)
    for side, how in c.unfinished.items():
        if how is not None:
            out.print(
                Text(
                    f"note: {side.upper()} did not end complete ({how}); nodes past its last "
                    "one are not compared",
                    style="yellow",
                )
            )
    first = c.first
    if first is None:
        out.print(
            Text(
                "the two searches are the same: every node, decision, bound and child order",
                style="green",
            )
        )
        return
    out.print(Text("first difference, in A's path order:", style="bold"))
    facts = Table(show_header=False, box=None, padding=(0, 1))
    facts.add_row("node", f"A {first.node_a}, B {first.node_b}")
    facts.add_row("path", " ".join(str(city) for city in first.path))
    facts.add_row("differs in", ", ".join(k.replace("_", " ") for k in first.kinds))
    facts.add_row("decision", f"A {first.decision_a}, B {first.decision_b}")
    facts.add_row(
        "bound",
        f"A {format_length(first.bound_a, integral)}, B {format_length(first.bound_b, integral)}",
    )
    facts.add_row(
        "incumbent",
        f"A {format_length(first.incumbent_a, integral)}, "
        f"B {format_length(first.incumbent_b, integral)}",
    )
    if {"children", "child_order"} & set(first.kinds):
        facts.add_row("children A", " ".join(str(x) for x in first.children_a) or "none")
        facts.add_row("children B", " ".join(str(x) for x in first.children_b) or "none")
    facts.add_row("in words", first.explanation)
    out.print(facts)
    kinds = ", ".join(
        f"{kind.replace('_', ' ')} {count:,}" for kind, count in c.differing.items() if count
    )
    firsts = ", ".join(
        f"{kind.replace('_', ' ')} at A {node}"
        for kind, node in c.first_of_kind.items()
        if node is not None
    )
    out.print(
        Text(
            f"nodes that differ, by kind: {kinds or 'none'} (first of each: {firsts}); paths "
            f"only in A: {c.only_a:,}, only in B: {c.only_b:,}"
        )
    )
