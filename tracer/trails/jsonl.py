"""Reading the JSON Lines interchange format (a foreign solver's trace) into a trail.

A foreign solver writes one JSON object a line, in the order it visited its nodes, and names
each node's parent by id (or gives the node's whole path). One pass checks every line on its
own and writes plain numbers into typed arrays (`_Reading` tells its three lanes apart);
everything that relates lines to each other (ids to parents, paths to nodes, depths, the
renumbering to depth-first pre-order, the visit column) is then worked out with numpy one
depth level at a time, so no Python object per node outlives its line. The file is
untrusted: every size is bounded, nothing in it is evaluated, and every problem is an
`InputError` naming the line and the field.

The format is specified in `tracer/TRAIL_FORMAT.md`.
"""

from __future__ import annotations

import gc
import json
import math
import os
from array import array
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, BinaryIO, NoReturn, TypeVar

import msgspec
import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    BEST,
    BOUND,
    CITY,
    COORD_METRICS,
    DECISION,
    DECISION_NAMES,
    DEPTH,
    END,
    EXPLICIT,
    FULL_COLUMNS,
    HEADER,
    LINK_IN,
    LINK_IN_CITY,
    LINK_OUT,
    LINK_OUT_CITY,
    MAX_COORDINATE,
    MAX_EDGE,
    MAX_FRAME_BYTES,
    MAX_LINE_BYTES,
    MAX_NODE_ID,
    MAX_TEXT,
    MAX_TRAIL_CITIES,
    MAX_TRAIL_NODES,
    MAX_WORD,
    MIN_NODE_ID,
    NODE,
    PARTIAL,
    SOURCE_COLUMNS,
    SOURCE_ID,
    SOURCE_LINE,
    STATUSES,
    TREE,
    VISIT,
    BestUpdate,
    Column,
    EndInfo,
    FieldError,
    FileKind,
    FloatArray,
    InputError,
    Instance,
    Matrix,
    SolverInfo,
    Trail,
    TrailHeader,
    absent_value,
    best_tour,
    bound_name,
    city_value,
    column_layout,
    decision_code,
    expect_kind,
    explicit_instance,
    is_int,
    is_number,
    link_value,
    recorded_length,
    show_value,
    text_value,
    tree_shape,
)
from tracer.trails._jsonl_scan import (
    BOUND_ROW,
    DONE,
    FULL,
    LENGTH_ROW,
    LINK_IN_ROW,
    LINK_OUT_ROW,
    OTHER_KIND,
    PARTIAL_ROW,
    TREE_ROW,
    scan_nodes,
    skip_lines,
)
from tracer.trails._jsonl_stream import MAX_WALK_CITIES, WALKED, WalkState, walk
from tracer.trails._jsonl_typed import (
    BestLine,
    EndLine,
    HeaderLine,
    NodeBatch,
    NodeLine,
    as_map,
    decode_line,
    node_batch,
)
from tracer.trails.writer import TrailWriter

#: `SolverInfo.engine` of an imported trail.
ENGINE = "jsonl"
_LINE_KINDS = (HEADER, NODE, BEST, END)
_T = TypeVar("_T")
_BLOCK_ROWS = 1 << 16
#: Lines decoded and checked together on the typed path, and bytes read at a time.
_BATCH_LINES = 1 << 14
_CHUNK_BYTES = 1 << 22
#: Lines handed to the typed path when the compiled lane meets a node line it does not read.
_SLOW_LINES = 1 << 12
#: Fewest bytes of a node line the compiled lane reads, with its newline (the six keys it
#: needs, one-digit values): so a chunk of n bytes holds at most n // this + 1 of them.
_SHORTEST_NODE = len('{"kind":"node","id":0,"parent":0,"city":0,"partial":0,"decision":"skip"}\n')
#: The length columns, in the order of `_Columns.lengths`' rows (the compiled lane's).
_LENGTH_KEYS: tuple[str, ...] = tuple(
    key
    for _, key in sorted(
        {
            PARTIAL_ROW: PARTIAL,
            TREE_ROW: TREE,
            BOUND_ROW: BOUND,
            LENGTH_ROW: "length",
            LINK_IN_ROW: LINK_IN,
            LINK_OUT_ROW: LINK_OUT,
        }.items()
    )
)
_NO_CITY = -1  # an absent link city while parsing
_MISSING = object()  # a key the line does not have


def _reject_constant(name: str) -> NoReturn:
    raise ValueError(f"{name} is not a JSON number")


_DECODER = json.JSONDecoder(parse_constant=_reject_constant)


class _Columns:
    """The per-node values of the file, in visit order, in arrays grown by doubling: every
    path (field by field, typed batches, the compiled lane) writes its rows in place."""

    def __init__(self, rows: int = 1 << 12) -> None:
        self.base = 0  # rows handed on already (a streamed import); visits count them too
        self.count = 0
        self.ident = np.empty(rows, dtype=np.int64)
        self.parent_id = np.empty(rows, dtype=np.int64)  # 0 where a path places the node
        self.city = np.empty(rows, dtype=np.int32)
        self.decision = np.empty(rows, dtype=np.uint8)
        self.lengths = np.empty((len(_LENGTH_KEYS), rows), dtype=np.float64)  # NaN: absent
        self.link_city = np.empty((2, rows), dtype=np.int32)  # link_in, link_out; -1: absent
        self.line = np.empty(rows, dtype=np.int64)
        # Nodes given by path: their visit positions, and where each path starts in `flat`.
        self.path_node = array("q")
        self.path_start = array("q")
        self.flat = array("H")

    def __len__(self) -> int:
        """Node lines read so far: the visit position of the next one."""
        return self.base + self.count

    def drain(self) -> None:
        """Forget the rows held (after a streamed import has handed them on), keeping room."""
        self.base += self.count
        self.count = 0

    def reserve(self, rows: int) -> None:
        """Make room for `rows` more rows (room not yet written costs no memory)."""
        need = self.count + rows
        size = self.ident.shape[0]
        if need <= size:
            return
        size = max(need, 2 * size)
        for name in ("ident", "parent_id", "city", "decision", "line", "lengths", "link_city"):
            old = getattr(self, name)
            new = np.empty((*old.shape[:-1], size), dtype=old.dtype)
            new[..., : self.count] = old[..., : self.count]
            setattr(self, name, new)

    def arrays(self) -> tuple[NDArray[Any], ...]:
        """The arrays, in the order `scan_nodes` fills them."""
        return (
            self.ident,
            self.parent_id,
            self.city,
            self.decision,
            self.lengths,
            self.link_city,
            self.line,
        )

    def append_one(
        self,
        line: int,
        ident: int,
        parent_id: int,
        city: int,
        decision: int,
        lengths: tuple[float, ...],
        link_city: tuple[int, int],
    ) -> None:
        """Append one node line checked field by field (`lengths` in `_LENGTH_KEYS` order)."""
        self.reserve(1)
        i = self.count
        self.line[i], self.ident[i], self.parent_id[i] = line, ident, parent_id
        self.city[i], self.decision[i] = city, decision
        self.lengths[:, i] = lengths
        self.link_city[:, i] = link_city
        self.count += 1

    def append_batch(self, batch: NodeBatch, lines: Sequence[int]) -> None:
        """Append node lines already checked by the typed path (given by parent id)."""
        k = len(lines)
        self.reserve(k)
        rows = slice(self.count, self.count + k)
        self.line[rows] = lines
        self.ident[rows] = batch.ident
        self.parent_id[rows] = batch.parent_id
        self.city[rows] = batch.city
        self.decision[rows] = batch.decision
        for i, key in enumerate(_LENGTH_KEYS):
            self.lengths[i, rows] = batch.lengths[key]
        self.link_city[0, rows] = batch.link_city[LINK_IN]
        self.link_city[1, rows] = batch.link_city[LINK_OUT]
        self.count += k

    def rows_from(self, lo: int) -> _Columns:
        """The rows from `lo` on, as columns of their own (views), for a lane without paths."""
        part = _Columns(0)
        part.base, part.count = self.base + lo, self.count - lo
        for name in ("ident", "parent_id", "city", "decision", "line"):
            setattr(part, name, getattr(self, name)[lo : self.count])
        part.lengths = self.lengths[:, lo : self.count]
        part.link_city = self.link_city[:, lo : self.count]
        return part

    def view(self, name: str) -> NDArray[Any]:
        """A column of the rows so far (a view): a field, a length key or a link's city."""
        if name in _LENGTH_KEYS:
            return self.lengths[_LENGTH_KEYS.index(name), : self.count]
        if name in (LINK_IN_CITY, LINK_OUT_CITY):
            return self.link_city[0 if name == LINK_IN_CITY else 1, : self.count]
        array_: NDArray[Any] = getattr(self, name)
        return array_[: self.count]


