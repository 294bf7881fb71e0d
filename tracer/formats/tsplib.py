"""TSPLIB text format (an open standard): instance files (.tsp, .atsp) and tour files.

The reader is strict about what it accepts (every error names the file, the line and what
was expected) and bounded in what it will hold; it never evaluates anything. The writer
exists so tests can round-trip instances, and so `tour -o` produces files other tools read.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    COORD_METRICS,
    EUCLIDEAN,
    EXPLICIT,
    MAX_COORDINATE,
    MAX_EDGE,
    MAX_EXPLICIT_CITIES,
    MAX_FILE_BYTES,
    MAX_FILE_CITIES,
    MAX_TEXT,
    FloatArray,
    InputError,
    Instance,
    Matrix,
)

SECTIONS = (
    "NODE_COORD_SECTION",
    "EDGE_WEIGHT_SECTION",
    "DISPLAY_DATA_SECTION",
    "TOUR_SECTION",
    "FIXED_EDGES_SECTION",
)
_TYPES = ("TSP", "ATSP", "TOUR")
_WEIGHT_TYPES = (*(m for m in COORD_METRICS if m != EUCLIDEAN), EXPLICIT)
FULL_MATRIX = "FULL_MATRIX"
#: Triangular formats, each mapped to the row-wise format that reads the same numbers
#: for a symmetric matrix (a *_COL triangle read column by column is the other row triangle).
_TRIANGLES = {
    "UPPER_ROW": "UPPER_ROW",
    "LOWER_ROW": "LOWER_ROW",
    "UPPER_DIAG_ROW": "UPPER_DIAG_ROW",
    "LOWER_DIAG_ROW": "LOWER_DIAG_ROW",
    "UPPER_COL": "LOWER_ROW",
    "LOWER_COL": "UPPER_ROW",
    "UPPER_DIAG_COL": "LOWER_DIAG_ROW",
    "LOWER_DIAG_COL": "UPPER_DIAG_ROW",
}
WEIGHT_FORMATS = ("FUNCTION", FULL_MATRIX, *_TRIANGLES)
_COORD_TYPES = ("TWOD_COORDS", "NO_COORDS")
_DISPLAY_TYPES = ("COORD_DISPLAY", "TWOD_DISPLAY", "NO_DISPLAY")
_KEYS = {
    "NAME": None,
    "TYPE": _TYPES,
    "COMMENT": None,
    "DIMENSION": None,
    "CAPACITY": None,
    "EDGE_WEIGHT_TYPE": _WEIGHT_TYPES,
    "EDGE_WEIGHT_FORMAT": WEIGHT_FORMATS,
    "NODE_COORD_TYPE": _COORD_TYPES,
    "DISPLAY_DATA_TYPE": _DISPLAY_TYPES,
}


@dataclass
class _Section:
    line: int
    rows: list[tuple[int, list[str]]] = field(default_factory=list)


@dataclass
class _Parsed:
    path: str
    last_line: int
    spec: dict[str, tuple[int, str]] = field(default_factory=dict)
    comments: list[str] = field(default_factory=list)
    sections: dict[str, _Section] = field(default_factory=dict)

    def error(self, message: str, line: int | None = None) -> InputError:
        return InputError(self.path, message, line=line)

    def value(self, key: str) -> str | None:
        got = self.spec.get(key)
        return got[1] if got else None

    def line_of(self, key: str) -> int | None:
        got = self.spec.get(key)
        return got[0] if got else None


def _read_text(path: Path) -> str:
    try:
        size = path.stat().st_size
        if size > MAX_FILE_BYTES:
            raise InputError(path, f"file is {size} bytes, more than the {MAX_FILE_BYTES} read")
        return path.read_bytes().decode("utf-8", errors="replace")
    except OSError as exc:
        raise InputError(path, f"cannot read: {exc.strerror or exc}") from None


def _is_keyword(token: str) -> bool:
    return token[:1].isalpha()


def _parse(text: str, path: str) -> _Parsed:
    lines = text.splitlines()
    parsed = _Parsed(path=path, last_line=len(lines))
    section: _Section | None = None
    for lineno, raw in enumerate(lines, 1):
        fields = raw.replace(":", " : ", 1).split() if ":" in raw else raw.split()
        if not fields:
            continue
        if section is not None and not _is_keyword(fields[0]):
            section.rows.append((lineno, raw.split()))
            continue
        section = None
        key = fields[0].upper()
        if key == "EOF":
            break
        if key in SECTIONS:
            if key in parsed.sections:
                raise parsed.error(
                    f"{key} appears twice (first on line {parsed.sections[key].line})", lineno
                )
            if len(fields) > 1 and fields[1:] != [":"]:
                raise parsed.error(f"expected nothing after {key} on its line", lineno)
            section = parsed.sections[key] = _Section(line=lineno)
            continue
        if len(fields) < 2 or fields[1] != ":":
            raise parsed.error(
                f"expected 'KEYWORD : value' or a section name, found {raw.strip()[:60]!r}", lineno
            )
        value = raw.split(":", 1)[1].strip()
        if key == "COMMENT":
            parsed.comments.append(value)
            continue
        if key in parsed.spec:
            raise parsed.error(f"{key} appears twice (first on line {parsed.line_of(key)})", lineno)
        allowed = _KEYS.get(key)
        if allowed is not None:
            word = value.split()[0].upper() if value.split() else ""
            if word not in allowed:
                raise parsed.error(
                    f"{key} {value[:40]!r} is not supported; expected one of {', '.join(allowed)}",
                    lineno,
                )
            value = word
        parsed.spec[key] = (lineno, value)
    return parsed


def _dimension(parsed: _Parsed, limit: int) -> int:
    raw = parsed.value("DIMENSION")
    line = parsed.line_of("DIMENSION")
    if raw is None:
        raise parsed.error("missing DIMENSION (the number of cities)")
    try:
        n = int(raw)
    except ValueError:
        raise parsed.error(f"DIMENSION must be a whole number, found {raw[:40]!r}", line) from None
    if n < 1:
        raise parsed.error(f"DIMENSION must be at least 1, found {n}", line)
    if n > limit:
        raise parsed.error(f"DIMENSION {n} is more than the {limit} this reader accepts", line)
    return n


def _name(parsed: _Parsed, path: str) -> str:
    """NAME, refused beyond `MAX_TEXT` characters; without one, the file's stem (cut to it)."""
    name = parsed.value("NAME")
    if not name:
        return Path(path).stem[:MAX_TEXT]
    if len(name) > MAX_TEXT:
        raise parsed.error(
            f"NAME is {len(name)} characters, more than the {MAX_TEXT} accepted",
            parsed.line_of("NAME"),
        )
    return name


