"""The search tree behind a trail, as arrays: parents, subtree ranges, counts, incumbents.

Node ids are depth-first pre-order, so the parent of a node is the last earlier node one
level up and every subtree is one contiguous id range [id, end). One compiled pass over the
depth column builds both (`tracer.base.tree_shape`, which also flags a city repeated on its
own path); everything else (a node's path, the node for a path prefix,
decision counts in a range, the incumbent in force) is answered from these arrays without
scanning the trail. Memory: 9 bytes a node for parent, end and the repeated flag, well under a
byte for counts.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    CITY,
    DECISION,
    DECISION_NAMES,
    DEPTH,
    ORPHAN,
    ROOT,
    VISIT,
    BestUpdate,
    tree_shape,
)

__all__ = ["ORPHAN", "ROOT", "DecisionRanks", "TreeIndex"]

_COUNT_STEP = 64


class TreeIndex:
    """Answers tree questions about a trail's nodes in time independent of the trail's size.

    Args:
        columns: the trail's columns (at least city, depth, decision; visit if present).
        best: the trail's incumbent updates, in the order they took effect.
    """

    def __init__(self, columns: dict[str, NDArray[Any]], best: Sequence[BestUpdate]) -> None:
        self.city = columns[CITY]
        self.depth = columns[DEPTH]
        self.decision = columns[DECISION]
        self.visit: NDArray[Any] | None = columns.get(VISIT)
        self.count = len(self.depth)
        self.parent, self.end, self.repeated = tree_shape(self.depth, self.city)
        self._cum = _block_counts(self.decision)
        self._set_best(best)

    def _set_best(self, best: Sequence[BestUpdate]) -> None:
        """Keep the incumbent updates for `incumbent_at`, ordered by when they took effect."""
        ordered = sorted(best, key=lambda b: b.at)
        self._best_at = np.array([b.at for b in ordered], dtype=np.int64)
        self._best_length = np.array([b.length for b in ordered], dtype=np.float64)

    # -- paths and subtrees --------------------------------------------------------------

    def path(self, node: int) -> list[int]:
        """Cities from the start city to `node` (O(depth))."""
        cities: list[int] = []
        while node >= 0:
            cities.append(int(self.city[node]))
            node = int(self.parent[node])
        return cities[::-1]

    def paths(self, nodes: Iterable[int]) -> list[list[int]]:
        """`path` of several nodes: a walk stops at an ancestor met before (the rows on a
        screen share most of their paths, so each costs about one lookup)."""
        known: dict[int, list[int]] = {}
        out: list[list[int]] = []
        for node in nodes:
            walked: list[int] = []
            while node >= 0 and node not in known:
                walked.append(node)
                node = int(self.parent[node])
            path = known.get(node, [])
            for step in reversed(walked):
                path = [*path, int(self.city[step])]
                known[step] = path
            out.append(path)
        return out

    def ancestors(self, node: int) -> list[int]:
        """Ids from the root down to `node`, inclusive."""
        ids: list[int] = []
        while node >= 0:
            ids.append(node)
            node = int(self.parent[node])
        return ids[::-1]

    def children(self, node: int) -> list[int]:
        """Ids of `node`'s children, in order (jumping over each child's subtree)."""
        out: list[int] = []
        child = node + 1
        stop = int(self.end[node])
        while child < stop:
            out.append(child)
            child = int(self.end[child])
        return out

    def subtree(self, node: int) -> tuple[int, int]:
        """The id range [start, stop) of `node`'s subtree."""
        return node, int(self.end[node])

    def node_for_prefix(self, prefix: Sequence[int]) -> int | None:
        """The node whose path is exactly `prefix` (e.g. [0, 5, 2]), or None if not recorded."""
        if not prefix or self.count == 0 or int(self.city[0]) != prefix[0]:
            return None
        node = 0
        for city in prefix[1:]:  # over `node`'s children, stopping at the match
            child, stop = node + 1, int(self.end[node])
            while child < stop and int(self.city[child]) != city:
                child = int(self.end[child])
            if child >= stop:
                return None
            node = child
        return node

    # -- counts and incumbents -----------------------------------------------------------

    def decision_counts(self, start: int = 0, stop: int | None = None) -> dict[str, int]:
        """How many nodes in the id range [start, stop) took each decision (O(1) in size)."""
        stop = self.count if stop is None else stop
        start, stop = max(0, start), min(self.count, stop)
        if stop <= start:
            return dict.fromkeys(DECISION_NAMES, 0)
        counts = self._counts_before(stop) - self._counts_before(start)
        return {name: int(counts[i]) for i, name in enumerate(DECISION_NAMES)}

    def decision_ranks(self, codes: frozenset[int]) -> DecisionRanks:
        """Counting and finding the nodes whose decision is one of `codes`, without an id list."""
        return DecisionRanks(self, codes)

    def incumbent_at(self, nodes: NDArray[Any]) -> NDArray[np.float64]:
        """The incumbent length in force when each node was visited (inf before any tour)."""
        position = self.visit[nodes] if self.visit is not None else nodes
        idx = np.searchsorted(self._best_at, position, side="right") - 1
        lengths = np.concatenate(([math.inf], self._best_length))
        return np.asarray(lengths[idx + 1], dtype=np.float64)

    def _counts_before(self, stop: int) -> NDArray[np.int64]:
        block = stop // _COUNT_STEP
        tail = self.decision[block * _COUNT_STEP : stop]
        counts = self._cum[block] + np.bincount(tail, minlength=len(DECISION_NAMES))
        return np.asarray(counts, dtype=np.int64)