@dataclass
class _Best:
    line: int
    ident: int | None
    length: float
    tour: tuple[int, ...]
    seen: int  # how many node lines came before it


@dataclass
class _Parsed:
    """What one pass over the file found (node values still in visit order)."""

    path: str
    instance: Instance
    solver: SolverInfo
    nodes: _Columns
    best: list[_Best] = field(default_factory=list)
    status: str | None = None
    notice: str | None = None


class _Parser:
    """Checks each line on its own and appends its numbers; relations are left for later."""

    def __init__(self, path: str) -> None:
        self.path = path
        self.instance: Instance | None = None
        self.solver = SolverInfo()
        self.nodes = _Columns()
        self.best: list[_Best] = []
        self.status: str | None = None

    def fail(self, line: int, key: str | None, message: str) -> InputError:
        return InputError(self.path, f"{key!r}: {message}" if key else message, line=line)

    def checked(
        self, line: int, key: str, check: Callable[..., _T], *args: Any, **options: Any
    ) -> _T:
        """A shared field check (`tracer.base.records`), its refusal naming line and field."""
        try:
            return check(*args, **options)
        except FieldError as exc:
            raise self.fail(line, key, str(exc)) from None

    def take(self, obj: Any, line: int) -> None:
        """Check one decoded line and keep what it says."""
        if not isinstance(obj, dict):
            raise self.fail(line, None, f"expected a JSON object, found {show_value(obj)}")
        kind = obj.get("kind")
        if kind not in _LINE_KINDS:
            expected = ", ".join(_LINE_KINDS)
            raise self.fail(line, "kind", f"must be one of {expected}, found {show_value(kind)}")
        if self.instance is None:
            if kind != HEADER:
                raise self.fail(line, "kind", "the first line must be the header")
            self._header(obj, line)
        elif self.status is not None:
            raise self.fail(line, "kind", "no line may follow the end line")
        elif kind == NODE:
            self._node(obj, line)
        elif kind == BEST:
            self._best(obj, line)
        elif kind == END:
            self._end(obj, line)
        else:
            raise self.fail(line, "kind", "a second header")

    # -- header ------------------------------------------------------------------------

    def _header(self, obj: dict[str, Any], line: int) -> None:
        raw = obj.get("instance")
        if not isinstance(raw, dict):
            raise self.fail(line, "instance", f"must be an object, found {show_value(raw)}")
        name = self._informational(raw.get("name"), line, "instance.name")
        if name is None:
            name = Path(self.path).stem[:MAX_TEXT]
        coords = None if raw.get("coords") is None else self._coords(raw["coords"], line)
        if raw.get("matrix") is not None:
            metric = raw.get("metric", EXPLICIT)
            if metric != EXPLICIT:
                raise self.fail(
                    line, "instance.metric", f"must be absent or {EXPLICIT!r} with a matrix"
                )
            matrix = self._matrix(raw["matrix"], line)
            if coords is not None and len(coords) != len(matrix):
                raise self.fail(
                    line,
                    "instance.coords",
                    f"lists {len(coords)} cities but the matrix has {len(matrix)}",
                )
            self.instance = explicit_instance(name, matrix, coords, source=self.path)
        elif coords is None:
            raise self.fail(line, "instance", "needs 'coords' (with 'metric') or 'matrix'")
        else:
            metric = raw.get("metric")
            if metric not in COORD_METRICS:
                raise self.fail(
                    line,
                    "instance.metric",
                    f"must be one of {', '.join(COORD_METRICS)}, found {show_value(metric)}",
                )
            self.instance = Instance(name=name, metric=metric, coords=coords, source=self.path)
        self.solver = self._solver(obj.get("solver", _MISSING), line, self.instance.n)

    def _cities(self, raw: Any, line: int, key: str) -> int:
        if not isinstance(raw, list) or not 1 <= len(raw) <= MAX_TRAIL_CITIES:
            raise self.fail(line, key, f"must be a list of 1..{MAX_TRAIL_CITIES} rows")
        return len(raw)

    def _coords(self, raw: Any, line: int) -> FloatArray:
        n = self._cities(raw, line, "instance.coords")
        for i, point in enumerate(raw):
            if not (
                isinstance(point, list)
                and len(point) == 2
                and all(is_number(v) and abs(v) <= MAX_COORDINATE for v in point)
            ):
                raise self.fail(
                    line,
                    "instance.coords",
                    f"city {i} must be [x, y], numbers within ±{MAX_COORDINATE:g}",
                )
        return np.array(raw, dtype=np.float64).reshape(n, 2)

    def _matrix(self, raw: Any, line: int) -> Matrix:
        key = "instance.matrix"
        n = self._cities(raw, line, key)
        if not all(isinstance(row, list) and len(row) == n for row in raw):
            raise self.fail(line, key, f"must be {n} rows of {n} numbers")
        kinds = {type(v) for row in raw for v in row}
        if not kinds <= {int, float}:
            raise self.fail(line, key, "must hold only numbers")
        out_of_range = self.fail(line, key, f"must hold finite numbers within ±{MAX_EDGE:g}")
        try:
            matrix = np.array(raw, dtype=np.int64 if kinds == {int} else np.float64)
        except OverflowError:
            raise out_of_range from None
        if not (np.abs(matrix) <= MAX_EDGE).all():
            raise out_of_range
        skew = np.argwhere(matrix != matrix.T)
        if len(skew):
            i, j = (int(v) for v in skew[0])
            raise self.fail(
                line, key, f"must be symmetric: row {i} column {j} differs from row {j} column {i}"
            )
        return matrix

    def _solver(self, raw: Any, line: int, n: int) -> SolverInfo:
        if raw is _MISSING:
            raise self.fail(line, "solver", "is missing: an object with at least 'bound'")
        if not isinstance(raw, dict):
            raise self.fail(line, "solver", f"must be an object, found {show_value(raw)}")
        bound = raw.get("bound")
        if not isinstance(bound, str) or not 1 <= len(bound) <= MAX_WORD:
            raise self.fail(line, "solver.bound", f"must be a name of 1..{MAX_WORD} characters")
        bound = self.checked(line, "solver.bound", bound_name, bound)
        cutoff = raw.get("cutoff", 0)
        if not is_int(cutoff) or cutoff < 0:
            raise self.fail(line, "solver.cutoff", "must be a whole number >= 0")
        start = self._informational(raw.get("start"), line, "solver.start")
        engine = self._informational(raw.get("engine"), line, "solver.engine")
        return SolverInfo(
            bound=bound,
            cutoff=min(cutoff, n),
            engine=ENGINE if engine is None else f"{ENGINE}: {engine}",
            start=start,
        )

    def _informational(self, value: Any, line: int, key: str) -> str | None:
        """A field only shown to people: null, or any scalar kept as text."""
        if value is None:
            return None
        if isinstance(value, bool):
            value = "true" if value else "false"
        elif is_int(value) or isinstance(value, float):
            value = repr(value)
        return self.checked(line, key, text_value, value, MAX_TEXT)

    # -- nodes ---------------------------------------------------------------------------

    def _node(self, obj: dict[str, Any], line: int) -> None:
        assert self.instance is not None
        n = self.instance.n
        nodes = self.nodes
        visit = len(nodes)
        if visit >= MAX_TRAIL_NODES:
            raise self.fail(line, None, f"more than {MAX_TRAIL_NODES} nodes")
        ident = self._present(obj, "id", line)
        if not is_int(ident) or not MIN_NODE_ID <= ident <= MAX_NODE_ID:
            raise self.fail(
                line, "id", f"must be a whole number within ±2**63, found {show_value(ident)}"
            )
        if "path" in obj:
            city = self._path(obj, line, n, visit)
            parent_id = 0
        else:
            parent_id, city = self._parent_and_city(obj, line, n, visit)
        decision = self._present(obj, DECISION, line)
        code = self.checked(line, DECISION, decision_code, decision, codes=False)
        given = {
            PARTIAL: self._length(obj, PARTIAL, line, required=True),
            TREE: self._length(obj, TREE, line),
            BOUND: self._length(obj, BOUND, line),
            "length": self._length(obj, "length", line),
        }
        cities = []
        for key in (LINK_IN, LINK_OUT):
            link = obj.get(key)
            link_city, given[key] = (
                (_NO_CITY, math.nan)
                if link is None
                else self.checked(line, key, link_value, link, n)
            )
            cities.append(link_city)
        lengths = tuple(given[key] for key in _LENGTH_KEYS)
        nodes.append_one(line, ident, parent_id, city, code, lengths, (cities[0], cities[1]))

    def _path(self, obj: dict[str, Any], line: int, n: int, visit: int) -> int:
        """Check a node given by its path; keep the path and return its last city."""
        if "parent" in obj or CITY in obj:
            raise self.fail(line, "path", "give either 'path' or 'parent' and 'city', not both")
        path = obj["path"]
        if not (
            isinstance(path, list)
            and 1 <= len(path) <= n
            and all(is_int(c) and 0 <= c < n for c in path)
        ):
            raise self.fail(line, "path", f"must list 1..{n} cities, each 0..{n - 1}")
        if path[0] != 0:
            raise self.fail(line, "path", "must start at city 0")
        if (len(path) == 1) != (visit == 0):
            message = "the first node is the root, [0]" if visit == 0 else "only the root is [0]"
            raise self.fail(line, "path", message)
        self.nodes.path_node.append(visit)
        self.nodes.path_start.append(len(self.nodes.flat))
        self.nodes.flat.extend(path)
        return int(path[-1])

    def _parent_and_city(
        self, obj: dict[str, Any], line: int, n: int, visit: int
    ) -> tuple[int, int]:
        if "parent" not in obj:
            raise self.fail(line, "parent", "is missing (or give 'path' instead)")
        parent = obj["parent"]
        city = self.checked(line, CITY, city_value, self._present(obj, CITY, line), n)
        if visit == 0:
            if parent is not None or city != 0:
                raise self.fail(line, "parent", "the first node is the root: parent null, city 0")
            return 0, 0
        if parent is None:
            raise self.fail(line, "parent", "only the first node (the root) has parent null")
        if not is_int(parent) or not MIN_NODE_ID <= parent <= MAX_NODE_ID:
            raise self.fail(line, "parent", f"must be a node id, found {show_value(parent)}")
        return parent, city

    def _present(self, obj: dict[str, Any], key: str, line: int) -> Any:
        if key not in obj:
            raise self.fail(line, key, "is missing")
        return obj[key]

    def _length(self, obj: dict[str, Any], key: str, line: int, required: bool = False) -> float:
        value = obj.get(key)
        if value is None:
            if required:
                raise self.fail(line, key, "is missing" if key not in obj else "must not be null")
            return math.nan
        return self.checked(line, key, recorded_length, value)

    # -- best and end ---------------------------------------------------------------------

    def _best(self, obj: dict[str, Any], line: int) -> None:
        assert self.instance is not None
        n = self.instance.n
        if "id" not in obj:
            raise self.fail(
                line, "id", "is missing (a node id, or null for a tour found elsewhere)"
            )
        ident = obj["id"]
        if ident is not None and (not is_int(ident) or not MIN_NODE_ID <= ident <= MAX_NODE_ID):
            raise self.fail(line, "id", f"must be a node id or null, found {show_value(ident)}")
        length = self._length(obj, "length", line, required=True)
        tour = self.checked(line, "tour", best_tour, obj.get("tour"), n)
        self.best.append(_Best(line, ident, length, tour, len(self.nodes)))

    def _end(self, obj: dict[str, Any], line: int) -> None:
        status = obj.get("status")
        if status not in STATUSES:
            raise self.fail(
                line, "status", f"must be one of {', '.join(STATUSES)}, found {show_value(status)}"
            )
        self.status = str(status)


