"""The recorded bound of a node: which columns are its parts and how they add up.

A trail of ours does not store the bound; it is derived from the recorded parts. The
re-check, the analyses and the viewer all read it through `bound_values`, so the rule
(which parts, which are taken away, when the sum is rounded up, when a foreign solver's
own `bound` column stands in) lives here once.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.base.header import PENALTIES, TrailHeader
from tracer.base.schema import (
    BOUND,
    BOUND_PARTS,
    DECISION,
    LINK_IN,
    LINK_OUT,
    PENALTY,
    TREE,
    is_absent,
)
from tracer.base.trail import Trail

#: Parts taken away from the sum rather than added (the penalties bound's 2·Σπ).
SUBTRACTED_TERMS = frozenset({PENALTY})
#: Relative slack before rounding a penalised sum up: float sums of whole-number quanta
#: may land a hair above the whole number they stand for.
_CEIL_SLACK = 1e-9


def bound_terms(header: TrailHeader) -> tuple[str, ...]:
    """The bound's parts this trail records, in the order they are summed.

    A trail with no tree or link column (a `--record decisions` trail, a foreign trace with
    its own `bound` only) has no derived bound, so this is empty for it.
    """
    names = tuple(name for name in (*BOUND_PARTS, PENALTY) if header.column(name) is not None)
    return names if set(names) & {TREE, LINK_IN, LINK_OUT} else ()


def bound_values(trail: Trail, ids: NDArray[Any] | slice) -> NDArray[np.float64]:
    """The recorded bound of each node in `ids` as float64 (NaN where none was evaluated).

    The sum of the recorded parts (penalty terms taken away, rounded up for a penalised
    bound over whole-number lengths) where all are present, else the trail's own `bound`.
    """
    terms = bound_terms(trail.header)
    count = len(trail.columns[DECISION][ids])
    total = np.zeros(count, dtype=np.float64)
    present = np.full(count, bool(terms), dtype=np.bool_)
    for name in terms:
        values = trail.columns[name][ids]
        present &= ~is_absent(values)
        if name in SUBTRACTED_TERMS:
            total -= values
        else:
            total += values
    if trail.header.solver.bound == PENALTIES and trail.header.instance.integral:
        total = np.ceil(total - _CEIL_SLACK * np.maximum(np.abs(total), 1.0))
    total[~present] = math.nan
    own = trail.columns.get(BOUND)
    if own is not None:
        values = own[ids]
        fill = ~present & ~is_absent(values)
        total[fill] = values[fill]
    return total


def recorded_bound(trail: Trail, node: int) -> float | None:
    """The recorded bound at one node, or None where none was evaluated."""
    value = float(bound_values(trail, np.array([node], dtype=np.int64))[0])
    return None if math.isnan(value) else value
