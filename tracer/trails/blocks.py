"""The block index of a trail file: where every node block lies and what it holds, in summary.

A trail of billions of nodes cannot be read into memory, but its blocks can be found and
summarised: `scan_blocks` passes over the file once, decoding only each block's depth and
decision columns (the other columns' payloads are passed over, never decompressed), and
records for every block its byte range, first id, count, codec, minimum and maximum depth,
the depth of the ancestor stack at its start, and its decision counts. A `BlockScanner`
does the same a step at a time (resuming as a live file grows, reporting progress). When
the writer left an index in the `end` frame (see TRAIL_FORMAT.md, *The block index*) and
it is sound, the file is not scanned at all. The same tolerance as `read_trail` holds: a
file cut at any byte gives its complete blocks and a notice.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, BinaryIO

import msgpack
import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    BEST,
    CODECS,
    DECISION,
    DECISION_NAMES,
    DECODED_ALLOWANCE,
    DEPTH,
    END,
    MAX_BLOCK_NODES,
    MAX_DECODED_RATIO,
    MAX_FRAME_BYTES,
    MAX_TRAIL_NODES,
    ORPHAN,
    ROOT,
    BestUpdate,
    EndInfo,
    InputError,
    TrailHeader,
    tree_shape,
)
from tracer.trails.reader import (
    READ_SIZE,
    CorruptTrailError,
    FrameLog,
    RawBlock,
    consume_frames,
    decode_column,
    end_disagreement,
    frame_unpacker,
)

#: The end frame's key holding the block index (a key old readers ignore).
INDEX_KEY = "index"
#: The end frame's last key: the frame's own byte offset as a MessagePack uint64, so a
#: reader finds the index from the file's last 18 bytes.
INDEX_AT_KEY = "index_at"
#: The file's last bytes when its end frame carries an index: the key, then uint64's tag.
INDEX_TAIL: bytes = bytes(msgpack.packb(INDEX_AT_KEY)) + b"\xcf"
_TAIL_BYTES = len(INDEX_TAIL) + 8
#: The index's fields, in order: one little-endian int64 row of these per block.
INDEX_FIELDS: tuple[str, ...] = (
    "offset",
    "stop",
    "first",
    "count",
    "codec",
    "min_depth",
    "max_depth",
    "entry_top",
    *DECISION_NAMES,
)
_F = {name: i for i, name in enumerate(INDEX_FIELDS)}
_DECISIONS = slice(_F[DECISION_NAMES[0]], _F[DECISION_NAMES[-1]] + 1)
#: Most blocks an index may list (104 bytes each: the end frame stays under the frame limit).
MAX_INDEX_BLOCKS = (MAX_FRAME_BYTES // 2) // (8 * len(INDEX_FIELDS))
#: Most incumbent updates an index may list (each is read from its own frame).
MAX_INDEX_BEST = 1 << 16
_BEST_READ = 1 << 16  # a best frame of MAX_TRAIL_CITIES cities is about 13 kB


@dataclass(frozen=True)
class BlockSummary:
    """What the index keeps of one block besides where it lies (the writer computes it too)."""

    min_depth: int
    max_depth: int
    entry_top: int
    exit_top: int
    decisions: tuple[int, ...]


def block_summary(depth: NDArray[Any], decision: NDArray[Any], entry_top: int) -> BlockSummary:
    """Summarise a block's depths and decisions, given the ancestor stack's depth before it."""
    return BlockSummary(
        int(depth.min()),
        int(depth.max()),
        entry_top,
        _exit_top(entry_top, depth),
        tuple(int(c) for c in np.bincount(decision, minlength=len(DECISION_NAMES))),
    )


def block_parents(first: int, entry_top: int, depth: NDArray[Any]) -> NDArray[np.int64]:
    """Each record's parent id, by `tree_shape` on the block behind its entry stack.

    A parent before the block is given as `-3 - d` (the ancestor at depth d on the stack the
    block starts with); `ROOT` and `ORPHAN` are as in `tree_shape`.
    """
    stack = np.arange(entry_top, dtype=depth.dtype)
    ext = np.concatenate((stack, depth))
    parent, _, _ = tree_shape(ext, np.zeros(len(ext), dtype=np.uint8))
    rel = parent[entry_top:].astype(np.int64)
    out = np.where(rel >= entry_top, first + rel - entry_top, -3 - rel)
    out[rel == ROOT] = ROOT
    out[rel == ORPHAN] = ORPHAN
    return out


def _exit_top(entry_top: int, depth: NDArray[Any]) -> int:
    """The ancestor stack's depth after the block (it grows only by one level a record)."""
    steps = np.diff(depth.astype(np.int64))
    if int(depth[0]) <= entry_top and (not len(steps) or int(steps.max()) <= 1):
        return int(depth[-1]) + 1  # no record jumps more than a level down: none is an orphan
    parent = block_parents(0, entry_top, depth)
    placed = np.flatnonzero(parent != ORPHAN)
    return int(depth[placed[-1]]) + 1 if len(placed) else entry_top


