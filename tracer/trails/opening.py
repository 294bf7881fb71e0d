"""Opening any trace a user hands us: a trail file, or a JSON Lines trace from another solver.

Commands take a path and call `open_trail`, so `check`, `why` and the viewer accept a
foreign solver's `.jsonl` directly, without an import step.
"""

from __future__ import annotations

from pathlib import Path

from tracer.base import Trail
from tracer.trails.jsonl import read_jsonl
from tracer.trails.reader import read_trail

#: File suffix read as JSON Lines (any other file is read as a trail).
JSONL_SUFFIX = ".jsonl"


def open_trail(path: str | Path) -> Trail:
    """Read `path` as JSON Lines if it ends in `.jsonl`, otherwise as a trail file.

    Raises:
        InputError: the file is not what its name says, naming where.
    """
    p = Path(path)
    if p.suffix.lower() == JSONL_SUFFIX:
        return read_jsonl(p)
    return read_trail(p)
