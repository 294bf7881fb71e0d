"""A trail file opened by its block index: columns decoded block by block, on demand.

`open_blocks` indexes the file (`tracer.trails.blocks`) and returns a `BlockFile`: a
`tracer.base.BlockSource` for the streaming analyses, and random access for a viewer.
`column(name, lo, hi)` decodes only the blocks involved, through a least-recently-used cache
bounded in bytes; the tree questions (parent, subtree end, path, the node for a prefix, the
next node with a decision, decision counts) use the block summaries to skip every block
that cannot hold the answer, and decode only the few that can. Each answer equals the
in-memory `TreeIndex`'s, orphans included, because within a block the shape comes from the
same `tree_shape` routine, run on the block behind the ancestor stack it starts with.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Iterator
from pathlib import Path
from types import TracebackType
from typing import Any, BinaryIO, cast

import msgpack
import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    CITY,
    DECISION,
    DECISION_NAMES,
    DEPTH,
    ORPHAN,
    BestUpdate,
    Column,
    EndInfo,
    InputError,
    NodeBlock,
    Trail,
    TrailHeader,
)
from tracer.trails.blocks import (
    BlockIndex,
    BlockScanner,
    block_parents,
    block_summary,
    read_written_index,
)
from tracer.trails.reader import (
    CorruptTrailError,
    FrameLog,
    RawBlock,
    decode_column,
    frame_unpacker,
)

#: Default bound of a `BlockFile`'s cache of decoded columns.
DEFAULT_CACHE_BYTES = 64 * 1024 * 1024
_PARENT = "(parent)"  # the cache key of a block's parent ids, beside its columns
_ENTRY_MEMO = 1 << 16  # most remembered parents before a block, and far subtree ends


class _Cache:
    """Decoded arrays by (block, column), least recently used first out, within `limit` bytes."""

    def __init__(self, limit: int) -> None:
        self.limit = limit
        self.used = 0
        self.peak = 0
        self._items: OrderedDict[tuple[int, str], NDArray[Any]] = OrderedDict()

    def get(self, key: tuple[int, str]) -> NDArray[Any] | None:
        value = self._items.get(key)
        if value is not None:
            self._items.move_to_end(key)
        return value

    def put(self, key: tuple[int, str], value: NDArray[Any]) -> None:
        if value.nbytes > self.limit or key in self._items:
            return  # larger than the whole cache: used once, never kept
        while self.used + value.nbytes > self.limit:
            _, old = self._items.popitem(last=False)
            self.used -= old.nbytes
        self._items[key] = value
        self.used += value.nbytes
        self.peak = max(self.peak, self.used)

    def clear(self) -> None:
        self._items.clear()
        self.used = 0


class BlockFile:
    """A trail file read lazily: the `BlockSource` protocol plus random access by id.

    Attributes (the `BlockSource` ones): path, header, best, end, notice; also `index`
    (the block index) and `corrupt` (the first corrupt frame found, or None).
    """

    def __init__(
        self,
        index: BlockIndex,
        scanner: BlockScanner | None,
        cache_bytes: int,
        unused_index: str | None = None,
    ) -> None:
        self.index = index
        self._scanner = scanner
        self._unused_index = unused_index
        self._cache = _Cache(cache_bytes)
        self._last: tuple[int, dict[str, bytes]] | None = None  # the last block's payload
        self._orphan_free: dict[int, bool] = {}
        #: (block, depth) -> the last id before the block at that depth or above: the open
        #: ancestors a block starts under, found once (bounded: cleared when full).
        self._entry: dict[tuple[int, int], int] = {}
        #: node -> its subtree end, for subtrees that end in a later block (found once).
        self._far_ends: dict[int, int] = {}
        self._lock = threading.RLock()
        self._handle: BinaryIO = open(index.path, "rb")  # noqa: SIM115 (closed in close())
        self._sync()

    # -- the BlockSource protocol --------------------------------------------------------

    @property
    def count(self) -> int:
        """How many node records are indexed."""
        return self.index.total

    def blocks(self) -> Iterator[NodeBlock]:
        """Every indexed block in id order, each decoded afresh (not through the cache).

        Raises:
            CorruptTrailError: a block that does not decode, or disagrees with its summary.
        """
        for block in range(self.index.blocks):
            first = int(self.index.values("first")[block])
            with self._lock:
                payload = self._payload(block)
                columns = {
                    col.name: self._decode(block, col, payload) for col in self.header.columns
                }
            yield NodeBlock(first, columns)

    # -- growing -------------------------------------------------------------------------

    def refresh(self, max_bytes: int | None = None) -> int:
        """Index what was appended to a live file since; returns how many records are new.

        One thread refreshes; readers on other threads go on meanwhile (the index only
        grows, row by row), and wait only while the file's attributes are brought up to date.
        """
        if self._scanner is None:
            return 0
        before = self.count
        self._scanner.step(max_bytes)
        with self._lock:
            self._sync()
        return self.count - before

    @property
    def indexing(self) -> bool:
        """Whether the file may hold more to index (no end frame or corrupt frame reached)."""
        return self._scanner is not None and self.end is None and self.corrupt is None

    @property
    def at_end(self) -> bool:
        """Whether the scan has read the whole file as it is now: what is not indexed is
        at most a frame still being written (or cut short); a `refresh` finds more only
        if the file grows."""
        return self._scanner is None or self._scanner.bytes_read >= self.index.size

    @property
    def progress(self) -> tuple[int, int, int]:
        """(blocks indexed, bytes indexed, bytes in the file)."""
        return self.index.progress

    # -- columns -------------------------------------------------------------------------

    def column(self, name: str, lo: int = 0, hi: int | None = None) -> NDArray[Any]:
        """Records [lo, hi) of one column (a copy), decoding only the blocks involved.

        Raises:
            KeyError: the trail has no such column.
            CorruptTrailError: a block involved does not decode.
        """
        col = self.header.column(name)
        if col is None:
            raise KeyError(name)
        hi = self.count if hi is None else min(hi, self.count)
        lo = max(0, lo)
        if hi <= lo:
            return np.empty((0, *col.dtype.shape), dtype=col.dtype.base)
        first = self.index.values("first")
        parts = []
        for block in range(self.index.block_of(lo), self.index.block_of(hi - 1) + 1):
            values = self._cached(block, name)
            start = int(first[block])
            parts.append(values[max(lo - start, 0) : hi - start])
        return np.concatenate(parts)

    @property
    def cache_used(self) -> int:
        """Bytes of decoded columns the cache holds now."""
        return self._cache.used

    @property
    def cache_peak(self) -> int:
        """The most bytes the cache has held at once."""
        return self._cache.peak

    @property
    def cache_limit(self) -> int:
        """The cache's bound in bytes."""
        return self._cache.limit

    def snapshot(self) -> Trail:
        """The records indexed so far as a `Trail` whose columns are `LazyColumn`s.

        For code that reads rows by id (a viewer, the tree questions); its count stays
        fixed while the file's index grows, so take a new snapshot after `refresh`.
        """
        count = self.count
        columns = {col.name: LazyColumn(self, col.name, count) for col in self.header.columns}
        return Trail(
            self.path,
            self.header,
            cast(dict[str, NDArray[Any]], columns),
            list(self.best),
            self.end,
            self.notice,
        )

    @property
    def tree(self) -> BlockTree:
        """The tree questions of `tracer.analysis.TreeIndex`, answered from the blocks."""
        return BlockTree(self)

    # -- closing -------------------------------------------------------------------------

    def close(self) -> None:
        """Release the file (and the scanner of a live one)."""
        with self._lock:  # not in the middle of another thread's read
            self._handle.close()
        if self._scanner is not None:
            self._scanner.close()
        self._cache.clear()

    def __enter__(self) -> BlockFile:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    # -- internals -----------------------------------------------------------------------

    def _sync(self) -> None:
        if self._scanner is not None and self._scanner.index is not None:
            self.index = self._scanner.index
        index = self.index
        self.path: str = index.path
        self.header: TrailHeader = index.header
        self.best: list[BestUpdate] = index.best
        self.end: EndInfo | None = index.end
        self.notice: str | None = index.notice
        if self._unused_index is not None:
            self.notice = f"{self._unused_index}; indexed by scanning" + (
                f" ({index.notice})" if index.notice else ""
            )
        self.corrupt: CorruptTrailError | None = index.corrupt

    def _block(self, node: int) -> int:
        if not 0 <= node < self.count:
            raise IndexError(f"node {node} is outside 0..{self.count - 1}")
        return self.index.block_of(node)

    def _at(self, name: str, node: int) -> Any:
        block = self._block(node)
        return self._cached(block, name)[node - int(self.index.values("first")[block])]

    def _parents(self, block: int) -> NDArray[np.int64]:
        with self._lock:
            found = self._cache.get((block, _PARENT))
            if found is None:
                first = int(self.index.values("first")[block])
                entry_top = int(self.index.values("entry_top")[block])
                found = block_parents(first, entry_top, self._cached(block, DEPTH))
                self._cache.put((block, _PARENT), found)
            return found

    def _cached(self, block: int, name: str) -> NDArray[Any]:
        with self._lock:
            found = self._cache.get((block, name))
            if found is None:
                col = self.header.column(name)
                assert col is not None
                if self._last is None or self._last[0] != block:
                    self._last = (block, self._payload(block))
                found = self._decode(block, col, self._last[1])
                self._cache.put((block, name), found)
            return found

    def _orphan(self, node: int) -> bool:
        """Whether `node` is an orphan; blocks where no depth jumps down are known free."""
        block = self._block(node)
        free = self._orphan_free.get(block)
        if free is None:
            depth = self._cached(block, DEPTH).astype(np.int64)
            top = int(self.index.values("entry_top")[block])
            free = int(depth[0]) <= top and (len(depth) < 2 or int(np.diff(depth).max()) <= 1)
            self._orphan_free[block] = free
        return not free and self.tree.parent(node) == ORPHAN

    def _payload(self, block: int) -> dict[str, bytes]:
        """A block's compressed columns, re-read from its byte range and re-checked."""
        offset, stop, first, count = (
            int(self.index.values(name)[block]) for name in ("offset", "stop", "first", "count")
        )
        self._handle.seek(offset)
        data = self._handle.read(stop - offset)
        frames = FrameLog(self.path)
        frames.header, frames.total, frames.header_end = self.header, first, self.index.header_end
        unpacker = frame_unpacker(None)
        unpacker.feed(data)
        try:
            while unpacker.tell() < len(data):
                at = offset + unpacker.tell()
                frame = unpacker.unpack()
                frames.here = offset + unpacker.tell()
                frames.take(frame, at)
        except (msgpack.UnpackException, ValueError) as exc:
            raise self._bad(block, f"its frame does not read ({exc})") from None
        frames.finish()
        blocks: list[RawBlock] = frames.blocks
        if len(blocks) != 1 or (blocks[0].nodes, blocks[0].codec) != (
            count,
            self.index.codec(block),
        ):
            raise self._bad(block, "its frame is not the block the index describes")
        return blocks[0].payload

    def _decode(self, block: int, col: Column, payload: dict[str, bytes]) -> NDArray[Any]:
        count = int(self.index.values("count")[block])
        values = decode_column(self.header, col, self.index.codec(block), payload[col.name], count)
        if isinstance(values, str):
            raise self._bad(block, values)
        if col.name in (DEPTH, DECISION):
            self._check_summary(block, col.name, values)
        return values

    def _check_summary(self, block: int, name: str, values: NDArray[Any]) -> None:
        """A decoded depth or decision column must agree with the block's index row."""
        if name == DECISION:
            counts = np.bincount(values, minlength=len(DECISION_NAMES))
            if not (counts == self.index.decisions[block]).all():
                raise self._bad(block, "its decisions disagree with the index")
            return
        tops = self.index.values("entry_top")
        summary = block_summary(values, np.zeros(0, dtype=np.uint8), int(tops[block]))
        later = tops[block + 1 : block + 2]
        expected = (self.index.values("min_depth")[block], self.index.values("max_depth")[block])
        if (summary.min_depth, summary.max_depth) != tuple(int(v) for v in expected) or (
            len(later) and int(later[0]) != summary.exit_top
        ):
            raise self._bad(block, "its depths disagree with the index")

    def _bad(self, block: int, problem: str) -> CorruptTrailError:
        first = int(self.index.values("first")[block])
        offset = int(self.index.values("offset")[block])
        message = f"node block {block} (ids {first}..): {problem}"
        return CorruptTrailError(self.path, offset, message, None)


