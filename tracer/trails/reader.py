"""Reading a trail: every complete frame, into one contiguous numpy array per column.

`read_trail` passes over the file once, keeping the (small, compressed) node payloads, then
allocates each column once from the block counts and decompresses every block into place:
memory stays close to the decoded columns and there is never a Python object per node.
`TrailFollower` reads the same frames incrementally from a file that is still growing.

The file is untrusted: every size is bounded before anything is allocated, nothing is ever
evaluated, and a frame that is not what it claims is reported with its byte offset while
everything before it stays available. A file cut at any byte yields its complete frames
and a notice saying where it stops.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from pathlib import Path
from typing import Any, BinaryIO, NamedTuple

import msgpack
import numpy as np
import zstandard
from numpy.typing import NDArray

from tracer.base import (
    BEST,
    BOUND,
    CITY,
    CITY_COLUMNS,
    CODECS,
    DECISION,
    DECISION_NAMES,
    DECODED_ALLOWANCE,
    DEPTH,
    END,
    HEADER,
    LINK_IN,
    LINK_IN_CITY,
    LINK_OUT,
    LINK_OUT_CITY,
    MAX_BLOCK_NODES,
    MAX_DECODED_RATIO,
    MAX_FRAME_BYTES,
    MAX_LIST_ITEMS,
    MAX_MAP_ITEMS,
    MAX_STRING_BYTES,
    MAX_TRAIL_NODES,
    NODE,
    NODES,
    PARTIAL,
    STATUSES,
    TREE,
    VISIT,
    BestUpdate,
    Column,
    EndInfo,
    FieldError,
    HeaderError,
    InputError,
    Trail,
    TrailHeader,
    absent_value,
    best_tour,
    city_value,
    decision_code,
    from_wire,
    is_int,
    is_number,
    link_value,
    recorded_length,
    show_value,
)

#: Bytes read from the file at a time (the reader's and the block scan's).
READ_SIZE = 1 << 20
_NODE_FRAME_BATCH = 1 << 16
_THREAD = threading.local()  # per-thread state: the zstd decompressor (`_decompressor`)


class CorruptTrailError(InputError):
    """A frame that cannot be what it claims; `partial` holds everything read before it."""

    def __init__(self, path: str, offset: int, message: str, partial: Trail | None) -> None:
        super().__init__(path, message, offset=offset)
        self.partial = partial


def frame_unpacker(source: BinaryIO | None) -> msgpack.Unpacker:
    """A MessagePack reader with every size bounded by the trail limits (shared by the scan)."""
    return msgpack.Unpacker(
        source,
        read_size=READ_SIZE,
        raw=False,
        strict_map_key=True,
        max_buffer_size=MAX_FRAME_BYTES,
        max_bin_len=MAX_FRAME_BYTES,
        max_str_len=MAX_STRING_BYTES,
        max_array_len=MAX_LIST_ITEMS,
        max_map_len=MAX_MAP_ITEMS,
        max_ext_len=0,
    )


class RawBlock(NamedTuple):
    """One node block as framed: still compressed, with the byte offset of its frame."""

    nodes: int
    codec: str
    payload: dict[str, bytes]
    offset: int  # of the `nodes` frame, or of the first `node` frame batched into it
    stop: int  # one past the last byte of that frame (or of the last batched `node` frame)


class FrameLog:
    """Validates frames one by one and keeps what they say (node payloads undecoded)."""

    def __init__(self, path: str) -> None:
        self.path = path
        self.header: TrailHeader | None = None
        self.blocks: list[RawBlock] = []
        self.total = 0
        self.best: list[BestUpdate] = []
        self.end: EndInfo | None = None
        self._pending: dict[str, list[Any]] | None = None
        self._pending_count = 0
        self._pending_offset = 0
        self._pending_stop = 0
        self.end_offset = -1
        #: Where the first frame not yet complete starts (the file's end when all are).
        self.resume = 0
        #: Whether the unpacker stopped inside the frame that starts at `resume`.
        self.partway = False
        #: One past the last byte of the frame being taken.
        self.here = 0
        #: Where the header frame ends (node frames follow it).
        self.header_end = 0
        #: Decoded bytes the node blocks so far claim (bounded by `_claim`).
        self.decoded = 0

    def fail(self, offset: int, message: str) -> CorruptTrailError:
        return CorruptTrailError(self.path, offset, message, None)

    def take(self, frame: Any, offset: int) -> None:
        if not isinstance(frame, dict):
            if self.header is None:
                raise self.fail(offset, "not a trail: it does not start with a header frame")
            raise self.fail(offset, "expected a frame (a map with a 'kind')")
        kind = frame.get("kind")
        if self.header is None:
            try:
                self.header = from_wire(frame)
            except HeaderError as exc:
                raise self.fail(offset, f"bad header: {exc}") from None
            self.header_end = self.here
            return
        if self.end is not None:
            raise self.fail(offset, "a frame follows the end frame")
        if kind == NODES:
            self._flush_pending()
            self._nodes(frame, offset)
        elif kind == NODE:
            self._node(frame, offset)
        elif kind == BEST:
            self._flush_pending()
            self.best.append(self._best(frame, offset))
        elif kind == END:
            self._flush_pending()
            self.end = self._end(frame, offset)
        elif kind == HEADER:
            raise self.fail(offset, "a second header frame")
        else:
            raise self.fail(offset, f"unknown frame kind {str(kind)[:40]!r}")

    def finish(self) -> None:
        self._flush_pending()

    # -- frame kinds ---------------------------------------------------------------------

    def _nodes(self, frame: dict[str, Any], offset: int) -> None:
        assert self.header is not None
        first, count, codec = frame.get("first"), frame.get("count"), frame.get("codec", "none")
        if not is_int(count) or not 0 < count <= MAX_BLOCK_NODES:
            raise self.fail(offset, f"nodes frame count must be 1..{MAX_BLOCK_NODES}")
        if first != self.total:
            raise self.fail(offset, f"nodes frame starts at id {first!r}, expected {self.total}")
        if codec not in CODECS:
            raise self.fail(offset, f"unknown codec {str(codec)[:20]!r}; expected one of {CODECS}")
        payload = frame.get("columns")
        if not isinstance(payload, dict):
            raise self.fail(offset, "nodes frame needs a 'columns' map")
        for col in self.header.columns:
            data = payload.get(col.name)
            if not isinstance(data, bytes):
                raise self.fail(offset, f"nodes frame lacks column {col.name!r}")
            if codec == "none" and len(data) != count * col.dtype.itemsize:
                raise self.fail(
                    offset,
                    f"column {col.name} holds {len(data)} bytes, "
                    f"expected {count * col.dtype.itemsize}",
                )
        if self.total + count > MAX_TRAIL_NODES:
            raise self.fail(offset, f"more than {MAX_TRAIL_NODES} nodes")
        self._claim(count, offset)
        columns = {c.name: payload[c.name] for c in self.header.columns}
        self.blocks.append(RawBlock(count, codec, columns, offset, self.here))
        self.total += count

    def _claim(self, count: int, offset: int) -> None:
        """Refuse a block whose decoded columns the file's size cannot plausibly hold."""
        assert self.header is not None
        row = sum(c.dtype.itemsize for c in self.header.columns)
        claimed = self.decoded + count * row
        allowed = MAX_DECODED_RATIO * (self.here - self.header_end) + DECODED_ALLOWANCE
        if claimed > allowed:
            raise self.fail(
                offset,
                f"nodes frame claims {count} records of {row} bytes: the node columns so far "
                f"would decode to {claimed} bytes, more than {MAX_DECODED_RATIO} times the "
                f"{self.here - self.header_end} bytes of node frames that hold them "
                "(a decompression bomb, or a damaged count)",
            )
        self.decoded = claimed

    def _node(self, frame: dict[str, Any], offset: int) -> None:
        """A single-record frame (hand-written writers): batched into column blocks."""
        assert self.header is not None
        if "id" in frame and frame["id"] != self.total + self._pending_count:
            raise self.fail(
                offset,
                f"node id {frame['id']!r} out of order, expected "
                f"{self.total + self._pending_count}",
            )
        if self._pending is None:
            self._pending = {c.name: [] for c in self.header.columns}
            self._pending_offset = offset
        values = _node_values(frame, self.header)
        if isinstance(values, str):
            raise self.fail(offset, values)
        for col in self.header.columns:
            self._pending[col.name].append(values.get(col.name, absent_value(col.dtype)))
        self._pending_count += 1
        self._pending_stop = self.here
        if self._pending_count >= _NODE_FRAME_BATCH:
            self._flush_pending()

    def _flush_pending(self) -> None:
        if not self._pending_count or self._pending is None or self.header is None:
            return
        payload: dict[str, bytes] = {}
        for col in self.header.columns:
            payload[col.name] = np.array(self._pending[col.name], dtype=col.dtype).tobytes()
        self.decoded += self._pending_count * sum(c.dtype.itemsize for c in self.header.columns)
        block = RawBlock(
            self._pending_count, "none", payload, self._pending_offset, self._pending_stop
        )
        self.blocks.append(block)
        self.total += self._pending_count
        self._pending = None
        self._pending_count = 0

    def _best(self, frame: dict[str, Any], offset: int) -> BestUpdate:
        assert self.header is not None
        n = self.header.instance.n
        at, node, length, tour = (frame.get(k) for k in ("at", "node", "length", "tour"))
        if not is_int(at) or not 0 <= at <= MAX_TRAIL_NODES:
            raise self.fail(offset, f"best frame needs 'at', a node id 0..{MAX_TRAIL_NODES}")
        if node is None:
            node = -1
        if not is_int(node) or not -1 <= node < MAX_TRAIL_NODES:
            raise self.fail(offset, "best frame's 'node' must be a node id or -1")
        if node >= 0 and at != node + 1 and not self.header.solver.visit_order:
            raise self.fail(
                offset, f"best frame's 'at' must be its node + 1 ({node + 1}), found {at}"
            )
        try:
            value = recorded_length(length)
        except FieldError as exc:
            raise self.fail(offset, f"best frame's 'length' {exc}") from None
        try:
            cities = best_tour(tour, n)
        except FieldError as exc:
            raise self.fail(offset, f"best frame's 'tour' {exc}") from None
        return BestUpdate(at=at, node=node, length=value, tour=cities)

    def _end(self, frame: dict[str, Any], offset: int) -> EndInfo:
        self.end_offset = offset
        status = frame.get("status")
        if status not in STATUSES:
            raise self.fail(
                offset,
                f"end frame status must be one of {', '.join(STATUSES)}, "
                f"found {show_value(status)}",
            )
        raw_decisions = frame.get("decisions") or {}
        if not isinstance(raw_decisions, dict):
            raise self.fail(offset, "end frame's 'decisions' must be a map")
        decisions = {
            k: int(v) for k, v in raw_decisions.items() if k in DECISION_NAMES and is_int(v)
        }
        length = frame.get("length")
        tour = frame.get("tour")
        return EndInfo(
            status=str(status),
            nodes=_int_or(frame.get("nodes"), self.total),
            recorded=_int_or(frame.get("recorded"), self.total),
            decisions=decisions,
            seconds=float(frame["seconds"]) if is_number(frame.get("seconds")) else 0.0,
            length=float(length) if is_number(length) else None,
            tour=[int(c) for c in tour]
            if isinstance(tour, list) and all(is_int(c) for c in tour)
            else None,
        )