@dataclass
class BlockIndex:
    """Where every node block of a trail lies and what it holds in summary; grows as scanned.

    Attributes:
        path: the file.
        header: the trail's header.
        best: incumbent updates, in the order they take effect.
        end: the end frame, or None (a live or crashed run, or one that disagrees).
        notice: where and why indexing stopped early, or why the written index was not used.
        corrupt: the first corrupt frame or block, if any (everything before it is indexed).
        done: bytes indexed (the start of the first frame not yet complete).
        size: the file's size when last looked at.
        header_end: where the header frame ends.
        from_index: whether the blocks came from the written index (no scan).
    """

    path: str
    header: TrailHeader
    best: list[BestUpdate] = field(default_factory=list)
    end: EndInfo | None = None
    notice: str | None = None
    corrupt: CorruptTrailError | None = None
    done: int = 0
    size: int = 0
    header_end: int = 0
    from_index: bool = False
    _table: NDArray[np.int64] = field(
        default_factory=lambda: np.zeros((0, len(INDEX_FIELDS)), dtype=np.int64)
    )
    _rows: int = 0

    # -- the table -----------------------------------------------------------------------

    @property
    def blocks(self) -> int:
        """How many blocks are indexed."""
        return self._rows

    @property
    def total(self) -> int:
        """How many node records the indexed blocks hold."""
        if not self._rows:
            return 0
        last = self._table[self._rows - 1]
        return int(last[_F["first"]] + last[_F["count"]])

    @property
    def table(self) -> NDArray[np.int64]:
        """One row of `INDEX_FIELDS` per block (a view: do not keep it across a scan step)."""
        return self._table[: self._rows]

    def values(self, name: str) -> NDArray[np.int64]:
        """One field of every block (a view of `table`)."""
        return self._table[: self._rows, _F[name]]

    @property
    def decisions(self) -> NDArray[np.int64]:
        """Per block, its records per decision code (blocks × codes)."""
        return self._table[: self._rows, _DECISIONS]

    @property
    def progress(self) -> tuple[int, int, int]:
        """(blocks indexed, bytes indexed, bytes in the file): for a progress display."""
        return self._rows, self.done, self.size

    def block_of(self, node: int) -> int:
        """The block holding record `node` (0 <= node < total)."""
        return int(np.searchsorted(self.values("first"), node, side="right")) - 1

    def codec(self, block: int) -> str:
        """The codec of a block's payloads."""
        return CODECS[int(self._table[block, _F["codec"]])]

    def append(self, block: RawBlock, summary: BlockSummary, first: int) -> None:
        """Add one block's row."""
        if self._rows == len(self._table):
            grown = np.zeros((max(64, 2 * self._rows), len(INDEX_FIELDS)), dtype=np.int64)
            grown[: self._rows] = self._table[: self._rows]
            self._table = grown
        row = (
            block.offset,
            block.stop,
            first,
            block.nodes,
            CODECS.index(block.codec),
            summary.min_depth,
            summary.max_depth,
            summary.entry_top,
            *summary.decisions,
        )
        self._table[self._rows] = row
        self._rows += 1

    def set_table(self, table: NDArray[np.int64]) -> None:
        """Replace every row (an index read from the file)."""
        self._table = np.array(table, dtype=np.int64)
        self._rows = len(table)