def _number(
    parsed: _Parsed, token: str, line: int, what: str, limit: float = MAX_COORDINATE
) -> float:
    try:
        value = float(token)
    except ValueError:
        raise parsed.error(f"expected a number for {what}, found {token[:40]!r}", line) from None
    if not math.isfinite(value):
        raise parsed.error(f"expected a finite number for {what}, found {token[:40]!r}", line)
    if abs(value) > limit:
        raise parsed.error(f"{what} {token[:40]} is larger than the {limit:g} accepted", line)
    return value


def _coordinates(parsed: _Parsed, name: str, n: int) -> FloatArray:
    section = parsed.sections[name]
    coords = np.empty((n, 2), dtype=np.float64)
    seen = np.zeros(n, dtype=bool)
    for line, fields in section.rows:
        if len(fields) != 3:
            raise parsed.error(
                f"{name}: expected 3 fields 'node x y', found {len(fields)}"
                + (" (3-D coordinates are not supported)" if len(fields) == 4 else ""),
                line,
            )
        try:
            node = int(fields[0])
        except ValueError:
            raise parsed.error(
                f"{name}: expected a node number, found {fields[0][:40]!r}", line
            ) from None
        if not 1 <= node <= n:
            raise parsed.error(f"{name}: node {node} is outside 1..{n} (DIMENSION)", line)
        if seen[node - 1]:
            raise parsed.error(f"{name}: node {node} is given twice", line)
        seen[node - 1] = True
        coords[node - 1, 0] = _number(parsed, fields[1], line, f"node {node}'s x")
        coords[node - 1, 1] = _number(parsed, fields[2], line, f"node {node}'s y")
    if not seen.all():
        missing = int(np.flatnonzero(~seen)[0]) + 1
        raise parsed.error(
            f"{name}: has {int(seen.sum())} nodes but DIMENSION is {n} (node {missing} missing)",
            section.line,
        )
    return coords


