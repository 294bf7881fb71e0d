"""The spanning tree over a node's unvisited cities, with its edges, for drawing and checking.

A trail stores only the tree's weight; the viewer's map needs the edges themselves, for one
node at a time. This is a plain O(k²) Prim over the k unvisited cities with numpy rows,
written apart from the search's compiled routine and from the re-check's batch version, so
the map cannot inherit a mistake of either (tests hold it against scipy's minimum spanning
tree).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

#: The fixed start city of every path.
START = 0


@dataclass(frozen=True)
class SpanningTree:
    """A minimum spanning tree.

    Attributes:
        weight: the sum of its edge lengths (0 for one city or none).
        edges: (k-1)×2 city pairs, in the order Prim added them.
    """

    weight: float
    edges: NDArray[np.int64]


@dataclass(frozen=True)
class Remainder:
    """What the bound spans after a path: the tree and the two links (penalised or not).

    Attributes:
        unvisited: the cities not on the path, ascending.
        tree: the minimum spanning tree over them.
        link_in: (path end, city) of the cheapest edge into them, or None when none remain.
        link_out: (city, start) of the cheapest edge from them back to the start, or None.
        link_in_length: that edge's length (0 when none remain).
        link_out_length: that edge's length (0 when none remain).
    """

    unvisited: NDArray[np.int64]
    tree: SpanningTree
    link_in: tuple[int, int] | None
    link_out: tuple[int, int] | None
    link_in_length: float
    link_out_length: float


def spanning_tree(matrix: NDArray[Any], cities: Sequence[int] | NDArray[Any]) -> SpanningTree:
    """Prim's minimum spanning tree over `cities` (a subset of the matrix's cities).

    Args:
        matrix: the n×n symmetric distance matrix.
        cities: the cities to span, each once.

    Returns:
        The tree's weight and edges (city numbers, not positions in `cities`).
    """
    nodes = np.asarray(cities, dtype=np.int64)
    k = len(nodes)
    if k <= 1:
        return SpanningTree(0.0, np.zeros((0, 2), dtype=np.int64))
    sub = np.asarray(matrix)[np.ix_(nodes, nodes)].astype(np.float64)
    in_tree = np.zeros(k, dtype=np.bool_)
    in_tree[0] = True
    key = sub[0].copy()
    link = np.zeros(k, dtype=np.int64)
    edges = np.empty((k - 1, 2), dtype=np.int64)
    weight = 0.0
    for step in range(k - 1):
        masked = np.where(in_tree, np.inf, key)
        pick = int(np.argmin(masked))
        weight += float(masked[pick])
        edges[step] = (nodes[link[pick]], nodes[pick])
        in_tree[pick] = True
        closer = sub[pick] < key
        key = np.where(closer, sub[pick], key)
        link = np.where(closer, pick, link)
    return SpanningTree(weight, edges)


def remainder(
    matrix: NDArray[Any], path: Sequence[int], penalties: NDArray[Any] | None = None
) -> Remainder:
    """The tree over the cities `path` has not visited, and the two cheapest links.

    Reads only the cells it needs; the matrix is never copied whole (it may be 4096²).

    Args:
        matrix: the n×n symmetric distance matrix.
        path: the cities visited so far, from the start city.
        penalties: a penalty per city (the penalties bound): edge (u, v) then costs
            d(u, v) + π_u + π_v and a link to u costs d + π_u; None for plain lengths.

    Returns:
        The unvisited cities, their tree and the links from the path's end and back to the
        start (the first cheapest city where several tie), with their (penalised) lengths.
    """
    m = np.asarray(matrix)
    n = m.shape[0]
    visited = np.zeros(n, dtype=np.bool_)
    visited[np.asarray(path, dtype=np.int64)] = True
    rest = np.flatnonzero(~visited).astype(np.int64)
    pi = np.zeros(len(rest)) if penalties is None else np.asarray(penalties, np.float64)[rest]
    sub = m[np.ix_(rest, rest)].astype(np.float64) + pi[:, None] + pi[None, :]
    local = spanning_tree(sub, np.arange(len(rest)))
    tree = SpanningTree(local.weight, rest[local.edges])
    if len(rest) == 0:
        return Remainder(rest, tree, None, None, 0.0, 0.0)
    end = int(path[-1])
    into_cost = m[end, rest] + pi
    back_cost = m[rest, START] + pi
    into, back = int(np.argmin(into_cost)), int(np.argmin(back_cost))
    return Remainder(
        rest,
        tree,
        (end, int(rest[into])),
        (int(rest[back]), START),
        float(into_cost[into]),
        float(back_cost[back]),
    )
