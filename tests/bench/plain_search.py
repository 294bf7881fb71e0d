"""A plain compiled depth-first branch and bound: the engine's yardstick in bench_search.

The same search as `tracer.search.engine` with the tree+links bound (same child order, same
prune rule, same small-remainder cutoff), written the shortest way: recursion, no record
buffer, no resumable state, no faults. Its node count must equal the engine's, so the ratio
of their rates is the price of everything the engine adds to the loop.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True)
def _tree(dist: np.ndarray, members: np.ndarray, k: int, key: np.ndarray) -> float:
    """Prim's minimum spanning tree weight over members[0:k], O(k²)."""
    if k <= 1:
        return 0.0
    inside = np.zeros(k, dtype=np.bool_)
    inside[0] = True
    for j in range(1, k):
        key[j] = dist[members[0], members[j]]
    total = 0.0
    for _ in range(k - 1):
        best, at = np.inf, -1
        for j in range(k):
            if not inside[j] and key[j] < best:
                best, at = key[j], j
        inside[at] = True
        total += best
        row = dist[members[at]]
        for j in range(k):
            if not inside[j] and row[members[j]] < key[j]:
                key[j] = row[members[j]]
    return total


@njit  # not cached: numba's cache of a self-recursive function crashed on reload here
def _visit(
    dist: np.ndarray,
    children: np.ndarray,
    visited: np.ndarray,
    last: int,
    depth: int,
    partial: float,
    inc: np.ndarray,
    cutoff: int,
    members: np.ndarray,
    key: np.ndarray,
) -> int:
    """Nodes in the subtree of the path ending at `last` (depth `depth`); `members` is scratch
    used before the children are visited, so one array serves every level."""
    n = dist.shape[0]
    k = n - 1 - depth
    if k == 0:
        length = partial + dist[last, 0]
        if length < inc[0]:
            inc[0] = length
        return 1
    if k <= cutoff:
        if partial >= inc[0]:
            return 1
    else:
        cnt = 0
        lin, lout = np.inf, np.inf
        for c in range(n):
            if not visited[c]:
                members[cnt] = c
                cnt += 1
                lin = min(lin, dist[last, c])
                lout = min(lout, dist[c, 0])
        if partial + _tree(dist, members, cnt, key) + lin + lout >= inc[0]:
            return 1
    nodes = 1
    for pos in range(n - 1):
        c = children[last, pos]
        if not visited[c]:
            visited[c] = True
            step = partial + dist[last, c]
            nodes += _visit(dist, children, visited, c, depth + 1, step, inc, cutoff, members, key)
            visited[c] = False
    return nodes


def plain_search(dist: np.ndarray, children: np.ndarray, incumbent: float, cutoff: int) -> int:
    """Run the whole search from city 0; returns the node count."""
    n = dist.shape[0]
    visited = np.zeros(n, dtype=np.bool_)
    visited[0] = True
    inc = np.array([incumbent])
    key = np.empty(n)
    members = np.empty(n, dtype=np.int64)
    return int(_visit(dist, children, visited, 0, 0, 0.0, inc, cutoff, members, key))