def _weight_count(fmt: str, n: int) -> int:
    if fmt == FULL_MATRIX:
        return n * n
    return n * (n - 1) // 2 + (n if "DIAG" in fmt else 0)


def _triangle_indices(fmt: str, n: int) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    row_fmt = _TRIANGLES[fmt]
    k = 0 if "DIAG" in row_fmt else 1
    if row_fmt.startswith("UPPER"):
        return np.triu_indices(n, k)
    return np.tril_indices(n, -k)


def _edge_weights(parsed: _Parsed, n: int, fmt: str, asymmetric_type: bool) -> Matrix:
    section = parsed.sections["EDGE_WEIGHT_SECTION"]
    expected = _weight_count(fmt, n)
    tokens: list[str] = []
    for line, fields in section.rows:
        if len(tokens) + len(fields) > expected:
            raise parsed.error(
                f"EDGE_WEIGHT_SECTION: more than the {expected} numbers that "
                f"{fmt} with DIMENSION {n} needs",
                line,
            )
        tokens.extend(fields)
    if len(tokens) < expected:
        last = section.rows[-1][0] if section.rows else section.line
        raise parsed.error(
            f"EDGE_WEIGHT_SECTION: found {len(tokens)} numbers, {fmt} with DIMENSION {n} "
            f"needs {expected}",
            last,
        )
    values: NDArray[np.int64] | NDArray[np.float64]
    try:
        values = np.array([int(t) for t in tokens], dtype=np.int64)
    except (ValueError, OverflowError):
        values = _float_tokens(parsed, section, tokens)
    too_big = np.flatnonzero(np.abs(values) > MAX_EDGE)
    if len(too_big):
        line = _token_line(section, int(too_big[0]))
        raise parsed.error(f"an edge weight is larger than the {MAX_EDGE:g} accepted", line)
    matrix: Matrix
    if fmt == FULL_MATRIX:
        matrix = values.reshape(n, n).copy()
    else:
        if asymmetric_type:
            raise parsed.error(
                f"TYPE ATSP needs EDGE_WEIGHT_FORMAT FULL_MATRIX, not the triangle {fmt}",
                parsed.line_of("EDGE_WEIGHT_FORMAT"),
            )
        matrix = np.zeros((n, n), dtype=values.dtype)
        rows, cols = _triangle_indices(fmt, n)
        matrix[rows, cols] = values
        matrix[cols, rows] = values
    np.fill_diagonal(matrix, 0)
    return matrix


def _token_line(section: _Section, index: int) -> int:
    """The line holding the index-th number of a section."""
    seen = 0
    for line, fields in section.rows:
        seen += len(fields)
        if index < seen:
            return line
    return section.line


def _float_tokens(parsed: _Parsed, section: _Section, tokens: list[str]) -> FloatArray:
    values = [
        _number(parsed, token, line, "an edge weight", math.inf)  # bounded by the caller
        for line, fields in section.rows
        for token in fields
    ]
    assert len(values) == len(tokens)
    return np.array(values, dtype=np.float64)


def _first_asymmetry(matrix: Matrix) -> tuple[int, int] | None:
    diff = np.argwhere(matrix != matrix.T)
    if len(diff) == 0:
        return None
    return int(diff[0][0]) + 1, int(diff[0][1]) + 1