def _int_or(value: Any, default: int) -> int:
    return int(value) if is_int(value) else default


def _node_values(frame: dict[str, Any], header: TrailHeader) -> dict[str, int | float] | str:
    """Column values of a single-record frame, or the reason it is malformed."""
    out: dict[str, int | float] = {}
    n = header.instance.n
    if DECISION not in frame:
        return f"node frame needs a '{DECISION}'"
    try:
        out[DECISION] = decision_code(frame[DECISION], codes=True)
    except FieldError as exc:
        return f"node frame's '{DECISION}': {exc}"
    for key in (CITY, DEPTH):  # a depth is below n, as a city is
        try:
            out[key] = city_value(frame.get(key), n)
        except FieldError:
            return f"node frame needs '{key}', a whole number 0..{n - 1}"
    visit = frame.get(VISIT)
    if visit is not None:
        if not is_int(visit) or visit < 0:
            return f"node frame's '{VISIT}' must be a visit position >= 0"
        out[VISIT] = visit
    for key in (PARTIAL, TREE, BOUND):
        value = frame.get(key)
        if value is not None:
            problem = _length_problem(value, header.column(key))
            if problem:
                return f"node frame's '{key}' {problem}"
            out[key] = value
    for key, city_key in ((LINK_IN, LINK_IN_CITY), (LINK_OUT, LINK_OUT_CITY)):
        link = frame.get(key)
        if link is None:
            continue
        try:
            link_city, _ = link_value(link, n)
        except FieldError:
            return f"node frame's '{key}' must be [city, length] or null"
        if _length_problem(link[1], header.column(key)):
            return f"node frame's '{key}' must be [city, length] or null"
        out[city_key] = link_city
        out[key] = link[1]
    return out


