"""The penalties bound recomputed from the recorded π (numpy only, apart from the engine).

The re-check does not repeat the engine's search for good penalties: whatever π a node
records, the relaxation is a valid lower bound, so it is enough to recompute, from that π,
the penalised tree, both penalised links and the penalty term, and judge the recorded
numbers and the decision against them. Nodes are taken in groups with the same number of
unvisited cities; each group runs one batch Prim over its own penalised lengths
d(u, v) + π_u + π_v (a (g, k, k) cube, cut into slices of at most `SLICE_CELLS` cells).

Penalties are whole multiples of the header's power-of-two quantum, so over whole-number
lengths every sum here is exact and equals the engine's whatever the order of addition.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from tracer.analysis._recheck_sets import members, set_sizes

#: Most cells of penalised lengths held at once (g nodes × k × k).
SLICE_CELLS = 1 << 22


@dataclass
class PenalisedParts:
    """The recomputed parts at each node (zero where not asked for).

    Attributes:
        tree: minimum spanning tree over the unvisited cities, penalised lengths.
        link_in: cheapest d(end, u) + π_u over the unvisited u.
        link_out: cheapest d(u, 0) + π_u.
        penalty: 2 Σ π_u over the unvisited u (taken off the sum).
        pi: π in length units, by node and city (unvisited cities only; 0 elsewhere).
        link_in_city: the first unvisited city attaining link_in (for display).
        link_out_city: the same for link_out.
    """

    tree: NDArray[np.float64]
    link_in: NDArray[np.float64]
    link_out: NDArray[np.float64]
    penalty: NDArray[np.float64]
    pi: NDArray[np.float64]
    link_in_city: NDArray[np.intp]
    link_out_city: NDArray[np.intp]


def penalised_trees(cost: NDArray[np.float64]) -> NDArray[np.float64]:
    """Minimum spanning tree weight of each complete graph cost[i] (k × k), batch Prim."""
    g, k, _ = cost.shape
    total = np.zeros(g)
    if k <= 1:
        return total
    rows = np.arange(g)
    inside = np.zeros((g, k), dtype=np.bool_)
    inside[:, 0] = True
    key = cost[:, 0, :].copy()
    key[inside] = np.inf
    for _ in range(k - 1):
        pick = np.argmin(key, axis=1)
        total += key[rows, pick]
        inside[rows, pick] = True
        np.minimum(key, cost[rows, pick, :], out=key)
        key[inside] = np.inf
    return total


def penalised_parts(
    matrix: NDArray[np.generic],
    pi_rows: NDArray[np.integer],
    quantum: float,
    ends: NDArray[np.intp],
    unvisited: NDArray[np.uint64],
    need: NDArray[np.bool_],
    start: int = 0,
) -> PenalisedParts:
    """The penalised parts of the nodes in `need`.

    Args:
        matrix: the instance's lengths (n × n).
        pi_rows: each node's recorded π, in quanta, by city (m × n).
        quantum: the header's penalty quantum.
        ends: each node's last city.
        unvisited: each node's unvisited set as a bit mask (m × words).
        need: the nodes whose bound the rule evaluates.
        start: the start city, where every tour closes.
    """
    m, n = len(ends), matrix.shape[0]
    d = matrix.astype(np.float64)
    out = PenalisedParts(
        tree=np.zeros(m),
        link_in=np.zeros(m),
        link_out=np.zeros(m),
        penalty=np.zeros(m),
        pi=np.zeros((m, n)),
        link_in_city=np.zeros(m, np.intp),
        link_out_city=np.zeros(m, np.intp),
    )
    nodes = np.flatnonzero(need)
    if not len(nodes):
        return out
    size = set_sizes(unvisited[nodes])
    for k in np.unique(size):
        group = nodes[size == k]
        step = max(1, SLICE_CELLS // max(int(k) * int(k), 1))
        for lo in range(0, len(group), step):
            at = group[lo : lo + step]
            cities = members(unvisited[at], n, int(k))  # (g, k)
            rows = np.arange(len(at))[:, None]
            value = pi_rows[at[:, None], cities].astype(np.float64) * quantum  # (g, k)
            out.pi[at[:, None], cities] = value
            cost = d[cities[:, :, None], cities[:, None, :]] + value[:, :, None]
            cost += value[:, None, :]
            out.tree[at] = penalised_trees(cost)
            into = d[ends[at][:, None], cities] + value
            back = d[cities, start] + value
            first_in = np.argmin(into, axis=1)
            first_out = np.argmin(back, axis=1)
            out.link_in[at] = into[rows[:, 0], first_in]
            out.link_out[at] = back[rows[:, 0], first_out]
            out.link_in_city[at] = cities[rows[:, 0], first_in]
            out.link_out_city[at] = cities[rows[:, 0], first_out]
            out.penalty[at] = 2.0 * value.sum(axis=1)
    return out
