"""Bookmarks: nodes with a short note, kept in a small JSON sidecar file beside the trail.

The sidecar is `RUN.trail.bookmarks.json`. It is read as untrusted input (another person may
hand it over with the trail): the file size, the number of bookmarks and each note's length
are bounded, node ids outside the trail are dropped, and a file that is not what it should
be is reported in one line and otherwise ignored. Notes are shown through `Text`, never as
markup.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

FORMAT = "prunetrail-bookmarks"
VERSION = 1
SUFFIX = ".bookmarks.json"
MAX_BOOKMARKS = 500
MAX_NOTE = 200
MAX_FILE_BYTES = 256 * 1024


@dataclass(frozen=True)
class Bookmark:
    """A node and the note written about it."""

    node: int
    note: str


def sidecar_path(trail_path: str | Path) -> Path:
    """Where the bookmarks of the trail at `trail_path` live."""
    p = Path(trail_path)
    return p.with_name(p.name + SUFFIX)


def clean_note(note: str) -> str:
    """A note as stored: one line, control characters dropped, at most `MAX_NOTE` long."""
    flat = "".join(ch if ch.isprintable() else " " for ch in note.replace("\n", " "))
    return flat.strip()[:MAX_NOTE]


def load_bookmarks(path: Path, count: int) -> tuple[list[Bookmark], str | None]:
    """The bookmarks in `path` for a trail of `count` nodes, and a notice if some were dropped.

    A missing file is no bookmarks and no notice.
    """
    try:
        size = path.stat().st_size
    except FileNotFoundError:
        return [], None
    except OSError as exc:
        return [], f"{path}: cannot read bookmarks ({exc.strerror or exc})"
    if size > MAX_FILE_BYTES:
        return [], f"{path}: bookmarks file larger than {MAX_FILE_BYTES} bytes, ignored"
    try:
        raw = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        return [], f"{path}: not a bookmarks file ({exc})"
    if not isinstance(raw, dict) or raw.get("format") != FORMAT:
        return [], f"{path}: not a bookmarks file (no format {FORMAT!r})"
    items = raw.get("bookmarks")
    if not isinstance(items, list):
        return [], f"{path}: 'bookmarks' must be a list"
    out: list[Bookmark] = []
    dropped = 0
    for item in items[:MAX_BOOKMARKS]:
        node = item.get("node") if isinstance(item, dict) else None
        note = item.get("note", "") if isinstance(item, dict) else None
        if (
            not isinstance(node, int)
            or isinstance(node, bool)
            or not 0 <= node < count
            or not isinstance(note, str)
        ):
            dropped += 1
            continue
        out.append(Bookmark(node, clean_note(note)))
    dropped += max(0, len(items) - MAX_BOOKMARKS)
    notice = f"{path}: {dropped} bookmark(s) dropped (bad entries or beyond the limit)"
    return out, notice if dropped else None


def save_bookmarks(path: Path, bookmarks: list[Bookmark]) -> None:
    """Write the bookmarks (at most `MAX_BOOKMARKS`) atomically beside the trail.

    Raises:
        OSError: the folder cannot be written.
    """
    data = {
        "format": FORMAT,
        "version": VERSION,
        "bookmarks": [
            {"node": b.node, "note": clean_note(b.note)} for b in bookmarks[:MAX_BOOKMARKS]
        ],
    }
    temporary = path.with_name(path.name + ".tmp")
    temporary.write_text(json.dumps(data, indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
    temporary.replace(path)
