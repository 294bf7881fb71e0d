"""Opening a trail for the viewer, started before the viewer's own libraries load.

`start_loading` reads the trail and builds its tree index in a thread, so the reading (much
of it in compiled code that lets other threads run) overlaps the import of Textual and the
analyses; the viewer takes the result when it builds its model. This module imports only
the trail layer, so a caller can start the reading first and import the viewer after. It is
the one place the viewer's loading path goes through. A `.trail` too large for the memory
setting is opened block by block instead (`tracer.trails.open_blocks`): from the index its
writer left, or from its first `FIRST_BYTES` scanned while the viewer indexes the rest.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tracer.base import DEFAULT_MEMORY_MB, MAX_DECODED_RATIO, FileKind, InputError, Trail, sniff
from tracer.trails import (
    BlockFile,
    CorruptTrailError,
    Follower,
    follow_trail,
    open_blocks,
    open_trail,
)

if TYPE_CHECKING:
    from tracer.analysis import TreeIndex

#: Bytes of a trail without a written index scanned before the first screen.
FIRST_BYTES = 32 << 20


@dataclass(frozen=True)
class Opened:
    """A trail as the viewer opens it: what was readable, its index, what to tell the user.

    `blocks` is the block file behind a trail opened block by block (its columns are
    `LazyColumn`s and its index a `LazyTreeIndex`); None for a trail read whole.
    """

    trail: Trail
    notice: str | None
    follower: Follower | None
    index: TreeIndex | None = None
    blocks: BlockFile | None = None


def open_for_viewing(
    path: str | Path, *, follow: bool = True, memory_mb: int = DEFAULT_MEMORY_MB
) -> Opened:
    """Open a trail for the viewer: a cut or corrupt file opens with what was readable.

    A trail (or JSON Lines trace) without an end is followed live (when `follow`). A
    `.trail` whose in-memory form would need more than `memory_mb` opens block by block.

    Raises:
        InputError: nothing readable (not a trail, or cut before its header).
    """
    p = Path(path)
    blocks = _open_large(p, memory_mb)
    if blocks is not None:
        from tracer.analysis import lazy_view

        trail, index = lazy_view(blocks)
        # While the rest is still to be indexed, where the first scan stopped is no news
        # (the viewer says where the file stops, if it does, once it is indexed).
        partial = blocks.indexing and not blocks.at_end
        return Opened(trail, None if partial else blocks.notice, None, index, blocks)
    try:
        trail = open_trail(p)
    except CorruptTrailError as exc:
        if exc.partial is None:
            raise
        return Opened(exc.partial, f"{exc}; showing the {exc.partial.count} nodes before it", None)
    if trail.end is None and follow:
        follower = follow_trail(p)
        try:
            follower.poll()
        except InputError as exc:
            follower.close()
            return Opened(trail, str(exc), None)
        live = follower.trail
        if live is not None:
            return Opened(live, trail.notice, follower)
        follower.close()
    return Opened(trail, trail.notice, None)


def _open_large(path: Path, memory_mb: int) -> BlockFile | None:
    """The trail opened block by block when reading it whole would exceed `memory_mb`.

    A trail without a written index is judged by its first `FIRST_BYTES`, scaled to the
    file's size; a file that even decoded at the reader's cap (`MAX_DECODED_RATIO`) would fit
    is not looked at. None for anything else (the usual reader then opens it, or explains).
    """
    from tracer.analysis import in_memory_bytes

    limit = memory_mb << 20
    try:
        if sniff(path) != FileKind.TRAIL or path.stat().st_size * MAX_DECODED_RATIO <= limit:
            return None
        blocks = open_blocks(path, first_bytes=FIRST_BYTES)
    except (InputError, OSError):
        return None
    _, done, size = blocks.progress
    count = blocks.count
    if blocks.indexing and done:
        count = count * max(size, done) // done
    if in_memory_bytes(blocks.header, count) > limit:
        return blocks
    blocks.close()
    return None


class Loading:
    """A trail being opened (and indexed) in a background thread; `result` waits for it.

    Args:
        path: the trail or JSON Lines file.
        follow: follow a trail without an end frame as it grows.
        memory_mb: the memory setting (see `open_for_viewing`).
    """

    def __init__(
        self, path: str | Path, *, follow: bool = True, memory_mb: int = DEFAULT_MEMORY_MB
    ) -> None:
        self.path = path
        self.follow = follow
        self.memory_mb = memory_mb
        self._opened: Opened | None = None
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, name="prunetrail-open", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        warm = threading.Thread(target=_load_index_code, name="prunetrail-warm", daemon=True)
        warm.start()
        try:
            opened = open_for_viewing(self.path, follow=self.follow, memory_mb=self.memory_mb)
            if opened.blocks is not None:
                self._opened = opened
                return
            warm.join()
            from tracer.analysis import TreeIndex

            trail = opened.trail
            index = TreeIndex(trail.columns, trail.best)
            self._opened = Opened(trail, opened.notice, opened.follower, index)
        except BaseException as exc:  # handed to the caller of `result`
            self._error = exc

    def result(self) -> Opened:
        """The opened trail with its index (waits for the thread).

        Raises:
            InputError: as `open_for_viewing`.
        """
        self._thread.join()
        if self._error is not None:
            raise self._error
        assert self._opened is not None
        return self._opened


def start_loading(
    path: str | Path, *, follow: bool = True, memory_mb: int = DEFAULT_MEMORY_MB
) -> Loading:
    """Start opening `path` for the viewer in the background."""
    return Loading(path, follow=follow, memory_mb=memory_mb)


def _load_index_code() -> None:
    """Import the analyses and run the tree index once on one node.

    The compiled tree pass loads its cached machine code on its first call; doing that
    while the file is read takes it off the path to the first screen.
    """
    import numpy as np

    from tracer.analysis import TreeIndex
    from tracer.base import CITY, DECISION, DEPTH

    one: dict[str, Any] = {name: np.zeros(1, dtype=np.uint8) for name in (CITY, DEPTH, DECISION)}
    TreeIndex(one, [])
