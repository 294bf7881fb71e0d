"""What kind of file a path holds, told from its first bytes, so a command handed the wrong
kind says which kind it got and which it wanted instead of a confusing parse error.

The sniff reads at most a few kilobytes and never parses the file: the readers still
decide whether a file of the right kind is well formed.
"""

from __future__ import annotations

import re
from enum import StrEnum
from pathlib import Path

from tracer.base.errors import InputError


class FileKind(StrEnum):
    """The kinds of file the sniff tells apart."""

    TRAIL = "trail"
    JSON_LINES = "json-lines"
    TSPLIB = "tsplib"
    CSV = "csv"
    TEXT = "text"
    BINARY = "binary"
    EMPTY = "empty"


#: How each kind is named in a message.
KIND_NAMES = {
    FileKind.TRAIL: "a trail (MessagePack frames)",
    FileKind.JSON_LINES: "a JSON Lines trace",
    FileKind.TSPLIB: "a TSPLIB text file",
    FileKind.CSV: "a CSV city list",
    FileKind.TEXT: "plain text",
    FileKind.BINARY: "binary data",
    FileKind.EMPTY: "an empty file",
}

_SNIFF_BYTES = 4096
#: MessagePack map markers: fixmap, map16, map32 (a trail starts with its header map).
_MAP_MARKERS = frozenset(range(0x80, 0x90)) | {0xDE, 0xDF}
_TSPLIB_LINE = re.compile(r"^\s*[A-Z][A-Z_]*\s*(:|$)")
_CSV_LINE = re.compile(r"^[^,]*,[^,]*(,.*)?$")


def sniff_bytes(head: bytes) -> FileKind:
    """The kind of a file that starts with `head`."""
    if not head.strip():
        return FileKind.EMPTY
    if head[0] in _MAP_MARKERS and b"kind" in head[:64]:
        return FileKind.TRAIL
    text = head.decode("utf-8", errors="replace")
    first = next((line for line in text.splitlines() if line.strip()), "").lstrip("\ufeff ")
    if first.startswith("{"):  # what follows the first line is the reader's to judge
        return FileKind.JSON_LINES
    if b"\x00" in head or text.count("\ufffd") > len(text) // 20 + 1:
        return FileKind.BINARY
    if _TSPLIB_LINE.match(first):
        return FileKind.TSPLIB
    if _CSV_LINE.match(first):
        return FileKind.CSV
    return FileKind.TEXT


def sniff(path: str | Path) -> FileKind | None:
    """The kind of file at `path`, or None when it cannot be opened or is not a regular file
    (a pipe would lose the bytes sniffed; the reader says why)."""
    try:
        if not Path(path).is_file():
            return None
        with open(path, "rb") as handle:
            return sniff_bytes(handle.read(_SNIFF_BYTES))
    except OSError:
        return None


def expect_kind(path: str | Path, wanted: tuple[FileKind, ...], purpose: str) -> FileKind | None:
    """Refuse a file whose kind is clearly none of `wanted`; returns the kind found.

    Plain text, an empty file and unreadable paths pass through (their reader explains).

    Args:
        path: the file.
        wanted: the acceptable kinds.
        purpose: what the command wanted, for the message ("an instance (TSPLIB or CSV)").

    Raises:
        InputError: the file is of another known kind, naming the kind found and wanted.
    """
    kind = sniff(path)
    if kind is None or kind in wanted or kind in (FileKind.TEXT, FileKind.EMPTY):
        return kind
    raise InputError(path, f"this is {KIND_NAMES[kind]}, but {purpose} was wanted")
