"""What the viewer shows, without any widget: the trail, its index, the rows, the cursor.

Every panel reads the same `ViewerModel`, so the screen is one function of it. Nothing here
holds a Python object per node or a per-node array beyond the trail's own columns and the
tree index: bounds and incumbents are computed for the rows on screen only, a filter keeps
an id range (prefix filters: two integers), a range and a decision set (decision filters,
rows counted and found from the index's block counts), or one int64 array of kept ids, and the
re-check's findings arrive as a sorted array of wrong ids that grows chunk by chunk.

A trail opened block by block (`blocks` set) has `LazyColumn`s and a `LazyTreeIndex`, so the
same code serves it; only filters that read every node in their range are bounded
(`BLOCK_SCAN_LIMIT`), and its re-check, `why` and statistics stream over the blocks.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from tracer.analysis import (
    DecisionRanks,
    FilterError,
    NodeFilter,
    StopCondition,
    TreeIndex,
    kept_ids,
    kept_range,
    next_match,
    parse_filter,
)
from tracer.base import COMPLETE, DECISION_NAMES, Trail, bound_values
from tracer.trails import BlockFile

#: Status shown for a trail without an end frame that is being followed.
LIVE = "live"
#: Status shown for a trail without an end frame that is not followed (crashed or cut).
OPEN = "no end"
#: Status shown while a trail read block by block is still being indexed.
INDEXING = "indexing"
#: Node ids the re-check handles per background step (marks appear after each).
RECHECK_STEP = 1 << 16
#: Ids a run over the rows of a block-read trail looks at first, and at most at a time (the
#: range grows fourfold each time nothing matches).
RUN_FIRST_IDS = 1 << 12
RUN_MOST_IDS = 1 << 22
#: Most nodes a filter may read one by one (a depth or ratio clause) in a trail opened block by
#: block; a prefix clause narrows the range first.
BLOCK_SCAN_LIMIT = 20_000_000


class RowView:
    """The node list's rows: an id range, the nodes of a range with chosen decisions, or a
    sorted array of kept ids.

    Args:
        lo: first id of the range (range and decision forms).
        hi: one past the last id (range and decision forms).
        ids: the kept ids, ascending (array form; `lo` and `hi` are then ignored).
        ranks: the decisions kept (decision form): rows are counted and found from the
            tree index's block counts, with no per-node array.
    """

    def __init__(
        self,
        lo: int,
        hi: int,
        ids: NDArray[np.int64] | None = None,
        ranks: DecisionRanks | None = None,
    ) -> None:
        self.ids_array = ids
        self._kept: NDArray[np.int64] | None = ids
        self.ranks = ranks if ids is None else None
        self.lo, self.hi = (lo, hi) if ids is None else (0, 0)
        self._base = ranks.rank(lo) if ranks is not None else 0
        if ids is not None:
            self._len = len(ids)
        elif ranks is not None:
            self._len = ranks.rank(hi) - self._base
        else:
            self._len = hi - lo

    def __len__(self) -> int:
        return self._len

    def id_at(self, row: int) -> int:
        """The node shown on `row`."""
        if self.ids_array is not None:
            return int(self.ids_array[row])
        if self.ranks is not None:
            return self.ranks.select(self._base + row)
        return self.lo + row

    def ids(self, start: int, stop: int) -> NDArray[np.int64]:
        """The nodes on rows [start, stop)."""
        stop = min(stop, len(self))
        start = max(0, min(start, stop))
        if self.ids_array is not None:
            return self.ids_array[start:stop]
        if self.ranks is not None:
            if start == stop:
                return np.zeros(0, dtype=np.int64)
            return self.ranks.between(self.id_at(start), self.id_at(stop - 1))
        return np.arange(self.lo + start, self.lo + stop, dtype=np.int64)

    def row_of(self, node: int) -> int:
        """The row showing `node`, or the first row after it when it is not kept."""
        if self.ids_array is not None:
            return int(np.searchsorted(self.ids_array, node))
        clamped = min(max(node, self.lo), self.hi)
        if self.ranks is not None:
            return self.ranks.rank(clamped) - self._base
        return clamped - self.lo

    def holds(self, node: int) -> bool:
        """Whether `node` is one of the rows."""
        if self.ids_array is not None:
            row = self.row_of(node)
            return row < len(self.ids_array) and int(self.ids_array[row]) == node
        inside = self.lo <= node < self.hi
        return inside and (self.ranks is None or self.ranks.keeps(node))

    def kept(self) -> NDArray[np.int64] | None:
        """Every kept id as an array (made once), or None when the rows are a plain range."""
        if self.ids_array is None and self.ranks is None:
            return None
        if self._kept is None:
            self._kept = self.ids(0, len(self))
        return self._kept


@dataclass(frozen=True)
class Counts:
    """Node counts for the top line."""

    nodes: int
    decisions: dict[str, int]


class ViewerModel:
    """The trail, its tree index, the rows kept by the filter, the cursor and what is known.

    Args:
        trail: the trail (a live one grows through `replace_trail`).
        index: its tree index (built here when not given).
        live: whether the trail is being followed as it grows.
        blocks: the block file behind a trail opened block by block (then `trail` and
            `index` are its `lazy_view`).
    """

    def __init__(
        self,
        trail: Trail,
        index: TreeIndex | None = None,
        *,
        live: bool = False,
        blocks: BlockFile | None = None,
    ) -> None:
        self.trail = trail
        self.index = index if index is not None else TreeIndex(trail.columns, trail.best)
        self.live = live
        self.blocks = blocks
        self.wrong_ids: NDArray[np.int64] = np.zeros(0, dtype=np.int64)
        self.checked = 0
        self.completions: NDArray[np.float64] | None = None
        self.filter = NodeFilter()
        self.rows = RowView(0, self.index.count)
        self.cursor = 0

    # -- per-row values (visible rows only) ----------------------------------------------

    @property
    def count(self) -> int:
        """Nodes in the trail."""
        return self.index.count

    def bound_of(self, ids: NDArray[np.int64]) -> NDArray[np.float64]:
        """The bound of each node (NaN where none was evaluated)."""
        return bound_values(self.trail, ids)

    def incumbent_of(self, ids: NDArray[np.int64]) -> NDArray[np.float64]:
        """The incumbent length in force at each node (inf before any tour)."""
        return self.index.incumbent_at(ids)

    def wrong_mask(self, ids: NDArray[np.int64]) -> NDArray[np.bool_]:
        """Which of `ids` the re-check has found wrong so far."""
        wrong = self.wrong_ids
        if not len(wrong) or not len(ids):
            return np.zeros(len(ids), dtype=np.bool_)
        at = np.minimum(np.searchsorted(wrong, ids), len(wrong) - 1)
        return np.asarray(wrong[at] == ids, dtype=np.bool_)

    def is_wrong(self, node: int) -> bool:
        """Whether the re-check has found `node` wrong."""
        return bool(self.wrong_mask(np.array([node], dtype=np.int64))[0])

    # -- what the background work found ---------------------------------------------------

    def add_wrong(self, ids: NDArray[np.int64], checked_to: int) -> None:
        """Merge wrong ids found by the re-check of the nodes below `checked_to`."""
        if len(ids):
            self.wrong_ids = np.union1d(self.wrong_ids, ids).astype(np.int64)
        self.checked = max(self.checked, checked_to)
        if self.filter.wrong:
            self.rows = self._rows_for(self.filter)

    def recheck_ranges(self, start: int, step: int = RECHECK_STEP) -> Iterator[tuple[int, int]]:
        """Id ranges still to re-check from `start`, in steps (a live trail's last node waits).

        The last node of a growing trail may still get its first child, which changes
        whether its decision was followed, so it is checked once more nodes arrive.
        """
        stop = self.count - 1 if self.live and self.trail.end is None else self.count
        for lo in range(start, stop, step):
            yield lo, min(stop, lo + step)

    # -- filter, rows and cursor ---------------------------------------------------------

    def apply_filter(self, text: str) -> None:
        """Keep only the nodes the filter text selects.

        Raises:
            FilterError: the text does not parse (the rows stay as they were).
        """
        node_filter = parse_filter(text)
        self.rows = self._rows_for(node_filter)
        self.filter = node_filter

    def _rows_for(self, node_filter: NodeFilter) -> RowView:
        if node_filter.range_only:
            lo, hi = kept_range(node_filter, self.index)
            return RowView(lo, hi)
        if not (node_filter.depths or node_filter.wrong or node_filter.ratios):
            lo, hi = kept_range(node_filter, self.index)
            codes = frozenset.intersection(*node_filter.decisions)
            return RowView(lo, hi, ranks=self.index.decision_ranks(codes))
        scans = (node_filter.depths or node_filter.ratios) and not node_filter.wrong
        if self.blocks is not None and scans:
            lo, hi = kept_range(node_filter, self.index)
            if hi - lo > BLOCK_SCAN_LIMIT:
                raise FilterError(
                    f"this filter reads each of the {hi - lo:,} nodes in its range, more than "
                    f"{BLOCK_SCAN_LIMIT:,} in a trail read block by block: narrow it with "
                    "'under' a path first",
                    None,
                )
        return RowView(0, 0, kept_ids(node_filter, self.trail, self.index, self.wrong_ids))

    def replace_trail(self, trail: Trail, index: TreeIndex) -> str | None:
        """Take a grown snapshot of a live trail (the filter is applied again).

        Returns why the filter was dropped, when it no longer applies to the grown trail.
        """
        self.trail = trail
        self.index = index
        if trail.end is not None:
            self.live = False
        try:
            self.rows = self._rows_for(self.filter)
        except FilterError as exc:
            self.filter = NodeFilter()
            self.rows = self._rows_for(self.filter)
            return f"filter dropped: {exc}"
        return None

    @property
    def status(self) -> str:
        """complete, interrupted, limit, live, "indexing" while a trail read block by block
        is indexed to its end, or "no end" for a trail that just stops."""
        if self.trail.end is not None:
            return self.trail.end.status
        if self.indexing:
            return INDEXING
        return LIVE if self.live else OPEN

    @property
    def indexing(self) -> bool:
        """Whether a trail read block by block is still being indexed (not yet scanned to
        the end of its file)."""
        return self.blocks is not None and self.blocks.indexing and not self.blocks.at_end

    @property
    def settled(self) -> bool:
        """Whether the whole file as it is now is indexed (what whole-trail passes over a
        block-read trail wait for; nodes a live run adds later are not part of them)."""
        return self.trail.end is not None or not self.indexing

    @property
    def complete(self) -> bool:
        """Whether the search ran to its end."""
        return self.trail.end is not None and self.trail.end.status == COMPLETE

    def counts(self) -> Counts:
        """How many nodes took each decision (from the index's block counts)."""
        return Counts(self.count, self.index.decision_counts())

    def incumbent(self) -> float:
        """The incumbent in force at the last node (inf before any tour)."""
        if not self.count:
            return float("inf")
        return float(self.index.incumbent_at(np.array([self.count - 1], dtype=np.int64))[0])

    # -- moves (each returns the node to go to, or None) ---------------------------------

    def step(self, node: int, delta: int) -> int | None:
        """The node `delta` rows away from `node` in the rows shown."""
        if not len(self.rows):
            return None
        row = self.rows.row_of(node)
        if not self.rows.holds(node) and delta > 0:
            row -= 1
        target = min(max(row + delta, 0), len(self.rows) - 1)
        found = self.rows.id_at(target)
        return None if found == node else found

    def parent(self, node: int) -> int | None:
        """The node's parent, if recorded."""
        if not 0 <= node < self.count:
            return None
        parent = int(self.index.parent[node])
        return parent if parent >= 0 else None

    def first_child(self, node: int) -> int | None:
        """The node's first child, if it has one."""
        child = node + 1
        if node >= 0 and child < self.count and int(self.index.parent[child]) == node:
            return child
        return None

    def next_sibling(self, node: int) -> int | None:
        """The next child of the node's parent, if there is one."""
        if not 0 <= node < self.count:
            return None
        following = int(self.index.end[node])
        if following < self.count and int(self.index.parent[following]) == int(
            self.index.parent[node]
        ):
            return following
        return None

    def previous_sibling(self, node: int) -> int | None:
        """The previous child of the node's parent, if there is one."""
        parent = self.parent(node)
        if parent is None or node == parent + 1:
            return None
        children = self._children_before(parent, node)
        return children[-1] if children else None

    def _children_before(self, parent: int, node: int) -> list[int]:
        out: list[int] = []
        child = parent + 1
        while child < node:
            out.append(child)
            child = int(self.index.end[child])
        return out

    def run_until(self, condition: StopCondition, node: int, direction: int) -> int | None:
        """The next node (in the rows shown) where the condition holds, or None."""
        rows = self.rows
        if self.blocks is not None and rows.ids_array is None:
            return self._run_in_rows(condition, node, direction)
        kept = rows.kept()
        found = self._next(condition, node, direction, kept)
        if found is None or kept is not None:
            return found
        return found if rows.lo <= found < rows.hi else None

    def _next(
        self, condition: StopCondition, node: int, direction: int, kept: NDArray[np.int64] | None
    ) -> int | None:
        return next_match(
            condition, self.trail, self.index, node, direction, wrong_ids=self.wrong_ids, kept=kept
        )

    def _run_in_rows(self, condition: StopCondition, node: int, direction: int) -> int | None:
        """`run_until` over the range (or decision-filtered) rows of a block file: the kept
        ids of growing id ranges leaving `node`, inside the rows' range, are the candidates
        (no array of every kept id, and nothing read beyond the range)."""
        rows, ranks = self.rows, self.rows.ranks
        size = RUN_FIRST_IDS
        edge = max(node + 1, rows.lo) if direction >= 0 else min(node, rows.hi)
        lo = hi = edge
        while (direction >= 0 and hi < rows.hi) or (direction < 0 and lo > rows.lo):
            if direction >= 0:
                lo, hi = hi, min(rows.hi, hi + size)
            else:
                lo, hi = max(rows.lo, lo - size), lo
            ids = np.arange(lo, hi, dtype=np.int64) if ranks is None else ranks.between(lo, hi - 1)
            found = self._next(condition, node, direction, ids)
            if found is not None:
                return found
            size = min(size * 4, RUN_MOST_IDS)
        return None

    def decision_name(self, node: int) -> str:
        """The recorded decision's word."""
        return DECISION_NAMES[int(self.index.decision[node])]