def parse_instance(text: str, path: str = "<text>") -> Instance:
    """Parse a TSPLIB instance (TYPE TSP or ATSP) from its text.

    Raises:
        InputError: naming the line and what was expected, for anything malformed.
    """
    parsed = _parse(text, path)
    kind = parsed.value("TYPE")
    if kind is None:
        raise parsed.error("missing TYPE (expected TSP or ATSP)")
    if kind == "TOUR":
        raise parsed.error("this is a tour file (TYPE TOUR), expected an instance")
    weight_type = parsed.value("EDGE_WEIGHT_TYPE")
    if weight_type is None:
        raise parsed.error("missing EDGE_WEIGHT_TYPE")
    explicit = weight_type == EXPLICIT
    n = _dimension(parsed, MAX_EXPLICIT_CITIES if explicit else MAX_FILE_CITIES)
    name = _name(parsed, path)
    comment = " ".join(parsed.comments)
    if parsed.value("NODE_COORD_TYPE") == "NO_COORDS" and not explicit:
        raise parsed.error(
            f"NODE_COORD_TYPE NO_COORDS leaves nothing to measure {weight_type} distances on",
            parsed.line_of("NODE_COORD_TYPE"),
        )
    if not explicit:
        if "NODE_COORD_SECTION" not in parsed.sections:
            raise parsed.error(f"missing NODE_COORD_SECTION (needed by {weight_type})")
        coords = _coordinates(parsed, "NODE_COORD_SECTION", n)
        return Instance(name=name, metric=weight_type, coords=coords, comment=comment, source=path)
    fmt = parsed.value("EDGE_WEIGHT_FORMAT")
    if fmt is None or fmt == "FUNCTION":
        raise parsed.error(
            "EXPLICIT needs an EDGE_WEIGHT_FORMAT such as FULL_MATRIX or UPPER_ROW",
            parsed.line_of("EDGE_WEIGHT_FORMAT") or parsed.line_of("EDGE_WEIGHT_TYPE"),
        )
    if "EDGE_WEIGHT_SECTION" not in parsed.sections:
        raise parsed.error("missing EDGE_WEIGHT_SECTION (needed by EXPLICIT)")
    matrix = _edge_weights(parsed, n, fmt, asymmetric_type=kind == "ATSP")
    if kind == "TSP" and (pair := _first_asymmetry(matrix)) is not None:
        raise parsed.error(
            f"TYPE TSP but the matrix is not symmetric (d({pair[0]},{pair[1]}) differs from "
            f"d({pair[1]},{pair[0]})); use TYPE ATSP",
            parsed.sections["EDGE_WEIGHT_SECTION"].line,
        )
    display: FloatArray | None = None
    for section in ("DISPLAY_DATA_SECTION", "NODE_COORD_SECTION"):
        if section in parsed.sections:
            display = _coordinates(parsed, section, n)
            break
    return Instance(
        name=name, metric=EXPLICIT, coords=display, explicit=matrix, comment=comment, source=path
    )


def parse_tour(text: str, path: str = "<text>", n: int | None = None) -> NDArray[np.int64]:
    """Parse the first tour of a TSPLIB tour file, as 0-based cities.

    Args:
        text: the file's text.
        path: its name, for messages.
        n: the instance's city count, when known; the tour must be a permutation of it.
    """
    parsed = _parse(text, path)
    if "TOUR_SECTION" not in parsed.sections:
        raise parsed.error("missing TOUR_SECTION")
    section = parsed.sections["TOUR_SECTION"]
    if parsed.value("DIMENSION") is not None:
        dim = _dimension(parsed, MAX_FILE_CITIES)
        if n is not None and dim != n:
            raise parsed.error(
                f"tour DIMENSION {dim} does not match the instance's {n} cities",
                parsed.line_of("DIMENSION"),
            )
        n = dim
    nodes: list[int] = []
    lines: list[int] = []
    closed = False
    for line, fields in section.rows:
        for token in fields:
            try:
                node = int(token)
            except ValueError:
                raise parsed.error(
                    f"TOUR_SECTION: expected a node number, found {token[:40]!r}", line
                ) from None
            if node == -1:
                closed = True
                break
            nodes.append(node)
            lines.append(line)
            if len(nodes) > MAX_FILE_CITIES:
                raise parsed.error(f"TOUR_SECTION: more than {MAX_FILE_CITIES} nodes", line)
        if closed:
            break
    if not nodes:
        raise parsed.error("TOUR_SECTION holds no nodes", section.line)
    count = len(nodes) if n is None else n
    seen = np.zeros(count, dtype=bool)
    for node, line in zip(nodes, lines, strict=True):
        if not 1 <= node <= count:
            raise parsed.error(f"tour node {node} is outside 1..{count}", line)
        if seen[node - 1]:
            raise parsed.error(f"tour visits node {node} twice: not a permutation", line)
        seen[node - 1] = True
    if not seen.all():
        missing = int(np.flatnonzero(~seen)[0]) + 1
        raise parsed.error(
            f"tour has {len(nodes)} nodes, expected {count}: node {missing} is missing "
            "(not a permutation)",
            section.line,
        )
    return np.array(nodes, dtype=np.int64) - 1