def _length_problem(value: Any, column: Column | None) -> str | None:
    """Why `value` cannot go into a length column, or None if it can."""
    try:
        recorded_length(value)
    except FieldError:
        return "must be a finite number within ±2**53, or null"
    if column is not None and column.dtype.kind in "iu":
        info = np.iinfo(column.dtype.str)
        if not float(value).is_integer() or not info.min < value <= info.max:
            return f"must be a whole number that fits {column.dtype.str} (the trail's lengths)"
    return None


def _decode_into(
    store: dict[str, NDArray[Any]],
    header: TrailHeader,
    pos: int,
    block: RawBlock,
) -> str | None:
    """Decode one block into store[...][pos:pos+count]; returns an error message or None."""
    for col in header.columns:
        values = decode_column(header, col, block.codec, block.payload[col.name], block.nodes)
        if isinstance(values, str):
            return values
        store[col.name][pos : pos + block.nodes] = values
    return None


def _decompressor() -> zstandard.ZstdDecompressor:
    """This thread's zstd decompressor, made once: a fresh one per column cost about 14% of
    reading a 10 M-node trail. One per thread, as a decompressor must not be used by two
    threads at once; each `decompress` call starts a new frame, so a failed one leaves
    nothing behind."""
    found: zstandard.ZstdDecompressor | None = getattr(_THREAD, "zstd", None)
    if found is None:
        found = _THREAD.zstd = zstandard.ZstdDecompressor()
    return found