class BlockScanner:
    """Indexes a trail file a step at a time, resuming where it stopped as the file grows.

    Raises (from the constructor):
        InputError: the file cannot be opened.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        try:
            self._handle: BinaryIO = open(self.path, "rb")  # noqa: SIM115 (closed in close())
        except OSError as exc:
            raise InputError(self.path, f"cannot read: {exc.strerror or exc}") from None
        self.frame_unpacker = frame_unpacker(None)
        self._frames = FrameLog(str(self.path))
        self._top = 0
        self._ended = False
        self._read = 0
        self.index: BlockIndex | None = None

    def step(self, max_bytes: int | None = None) -> BlockIndex | None:
        """Index up to `max_bytes` more of the file (all there is by default).

        Returns the index so far, or None while the header frame is still incomplete.

        Raises:
            InputError: the file does not start with a header frame.
        """
        frames = self._frames
        left = max_bytes
        corrupt = self.index.corrupt if self.index is not None else None
        while corrupt is None:
            want = READ_SIZE if left is None else min(left, READ_SIZE)
            if want <= 0:
                break
            data = self._handle.read(want)
            self._read += len(data)
            if data:
                self.frame_unpacker.feed(data)
                left = None if left is None else left - len(data)
            corrupt = consume_frames(self.frame_unpacker, frames)
            if frames.header is not None and self.index is None:
                self.index = BlockIndex(str(self.path), frames.header)
                self.index.header_end = frames.header_end
            if self.index is not None:
                corrupt = self._summarise() or corrupt  # a bad block comes before the frame
            if len(data) < want:  # the file's end, for now
                break
        frames.finish()  # node frames gathered so far become a block now
        if self.index is not None:
            corrupt = self._summarise() or corrupt
        if self.index is None:
            if corrupt is not None:
                raise corrupt
            return None
        self._settle(corrupt)
        return self.index

    @property
    def bytes_read(self) -> int:
        """How far into the file the scan has read (a count kept by `step`, so another
        thread asking never sees the handle where a size check left it)."""
        return self._read

    def close(self) -> None:
        """Release the file."""
        self._handle.close()

    def _summarise(self) -> CorruptTrailError | None:
        """Decode the depth and decision columns of the blocks just framed, keep summaries."""
        assert self.index is not None
        frames, header = self._frames, self.index.header
        depth_col, decision_col = header.column(DEPTH), header.column(DECISION)
        assert depth_col is not None and decision_col is not None
        try:
            for block in frames.blocks:
                first = self.index.total
                depth = decode_column(
                    header, depth_col, block.codec, block.payload[DEPTH], block.nodes
                )
                decision = decode_column(
                    header, decision_col, block.codec, block.payload[DECISION], block.nodes
                )
                problem = depth if isinstance(depth, str) else decision
                if isinstance(problem, str):
                    message = f"node block {self.index.blocks} (ids {first}..): {problem}"
                    return CorruptTrailError(str(self.path), block.offset, message, None)
                assert not isinstance(depth, str) and not isinstance(decision, str)
                summary = block_summary(depth, decision, self._top)
                self.index.append(block, summary, first)
                self._top = summary.exit_top
        finally:
            frames.blocks.clear()
        return None

    def _settle(self, corrupt: CorruptTrailError | None) -> None:
        """Bring the index's updates, end, progress and notice up to date."""
        index, frames = self.index, self._frames
        assert index is not None
        index.size = max(index.size, _file_size(self._handle))
        index.done = frames.resume
        index.best = sorted(frames.best, key=lambda b: b.at)
        index.end = frames.end
        index.corrupt = corrupt
        index.notice = _scan_notice(index, frames.end_offset)


def _file_size(handle: BinaryIO) -> int:
    here = handle.tell()
    size = handle.seek(0, 2)
    handle.seek(here)
    return size


def _scan_notice(index: BlockIndex, end_offset: int) -> str | None:
    """The notice `read_trail` would give for what the scan found."""
    if index.corrupt is not None:
        return f"{index.corrupt}; indexed the {index.total} nodes before it"
    disagreement = end_disagreement(
        index.end, index.best, index.total, lambda: index.decisions.sum(axis=0)
    )
    if disagreement is not None:
        index.end = None
        return (
            f"the end frame at byte {end_offset} disagrees with the trail "
            f"({disagreement}); read as a run without an end"
        )
    if index.done < index.size:
        return (
            f"file stops inside a frame at byte {index.done} of {index.size}; "
            f"read {index.total} nodes before it"
        )
    if index.end is None:
        return f"no end frame: a live or crashed run ({index.total} nodes so far)"
    return None


