"""CSV city lists: `x,y` per line with an optional label column, plain Euclidean distance.

A first line naming the columns (`x`, `y`, and `label` or `name`, in any order) is optional;
without it the columns are `x,y[,label]`. Labels are kept only for display.
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from tracer.base import (
    EUCLIDEAN,
    MAX_COORDINATE,
    MAX_FILE_BYTES,
    MAX_FILE_CITIES,
    MAX_TEXT,
    InputError,
    Instance,
)

_LABEL_NAMES = ("label", "name")


def _float(path: str, line: int, token: str, what: str) -> float:
    try:
        value = float(token)
    except ValueError:
        raise InputError(
            path, f"expected a number for {what}, found {token[:40]!r}", line=line
        ) from None
    if not math.isfinite(value):
        raise InputError(path, f"expected a finite number for {what}, found {token!r}", line=line)
    if abs(value) > MAX_COORDINATE:
        raise InputError(
            path, f"{what} {token[:40]} is larger than the {MAX_COORDINATE:g} accepted", line=line
        )
    return value


def _columns(header: list[str], path: str, line: int) -> tuple[int, int, int | None]:
    names = [h.strip().lower() for h in header]
    if "x" not in names or "y" not in names:
        raise InputError(path, "header line must name columns 'x' and 'y'", line=line)
    label = next((names.index(n) for n in _LABEL_NAMES if n in names), None)
    return names.index("x"), names.index("y"), label


def parse_cities_csv(text: str, path: str = "<text>") -> tuple[Instance, list[str]]:
    """Parse a CSV city list.

    Returns:
        The instance (metric "euclidean") and the label of each city ("" where none given).
    """
    reader = csv.reader(io.StringIO(text))
    try:
        rows = [(i, r) for i, r in enumerate(reader, 1) if any(c.strip() for c in r)]
    except csv.Error as exc:
        raise InputError(path, f"unreadable CSV: {exc}", line=reader.line_num) from None
    if not rows:
        raise InputError(path, "no cities: expected lines 'x,y' or 'x,y,label'")
    first_line, first = rows[0]
    columns = (0, 1, 2)
    try:
        float(first[0])
    except (ValueError, IndexError):
        xi, yi, li = _columns(first, path, first_line)
        columns = (xi, yi, li if li is not None else -1)
        rows = rows[1:]
    if not rows:
        raise InputError(path, "no cities: only a header line")
    xi, yi, li = columns
    width = max(xi, yi) + 1
    if len(rows) > MAX_FILE_CITIES:
        raise InputError(path, f"more than {MAX_FILE_CITIES} cities")
    coords = np.empty((len(rows), 2), dtype=np.float64)
    labels: list[str] = []
    for k, (line, row) in enumerate(rows):
        if len(row) < width or len(row) > 3:
            raise InputError(
                path, f"expected 2 or 3 fields (x,y[,label]), found {len(row)}", line=line
            )
        coords[k, 0] = _float(path, line, row[xi].strip(), "x")
        coords[k, 1] = _float(path, line, row[yi].strip(), "y")
        label = row[li].strip() if 0 <= li < len(row) else ""
        if len(label) > MAX_TEXT:
            raise InputError(
                path,
                f"label is {len(label)} characters, more than the {MAX_TEXT} accepted",
                line=line,
            )
        labels.append(label)
    name = Path(path).stem[:MAX_TEXT]  # a name we make ourselves: cut, never refused
    return Instance(name=name, metric=EUCLIDEAN, coords=coords, source=path), labels


def read_cities_csv(path: str | Path) -> tuple[Instance, list[str]]:
    """Read a CSV city list file."""
    p = Path(path)
    try:
        if p.stat().st_size > MAX_FILE_BYTES:
            raise InputError(p, f"file is larger than the {MAX_FILE_BYTES} bytes read")
        text = p.read_bytes().decode("utf-8", errors="replace")
    except OSError as exc:
        raise InputError(p, f"cannot read: {exc.strerror or exc}") from None
    return parse_cities_csv(text, str(p))