class BlockTree:
    """Parents, subtree ends, paths and decision counts of a `BlockFile`, by its summaries.

    The names and answers are `TreeIndex`'s; only the blocks that can hold an answer are
    decoded (through the file's cache), every other block is skipped by its summary.
    """

    def __init__(self, file: BlockFile) -> None:
        self._file = file

    @property
    def count(self) -> int:
        """How many records the tree has (so far, for a live file)."""
        return self._file.count

    def depth(self, node: int) -> int:
        """The depth of record `node`."""
        return int(self._file._at(DEPTH, node))

    def parent(self, node: int) -> int:
        """The parent's id; `ROOT` at depth 0, `ORPHAN` for a record jumping levels down."""
        block = self._file._block(node)
        value = int(self._file._parents(block)[node - int(self._file.index.values("first")[block])])
        if value > -3:
            return value
        entry, key = self._file._entry, (block, -3 - value)
        found = entry.get(key)
        if found is None:
            found = self._last_at_most(int(self._file.index.values("first")[block]), key[1])
            if len(entry) >= _ENTRY_MEMO:
                entry.clear()
            entry[key] = found
        return found

    def subtree_end(self, node: int) -> int:
        """One past `node`'s subtree: the first later record at its depth or above."""
        if self._file._orphan(node):
            return node + 1
        d = self.depth(node)
        block = self._file._block(node)
        first = self._file.index.values("first")  # rows indexed now; later reads keep to them
        start = int(first[block])
        depth = self._file._cached(block, DEPTH)
        hit = np.flatnonzero(depth[node + 1 - start :] <= d)
        if len(hit):
            return node + 1 + int(hit[0])
        far = self._file._far_ends
        found = far.get(node)
        if found is not None:
            return found
        min_depth = self._file.index.values("min_depth")[: len(first)]
        later = np.flatnonzero(min_depth[block + 1 :] <= d)
        if not len(later):
            return int(first[-1] + self._file.index.values("count")[len(first) - 1])
        block += 1 + int(later[0])
        hit = np.flatnonzero(self._file._cached(block, DEPTH) <= d)
        found = int(first[block]) + int(hit[0])
        if len(far) >= _ENTRY_MEMO:
            far.clear()
        far[node] = found
        return found

    def path(self, node: int) -> list[int]:
        """Cities from the start city to `node` (O(depth) lookups)."""
        return self._walk(node)[1][::-1]

    def ancestors(self, node: int) -> list[int]:
        """Ids from the root down to `node`, inclusive."""
        return self._walk(node)[0][::-1]

    def _walk(self, node: int) -> tuple[list[int], list[int]]:
        """The ids and cities from `node` up to the root: a block's own parents and cities
        are read as arrays, so only a step out of a block looks anything up."""
        file = self._file
        first = file.index.values("first")
        ids: list[int] = []
        cities: list[int] = []
        while node >= 0:
            block = file._block(node)
            start = int(first[block])
            parents, city = file._parents(block), file._cached(block, CITY)
            while node >= start:
                ids.append(node)
                cities.append(int(city[node - start]))
                value = int(parents[node - start])
                if value <= -3:  # the parent lies before this block
                    value = self.parent(node)
                node = value
        return ids, cities

    def decision_counts(self, start: int = 0, stop: int | None = None) -> dict[str, int]:
        """How many records in [start, stop) took each decision: whole blocks by summary."""
        index = self._file.index
        stop = self._file.count if stop is None else min(stop, self._file.count)
        start = max(0, start)
        counts = np.zeros(len(DECISION_NAMES), dtype=np.int64)
        if stop > start:
            first, count = index.values("first"), index.values("count")
            lo, hi = index.block_of(start), index.block_of(stop - 1)
            inner_lo = lo if start == int(first[lo]) else lo + 1
            inner_hi = hi if stop < int(first[hi] + count[hi]) else hi + 1
            if inner_lo < inner_hi:
                counts += index.decisions[inner_lo:inner_hi].sum(axis=0)
            for edge in sorted({lo, hi} - set(range(inner_lo, inner_hi))):
                a = max(start, int(first[edge]))
                b = min(stop, int(first[edge] + count[edge]))
                values = self._file.column(DECISION, a, b)
                counts += np.bincount(values, minlength=len(DECISION_NAMES))
        return {name: int(counts[i]) for i, name in enumerate(DECISION_NAMES)}

    def _last_at_most(self, before: int, depth: int) -> int:
        """The last id before `before` at `depth` or above: in the block of `before - 1`, or
        else in the last earlier block whose minimum depth allows it (one array search)."""
        index = self._file.index
        if before <= 0:  # a written index claiming ancestors open before the first record
            raise CorruptTrailError(self._file.path, 0, f"no record before id {before}", None)
        first = index.values("first")
        block = index.block_of(before - 1)
        values = self._file._cached(block, DEPTH)[: before - int(first[block])]
        hit = np.flatnonzero(values <= depth)
        if not len(hit):
            earlier = np.flatnonzero(index.values("min_depth")[:block] <= depth)
            if len(earlier):
                block = int(earlier[-1])
                hit = np.flatnonzero(self._file._cached(block, DEPTH) <= depth)
        if len(hit):
            return int(first[block]) + int(hit[-1])
        raise CorruptTrailError(
            self._file.path, 0, f"no record at depth {depth} before id {before}", None
        )


