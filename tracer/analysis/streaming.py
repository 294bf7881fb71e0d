"""The re-check, the per-depth figures and `why` over a trail read block by block, in bounded
memory.

A trail's records arrive as node blocks (`tracer.base.BlockSource`); they are cut into
windows of at most `chunk_rows(n)` records. Each window is the search's path at the record
before it (carried from the window before: in pre-order every parent that lies before the
window is on it, and so is every earlier sibling the re-check's partial chains look at; at
most n rows), the window's own records, and one record of lookahead (whether a record has
a child is whether the next one is its child). The window is a small `Trail` with its own
`TreeIndex`, and the same code that checks an in-memory trail checks it
(`tracer.analysis.rechecking`, `tracer.analysis.stats`, `tracer.analysis.why`), keeping
the results of the window's own records under their trail ids. So memory is one window and
the carry, and the results equal the in-memory path's exactly (tests compare them on every
kind of trail).
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.analysis.oracle import CompletionTable, best_completions
from tracer.analysis.rechecking import CheckRule, RecheckReport, Tally, chunk_rows, window_trail
from tracer.analysis.stats import DepthStats, DepthTally
from tracer.analysis.tree_index import ORPHAN, TreeIndex
from tracer.analysis.why import HARMFUL_SHOWN, Follow, Harm, WhyReport, judged, reference_cycle
from tracer.base import BlockSource, NodeBlock, Trail, TrailHeader

__all__ = [
    "Window",
    "in_memory_bytes",
    "stream_explain",
    "stream_recheck",
    "stream_stats",
    "values_at",
    "windows",
]

#: Bytes a node costs an in-memory analysis beyond its columns: the tree index (parent, end,
#: repeated flag: 9) and the reader's and re-check's working arrays, rounded up (measured:
#: `check` of gr17 at cutoff 6, 105 M nodes of 21 bytes of columns, peaked at 3.6 GB,
#: some 34 bytes a node).
_WORKING_BYTES = 20


@dataclass(frozen=True)
class Window:
    """Consecutive records with the ancestors they need, as a small trail of their own.

    Attributes:
        trail: rows [0, seeded) the carried path, then the window's records, then at
            most one record of lookahead.
        index: the window's tree index; its incumbent lookups use trail ids (or visit
            positions), so they agree with the whole trail's.
        ids: the trail id of every row.
        seeded: how many carried path rows come first.
        count: how many of the window's own records follow them.
    """

    trail: Trail
    index: TreeIndex
    ids: NDArray[np.int64]
    seeded: int
    count: int

    @property
    def first(self) -> int:
        """The trail id of the window's first own record."""
        return int(self.ids[self.seeded]) if self.count else 0

    def own(self) -> Trail:
        """The window's own records alone, as a trail (no ancestors, no lookahead)."""
        lo, hi = self.seeded, self.seeded + self.count
        cols = {name: column[lo:hi] for name, column in self.trail.columns.items()}
        return Trail(
            self.trail.path,
            self.trail.header,
            cols,
            self.trail.best,
            self.trail.end,
            self.trail.notice,
        )


def _pieces(
    source: BlockSource, rows: int
) -> Iterator[tuple[int, dict[str, NDArray[Any]], dict[str, NDArray[Any]] | None]]:
    """The source's records `rows` at a time: (first id, columns, next record or None)."""
    pending: deque[NodeBlock] = deque()
    held = 0
    first = 0

    def take(count: int) -> dict[str, NDArray[Any]]:
        nonlocal held, first
        parts: dict[str, list[NDArray[Any]]] = {}
        need = count
        while need:
            block = pending[0]
            use = min(need, block.count)
            for name, column in block.columns.items():
                parts.setdefault(name, []).append(column[:use])
            if use == block.count:
                pending.popleft()
            else:
                rest = {name: column[use:] for name, column in block.columns.items()}
                pending[0] = NodeBlock(block.first + use, rest)
            need -= use
        held -= count
        first += count
        return {name: np.concatenate(chunks) for name, chunks in parts.items()}

    def ahead() -> dict[str, NDArray[Any]]:
        return {name: column[:1] for name, column in pending[0].columns.items()}

    for block in source.blocks():
        if not block.count:
            continue
        pending.append(block)
        held += block.count
        while held > rows:
            start = first
            piece = take(rows)
            yield start, piece, ahead()
    if held:
        start = first
        yield start, take(held), None


def windows(source: BlockSource, rows: int | None = None) -> Iterator[Window]:
    """The source's records as windows of at most `rows` records (default `chunk_rows`)."""
    rows = chunk_rows(source.header.instance.n) if rows is None else max(1, rows)
    carry: dict[str, NDArray[Any]] | None = None
    carry_ids = np.zeros(0, dtype=np.int64)
    for first, piece, nxt in _pieces(source, rows):
        count = len(next(iter(piece.values())))
        parts = [carry, piece] if carry is not None else [piece]
        if nxt is not None:
            parts.append(nxt)
        cols = {name: np.concatenate([p[name] for p in parts]) for name in piece}
        ids = np.concatenate(
            [
                carry_ids,
                np.arange(first, first + count + (nxt is not None), dtype=np.int64),
            ]
        )
        seeded = len(carry_ids)
        trail, index = window_trail(source, cols, ids)
        yield Window(trail, index, ids, seeded, count)
        stack = _stack(index, seeded + count)
        carry = {name: column[stack] for name, column in cols.items()}
        carry_ids = ids[stack]


