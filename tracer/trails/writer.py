"""Writing a trail: MessagePack frames, node columns compressed in a background thread.

Compression and disk writes happen on a second thread so they overlap the search (the
compiled loop releases the GIL). Frames keep their order; each is flushed to the file as
soon as it is written, so a viewer can follow a live run and a crash loses at most the
frames still queued. `close` always writes the `end` frame, and in it the block index (every
block's place and summary, see TRAIL_FORMAT.md), so a reader can open a large trail without
scanning it.
"""

from __future__ import annotations

import queue
import struct
import threading
from collections.abc import Mapping
from pathlib import Path
from types import TracebackType
from typing import Any, BinaryIO

import msgpack
import numpy as np
import zstandard
from numpy.typing import NDArray

from tracer.base import (
    BEST,
    CODECS,
    DECISION,
    DECISION_NAMES,
    DEPTH,
    END,
    NODES,
    BestUpdate,
    EndInfo,
    PrunetrailError,
    TrailHeader,
    length_value,
    to_wire,
)
from tracer.trails.blocks import (
    INDEX_AT_KEY,
    INDEX_FIELDS,
    INDEX_KEY,
    INDEX_TAIL,
    MAX_INDEX_BEST,
    MAX_INDEX_BLOCKS,
    block_summary,
)

_QUEUE_DEPTH = 4


class TrailWriteError(PrunetrailError):
    """A write failed (a full disk, say); the file keeps every frame written before it."""

    def __init__(self, path: Path, exc: OSError) -> None:
        super().__init__(
            f"cannot write {path}: {exc.strerror or exc} "
            "(the trail stays readable up to its last complete frame)"
        )


