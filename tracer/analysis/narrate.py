"""One plain sentence for one step of a search: narrate(step) (viewer, walkthrough, why).

The bound panel, the Markdown walkthrough and `why` all say in words what a node's numbers
mean, so the words live here once, as pure functions of plain values. A sentence reads the
recorded numbers against the rule: when the recorded decision is not what the numbers call
for, it says so; when the exact-completion oracle is known, it says whether a prune was
safe (no tour through the branch beats the incumbent) or harmful.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tracer.analysis.rechecking import REL_TOL
from tracer.analysis.tree_index import TreeIndex
from tracer.base import (
    DECISION,
    DEPTH,
    LINK_OUT,
    PARTIAL,
    Decision,
    Trail,
    is_absent,
    recorded_bound,
)

#: How the bound's parts are called on screen and in sentences.
TERM_LABELS: dict[str, str] = {
    "partial": "partial",
    "tree": "tree",
    "link_in": "link in",
    "link_out": "link out",
    "penalty": "penalty",
}


@dataclass(frozen=True)
class Step:
    """What a sentence about one node needs to know.

    Attributes:
        decision: the recorded decision code (`tracer.base.Decision`).
        bound: the recorded bound, or None where none was evaluated.
        partial: the open path's length, or None if not recorded.
        incumbent: the best tour length in force (inf before any tour).
        unvisited: how many cities the path has not visited.
        cutoff: the small-remainder cutoff of the search.
        length: the closed tour's length at a complete path, else None.
        completion: the best length of any tour through this node (the oracle's), or None.
        integral: whether lengths are whole numbers (formatting and exact comparison).
    """

    decision: int
    bound: float | None
    partial: float | None
    incumbent: float
    unvisited: int
    cutoff: int
    length: float | None = None
    completion: float | None = None
    integral: bool = True


def format_length(value: float | None, integral: bool = True) -> str:
    """A length as people read it: digits in groups of three ("2 914", "1 204.57"), "∞", "—".

    Whole numbers of an integer metric show no decimals; a fractional part (the penalties
    bound's penalised lengths) always shows two.
    """
    if value is None or math.isnan(value):
        return "—"
    if math.isinf(value):
        return "∞" if value > 0 else "-∞"
    whole = integral and float(value).is_integer()
    text = f"{round(value):,}" if whole else f"{value:,.2f}"
    return text.replace(",", " ")


def recorded_value(trail: Trail, name: str, node: int) -> float | None:
    """A length column's value at a node, or None where the trail records none."""
    column = trail.columns.get(name)
    if column is None or bool(is_absent(column[node : node + 1])[0]):
        return None
    return float(column[node])


def node_step(trail: Trail, index: TreeIndex, node: int, completion: float | None = None) -> Step:
    """The `Step` of one recorded node, read from the trail (for `narrate`)."""
    depth = int(trail.columns[DEPTH][node])
    unvisited = max(trail.n - depth - 1, 0)
    partial = recorded_value(trail, PARTIAL, node)
    closing = recorded_value(trail, LINK_OUT, node)
    length = None
    if unvisited == 0 and partial is not None and closing is not None:
        length = partial + closing
    incumbent = float(index.incumbent_at(np.array([node], dtype=np.int64))[0])
    return Step(
        decision=int(trail.columns[DECISION][node]),
        bound=recorded_bound(trail, node) if unvisited > 0 else None,
        partial=partial,
        incumbent=incumbent,
        unvisited=unvisited,
        cutoff=trail.header.solver.cutoff,
        length=length,
        completion=completion,
        integral=trail.header.instance.integral,
    )


def reaches(value: float, incumbent: float, integral: bool = True) -> bool:
    """Whether a length reaches the incumbent (>=, with a float tolerance)."""
    if math.isinf(incumbent):
        return False
    if integral:
        return value >= incumbent
    return value >= incumbent - REL_TOL * max(abs(value), abs(incumbent), 1.0)


def narrate(step: Step) -> str:
    """The step in one sentence (a second short one when the oracle judges a prune)."""
    fmt = _Formatter(step.integral)
    inc = step.incumbent
    best = f"the best tour so far, {fmt(inc)}"
    sentence = _decision_sentence(step, fmt, best)
    return sentence + _completion_sentence(step, fmt)


class _Formatter:
    def __init__(self, integral: bool) -> None:
        self.integral = integral

    def __call__(self, value: float | None) -> str:
        return format_length(value, self.integral)


def _decision_sentence(step: Step, fmt: _Formatter, best: str) -> str:
    inc, integral = step.incumbent, step.integral
    none_yet = math.isinf(inc)
    code = step.decision
    if code == Decision.EXPAND:
        if step.bound is None:
            return "Expanded, with no bound recorded for the step."
        if none_yet:
            return f"Expanded: the bound is {fmt(step.bound)} and no tour is known yet."
        if reaches(step.bound, inc, integral):
            return f"Expanded, though the bound {fmt(step.bound)} reaches {best}: the rule prunes."
        return f"Expanded: the bound {fmt(step.bound)} stays below {best}."
    if code == Decision.PRUNE:
        if step.bound is not None:
            if reaches(step.bound, inc, integral):
                return f"Pruned: the bound {fmt(step.bound)} reaches {best}."
            if none_yet:
                return (
                    f"Pruned, though no tour is known yet for the bound {fmt(step.bound)} to reach."
                )
            return (
                f"Pruned, though the bound {fmt(step.bound)} stays below {best}: the rule expands."
            )
        if step.partial is not None and reaches(step.partial, inc, integral):
            return f"Pruned: the path alone, {fmt(step.partial)}, already reaches {best}."
        return f"Pruned, though the path alone, {fmt(step.partial)}, stays below {best}."
    if code == Decision.SKIP:
        k, cutoff = step.unvisited, step.cutoff
        cities = "city remains" if k == 1 else "cities remain"
        if k <= cutoff:
            return (
                f"Bound skipped: {k} {cities}, within the cutoff of {cutoff}, "
                "so the children follow without one."
            )
        return (
            f"Bound skipped, though {k} {cities}, more than the cutoff of {cutoff}: "
            "the rule computes one."
        )
    if code == Decision.TOUR_BETTER:
        if step.length is None:
            return "New best tour recorded, with no length."
        if none_yet:
            return f"First tour: closing the path gives {fmt(step.length)}."
        if reaches(step.length, inc, integral):
            return (
                f"Recorded as a new best, though its length {fmt(step.length)} "
                f"does not beat {fmt(inc)}."
            )
        return f"New best tour: closing the path gives {fmt(step.length)}, shorter than {fmt(inc)}."
    if code == Decision.TOUR:
        if step.length is None:
            return "Complete tour recorded, with no length."
        if none_yet:
            return f"Complete tour of {fmt(step.length)}, though as the first it is the best."
        if not reaches(step.length, inc, integral):
            return (
                f"Complete tour of {fmt(step.length)}, recorded as no better, "
                f"though it beats {fmt(inc)}."
            )
        return f"Complete tour of {fmt(step.length)}: no shorter than {best}."
    return f"Decision code {code} is not one this version knows."


def _completion_sentence(step: Step, fmt: _Formatter) -> str:
    c, inc = step.completion, step.incumbent
    if c is None or math.isnan(c) or step.decision not in (Decision.PRUNE, Decision.EXPAND):
        return ""
    if math.isinf(c):
        return " No tour passes through this branch."
    beats = not reaches(c, inc, step.integral)
    if step.decision == Decision.PRUNE:
        if beats:
            return f" Harmful: this branch holds a tour of {fmt(c)}, shorter than {fmt(inc)}."
        return f" Safe: the best tour through this branch is {fmt(c)}, no shorter."
    if not beats:
        return f" No tour through it beats {fmt(inc)} (the best is {fmt(c)})."
    return f" The best tour through it is {fmt(c)}."