def open_blocks(
    path: str | Path,
    *,
    cache_bytes: int = DEFAULT_CACHE_BYTES,
    use_index: bool = True,
    first_bytes: int | None = None,
) -> BlockFile:
    """Open a trail file lazily: from the index its writer left, or by scanning it.

    A file without a sound index (a live or crashed run, a cut or damaged index) is scanned
    once, or only its first `first_bytes` when given (a viewer shows those while `refresh`
    indexes the rest); `refresh()` then follows it as it grows.

    Raises:
        InputError: the file cannot be opened or does not start with a header.
    """
    p = Path(path)
    found = read_written_index(p) if use_index else None
    if isinstance(found, BlockIndex):
        return BlockFile(found, None, cache_bytes)
    scanner = BlockScanner(p)
    try:
        index = scanner.step(first_bytes)
        read = -1
        while index is None and scanner.bytes_read > read:  # a header longer than first_bytes
            read = scanner.bytes_read
            index = scanner.step(first_bytes)
    except BaseException:
        scanner.close()
        raise
    if index is None:
        scanner.close()
        if p.stat().st_size:
            raise InputError(p, "stops inside its header frame: not a complete trail", offset=0)
        raise InputError(p, "empty: no header frame, not a trail")
    return BlockFile(index, scanner, cache_bytes, found if isinstance(found, str) else None)