def decode_column(
    header: TrailHeader, col: Column, codec: str, data: bytes, count: int
) -> NDArray[Any] | str:
    """One column of a block as `count` checked values (read-only), or why it cannot be."""
    size = count * col.dtype.itemsize
    if codec == "zstd":
        try:
            data = _decompressor().decompress(data, max_output_size=size)
        except zstandard.ZstdError as exc:
            return f"column {col.name} does not decompress ({exc})"
    if len(data) != size:
        return f"column {col.name} holds {len(data)} bytes, expected {size}"
    values = np.frombuffer(data, dtype=col.dtype)
    n = header.instance.n
    if col.name in (*CITY_COLUMNS, DEPTH):
        bad = values >= n
        if col.name in (LINK_IN_CITY, LINK_OUT_CITY):
            bad &= values != absent_value(values.dtype)
        if bad.any():
            return f"column {col.name} holds {int(values[bad][0])}, outside 0..{n - 1}"
    if col.name == DECISION and (values >= len(DECISION_NAMES)).any():
        return "column decision holds an unknown code"
    return values


def consume_frames(unpacker: msgpack.Unpacker, frames: FrameLog) -> CorruptTrailError | None:
    """Hand every complete frame to `frames`; the first corrupt one is returned, not raised."""
    while True:
        # After running out of data the unpacker keeps its place inside the frame, so the
        # frame's start is the one noted before it.
        if not frames.partway:
            frames.resume = unpacker.tell()
        offset = frames.resume
        try:
            frame = unpacker.unpack()
        except msgpack.OutOfData:
            frames.partway = True
            return None
        except (msgpack.UnpackException, ValueError) as exc:
            return frames.fail(offset, f"not a valid frame ({exc})")
        frames.partway = False
        frames.here = unpacker.tell()
        try:
            frames.take(frame, offset)
        except CorruptTrailError as exc:
            return exc