def scan_blocks(path: str | Path, *, use_index: bool = True) -> BlockIndex:
    """The block index of a trail file: from the index its writer left, or by one pass.

    Raises:
        InputError: the file cannot be opened or does not start with a header.
    """
    p = Path(path)
    found = read_written_index(p) if use_index else None
    if isinstance(found, BlockIndex):
        return found
    scanner = BlockScanner(p)
    try:
        index = scanner.step()
    finally:
        scanner.close()
    if index is None:
        if p.stat().st_size:
            raise InputError(p, "stops inside its header frame: not a complete trail", offset=0)
        raise InputError(p, "empty: no header frame, not a trail")
    if isinstance(found, str):
        index.notice = f"{found}; indexed by scanning" + (
            f" ({index.notice})" if index.notice else ""
        )
    return index


def read_written_index(path: Path) -> BlockIndex | str | None:
    """The index in the end frame: a `BlockIndex`, why it cannot be used, or None if absent."""
    try:
        with open(path, "rb") as handle:
            size = _file_size(handle)
            if size < _TAIL_BYTES:
                return None
            handle.seek(size - _TAIL_BYTES)
            tail = handle.read(_TAIL_BYTES)
            if not tail.startswith(INDEX_TAIL):
                return None
            (at,) = struct.unpack(">Q", tail[len(INDEX_TAIL) :])
            problem = _index_problem_at(at, size)
            if problem is not None:
                return f"the index locator at byte {size - 8} is unusable ({problem})"
            return _read_index(path, handle, at, size)
    except OSError as exc:
        raise InputError(path, f"cannot read: {exc.strerror or exc}") from None


def _index_problem_at(at: int, size: int) -> str | None:
    if not 0 < at < size - _TAIL_BYTES:
        return f"it points at byte {at}, outside the file"
    if size - at > MAX_FRAME_BYTES:
        return f"the end frame would be {size - at} bytes, over {MAX_FRAME_BYTES}"
    return None


def _one_frame(data: bytes) -> tuple[Any, int]:
    """The first MessagePack value in `data` (within the reader's limits) and its length."""
    unpacker = frame_unpacker(None)
    unpacker.feed(data)
    value = unpacker.unpack()
    return value, unpacker.tell()


def _read_index(path: Path, handle: BinaryIO, at: int, size: int) -> BlockIndex | str:
    """Read the header, the end frame at `at` and its index; why not, if any check fails."""
    where = f"the index in the end frame at byte {at} is unusable"
    frames = FrameLog(str(path))
    handle.seek(0)
    head = frame_unpacker(handle)
    try:
        header_frame = head.unpack()
        frames.here = head.tell()
        frames.take(header_frame, 0)
    except (msgpack.UnpackException, ValueError, CorruptTrailError):
        return f"{where} (the header does not read)"
    if frames.header is None:
        return f"{where} (the header does not read)"
    handle.seek(at)
    data = handle.read(size - at)
    try:
        frame, used = _one_frame(data)
    except (msgpack.UnpackException, ValueError) as exc:
        return f"{where} (not a valid frame: {exc})"
    if used != len(data) or not isinstance(frame, dict) or frame.get("kind") != END:
        return f"{where} (no end frame there)"
    if frame.get(INDEX_AT_KEY) != at:
        return f"{where} (its locator disagrees with the frame's place)"
    table = _index_table(frame.get(INDEX_KEY), frames.header, frames.header_end, at)
    if isinstance(table, str):
        return f"{where} ({table})"
    index = BlockIndex(str(path), frames.header, header_end=frames.header_end, size=size)
    index.set_table(table)
    frames.total = index.total
    best = _index_best(frame[INDEX_KEY].get(BEST), handle, frames, table, at)
    if isinstance(best, str):
        return f"{where} ({best})"
    try:
        end = frames._end(frame, at)
    except CorruptTrailError as exc:
        return f"{where} (the end frame: {exc})"
    problem = end_disagreement(end, best, index.total, lambda: index.decisions.sum(axis=0))
    if problem is not None:
        return f"{where} (the end frame disagrees with it: {problem})"
    index.best, index.end, index.done, index.from_index = best, end, size, True
    return index