class _Reading:
    """One pass over the lines, in three lanes: plain node lines straight from the bytes by
    the compiled lane (`_jsonl_scan`), any line it leaves in msgspec-typed batches, and a
    batch the typed path is unsure of line by line, field by field (which names the problem).

    The header line is read on its own (it may be large); the rest is read in big chunks of
    whole lines, each line bounded by `MAX_LINE_BYTES`.
    """

    def __init__(self, path: Path) -> None:
        self.path = path
        self.parser = _Parser(str(path))
        self.notice: str | None = None

    def run(
        self,
        handle: BinaryIO,
        chunk_bytes: int = _CHUNK_BYTES,
        drain: Callable[[_Columns], None] | None = None,
    ) -> None:
        """Read every line of `handle` (stops quietly inside an unfinished last line).

        `drain`, if given, is handed the node rows read after each chunk of `chunk_bytes`,
        which are then forgotten: memory stays bounded by the chunk (a streamed import).
        """
        number = 0
        while self.parser.instance is None:
            raw = handle.readline(MAX_FRAME_BYTES + 1)
            if not raw:
                return
            number += 1
            if len(raw) > MAX_FRAME_BYTES:
                raise InputError(
                    self.path,
                    f"the header line is longer than {MAX_FRAME_BYTES} bytes",
                    line=number,
                )
            if not self.slow(number, raw, raw.endswith(b"\n")):
                return
        try:  # how much is left, to make room for its nodes (a pipe does not say)
            size, done = os.fstat(handle.fileno()).st_size, handle.tell()
        except (OSError, ValueError, AttributeError):
            size = done = 0
        tail = b""
        while chunk := handle.read(chunk_bytes):
            nodes, before = self.parser.nodes, done
            done += len(chunk)
            if nodes.count and size > before:  # room for the rest at the density so far
                rest = min(nodes.count * (size - before) // before, size // _SHORTEST_NODE)
                nodes.reserve(rest + rest // 20 + 1)
            data = tail + chunk
            cut = data.rfind(b"\n")
            if cut >= 0:
                body, tail = data[:cut], data[cut + 1 :]
                number = self.feed(number + 1, body) - 1
                if drain is not None:
                    drain(self.parser.nodes)
                    self.parser.nodes.drain()
            else:
                tail = data
            if len(tail) > MAX_LINE_BYTES:
                raise InputError(
                    self.path, f"line is longer than {MAX_LINE_BYTES} bytes", line=number + 1
                )
        if tail:
            self.slow(number + 1, tail, False)
        if drain is not None:
            drain(self.parser.nodes)
            self.parser.nodes.drain()

    def feed(self, first: int, body: bytes) -> int:
        """Take whole lines (`body` holds them joined by newlines) numbered from `first`;
        returns the number of the line after them."""
        pos = 0
        while self.parser.instance is None:  # the header, on its own
            cut = body.find(b"\n", pos)
            line = body[pos:] if cut < 0 else body[pos:cut]
            if len(line) > MAX_FRAME_BYTES:
                message = f"the header line is longer than {MAX_FRAME_BYTES} bytes"
                raise InputError(self.path, message, line=first)
            self.slow(first, line, True)
            if cut < 0:
                return first + 1
            first, pos = first + 1, cut + 1
        if self.parser.status is None:
            first, pos = self._scan(first, body, pos)
        if pos == len(body):
            # a last, empty line (or `body` is one empty line)
            return first + 1 if not body or body.endswith(b"\n") else first
        rest = body[pos:].split(b"\n")
        self._lines(first, rest)
        return first + len(rest)

    def _scan(self, first: int, body: bytes, pos: int) -> tuple[int, int]:
        """Plain node lines by the compiled lane, the rest handed to `_lines`, until every
        line is read or the end line has been; returns the next line's number and offset."""
        assert self.parser.instance is not None
        nodes = self.parser.nodes
        buf = np.frombuffer(body, dtype=np.uint8)
        size = len(body)
        while pos < size and self.parser.status is None:
            pos, nodes.count, passed, why = scan_nodes(
                buf,
                pos,
                self.parser.instance.n,
                MAX_LINE_BYTES,
                MAX_TRAIL_NODES - nodes.base,
                first,
                nodes.base,
                nodes.count,
                *nodes.arrays(),
            )
            first += passed
            if why == DONE:
                break
            if why == FULL and len(nodes) < MAX_TRAIL_NODES:  # out of room: grow, go on
                nodes.reserve((size - pos) // _SHORTEST_NODE + 1)
                continue
            after = skip_lines(buf, pos, 1 if why == OTHER_KIND else _SLOW_LINES)
            lines = body[pos:after].split(b"\n")
            if after > pos and body[after - 1] == 10:
                lines.pop()  # the newline closing the last of them
            self._lines(first, lines)
            first, pos = first + len(lines), after
        return first, pos

    def _lines(self, first: int, lines: list[bytes]) -> None:
        """Take whole lines (without their newlines) numbered from `first`, each bounded."""
        if max(map(len, lines), default=0) > MAX_LINE_BYTES:
            at = next(i for i, line in enumerate(lines) if len(line) > MAX_LINE_BYTES)
            self.take(first, lines[:at])
            raise InputError(
                self.path, f"line is longer than {MAX_LINE_BYTES} bytes", line=first + at
            )
        self.take(first, lines)

    def parsed(self) -> _Parsed:
        """What has been read so far.

        Raises:
            InputError: no header line was read.
        """
        parser, notice = self.parser, self.notice
        if parser.instance is None:
            raise InputError(self.path, "no header line: not a JSON Lines trace")
        if notice is None and parser.status is None:
            notice = f"no end line: a live or crashed run ({len(parser.nodes)} nodes so far)"
        return _Parsed(
            str(self.path),
            parser.instance,
            parser.solver,
            parser.nodes,
            parser.best,
            parser.status,
            notice,
        )

    def slow(self, number: int, raw: bytes, whole: bool) -> bool:
        """Check one line field by field; False if the file stops inside it."""
        try:
            text = raw.decode("utf-8")
            if not text.strip():
                return True
            obj = _DECODER.decode(text)
        except (ValueError, RecursionError) as exc:
            if not whole:  # the writer stopped inside its last line
                count = len(self.parser.nodes)
                self.notice = f"file stops inside line {number}; read {count} nodes"
                return False
            raise InputError(self.path, f"not a JSON line ({str(exc)[:80]})", line=number) from None
        self.parser.take(obj, number)
        return True

    def take(self, first: int, lines: list[bytes]) -> None:
        """Take whole lines numbered from `first`, in batches: typed if a batch checks, else
        line by line (which names the first problem)."""
        for lo in range(0, len(lines), _BATCH_LINES):
            batch = lines[lo : lo + _BATCH_LINES]
            numbers = range(first + lo, first + lo + len(batch))
            if b"" in batch:  # blank lines are skipped
                kept = [(k, line) for k, line in zip(numbers, batch, strict=True) if line]
                numbers = [k for k, _ in kept]  # type: ignore[assignment]
                batch = [line for _, line in kept]
            if not self._typed(batch, numbers):
                for number, raw in zip(numbers, batch, strict=True):
                    self.slow(number, raw, True)

    def _typed(self, lines: list[bytes], numbers: Sequence[int]) -> bool:
        parser = self.parser
        if parser.instance is None or parser.status is not None or not lines:
            return not lines
        try:
            decoded = list(map(decode_line, lines))
        except (msgspec.DecodeError, msgspec.ValidationError):
            return False
        kinds = list(map(type, decoded))
        others = (
            []
            if kinds.count(NodeLine) == len(kinds)
            else [i for i, kind in enumerate(kinds) if kind is not NodeLine]
        )
        if any(type(decoded[i]) is HeaderLine for i in others) or any(
            type(decoded[i]) is EndLine for i in others if i != len(lines) - 1
        ):
            return False
        nodes = [line for line in decoded if type(line) is NodeLine] if others else decoded
        n, first = parser.instance.n, len(parser.nodes)
        batch = node_batch(nodes, n, first, MAX_TRAIL_NODES) if nodes else None  # type: ignore[arg-type]
        if nodes and batch is None:
            return False
        if not others:
            assert batch is not None
            parser.nodes.append_batch(batch, list(numbers))
            return True
        done = seen = 0  # node lines appended, node lines passed
        node_numbers = [
            k for k, line in zip(numbers, decoded, strict=True) if type(line) is NodeLine
        ]
        for number, line in zip(numbers, decoded, strict=True):
            if type(line) is NodeLine:
                seen += 1
                continue
            if batch is not None and seen > done:
                parser.nodes.append_batch(batch.rows(done, seen), node_numbers[done:seen])
                done = seen
            assert isinstance(line, BestLine | EndLine)
            parser.take(as_map(line), number)
        if batch is not None and seen > done:
            parser.nodes.append_batch(batch.rows(done, seen), node_numbers[done:seen])
        return True


@contextmanager
def _collector_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while lines are decoded: a batch makes many small
    objects and no cycles, and collections would otherwise take a fifth of the time."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def _parse(path: Path) -> _Parsed:
    """One pass over the file: every line checked on its own, numbers into typed arrays."""
    try:
        handle = open(path, "rb")  # noqa: SIM115 (closed below)
    except OSError as exc:
        raise InputError(path, f"cannot read: {exc.strerror or exc}") from None
    reading = _Reading(path)
    with handle, _collector_paused():
        reading.run(handle)
    return reading.parsed()


# -- relations between lines, vectorised -----------------------------------------------------


def _visits(
    sorted_ids: NDArray[np.int64], id_order: NDArray[np.int64] | None, ids: NDArray[np.int64]
) -> NDArray[np.int64]:
    """Visit position of each of `ids`, or -1 where no node has it, given every node's id in
    increasing order and the visit position of each (`id_order` None: ids grow with visits)."""
    if not len(sorted_ids):
        return np.full(len(ids), -1, dtype=np.int64)
    pos = np.minimum(np.searchsorted(sorted_ids, ids), len(sorted_ids) - 1)
    return np.where(sorted_ids[pos] == ids, pos if id_order is None else id_order[pos], -1)


class _Tree:
    """Depths and pre-order ids of the parsed nodes (all indexed by visit position), every
    relation between lines checked: by one walk for a trace already in pre-order with ids
    that grow (`_jsonl_stream`), else one depth level at a time (which also names any
    problem the walk stopped at)."""

    def __init__(self, parsed: _Parsed) -> None:
        self.path = parsed.path
        self.n = parsed.instance.n
        nodes = parsed.nodes
        self.count = len(nodes)
        self.line = nodes.view("line")
        self.ident = nodes.view("ident")
        city = nodes.view("city")
        self.city = city.astype(np.int64)
        self.by_path = np.zeros(self.count, dtype=np.bool_)
        self.path_node = np.frombuffer(nodes.path_node, dtype=np.int64)
        self.path_start = np.frombuffer(nodes.path_start, dtype=np.int64)
        self.flat = np.frombuffer(nodes.flat, dtype=np.uint16)
        self.by_path[self.path_node] = True
        if self.count < 2 or bool((self.ident[1:] > self.ident[:-1]).all()):  # often so
            self.id_order = np.arange(self.count)
            self.sorted_ids = self.ident
            if not len(self.path_node) and self.n <= MAX_WALK_CITIES:
                # in depth-first pre-order? Then one walk gives depths and every check
                depth, why = walk(WalkState(self.n), self.ident, nodes.view("parent_id"), city)
                if why == WALKED:
                    self.depth, self.pre = depth, np.arange(self.count)
                    return
        else:
            self.id_order = np.argsort(self.ident, kind="stable")
            self.sorted_ids = self.ident[self.id_order]
        self._check_ids()
        self.parent = np.full(self.count, -1, dtype=np.int64)
        self._link_parent_ids(nodes.view("parent_id"))
        self.depth = self._depths()
        self._by_depth, self._level_start = self._levels()
        self.top = len(self._level_start) - 2  # the deepest level
        self._resolve_paths()
        self.pre = self._preorder()
        self._check_paths()

    def fail(self, node: int, key: str, message: str) -> InputError:
        line = int(self.line[node])
        return InputError(self.path, f"{key!r}: {message}", line=line)

    def where(self, node: int) -> str:
        """The field that placed `node` in the tree."""
        return "path" if self.by_path[node] else "parent"

    def visit_of(self, ids: NDArray[np.int64]) -> NDArray[np.int64]:
        """Visit position of each id, or -1 where no node has it."""
        return _visits(self.sorted_ids, self.id_order, ids)

    def level(self, d: int) -> NDArray[np.int64]:
        """Visit positions of the nodes at depth d, in visit order."""
        return self._by_depth[self._level_start[d] : self._level_start[d + 1]]

    def _check_ids(self) -> None:
        same = np.flatnonzero(self.sorted_ids[1:] == self.sorted_ids[:-1])
        if same.size:
            later = self.id_order[same + 1]
            k = int(np.argmin(later))
            first = int(self.id_order[same[k]])
            raise self.fail(
                int(later[k]),
                "id",
                f"{int(self.ident[first])} is already the id of the node at line "
                f"{int(self.line[first])}",
            )

    def _link_parent_ids(self, parent_id: NDArray[np.int64]) -> None:
        """Parents of the nodes given by parent id: known, and visited before the child."""
        child = np.flatnonzero(~self.by_path)
        child = child[child > 0]
        parent = self.visit_of(parent_id[child])
        bad = (parent < 0) | (parent >= child)
        if bad.any():
            k = int(np.argmax(bad))
            node, wanted = int(child[k]), int(parent_id[child[k]])
            if parent[k] < 0:
                raise self.fail(node, "parent", f"no node has id {wanted}")
            raise self.fail(
                node,
                "parent",
                f"node {wanted} (line {int(self.line[parent[k]])}) is not visited before its child",
            )
        self.parent[child] = parent

    def _depths(self) -> NDArray[np.int64]:
        """Depth of every node by pointer jumping: known for the root and path nodes."""
        index = np.arange(self.count, dtype=np.int64)
        done = self.by_path.copy()
        done[:1] = True
        starts = self.path_start
        ends = np.append(starts[1:], len(self.flat))
        known = np.zeros(self.count, dtype=np.int64)
        known[self.path_node] = ends - starts - 1
        depth = np.where(done, known, 1)
        jump = np.where(done, index, self.parent)
        while not done.all():
            depth = np.where(done, depth, depth + depth[jump])
            done, jump = done | done[jump], jump[jump]
        deep = np.flatnonzero(depth >= self.n)
        if deep.size:
            raise self.fail(
                int(deep[0]), self.where(int(deep[0])), f"the path holds more than {self.n} cities"
            )
        return depth

    def _levels(self) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
        """Visit positions sorted by depth (stable), and where each depth starts among them."""
        order = np.argsort(self.depth, kind="stable")
        top = int(self.depth.max()) if self.count else 0
        return order, np.searchsorted(self.depth[order], np.arange(top + 2))

    def _resolve_paths(self) -> None:
        """Parents of path nodes, level by level; siblings must add different cities.

        Every path node below depth 1 walks down from the root: at depth d its ancestor
        there is the node at depth d whose parent is its ancestor at d - 1 and whose city is
        its path's d-th city (looked up among that level's sorted (parent, city) keys).
        """
        walker = self.path_node[self.path_node > 0]
        start = self.path_start[self.path_node > 0]
        ancestor = np.zeros(len(walker), dtype=np.int64)
        for d in range(1, self.top + 1):
            here = self.depth[walker] == d
            self.parent[walker[here]] = ancestor[here]
            walker, start, ancestor = walker[~here], start[~here], ancestor[~here]
            nodes = self.level(d)
            keys = self.parent[nodes] * self.n + self.city[nodes]
            order = np.argsort(keys, kind="stable")
            ranked = keys[order]
            twin = np.flatnonzero(ranked[1:] == ranked[:-1])
            if twin.size:
                later = nodes[order[twin + 1]]
                k = int(np.argmin(later))
                node, first = int(later[k]), int(nodes[order[twin[k]]])
                raise self.fail(
                    node,
                    "path" if self.by_path[node] else CITY,
                    f"a sibling at line {int(self.line[first])} already adds city "
                    f"{int(self.city[node])}",
                )
            if walker.size:
                wanted = ancestor * self.n + self.flat[start + d]
                pos = np.minimum(np.searchsorted(ranked, wanted), max(len(ranked) - 1, 0))
                found = (ranked[pos] == wanted) if len(ranked) else np.zeros(len(wanted), bool)
                hit = nodes[order[pos]] if len(ranked) else np.zeros(len(wanted), np.int64)
                bad = ~found | (hit >= walker)
                if bad.any():
                    k = int(np.argmin(np.where(bad, walker, self.count)))
                    prefix = self.flat[start[k] : start[k] + d + 1].tolist()
                    if not found[k]:
                        raise self.fail(int(walker[k]), "path", f"no node has path {prefix}")
                    raise self.fail(
                        int(walker[k]),
                        "path",
                        f"the node with path {prefix} (line {int(self.line[hit[k]])}) is not "
                        "visited before this one",
                    )
                ancestor = hit

    def _check_paths(self) -> None:
        """No node adds a city already on its parent's path (the shared `tree_shape` pass)."""
        visit = np.empty(self.count, dtype=np.int64)
        visit[self.pre] = np.arange(self.count)
        _, _, repeated = tree_shape(self.depth[visit], self.city[visit])
        if repeated.any():
            bad = int(visit[repeated].min())
            key = "path" if self.by_path[bad] else CITY
            raise self.fail(bad, key, f"city {int(self.city[bad])} is already on the path")

    def _preorder(self) -> NDArray[np.int64]:
        """Pre-order id of every node, children in visit order, one level at a time."""
        size = np.ones(self.count, dtype=np.int64)
        for d in range(self.top, 0, -1):
            nodes = self.level(d)
            np.add.at(size, self.parent[nodes], size[nodes])
        pre = np.zeros(self.count, dtype=np.int64)
        for d in range(1, self.top + 1):
            nodes = self.level(d)
            order = np.argsort(self.parent[nodes], kind="stable")
            child, parent = nodes[order], self.parent[nodes[order]]
            before = np.cumsum(size[child]) - size[child]
            first = np.ones(len(child), dtype=np.bool_)
            first[1:] = parent[1:] != parent[:-1]
            group_start = before[first][np.cumsum(first) - 1]
            pre[child] = pre[parent] + 1 + before - group_start
        return pre


def _closed_lengths(
    nodes: _Columns, depth: NDArray[np.int64], city: NDArray[np.int64], instance: Instance
) -> tuple[dict[str, NDArray[np.float64]], tuple[int, str, str] | None]:
    """Length values of the rows held (visit order, NaN where absent), complete paths'
    closing edges filled; and the first misplaced length as (row, field, message), or None."""
    raw = {k: nodes.view(k) for k in _LENGTH_KEYS}  # views: copy before changing
    complete = depth == instance.n - 1
    length = raw.pop("length").copy()
    raw[LINK_OUT] = raw[LINK_OUT].copy()  # closing edges are written into it below
    missing = complete & np.isnan(length)
    if missing.any():  # liberal: the closed tour's length is the path plus its closing edge
        length[missing] = raw[PARTIAL][missing] + instance.matrix[city[missing], 0]
    for bad, key, message in (
        (~complete & ~np.isnan(length), "length", "is only for a path holding every city"),
        (complete & ~np.isnan(raw[TREE]), TREE, "must be null at a path holding every city"),
        (complete & ~np.isnan(raw[LINK_IN]), LINK_IN, "must be null at a path holding every city"),
        (
            complete & ~np.isnan(raw[LINK_OUT]),
            LINK_OUT,
            "must be null at a path holding every city (its 'length' closes the tour)",
        ),
    ):
        if bad.any():
            return raw, (int(np.argmax(bad)), key, message)
    raw[LINK_OUT][complete] = length[complete] - raw[PARTIAL][complete]
    return raw, None


@dataclass
class _Extent:
    """What the column layout depends on, gathered over every length recorded."""

    bound: bool = False  # a node gives the solver's own bound
    integral: bool = True  # every length is a whole number
    largest: float = 0.0  # the largest magnitude

    def add(self, lengths: dict[str, NDArray[np.float64]]) -> None:
        """Take in the lengths of some nodes (NaN where absent)."""
        self.bound = self.bound or not np.isnan(lengths[BOUND]).all()
        for values in lengths.values():
            self.add_values(values[~np.isnan(values)])

    def add_values(self, values: NDArray[np.float64]) -> None:
        """Take in some recorded lengths (none absent)."""
        if values.size:
            self.integral = self.integral and bool((values == np.floor(values)).all())
            self.largest = max(self.largest, float(np.abs(values).max()))

    def layout(
        self, instance: Instance, in_preorder: bool, best: Sequence[_Best]
    ) -> tuple[Column, ...]:
        """The trail's columns: which there are, and the narrowest dtypes that hold them."""
        self.add_values(np.array([b.length for b in best], dtype=np.float64))
        names: tuple[str, ...] = FULL_COLUMNS
        if self.bound:
            names += (BOUND,)
        if not in_preorder:
            names += (VISIT,)
        names += SOURCE_COLUMNS  # findings name the node by the solver's id and its line
        integral = instance.integral and self.integral
        return column_layout(names, instance.n, integral, self.largest + 1.0)


def _store(
    values: NDArray[Any],
    absent: NDArray[np.bool_] | None,
    dtype: np.dtype[Any],
    pre: NDArray[np.int64] | None,
) -> NDArray[Any]:
    """`values` (visit order) as a column of `dtype` in pre-order (`pre` None: visit order
    is pre-order already), `absent` entries (None: none are) as the dtype's sentinel."""
    if absent is not None and absent.any():
        values = np.where(absent, absent_value(dtype), values)
    if pre is None:
        return values.astype(dtype)
    column = np.empty(len(values), dtype=dtype)
    column[pre] = values
    return column


def _trail_columns(
    nodes: _Columns,
    depth: NDArray[np.int64],
    city: NDArray[np.int64],
    lengths: dict[str, NDArray[np.float64]],
    layout: tuple[Column, ...],
    pre: NDArray[np.int64] | None,
    n: int,
) -> dict[str, NDArray[Any]]:
    """The trail's columns for the rows held (`pre` None: they are in pre-order already)."""
    link_city = {
        LINK_IN: nodes.view(LINK_IN_CITY).astype(np.int64),
        LINK_OUT: nodes.view(LINK_OUT_CITY).astype(np.int64),
    }
    link_city[LINK_OUT][depth == n - 1] = 0  # a complete path's closing edge goes to city 0
    source: dict[str, tuple[NDArray[Any], NDArray[np.bool_] | None]] = {
        CITY: (city, None),
        DEPTH: (depth, None),
        DECISION: (nodes.view("decision"), None),
        LINK_IN_CITY: (link_city[LINK_IN], link_city[LINK_IN] == _NO_CITY),
        LINK_OUT_CITY: (link_city[LINK_OUT], link_city[LINK_OUT] == _NO_CITY),
        VISIT: (np.arange(nodes.base, len(nodes)), None),
        SOURCE_ID: (nodes.view("ident"), None),
        SOURCE_LINE: (nodes.view("line"), None),
    }
    for key, values in lengths.items():
        source[key] = (values, np.isnan(values))
    return {c.name: _store(*source[c.name], c.dtype, pre) for c in layout}


def _end_info(
    status: str | None, count: int, counts: NDArray[np.int64], best: list[BestUpdate]
) -> EndInfo | None:
    """The end frame of an imported trace (None without an end line: a crashed run)."""
    if status is None:
        return None
    last = best[-1] if best else None
    return EndInfo(
        status=status,
        nodes=count,
        recorded=count,
        decisions={name: int(counts[i]) for i, name in enumerate(DECISION_NAMES)},
        seconds=0.0,
        length=None if last is None else last.length,
        tour=None if last is None else list(last.tour),
    )


def _build(parsed: _Parsed) -> Trail:
    tree = _Tree(parsed)
    lengths, misplaced = _closed_lengths(parsed.nodes, tree.depth, tree.city, parsed.instance)
    if misplaced is not None:
        raise tree.fail(*misplaced)
    in_preorder = bool(np.array_equal(tree.pre, np.arange(tree.count)))
    extent = _Extent()
    extent.add(lengths)
    layout = extent.layout(parsed.instance, in_preorder, parsed.best)
    pre = None if in_preorder else tree.pre
    columns = _trail_columns(parsed.nodes, tree.depth, tree.city, lengths, layout, pre, tree.n)
    best = _updates(parsed, tree.visit_of, tree.pre)
    solver = parsed.solver
    if not in_preorder:
        solver = replace(solver, visit_order=True)
    header = TrailHeader(instance=parsed.instance, solver=solver, columns=layout)
    counts = np.bincount(columns[DECISION], minlength=len(DECISION_NAMES))
    end = _end_info(parsed.status, tree.count, counts, best)
    return Trail(parsed.path, header, columns, best, end, parsed.notice)


def _updates(
    parsed: _Parsed,
    visit_of: Callable[[NDArray[np.int64]], NDArray[np.int64]],
    pre: NDArray[np.int64] | None,
) -> list[BestUpdate]:
    """Incumbent updates: `at` is the visit position of the first node to see each one.

    A tour found at a node is in force from the next node visited on; a tour found outside
    the tree (id null) from the next node after the line that reports it. `visit_of` gives
    ids' visit positions, `pre` each visit's pre-order id (None: visits are in pre-order).
    """
    ids = np.array([0 if b.ident is None else b.ident for b in parsed.best], dtype=np.int64)
    visit = visit_of(ids)
    out: list[BestUpdate] = []
    for b, v in zip(parsed.best, visit.tolist(), strict=True):
        if b.ident is None:
            out.append(BestUpdate(at=b.seen, node=-1, length=b.length, tour=b.tour))
            continue
        if not 0 <= v < b.seen:
            raise InputError(
                parsed.path, f"'id': no node before this line has id {b.ident}", line=b.line
            )
        node = v if pre is None else int(pre[v])
        out.append(BestUpdate(at=v + 1, node=node, length=b.length, tour=b.tour))
    return sorted(out, key=lambda u: u.at)


class _GrowingTrail:
    """A followed trace's trail, grown by appending while the trace is in pre-order.

    Each update walks only the node rows read since the last one, on from where the walk
    stopped (`_jsonl_stream`), and appends them in the column layout so far. Where the walk
    cannot vouch for the rows (another order, ids that do not grow, paths, more than
    `MAX_WALK_CITIES` cities, a problem to report) the trail is rebuilt from every row by
    `_build` at every update from then on, since a new node can renumber old ones; where
    the layout must change (a wider length, a first bound), it is rebuilt once and grows on.
    """

    def __init__(self, n: int) -> None:
        self.state: WalkState | None = WalkState(n) if n <= MAX_WALK_CITIES else None
        self.extent = _Extent()
        self.counts = np.zeros(len(DECISION_NAMES), dtype=np.int64)
        self.rows = 0  # node rows walked
        self.store: dict[str, NDArray[Any]] = {}  # the columns, with room to grow
        self.layout: tuple[Column, ...] | None = None

    def update(self, parsed: _Parsed) -> tuple[Trail, bool]:
        """The trail of every row read, and whether it only appended rows to the last one.

        Raises:
            InputError: as `read_jsonl` raises it for the lines read so far.
        """
        try:
            grown = self._grow(parsed)
            if grown is not None:
                return grown, True
            trail = _build(parsed)
        except InputError:
            self.state = None  # the walk went past rows that were not kept
            raise
        if self.state is not None:  # still in pre-order: grow on from the rebuilt trail
            self.layout = trail.header.columns
            self.store = {}
            self._append(trail.columns)
        return trail, False

    def _grow(self, parsed: _Parsed) -> Trail | None:
        """The trail with the new rows appended, or None where it must be rebuilt."""
        nodes, instance = parsed.nodes, parsed.instance
        if self.state is None or len(nodes.path_node):
            self.state = None
            return None
        new = nodes.rows_from(self.rows)
        depth, why = walk(self.state, new.view("ident"), new.view("parent_id"), new.view("city"))
        if why != WALKED:
            self.state = None
            return None
        city = new.view("city").astype(np.int64)
        lengths, misplaced = _closed_lengths(new, depth, city, instance)
        if misplaced is not None:
            self.state = None
            return None
        self.extent.add(lengths)
        self.counts += np.bincount(new.view("decision"), minlength=len(DECISION_NAMES))
        self.rows = nodes.count
        layout = self.extent.layout(instance, True, parsed.best)
        if layout != self.layout:
            return None
        ident = nodes.view("ident")
        best = _updates(parsed, lambda ids: _visits(ident, None, ids), None)
        self._append(_trail_columns(new, depth, city, lengths, layout, None, instance.n))
        header = TrailHeader(instance=instance, solver=parsed.solver, columns=layout)
        columns = {name: values[: self.rows] for name, values in self.store.items()}
        end = _end_info(parsed.status, self.rows, self.counts, best)
        return Trail(parsed.path, header, columns, best, end, parsed.notice)

    def _append(self, columns: dict[str, NDArray[Any]]) -> None:
        """Put `columns` after the rows held (room doubles), so that `rows` are held."""
        start = self.rows - len(next(iter(columns.values())))
        if not self.store or len(next(iter(self.store.values()))) < self.rows:
            room = max(self.rows, 2 * start, 1 << 12)
            grown = {k: np.empty((room, *v.shape[1:]), dtype=v.dtype) for k, v in columns.items()}
            for k, v in self.store.items():
                grown[k][:start] = v[:start]
            self.store = grown
        for k, v in columns.items():
            self.store[k][start : self.rows] = v


class JsonlFollower:
    """Follows a JSON Lines trace that is still being written, as `TrailFollower` follows a
    trail: `poll()` reads the lines appended since the last call.

    Each poll parses only the new whole lines (an unfinished last line waits for the next
    poll); a trace in depth-first pre-order grows its trail by the new rows alone, any
    other is rebuilt from everything read, since a new node can change the pre-order ids of
    a search that is not depth-first (`_GrowingTrail`).
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._handle: BinaryIO = open(self.path, "rb")  # noqa: SIM115 (closed in close())
        self._reading = _Reading(self.path)
        self._tail = b""
        self._number = 0
        self._trail: Trail | None = None
        self._growing: _GrowingTrail | None = None
        self._best_seen = 0

    def poll(self) -> tuple[int, int, list[BestUpdate]]:
        """Read what was appended since the last call.

        Returns:
            (first new node id, number of new nodes, new incumbent updates); when new nodes
            renumber old ones (a search that is not depth-first), the first id is 0 and the
            count is every node.

        Raises:
            InputError: a malformed line, naming its line and field.
        """
        data = self._handle.read()
        before = self._trail
        appended = False
        if data:
            data = self._tail + data
            cut = data.rfind(b"\n")
            body, self._tail = (b"", data) if cut < 0 else (data[:cut], data[cut + 1 :])
            if cut >= 0:
                with _collector_paused():
                    self._number = self._reading.feed(self._number + 1, body) - 1
            limit = MAX_FRAME_BYTES if self._reading.parser.instance is None else MAX_LINE_BYTES
            if len(self._tail) > limit:
                message = f"line is longer than {limit} bytes"
                raise InputError(self.path, message, line=self._number + 1)
            instance = self._reading.parser.instance
            if cut >= 0 and instance is not None:
                if self._growing is None:
                    self._growing = _GrowingTrail(instance.n)
                self._trail, appended = self._growing.update(self._reading.parsed())
        trail = self._trail
        if trail is None or trail is before:
            return (0 if before is None else before.count), 0, []
        new_best = trail.best[self._best_seen :]
        self._best_seen = len(trail.best)
        old = 0 if before is None else before.count
        kept = before is not None and (
            appended
            or all(
                np.array_equal(trail.columns[c][:old], before.columns[c]) for c in before.columns
            )
        )
        return (old, trail.count - old, new_best) if kept else (0, trail.count, trail.best)

    @property
    def header(self) -> TrailHeader | None:
        """The header, once it has been read."""
        return None if self._trail is None else self._trail.header

    @property
    def trail(self) -> Trail | None:
        """Everything read so far (None before the header and a first line after it)."""
        return self._trail

    def close(self) -> None:
        """Release the file."""
        self._handle.close()


def check_header(text: str, path: str | Path) -> None:
    """Check a header line as the import will, so a writer learns of a problem up front.

    Raises:
        InputError: naming the field, at line 1 of `path`.
    """
    try:
        obj = _DECODER.decode(text)
    except (ValueError, RecursionError) as exc:
        raise InputError(path, f"not a JSON line ({str(exc)[:80]})", line=1) from None
    _Parser(str(path)).take(obj, 1)


def read_jsonl(path: str | Path) -> Trail:
    """Read a JSON Lines trace into the same `Trail` the trail reader returns.

    Nodes are renumbered to depth-first pre-order (children in visit order); when that
    differs from the visit order, the `visit` column keeps each node's visit position and
    every `best` update's `at` is a visit position.

    Raises:
        InputError: naming the line and the field of the first problem found.
    """
    p = Path(path)
    expect_kind(p, (FileKind.JSON_LINES,), "a JSON Lines trace (one JSON object a line)")
    return _build(_parse(p))


def import_jsonl(src: str | Path, dst: str | Path) -> Trail:
    """Read a JSON Lines trace and write it as a trail file.

    A trace without an end line (a crashed run) gives a trail without an end frame.

    Returns:
        The trail as read from `src`.
    """
    trail = read_jsonl(src)
    with TrailWriter(dst, trail.header) as writer:
        for first in range(0, trail.count, _BLOCK_ROWS):
            writer.write_nodes(
                {k: v[first : first + _BLOCK_ROWS] for k, v in trail.columns.items()}
            )
        for update in trail.best:
            writer.write_best(update)
        if trail.end is not None:
            writer.close(trail.end)
    return trail


# -- a streamed import -----------------------------------------------------------------------

#: Bytes of lines read at a time by a streamed import: its memory is a small multiple of
#: this (and of `_BLOCK_ROWS` rows), whatever the size of the file.
STREAM_CHUNK_BYTES = _CHUNK_BYTES


@dataclass(frozen=True)
class ImportSummary:
    """What a streamed import wrote, for the command's report (the trail is not in memory)."""

    count: int
    header: TrailHeader
    end: EndInfo | None
    notice: str | None


class _WholeFileError(Exception):
    """The trace needs the whole-file import: not in pre-order, or something to report."""


class _StreamCheck:
    """The first pass of a streamed import: each chunk's nodes walked and checked as the
    whole-file path would, and what the column layout and the end frame need gathered."""

    def __init__(self, reading: _Reading) -> None:
        self.reading = reading
        self.state: WalkState | None = None
        self.extent = _Extent()
        self.counts = np.zeros(len(DECISION_NAMES), dtype=np.int64)
        self.visits: dict[int, int] = {}  # best line (index) -> visit of the node it names
        self.resolved = 0  # best lines looked at
        self.recent = (0, np.empty(0, dtype=np.int64))  # the last chunk: first visit, ids

    def __call__(self, nodes: _Columns) -> None:
        instance = self.reading.parser.instance
        if instance is None:
            return
        ident = nodes.view("ident")
        if nodes.count:
            if len(nodes.path_node) or instance.n > MAX_WALK_CITIES:
                raise _WholeFileError
            if self.state is None:
                self.state = WalkState(instance.n)
            depth, why = walk(self.state, ident, nodes.view("parent_id"), nodes.view("city"))
            if why != WALKED:
                raise _WholeFileError
            city = nodes.view("city").astype(np.int64)
            lengths, misplaced = _closed_lengths(nodes, depth, city, instance)
            if misplaced is not None:
                raise _WholeFileError
            self.extent.add(lengths)
            self.counts += np.bincount(nodes.view("decision"), minlength=len(DECISION_NAMES))
        self._resolve((self.recent, (nodes.base, ident)))
        if nodes.count:
            self.recent = (nodes.base, ident.copy())

    def _resolve(self, chunks: tuple[tuple[int, NDArray[np.int64]], ...]) -> None:
        """Find the nodes that the new best lines name, among the ids of this chunk and the
        one before (ids increase); a node further back is left to the whole-file path."""
        best = self.reading.parser.best
        for i in range(self.resolved, len(best)):
            b = best[i]
            if b.ident is None:
                continue
            for first, ids in chunks:
                k = int(np.searchsorted(ids, b.ident))
                if k < len(ids) and ids[k] == b.ident and first + k < b.seen:
                    self.visits[i] = first + k
            if i not in self.visits:
                raise _WholeFileError
        self.resolved = len(best)

    def updates(self) -> list[BestUpdate]:
        """The incumbent updates, as the whole-file path makes them (ids in pre-order)."""
        out = []
        for i, b in enumerate(self.reading.parser.best):
            if b.ident is None:
                out.append(BestUpdate(at=b.seen, node=-1, length=b.length, tour=b.tour))
            else:
                v = self.visits[i]
                out.append(BestUpdate(at=v + 1, node=v, length=b.length, tour=b.tour))
        return sorted(out, key=lambda u: u.at)


class _StreamWrite:
    """The second pass of a streamed import: each chunk's nodes into the trail's columns,
    written in blocks of `_BLOCK_ROWS` rows, the same blocks the whole-file import writes."""

    def __init__(self, reading: _Reading, writer: TrailWriter, header: TrailHeader) -> None:
        self.reading, self.writer, self.header = reading, writer, header
        self.state = WalkState(header.instance.n)
        self.pending: list[dict[str, NDArray[Any]]] = []
        self.held = 0

    def __call__(self, nodes: _Columns) -> None:
        if not nodes.count:
            return
        instance = self.header.instance
        depth, why = walk(
            self.state, nodes.view("ident"), nodes.view("parent_id"), nodes.view("city")
        )
        city = nodes.view("city").astype(np.int64)
        lengths, misplaced = _closed_lengths(nodes, depth, city, instance)
        if why != WALKED or misplaced is not None:  # the first pass read the same lines
            raise _WholeFileError
        columns = _trail_columns(nodes, depth, city, lengths, self.header.columns, None, instance.n)
        self.pending.append(columns)
        self.held += nodes.count
        if self.held >= _BLOCK_ROWS:
            self.flush(whole=True)

    def flush(self, whole: bool = False) -> None:
        """Write the rows held in blocks (`whole`: only whole blocks, the rest kept)."""
        if not self.pending:
            return
        joined = {k: np.concatenate([p[k] for p in self.pending]) for k in self.pending[0]}
        end = self.held - self.held % _BLOCK_ROWS if whole else self.held
        for first in range(0, end, _BLOCK_ROWS):
            self.writer.write_nodes(
                {k: v[first : min(first + _BLOCK_ROWS, end)] for k, v in joined.items()}
            )
        rest = self.held - end
        self.pending = [{k: v[end:] for k, v in joined.items()}] if rest else []
        self.held = rest


def stream_jsonl(
    src: str | Path, dst: str | Path, chunk_bytes: int = STREAM_CHUNK_BYTES
) -> ImportSummary | None:
    """Import a JSON Lines trace already in depth-first pre-order, writing blocks as it reads,
    with memory bounded by `chunk_bytes` (and a block of rows), in two passes over the file:
    one to check it and learn its column layout, one to write.

    The trail written is byte for byte the one `import_jsonl` writes. Returns None where the
    trace needs the whole-file import instead: not a regular file (a pipe is read once), not
    in pre-order (or ids that do not grow), paths instead of parent ids, more than
    `MAX_WALK_CITIES` cities, a best line naming a node more than a chunk back, or a problem
    to report (the whole-file import reports it as usual), or a file that changed between
    the passes. The trail is written beside `dst` and moved there only once complete, so an
    interrupted import leaves any earlier `dst` as it was.

    Raises:
        InputError: a line that is wrong in itself, as `import_jsonl` names it.
    """
    p = Path(src)
    expect_kind(p, (FileKind.JSON_LINES,), "a JSON Lines trace (one JSON object a line)")
    try:
        before = p.stat()
    except OSError as exc:
        raise InputError(p, f"cannot read: {exc.strerror or exc}") from None
    if not p.is_file():
        return None
    first = _Reading(p)
    check = _StreamCheck(first)
    try:
        with open(p, "rb") as handle, _collector_paused():
            first.run(handle, chunk_bytes, drain=check)
        parsed = first.parsed()
        best = check.updates()
    except _WholeFileError:
        return None
    layout = check.extent.layout(parsed.instance, True, parsed.best)
    header = TrailHeader(instance=parsed.instance, solver=parsed.solver, columns=layout)
    end = _end_info(parsed.status, len(first.parser.nodes), check.counts, best)
    second = _Reading(p)
    target = Path(dst)
    part = target.with_name(target.name + ".part")  # `dst` is replaced only when complete
    try:
        with TrailWriter(part, header) as writer, open(p, "rb") as handle, _collector_paused():
            write = _StreamWrite(second, writer, header)
            second.run(handle, chunk_bytes, drain=write)
            write.flush()
            for update in best:
                writer.write_best(update)
            after = p.stat()
            same = (after.st_size, after.st_mtime_ns) == (before.st_size, before.st_mtime_ns)
            if not same or len(second.parser.nodes) != len(first.parser.nodes):
                return None  # changed under us: the caller imports the whole file
            if end is not None:
                writer.close(end)
        os.replace(part, target)
    except _WholeFileError:
        return None
    finally:
        part.unlink(missing_ok=True)  # gone already after a replace
    return ImportSummary(len(first.parser.nodes), header, end, parsed.notice)
