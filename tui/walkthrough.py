"""The path from the root to one node as a Markdown walkthrough, for teaching.

Each step is one node on the path: the city it adds, its bound written out as a sum, the
incumbent it was judged against, the decision, and the one sentence `narrate` gives it.
Text that comes from the trail (the instance name) is escaped, so the Markdown shows it as
it was typed.
"""

from __future__ import annotations

import math
import re

import numpy as np
from numpy.typing import NDArray

from tracer.analysis import (
    TERM_LABELS,
    TreeIndex,
    format_length,
    narrate,
    node_step,
    recompute_node,
)
from tracer.analysis.narrate import recorded_value
from tracer.base import DECISION_NAMES, NO_BOUND, SUBTRACTED_TERMS, Trail, bound_terms

_MARKDOWN_SPECIAL = re.compile(r"([\\`*_{}\[\]()<>#+\-.!|~])")


def escape_markdown(text: str) -> str:
    """`text` with every Markdown punctuation character backslash-escaped."""
    return _MARKDOWN_SPECIAL.sub(r"\\\1", text.replace("\n", " "))


def walkthrough(
    trail: Trail,
    index: TreeIndex,
    node: int,
    completions: NDArray[np.float64] | None = None,
    wrong_ids: NDArray[np.int64] | None = None,
) -> str:
    """The Markdown walkthrough of the path from the root to `node`.

    Args:
        trail: the trail.
        index: its tree index.
        node: the last node of the walk.
        completions: the oracle's best completion per node, if known.
        wrong_ids: sorted ids the re-check found wrong; those steps get the recomputed sum.
    """
    wrong = set() if wrong_ids is None else set(np.asarray(wrong_ids).tolist())
    instance = trail.header.instance
    integral = instance.integral
    path = index.path(node)
    lines = [
        f"# Walkthrough: {escape_markdown(instance.name)}, node {node}",
        "",
        f"{instance.n} cities; path {' '.join(map(str, path))}; "
        f"bound {escape_markdown(trail.header.solver.bound)}, "
        f"small-remainder cutoff {trail.header.solver.cutoff}.",
        "",
    ]
    terms = bound_terms(trail.header)
    for step_no, here in enumerate(index.ancestors(node), start=1):
        completion = None
        if completions is not None:
            value = float(completions[here])
            completion = None if math.isnan(value) else value
        step = node_step(trail, index, here, completion)
        city = int(index.city[here])
        lines.append(f"## Step {step_no}: city {city} (node {here}, depth {index.depth[here]})")
        lines.append("")
        lines.append(f"- arithmetic: {_sum(trail, here, terms, step.bound, integral)}")
        lines.append(f"- incumbent in force: {format_length(step.incumbent, integral)}")
        lines.append(f"- decision: **{DECISION_NAMES[step.decision]}**")
        lines.append(f"- {narrate(step)}")
        if here in wrong:
            lines.append(f"- re-check: **wrong**; recomputed {_recomputed(trail, index, here)}")
        lines.append("")
    return "\n".join(lines)


def _recomputed(trail: Trail, index: TreeIndex, node: int) -> str:
    """The independent values of the bound's parts, written as a sum."""
    values = recompute_node(trail, index, node)
    integral = trail.header.instance.integral
    pieces = [
        f"{TERM_LABELS.get(name, name)} {format_length(_number(values.get(name)), integral)}"
        for name in bound_terms(trail.header)
        if name in values
    ]
    bound = _number(values.get("bound"))
    total = f" = bound {format_length(bound, integral)}" if bound is not None else ""
    decision = values.get("decision")
    rule = f"; the rule gives {DECISION_NAMES[int(decision)]}" if decision is not None else ""
    return " + ".join(pieces) + total + rule


def _number(value: object) -> float | None:
    return float(value) if isinstance(value, int | float) else None


def _sum(
    trail: Trail, node: int, terms: tuple[str, ...], bound: float | None, integral: bool
) -> str:
    """ "partial 65 + tree 1 385 + link in 84 + link out 143 = bound 1 677"."""
    if trail.header.solver.bound == NO_BOUND or not terms:
        partial = recorded_value(trail, "partial", node)
        return f"partial {format_length(partial, integral)} (no bound evaluated)"
    pieces: list[str] = []
    for name in terms:
        value = recorded_value(trail, name, node)
        sign = "−" if name in SUBTRACTED_TERMS else "+"
        label = TERM_LABELS.get(name, name)
        text = f"{label} {format_length(value, integral)}"
        pieces.append(text if not pieces else f"{sign} {text}")
    if bound is None:
        return " ".join(pieces) + " (no bound evaluated here)"
    return " ".join(pieces) + f" = bound {format_length(bound, integral)}"