class LazyColumn:
    """One column of a `BlockFile`, indexed like a numpy array but decoded only where read.

    It answers `len`, `dtype`, an integer, a slice (step 1) and an array of ids; the result
    is a numpy value or array. It is a stand-in for the arrays of `Trail.columns` where a
    trail is too large to read whole, so code that reads rows by id works unchanged, while
    whole-column numpy operations are refused (`np.asarray` raises) rather than
    decoding gigabytes by accident. Its length is fixed when made (a snapshot of a growing
    file).
    """

    def __init__(self, file: BlockFile, name: str, count: int) -> None:
        col = file.header.column(name)
        if col is None:
            raise KeyError(name)
        self._file = file
        self.name = name
        self.dtype: np.dtype[Any] = col.dtype.base
        self._row_shape: tuple[int, ...] = col.dtype.shape
        self._count = count

    def __len__(self) -> int:
        return self._count

    @property
    def shape(self) -> tuple[int, ...]:
        """(count, *row shape), as an array's."""
        return (self._count, *self._row_shape)

    @property
    def ndim(self) -> int:
        """1, or 2 for a column of rows (π)."""
        return 1 + len(self._row_shape)

    def __getitem__(self, key: Any) -> Any:
        if isinstance(key, tuple):
            raise IndexError("a lazy column is indexed by one id, slice or id array")
        if isinstance(key, slice):
            lo, hi, step = key.indices(self._count)
            if step != 1:
                raise IndexError("a lazy column is sliced with step 1 only")
            return self._file.column(self.name, lo, max(lo, hi))
        if isinstance(key, (int, np.integer)):
            node = int(key) + self._count if key < 0 else int(key)
            if not 0 <= node < self._count:
                raise IndexError(f"node {key} is outside 0..{self._count - 1}")
            return self._file._at(self.name, node)
        return self._take(np.asarray(key))

    def __array__(self, *args: Any, **kwargs: Any) -> NDArray[Any]:
        raise self._whole()

    def _whole(self) -> TypeError:
        return TypeError(
            f"column {self.name!r} of a trail read block by block is read by id range, not whole"
        )

    def __iter__(self) -> Iterator[Any]:
        raise self._whole()

    def __eq__(self, other: object) -> Any:
        raise self._whole()

    def __ne__(self, other: object) -> Any:
        raise self._whole()

    def __lt__(self, other: object) -> Any:
        raise self._whole()

    def __le__(self, other: object) -> Any:
        raise self._whole()

    def __gt__(self, other: object) -> Any:
        raise self._whole()

    def __ge__(self, other: object) -> Any:
        raise self._whole()

    __hash__ = None  # type: ignore[assignment]

    def _take(self, ids: NDArray[Any]) -> NDArray[Any]:
        """The values at `ids` (any order), decoding each block involved once."""
        if ids.dtype == np.bool_ or not np.issubdtype(ids.dtype, np.integer):
            raise IndexError("a lazy column is indexed by integer ids")
        flat = ids.astype(np.int64).ravel()
        flat = np.where(flat < 0, flat + self._count, flat)
        out = np.empty((len(flat), *self._row_shape), dtype=self.dtype)
        if not len(flat):
            return out.reshape((*ids.shape, *self._row_shape))
        if int(flat.min()) < 0 or int(flat.max()) >= self._count:
            raise IndexError(f"ids outside 0..{self._count - 1}")
        ascending = bool((flat[1:] >= flat[:-1]).all())  # the usual case: rows, id ranges
        order = np.arange(len(flat)) if ascending else np.argsort(flat, kind="stable")
        ordered = flat if ascending else flat[order]
        first = self._file.index.values("first")
        blocks = np.searchsorted(first, ordered, side="right") - 1
        cuts = np.flatnonzero(np.diff(blocks)) + 1  # where the block changes
        starts = np.concatenate(([0], cuts)).tolist()
        stops = [*cuts.tolist(), len(ordered)]
        for a, b in zip(starts, stops, strict=True):
            block = int(blocks[a])
            values = self._file._cached(block, self.name)
            out[order[a:b]] = values[ordered[a:b] - int(first[block])]
        return out.reshape((*ids.shape, *self._row_shape))
