"""The tree index of a trail read block by block: `TreeIndex`'s answers from a `BlockFile`.

A viewer on a trail too large to read whole uses `lazy_view`: a `Trail` whose columns are
decoded where read (`tracer.trails.LazyColumn`) and a `LazyTreeIndex` that answers the same
questions as the in-memory index from the block summaries (`tracer.trails.BlockTree`) and
the few blocks involved, at the count the snapshot was taken. Code that asks per node or per
id range works on either; whole-trail passes (the re-check, `why`, the per-depth figures)
have their streaming forms in `tracer.analysis.streaming`.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, cast

import numpy as np
from numpy.typing import NDArray

from tracer.analysis.tree_index import DecisionRanks, TreeIndex
from tracer.base import CITY, DECISION, DECISION_NAMES, DEPTH, VISIT, Trail
from tracer.trails import BlockFile

__all__ = ["LazyDecisionRanks", "LazyTreeIndex", "lazy_view"]


class _PerNode:
    """An array-like of one value per node, each computed when read (parents, subtree ends)."""

    def __init__(self, value: Callable[[int], int], count: int) -> None:
        self._value = value
        self._count = count

    def __len__(self) -> int:
        return self._count

    def __getitem__(self, key: Any) -> Any:
        if isinstance(key, (int, np.integer)):
            node = int(key) + self._count if key < 0 else int(key)
            if not 0 <= node < self._count:
                raise IndexError(f"node {node} is outside 0..{self._count - 1}")
            return min(self._value(node), self._count)
        ids = np.asarray(key, dtype=np.int64)
        return np.array([self[int(i)] for i in ids.ravel()], dtype=np.int64).reshape(ids.shape)


class LazyTreeIndex(TreeIndex):
    """`TreeIndex`'s questions for a `BlockFile` snapshot, without per-node arrays.

    `parent` and `end` are read per node (an int or a few ids), `decision_counts` comes
    from the block summaries; `repeated` (the re-check's own flag) is not offered: the
    re-check of such a trail is `stream_recheck`.

    Args:
        file: the block file.
        trail: its `snapshot()`; the index answers for that snapshot's records.
    """

    def __init__(self, file: BlockFile, trail: Trail) -> None:
        columns = trail.columns
        self.city = columns[CITY]
        self.depth = columns[DEPTH]
        self.decision = columns[DECISION]
        self.visit = columns.get(VISIT)
        self.count = trail.count
        self.file = file
        tree = file.tree
        self.parent = cast(NDArray[np.int32], _PerNode(tree.parent, self.count))
        self.end = cast(NDArray[np.int32], _PerNode(tree.subtree_end, self.count))
        self._whole: dict[str, int] | None = None
        self._set_best(trail.best)

    def path(self, node: int) -> list[int]:
        """Cities from the start city to `node` (a block's own parents read as arrays)."""
        return self.file.tree.path(node)

    def ancestors(self, node: int) -> list[int]:
        """Ids from the root down to `node`, inclusive."""
        return self.file.tree.ancestors(node)

    def decision_counts(self, start: int = 0, stop: int | None = None) -> dict[str, int]:
        """How many nodes in [start, stop) took each decision (whole blocks by summary)."""
        stop = self.count if stop is None else min(stop, self.count)
        if stop <= start:
            return dict.fromkeys(DECISION_NAMES, 0)
        if start <= 0 and stop == self.count:  # the whole snapshot: asked on every move
            if self._whole is None:
                self._whole = self.file.tree.decision_counts(0, stop)
            return dict(self._whole)
        return self.file.tree.decision_counts(start, stop)

    def decision_ranks(self, codes: frozenset[int]) -> DecisionRanks:
        """Counting and finding the nodes with one of `codes`, from the block summaries."""
        return LazyDecisionRanks(self.file, codes, self.count)


class LazyDecisionRanks(DecisionRanks):
    """`DecisionRanks` over blocks: a per-block running count, one block decoded per answer.

    Args:
        file: the block file.
        codes: the decision codes kept.
        count: the records the snapshot holds.
    """

    def __init__(self, file: BlockFile, codes: frozenset[int], count: int) -> None:
        self._file = file
        self.count = count
        self.table = np.zeros(256, dtype=np.bool_)
        self.table[sorted(codes)] = True
        index = file.index
        blocks = index.block_of(count - 1) + 1 if count else 0
        self._first = index.values("first")[:blocks].copy()
        self._size = index.values("count")[:blocks].copy()
        kept = index.decisions[:blocks][:, sorted(codes)].sum(axis=1)
        self._cum = np.concatenate(([0], np.cumsum(kept))).astype(np.int64)

    def keeps(self, node: int) -> bool:
        """Whether `node`'s decision is one of the codes."""
        return bool(self.table[self._file.column(DECISION, node, node + 1)[0]])

    def rank(self, node: int) -> int:
        """How many kept nodes have an id below `node` (0..count)."""
        node = max(0, min(node, self.count))
        block = int(np.searchsorted(self._first, node, side="right")) - 1
        if block < 0:
            return 0
        start = int(self._first[block])
        before = self._file.column(DECISION, start, node)
        return int(self._cum[block]) + int(np.count_nonzero(self.table[before]))

    def select(self, k: int) -> int:
        """The id of the kept node with `k` kept nodes before it (0 <= k < rank(count))."""
        block = int(np.searchsorted(self._cum, k, side="right")) - 1
        start = int(self._first[block])
        stop = min(start + int(self._size[block]), self.count)
        hits = np.flatnonzero(self.table[self._file.column(DECISION, start, stop)])
        return start + int(hits[k - int(self._cum[block])])

    def between(self, first: int, last: int) -> NDArray[np.int64]:
        """Ids of the kept nodes in [first, last], ascending."""
        values = self._file.column(DECISION, first, min(last + 1, self.count))
        return np.flatnonzero(self.table[values]).astype(np.int64) + first


def lazy_view(file: BlockFile) -> tuple[Trail, LazyTreeIndex]:
    """The file's records indexed so far, as a trail and its tree index (a snapshot)."""
    trail = file.snapshot()
    return trail, LazyTreeIndex(file, trail)