class DecisionRanks:
    """The nodes whose decision is in a set, answered from the block counts in O(1) each.

    `rank(node)` counts them before `node`; `select(k)` finds the k-th. Neither keeps a
    per-node array: a decision filter over ten million nodes needs no kept-id list.

    Args:
        index: the tree index.
        codes: the decision codes kept.
    """

    def __init__(self, index: TreeIndex, codes: frozenset[int]) -> None:
        self.decision = index.decision
        self.count = index.count
        self.table = np.zeros(256, dtype=np.bool_)
        self.table[sorted(codes)] = True
        self._cum = index._cum[:, sorted(codes)].sum(axis=1)

    def keeps(self, node: int) -> bool:
        """Whether `node`'s decision is one of the codes."""
        return bool(self.table[self.decision[node]])

    def rank(self, node: int) -> int:
        """How many kept nodes have an id below `node` (0..count)."""
        node = max(0, min(node, self.count))
        block = node // _COUNT_STEP
        tail = self.decision[block * _COUNT_STEP : node]
        return int(self._cum[block]) + int(np.count_nonzero(self.table[tail]))

    def select(self, k: int) -> int:
        """The id of the kept node with `k` kept nodes before it (0 <= k < rank(count))."""
        block = int(np.searchsorted(self._cum, k, side="right")) - 1
        start = block * _COUNT_STEP
        hits = np.flatnonzero(self.table[self.decision[start : start + _COUNT_STEP]])
        return start + int(hits[k - int(self._cum[block])])

    def between(self, first: int, last: int) -> NDArray[np.int64]:
        """Ids of the kept nodes in [first, last], ascending."""
        return np.flatnonzero(self.table[self.decision[first : last + 1]]) + first


def _block_counts(decision: NDArray[Any]) -> NDArray[np.int64]:
    """cum[b, code]: nodes with `code` among ids [0, b * step)."""
    blocks = len(decision) // _COUNT_STEP
    cum = np.zeros((blocks + 1, len(DECISION_NAMES)), dtype=np.int64)
    shaped = decision[: blocks * _COUNT_STEP].reshape(blocks, _COUNT_STEP)
    for code in range(len(DECISION_NAMES)):
        np.cumsum((shaped == code).sum(axis=1), out=cum[1:, code])
    return cum