class TrailWriter:
    """Streams one trail file; use as a context manager or call `close`.

    Args:
        path: the file to create (replaced if it exists).
        header: instance, solver settings and column layout.
        codec: "zstd" (default) or "none".
        level: zstandard level (1 is fast and already small for these columns).
        threaded: compress and write on a background thread.
    """

    def __init__(
        self,
        path: str | Path,
        header: TrailHeader,
        *,
        codec: str = "zstd",
        level: int = 1,
        threaded: bool = True,
    ) -> None:
        if codec not in CODECS:
            raise ValueError(f"codec must be one of {CODECS}")
        self.path = Path(path)
        self.header = header
        self.codec = codec
        self._level = level
        self._integral = header.instance.integral
        self._names = [c.name for c in header.columns]
        self._dtypes = {c.name: c.dtype.base for c in header.columns}  # a row column: (m, n)
        self._next_id = 0
        self._closed = False
        self._error: BaseException | None = None
        self._written = 0  # bytes in the file so far
        # One row of INDEX_FIELDS per block (8 bytes a field: 104 bytes a block).
        self._index = np.zeros((64, len(INDEX_FIELDS)), dtype="<i8")
        self._blocks = 0
        self._best_offsets: list[int] = []
        self._top = 0  # the ancestor stack's depth after the blocks written so far
        self._file: BinaryIO = open(self.path, "wb")  # noqa: SIM115 (closed in close())
        self._compressor = zstandard.ZstdCompressor(level=level, write_checksum=True)
        try:
            self._emit(msgpack.packb(to_wire(header), use_bin_type=True))
        except TrailWriteError:
            self._file.close()
            raise
        self._queue: queue.Queue[tuple[int, dict[str, NDArray[Any]]] | bytes | None] | None = None
        self._thread: threading.Thread | None = None
        if threaded:
            self._queue = queue.Queue(maxsize=_QUEUE_DEPTH)
            self._thread = threading.Thread(target=self._drain, name="trail-writer", daemon=True)
            self._thread.start()

    @property
    def nodes_written(self) -> int:
        """How many node records have been handed to the writer."""
        return self._next_id

    def write_nodes(self, columns: Mapping[str, NDArray[Any]]) -> None:
        """Append one block of consecutive node records (one array per header column)."""
        count = len(columns[self._names[0]])
        if count == 0:
            return
        block = {
            name: np.ascontiguousarray(columns[name], dtype=self._dtypes[name])
            for name in self._names
        }
        if any(len(v) != count for v in block.values()):
            raise ValueError("node columns differ in length")
        first = self._next_id
        self._next_id += count
        self._put((first, block))

    def write_best(self, update: BestUpdate) -> None:
        """Append an incumbent update."""
        frame = {
            "kind": BEST,
            "at": update.at,
            "node": update.node,
            "length": length_value(update.length, self._integral),
            "tour": [int(c) for c in update.tour],
        }
        self._put(msgpack.packb(frame, use_bin_type=True))

    def close(self, end: EndInfo) -> int:
        """Write the `end` frame (with the block index), once every queued frame is written.

        Returns:
            The file's size in bytes.
        """
        if self._closed:
            return self.path.stat().st_size
        self._finish(end)
        return self.path.stat().st_size

    def __enter__(self) -> TrailWriter:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if not self._closed:
            self._finish(None)

    # -- internals -------------------------------------------------------------------------

    def _put(self, item: tuple[int, dict[str, NDArray[Any]]] | bytes) -> None:
        if self._error is not None:
            raise self._error
        if self._queue is None:
            self._write(item)
        else:
            self._queue.put(item)

    def _write(self, item: tuple[int, dict[str, NDArray[Any]]] | bytes) -> None:
        """Pack and write one frame, noting its place for the index."""
        offset = self._written
        if isinstance(item, bytes):
            self._emit(item)
            self._best_offsets.append(offset)
            return
        first, block = item
        self._emit(self._pack(first, block))
        summary = block_summary(block[DEPTH], block[DECISION], self._top)
        self._top = summary.exit_top
        if self._blocks == len(self._index):
            self._index = np.concatenate((self._index, np.zeros_like(self._index)))
        self._index[self._blocks] = (
            offset,
            self._written,
            first,
            len(block[DEPTH]),
            CODECS.index(self.codec),
            summary.min_depth,
            summary.max_depth,
            summary.entry_top,
            *summary.decisions,
        )
        self._blocks += 1

    def _end_frame(self, end: EndInfo) -> bytes:
        """The end frame; with the block index and, last, its own offset when they fit."""
        frame: dict[str, Any] = {
            "kind": END,
            "status": end.status,
            "nodes": end.nodes,
            "recorded": end.recorded,
            "decisions": {name: int(end.decisions.get(name, 0)) for name in DECISION_NAMES},
            "seconds": round(end.seconds, 6),
            "length": None if end.length is None else length_value(end.length, self._integral),
            "tour": None if end.tour is None else [int(c) for c in end.tour],
            **{k: v for k, v in end.extra.items() if k not in (INDEX_KEY, INDEX_AT_KEY)},
        }
        if self._blocks > MAX_INDEX_BLOCKS or len(self._best_offsets) > MAX_INDEX_BEST:
            return bytes(msgpack.packb(frame, use_bin_type=True))
        frame[INDEX_KEY] = {
            "fields": list(INDEX_FIELDS),
            "blocks": self._index[: self._blocks].tobytes(),
            BEST: np.array(self._best_offsets, dtype="<i8").tobytes(),
        }
        packer = msgpack.Packer(use_bin_type=True)
        body = b"".join(packer.pack(k) + packer.pack(v) for k, v in frame.items())
        # The locator is packed by hand as a uint64, so it is always the file's last 9 bytes.
        locator = INDEX_TAIL + struct.pack(">Q", self._written)
        head = bytes(packer.pack_map_header(len(frame) + 1))
        return b"".join((head, body, locator))

    def _pack(self, first: int, block: dict[str, NDArray[Any]]) -> bytes:
        if self.codec == "zstd":
            payload = {
                name: self._compressor.compress(arr.tobytes()) for name, arr in block.items()
            }
        else:
            payload = {name: arr.tobytes() for name, arr in block.items()}
        count = len(next(iter(block.values())))
        frame = {
            "kind": NODES,
            "first": first,
            "count": count,
            "codec": self.codec,
            "columns": payload,
        }
        packed: bytes = msgpack.packb(frame, use_bin_type=True)
        return packed

    def _emit(self, data: bytes) -> None:
        try:
            self._file.write(data)
            self._file.flush()
        except OSError as exc:
            raise TrailWriteError(self.path, exc) from exc
        self._written += len(data)

    def _drain(self) -> None:
        assert self._queue is not None
        while True:
            item = self._queue.get()
            if item is None:
                return
            if self._error is not None:
                continue
            try:
                self._write(item)
            except BaseException as exc:
                self._error = exc

    def _finish(self, end: EndInfo | None) -> None:
        """Drain the writer thread, then write `end` (if given) and close the file."""
        self._closed = True
        try:
            if self._queue is not None and self._thread is not None:
                self._queue.put(None)
                self._thread.join()
            if end is not None and self._error is None:
                self._emit(self._end_frame(end))
        finally:
            self._file.close()
        if self._error is not None:
            raise self._error