def _index_table(
    raw: Any, header: TrailHeader, header_end: int, at: int
) -> NDArray[np.int64] | str:
    """The index's rows, checked for every fact that can be checked without the blocks."""
    if not isinstance(raw, dict):
        return f"'{INDEX_KEY}' is not a map"
    if raw.get("fields") != list(INDEX_FIELDS):
        return f"its fields are not {', '.join(INDEX_FIELDS)}"
    data = raw.get("blocks")
    width = 8 * len(INDEX_FIELDS)
    if not isinstance(data, bytes) or len(data) % width:
        return f"'blocks' is not a whole number of {width}-byte rows"
    if len(data) // width > MAX_INDEX_BLOCKS:
        return f"more than {MAX_INDEX_BLOCKS} blocks"
    table = np.frombuffer(data, dtype="<i8").reshape(-1, len(INDEX_FIELDS)).astype(np.int64)
    if not len(table):
        return table
    col = {name: table[:, i] for name, i in _F.items()}
    count, first = col["count"], col["first"]
    n = header.instance.n
    checks = (
        ((count >= 1) & (count <= MAX_BLOCK_NODES)).all(),
        first[0] == 0 and (first[1:] == first[:-1] + count[:-1]).all(),
        int(first[-1] + count[-1]) <= MAX_TRAIL_NODES,
        col["offset"][0] >= header_end and (col["offset"] < col["stop"]).all(),
        (col["offset"][1:] >= col["stop"][:-1]).all() and col["stop"][-1] <= at,
        ((col["codec"] >= 0) & (col["codec"] < len(CODECS))).all(),
        ((col["min_depth"] >= 0) & (col["min_depth"] <= col["max_depth"])).all(),
        (col["max_depth"] < n).all() and ((col["entry_top"] >= 0) & (col["entry_top"] <= n)).all(),
        col["entry_top"][0] == 0,  # nothing is open before the first record
        (table[:, _DECISIONS] >= 0).all() and (table[:, _DECISIONS].sum(axis=1) == count).all(),
    )
    if not all(checks):
        return "its rows do not describe consecutive blocks of this trail"
    row = sum(c.dtype.itemsize for c in header.columns)
    claimed = int(count.sum()) * row
    if claimed > MAX_DECODED_RATIO * (at - header_end) + DECODED_ALLOWANCE:
        return f"its blocks would decode to {claimed} bytes, more than the file can hold"
    return table


def _index_best(
    raw: Any, handle: BinaryIO, frames: FrameLog, table: NDArray[np.int64], at: int
) -> list[BestUpdate] | str:
    """The incumbent updates at the offsets the index lists, read and checked as when scanned."""
    if not isinstance(raw, bytes) or len(raw) % 8 or len(raw) // 8 > MAX_INDEX_BEST:
        return "'best' is not a list of frame offsets"
    offsets = np.frombuffer(raw, dtype="<i8")
    if len(offsets) > 1 and not (np.diff(offsets) > 0).all():
        return "its best frame offsets are not in file order"
    stops = table[:, _F["stop"]]
    starts = table[:, _F["offset"]]
    covered = frames.header_end + int((stops - starts).sum())
    for offset in offsets.tolist():
        inside = int(np.searchsorted(starts, offset, side="right")) - 1
        if not frames.header_end <= offset < at or (inside >= 0 and offset < stops[inside]):
            return f"a best frame offset {offset} is outside the gaps between blocks"
        handle.seek(offset)
        try:
            frame, used = _one_frame(handle.read(min(_BEST_READ, at - offset)))
            if not isinstance(frame, dict) or frame.get("kind") != BEST:
                return f"no best frame at byte {offset}"
            covered += used
            frames.best.append(frames._best(frame, offset))
        except (msgpack.UnpackException, ValueError) as exc:
            return f"no best frame at byte {offset} ({exc})"
        except CorruptTrailError as exc:
            return str(exc)
    if covered != at:
        return "its blocks and best frames do not account for every byte before the end frame"
    return sorted(frames.best, key=lambda b: b.at)
