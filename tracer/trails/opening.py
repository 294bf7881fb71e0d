"""Opening any trace a user hands us: a trail file, or a JSON Lines trace from another solver.

Commands take a path and call `open_trail`, so `check`, `why` and the viewer accept a
foreign solver's `.jsonl` directly, without an import step.
"""

from __future__ import annotations

from pathlib import Path

from tracer.base import FileKind, Trail, expect_kind
from tracer.trails.jsonl import read_jsonl
from tracer.trails.reader import read_trail

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
