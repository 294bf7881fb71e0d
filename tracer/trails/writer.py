"""Writing a trail: MessagePack frames, node columns compressed in a background thread.

Compression and disk writes happen on a second thread so they overlap the search (the
compiled loop releases the GIL). Frames keep their order; each is flushed to the file as
soon as it is written, so a viewer can follow a live run and a crash loses at most the
frames still queued. `close` always writes the `end` frame.
"""

from __future__ import annotations

import queue
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
    DECISION_NAMES,
    END,
    NODES,
    BestUpdate,
    EndInfo,
    PrunetrailError,
    TrailHeader,
    length_value,
    to_wire,
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
        """Write the `end` frame, wait for the writer thread, close the file.

        Returns:
            The file's size in bytes.
        """
        if self._closed:
            return self.path.stat().st_size
        frame: dict[str, Any] = {
            "kind": END,
            "status": end.status,
            "nodes": end.nodes,
            "recorded": end.recorded,
            "decisions": {name: int(end.decisions.get(name, 0)) for name in DECISION_NAMES},
            "seconds": round(end.seconds, 6),
            "length": None if end.length is None else length_value(end.length, self._integral),
            "tour": None if end.tour is None else [int(c) for c in end.tour],
            **end.extra,
        }
        try:
            self._put(msgpack.packb(frame, use_bin_type=True))
        finally:
            self._finish()
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
            self._finish()

    # -- internals -------------------------------------------------------------------------

    def _put(self, item: tuple[int, dict[str, NDArray[Any]]] | bytes) -> None:
        if self._error is not None:
            raise self._error
        if self._queue is None:
            self._emit(self._pack(item))
        else:
            self._queue.put(item)

    def _pack(self, item: tuple[int, dict[str, NDArray[Any]]] | bytes) -> bytes:
        if isinstance(item, bytes):
            return item
        first, block = item
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

    def _drain(self) -> None:
        assert self._queue is not None
        while True:
            item = self._queue.get()
            if item is None:
                return
            if self._error is not None:
                continue
            try:
                self._emit(self._pack(item))
            except BaseException as exc:
                self._error = exc

    def _finish(self) -> None:
        self._closed = True
        try:
            if self._queue is not None and self._thread is not None:
                self._queue.put(None)
                self._thread.join()
        finally:
            self._file.close()
        if self._error is not None:
            raise self._error