def read_trail(path: str | Path) -> Trail:
    """Read every complete frame of a trail file.

    Raises:
        InputError: the file cannot be opened or does not start with a header.
        CorruptTrailError: a corrupt frame (its `partial` holds everything before it).
    """
    p = Path(path)
    try:
        handle = open(p, "rb")  # noqa: SIM115 (closed below)
        size = p.stat().st_size
    except OSError as exc:
        raise InputError(p, f"cannot read: {exc.strerror or exc}") from None
    frames = FrameLog(str(p))
    with handle:
        unpacker = frame_unpacker(handle)
        corrupt = consume_frames(unpacker, frames)
        stop = frames.resume
    frames.finish()
    if frames.header is None:
        if corrupt is not None:
            raise corrupt
        if size:
            raise InputError(p, "stops inside its header frame: not a complete trail", offset=0)
        raise InputError(p, "empty: no header frame, not a trail")
    store = {c.name: np.empty(frames.total, dtype=c.dtype) for c in frames.header.columns}
    pos = 0
    for i, block in enumerate(frames.blocks):
        problem = _decode_into(store, frames.header, pos, block)
        if problem is not None:
            store = {k: v[:pos] for k, v in store.items()}
            partial = Trail(str(p), frames.header, store, frames.best, None)
            message = f"node block {i} (ids {pos}..): {problem}"
            raise CorruptTrailError(str(p), block.offset, message, partial)
        pos += block.nodes
    trail = Trail(str(p), frames.header, store, sorted(frames.best, key=lambda b: b.at), frames.end)
    if corrupt is not None:
        corrupt.partial = trail
        raise corrupt
    disagreement = end_disagreement(
        trail.end,
        trail.best,
        trail.count,
        lambda: _decision_counts(trail.columns[DECISION]),
    )
    if disagreement is not None:
        trail.end = None
        trail.notice = (
            f"the end frame at byte {frames.end_offset} disagrees with the trail "
            f"({disagreement}); read as a run without an end"
        )
    elif stop < size:
        trail.notice = (
            f"file stops inside a frame at byte {stop} of {size}; "
            f"read {trail.count} nodes before it"
        )
    elif trail.end is None:
        trail.notice = f"no end frame: a live or crashed run ({trail.count} nodes so far)"
    return trail


def _decision_counts(decision: NDArray[Any]) -> NDArray[np.int64]:
    """Nodes per decision code: one comparison pass per code over the narrow column, which
    is faster than `np.bincount` (that first widens every code to 64 bits)."""
    return np.array([np.count_nonzero(decision == code) for code in range(len(DECISION_NAMES))])