def _stack(index: TreeIndex, rows: int) -> NDArray[np.intp]:
    """The rows on the search's path after row `rows - 1`: the ancestors of the last row
    with a parent (an orphan is pushed on no path), root first."""
    live = np.flatnonzero(index.parent[:rows] != ORPHAN)
    if not len(live):
        return np.zeros(0, dtype=np.intp)
    return np.asarray(index.ancestors(int(live[-1])), dtype=np.intp)


def in_memory_bytes(header: TrailHeader, count: int) -> int:
    """About how much memory analysing a trail of `count` records in memory takes."""
    row = sum(np.dtype(column.dtype).itemsize for column in header.columns)
    return count * (row + _WORKING_BYTES)


def stream_recheck(
    source: BlockSource,
    *,
    start: int = 0,
    stop: int | None = None,
    first: int = 20,
    on_progress: Callable[[int, int], None] | None = None,
    strict: bool = False,
    rows: int | None = None,
    on_wrong: Callable[[NDArray[np.int64], int], None] | None = None,
) -> RecheckReport:
    """`recheck` over a block source: the same report, in memory bounded by one window.

    Args:
        source: the trail, block by block.
        start, stop, first, on_progress, strict: as for `recheck`.
        rows: records per window (default `chunk_rows`, as the in-memory check uses).
        on_wrong: called after each window with its wrong ids and the id checked up to
            (a viewer marks them as they are found); it may raise to stop the pass.
    """
    total = source.count
    stop = total if stop is None else min(stop, total)
    start = max(0, min(start, stop))
    tally: Tally | None = None
    base: CheckRule | None = None
    roots = np.zeros(0, dtype=np.int64)
    for window in windows(source, rows):
        lo, hi = window.first, window.first + window.count
        if base is None:
            base = CheckRule(window.trail, window.index, strict, total=total)
            tally = Tally(base, start, stop, first)
        all_roots = np.concatenate([roots, window.ids[window.seeded :]])
        rule = base.view(window.trail, window.index, window.ids, all_roots, window.seeded)
        a, b = max(lo, start), min(hi, stop)
        if a < b:
            assert tally is not None
            tally.add(rule, rule.row(a), rule.row(b))
            if on_progress is not None:
                on_progress(b - start, stop - start)
            if on_wrong is not None:
                on_wrong(tally.latest_wrong, b)
        if hi >= stop:
            break
        stack = _stack(window.index, window.seeded + window.count)
        roots = rule.root_ids(rule.chains[stack]) if len(stack) else roots[:0]
    if tally is None:
        return _empty_report(source, start, stop, first, strict)
    return tally.finish()


def _empty_report(
    source: BlockSource, start: int, stop: int, first: int, strict: bool
) -> RecheckReport:
    """The report of a source without records (its frames alone are checked)."""
    cols = {name: np.zeros(0, dtype=dtype) for name, dtype in _dtypes(source)}
    trail = Trail(source.path, source.header, cols, source.best, source.end, source.notice)
    rule = CheckRule(trail, TreeIndex(cols, source.best), strict)
    return Tally(rule, start, stop, first).finish()


def _dtypes(source: BlockSource) -> list[tuple[str, Any]]:
    """Each column's name and dtype, from the header."""
    return [(column.name, column.dtype) for column in source.header.columns]


def stream_stats(
    source: BlockSource,
    table: CompletionTable | None = None,
    *,
    on_progress: Callable[[int, int], None] | None = None,
) -> DepthStats:
    """`depth_stats` over a block source; with `table`, tightness against the oracle's best
    completion of every node (`best_completions`), as with in-memory completions.
    `on_progress(done, total)` is called after each window (it may raise to stop)."""
    tally = DepthTally(source.header, source.best, source.end)
    for window in windows(source):
        completions = None
        if table is not None:
            lo, hi = window.seeded, window.seeded + window.count
            completions = best_completions(window.trail, window.index, table)[lo:hi]
        tally.add(window.own(), window.first, completions)
        if on_progress is not None:
            on_progress(window.first + window.count, source.count)
    return tally.finish(oracle=table is not None)


def stream_explain(
    source: BlockSource,
    *,
    tour: Sequence[int] | None,
    table: CompletionTable | None,
    harmful_shown: int = HARMFUL_SHOWN,
    rows: int | None = None,
    on_progress: Callable[[int, int], None] | None = None,
) -> WhyReport:
    """`explain` over a block source: the same report, in one pass over the blocks
    (`rows`: records per window, default `chunk_rows`; `on_progress(done, total)` after
    each window, which may raise to stop)."""
    matrix, cycle = reference_cycle(source, tour, table)
    follow = Follow(cycle)
    harm = Harm(matrix, harmful_shown) if table is not None else None
    for window in windows(source, rows):
        lo, hi = window.seeded, window.seeded + window.count
        follow.add(window.trail, window.index, window.ids, lo, hi)
        if harm is not None and table is not None:
            completions = best_completions(window.trail, window.index, table)[lo:hi]
            harm.add(window.trail, window.index, window.ids, lo, hi, completions)
        if on_progress is not None:
            on_progress(window.first + window.count, source.count)
    return judged(source, follow, harm, table, matrix)


def values_at(
    source: BlockSource, ids: Sequence[int], names: Sequence[str]
) -> dict[int, dict[str, Any]]:
    """The values of a few columns at a few node ids, in one pass over the blocks."""
    wanted = np.array(sorted(set(ids)), dtype=np.int64)
    out: dict[int, dict[str, Any]] = {}
    if not len(wanted):
        return out
    for block in source.blocks():
        hit = wanted[(wanted >= block.first) & (wanted < block.first + block.count)]
        for node in hit.tolist():
            out[node] = {name: block.columns[name][node - block.first].item() for name in names}
        if block.first + block.count > wanted[-1]:
            break
    return out
