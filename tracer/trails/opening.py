"""Opening any trace a user hands us: a trail file, or a JSON Lines trace from another solver.

Commands take a path and call `open_trail`, so `check`, `why` and the viewer accept a
foreign solver's `.jsonl` directly, without an import step.
"""

from __future__ import annotations

from pathlib import Path
from typing import Protocol

from tracer.base import BestUpdate, FileKind, Trail, expect_kind, sniff
from tracer.trails.jsonl import JsonlFollower, read_jsonl
from tracer.trails.reader import TrailFollower, read_trail

#: File suffix read as JSON Lines (any other file is read as a trail).
JSONL_SUFFIX = ".jsonl"
#: The file kinds a trace is read from (binary data goes to the trail reader, which names
#: the byte where it stops making sense).
TRACE_KINDS = (FileKind.TRAIL, FileKind.JSON_LINES, FileKind.BINARY)


def open_trail(path: str | Path) -> Trail:
    """Read `path` as JSON Lines if it ends in `.jsonl` or holds JSON, otherwise as a trail.

    Raises:
        InputError: the file is not what its name says, naming where; or it is another
            kind of file (an instance, say), naming the kind found.
    """
    p = Path(path)
    kind = expect_kind(p, TRACE_KINDS, "a trace (a .trail file or a JSON Lines trace)")
    if kind == FileKind.JSON_LINES or (p.suffix.lower() == JSONL_SUFFIX and kind != FileKind.TRAIL):
        return read_jsonl(p)
    return read_trail(p)


class Follower(Protocol):
    """Follows a trace still being written (a trail, or JSON Lines): the same to a viewer."""

    def poll(self) -> tuple[int, int, list[BestUpdate]]:
        """(first new id, new nodes, new updates) since the last call.

        Raises:
            InputError: a corrupt frame or malformed line, naming where.
        """
        ...

    @property
    def trail(self) -> Trail | None:
        """Everything read so far."""
        ...

    def close(self) -> None:
        """Release the file."""
        ...


def follow_trail(path: str | Path) -> Follower:
    """A follower for `path`: JSON Lines (by content or `.jsonl`) or a trail file."""
    p = Path(path)
    kind = sniff(p)
    if kind == FileKind.JSON_LINES or (p.suffix.lower() == JSONL_SUFFIX and kind != FileKind.TRAIL):
        return JsonlFollower(p)
    return TrailFollower(p)