def end_disagreement(
    end: EndInfo | None,
    best: list[BestUpdate],
    count: int,
    decision_counts: Callable[[], NDArray[Any]],
) -> str | None:
    """Why the end frame cannot be the summary of these nodes and updates, or None if it can.

    `best` is in effect order; `decision_counts()` gives the nodes per decision code (only
    called when the end frame's counts must be compared).
    """
    if end is None:
        return None
    last = best[-1] if best else None
    if end.length is not None and (last is None or end.length != last.length):
        found = "none" if last is None else f"{last.length:g}"
        return f"it gives length {end.length:g}, the last incumbent update {found}"
    if end.tour is not None and (last is None or tuple(end.tour) != last.tour):
        return "its tour is not the last incumbent update's"
    if end.recorded != count:
        return f"it counts {end.recorded} records, the trail holds {count}"
    if end.nodes == count and end.decisions:
        counts = decision_counts()
        for code, name in enumerate(DECISION_NAMES):
            if end.decisions.get(name, 0) != int(counts[code]):
                return f"it counts {end.decisions.get(name, 0)} {name}, the trail {counts[code]}"
    return None


class TrailFollower:
    """Follows a trail that is still being written: `poll()` returns what was appended.

    The follower keeps its own growing columns (capacity doubles), so `trail` is always a
    view of everything read so far.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._handle: BinaryIO = open(self.path, "rb")  # noqa: SIM115 (closed in close())
        self.frame_unpacker = frame_unpacker(None)
        self._frames = FrameLog(str(self.path))
        self._store: dict[str, NDArray[Any]] = {}
        self._count = 0
        self._decoded_blocks = 0
        self._best_seen = 0

    def poll(self) -> tuple[int, int, list[BestUpdate]]:
        """Read what was appended since the last call.

        Returns:
            (first new node id, number of new nodes, new incumbent updates).

        Raises:
            CorruptTrailError: a corrupt frame.
        """
        while True:  # a chunk at a time: the unpacker's buffer holds one frame at most
            data = self._handle.read(READ_SIZE)
            if data:
                self.frame_unpacker.feed(data)
            corrupt = consume_frames(self.frame_unpacker, self._frames)
            if corrupt is not None:
                raise corrupt
            if len(data) < READ_SIZE:
                break
        if self._frames.end is not None:
            self._frames.finish()
        header = self._frames.header
        first = self._count
        if header is not None:
            for block in self._frames.blocks[self._decoded_blocks :]:
                self._reserve(header, self._count + block.nodes)
                problem = _decode_into(self._store, header, self._count, block)
                if problem is not None:
                    message = f"node block (ids {self._count}..): {problem}"
                    raise CorruptTrailError(str(self.path), block.offset, message, None)
                self._count += block.nodes
                self._decoded_blocks += 1
            self._frames.blocks.clear()
            self._decoded_blocks = 0
        new_best = self._frames.best[self._best_seen :]
        self._best_seen = len(self._frames.best)
        return first, self._count - first, new_best

    @property
    def header(self) -> TrailHeader | None:
        """The header, once it has been read."""
        return self._frames.header

    @property
    def trail(self) -> Trail | None:
        """Everything read so far (None before the header arrives)."""
        header = self._frames.header
        if header is None:
            return None
        # Before the first block the store is empty: every column is then an empty array.
        columns = {
            c.name: self._store[c.name][: self._count]
            if c.name in self._store
            else np.empty(0, dtype=c.dtype)
            for c in header.columns
        }
        return Trail(
            str(self.path),
            header,
            columns,
            sorted(self._frames.best, key=lambda b: b.at),
            self._frames.end,
        )

    def close(self) -> None:
        """Release the file."""
        self._handle.close()

    def _reserve(self, header: TrailHeader, needed: int) -> None:
        have = len(next(iter(self._store.values()))) if self._store else 0
        if needed <= have:
            return
        capacity = max(needed, 2 * have, 1 << 16)
        grown = {c.name: np.empty(capacity, dtype=c.dtype) for c in header.columns}
        for name, arr in self._store.items():
            grown[name][: self._count] = arr[: self._count]
        self._store = grown