def read_instance(path: str | Path) -> Instance:
    """Read a TSPLIB instance file."""
    p = Path(path)
    return parse_instance(_read_text(p), str(p))


def read_tour(path: str | Path, n: int | None = None) -> NDArray[np.int64]:
    """Read a TSPLIB tour file as 0-based cities (a permutation of `n` when given)."""
    p = Path(path)
    return parse_tour(_read_text(p), str(p), n)


def _number_text(value: float | int) -> str:
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    return repr(value)


def _coord_lines(coords: FloatArray) -> Iterable[str]:
    for i, (x, y) in enumerate(coords.tolist(), 1):
        yield f"{i} {_number_text(x)} {_number_text(y)}"


def format_instance(instance: Instance, weight_format: str = FULL_MATRIX) -> str:
    """TSPLIB text for `instance`; an EXPLICIT one is written in `weight_format`."""
    kind = "TSP" if instance.symmetric else "ATSP"
    out = [f"NAME : {instance.name}", f"TYPE : {kind}"]
    if instance.comment:
        out.append(f"COMMENT : {instance.comment}")
    out.append(f"DIMENSION : {instance.n}")
    metric = instance.metric
    if metric == EUCLIDEAN:
        raise ValueError("plain euclidean has no TSPLIB edge-weight type")
    out.append(f"EDGE_WEIGHT_TYPE : {metric}")
    if metric != EXPLICIT:
        assert instance.coords is not None
        out.append("NODE_COORD_SECTION")
        out.extend(_coord_lines(instance.coords))
        out.append("EOF")
        return "\n".join(out) + "\n"
    out.append(f"EDGE_WEIGHT_FORMAT : {weight_format}")
    if instance.coords is not None:
        out.append("DISPLAY_DATA_TYPE : TWOD_DISPLAY")
    out.append("EDGE_WEIGHT_SECTION")
    matrix = instance.matrix
    if weight_format == FULL_MATRIX:
        values: Sequence[float | int] = matrix.ravel().tolist()
    else:
        rows, cols = _triangle_indices(weight_format, instance.n)
        values = matrix[rows, cols].tolist()
    width = max(instance.n, 1)
    for start in range(0, len(values), width):
        out.append(" ".join(_number_text(v) for v in values[start : start + width]))
    if instance.coords is not None:
        out.append("DISPLAY_DATA_SECTION")
        out.extend(_coord_lines(instance.coords))
    out.append("EOF")
    return "\n".join(out) + "\n"


def format_tour(name: str, tour: Sequence[int] | NDArray[np.int64], comment: str = "") -> str:
    """TSPLIB tour-file text for a 0-based `tour`."""
    out = [f"NAME : {name}", "TYPE : TOUR"]
    if comment:
        out.append(f"COMMENT : {comment}")
    out += [f"DIMENSION : {len(tour)}", "TOUR_SECTION"]
    out.extend(str(int(c) + 1) for c in tour)
    out += ["-1", "EOF"]
    return "\n".join(out) + "\n"
