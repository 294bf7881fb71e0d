"""Reading the JSON Lines interchange format (a foreign solver's trace) into a trail.

A foreign solver writes one JSON object a line, in the order it visited its nodes, and names
each node's parent by id (or gives the node's whole path). One pass checks every line on its
own and appends plain numbers to typed arrays; everything that relates lines to each other
(ids to parents, paths to nodes, depths, the renumbering to depth-first pre-order, the visit
column) is then worked out with numpy one depth level at a time, so no Python object per node
outlives its line. The file is untrusted: every size is bounded, nothing in it is evaluated,
and every problem is an `InputError` naming the line and the field.

The format is specified in `tracer/TRAIL_FORMAT.md`.
"""

from __future__ import annotations

import gc
import json
import math
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
_NO_CITY = -1  # an absent link city while parsing
_MISSING = object()  # a key the line does not have


def _reject_constant(name: str) -> NoReturn:
    raise ValueError(f"{name} is not a JSON number")


_DECODER = json.JSONDecoder(parse_constant=_reject_constant)


class _Columns:
    """The per-node values of the file, in visit order, as growing typed arrays."""

    def __init__(self) -> None:
        self.line = array("q")
        self.ident = array("q")
        self.parent_id = array("q")  # 0 where the node gives a path (or is the root)
        self.city = array("i")
        self.decision = array("B")
        self.lengths: dict[str, array[float]] = {
            key: array("d") for key in (PARTIAL, TREE, LINK_IN, LINK_OUT, BOUND, "length")
        }
        self.link_city: dict[str, array[int]] = {LINK_IN: array("i"), LINK_OUT: array("i")}
        # Nodes given by path: their visit positions, and where each path starts in `flat`.
        self.path_node = array("q")
        self.path_start = array("q")
        self.flat = array("H")

    def __len__(self) -> int:
        return len(self.ident)

    def append_batch(self, batch: NodeBatch, lines: list[int]) -> None:
        """Append node lines already checked by the typed path (given by parent id)."""
        self.line.extend(lines)
        self.ident.extend(batch.ident)
        self.parent_id.extend(batch.parent_id)
        self.city.extend(batch.city)
        self.decision.extend(batch.decision)
        for key, values in batch.lengths.items():
            self.lengths[key].frombytes(values.tobytes())
        for key, cities in batch.link_city.items():
            self.link_city[key].frombytes(cities.tobytes())


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
        lengths = nodes.lengths
        lengths[PARTIAL].append(self._length(obj, PARTIAL, line, required=True))
        lengths[TREE].append(self._length(obj, TREE, line))
        lengths[BOUND].append(self._length(obj, BOUND, line))
        lengths["length"].append(self._length(obj, "length", line))
        for key in (LINK_IN, LINK_OUT):
            link = obj.get(key)
            if link is None:
                nodes.link_city[key].append(_NO_CITY)
                lengths[key].append(math.nan)
                continue
            link_city, link_length = self.checked(line, key, link_value, link, n)
            nodes.link_city[key].append(link_city)
            lengths[key].append(link_length)
        nodes.line.append(line)
        nodes.ident.append(ident)
        nodes.parent_id.append(parent_id)
        nodes.city.append(city)
        nodes.decision.append(code)

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
    """One pass over the lines: node lines in typed batches, everything else line by line.

    The header line is read on its own (it may be large); the rest is read in big chunks
    split into lines by `bytes.split`, each line bounded by `MAX_LINE_BYTES`.
    """

    def __init__(self, path: Path) -> None:
        self.path = path
        self.parser = _Parser(str(path))
        self.notice: str | None = None

    def run(self, handle: BinaryIO) -> None:
        """Read every line of `handle` (stops quietly inside an unfinished last line)."""
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
        tail = b""
        while chunk := handle.read(_CHUNK_BYTES):
            lines = (tail + chunk).split(b"\n")
            tail = lines.pop()
            self.feed(number + 1, lines)
            number += len(lines)
            if len(tail) > MAX_LINE_BYTES:
                raise InputError(
                    self.path, f"line is longer than {MAX_LINE_BYTES} bytes", line=number + 1
                )
        if tail:
            self.slow(number + 1, tail, False)

    def feed(self, first: int, lines: list[bytes]) -> None:
        """Take whole lines (without their newlines) numbered from `first`."""
        done = 0
        while self.parser.instance is None and done < len(lines):  # the header, on its own
            if len(lines[done]) > MAX_FRAME_BYTES:
                message = f"the header line is longer than {MAX_FRAME_BYTES} bytes"
                raise InputError(self.path, message, line=first + done)
            self.slow(first + done, lines[done], True)
            done += 1
        if done:
            first, lines = first + done, lines[done:]
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


class _Tree:
    """Parents, depths and pre-order ids of the parsed nodes (all indexed by visit position)."""

    def __init__(self, parsed: _Parsed) -> None:
        self.path = parsed.path
        self.n = parsed.instance.n
        nodes = parsed.nodes
        self.count = len(nodes)
        self.line = np.frombuffer(nodes.line, dtype=np.int64)
        self.ident = np.frombuffer(nodes.ident, dtype=np.int64)
        self.city = np.frombuffer(nodes.city, dtype=np.intc).astype(np.int64)
        self.by_path = np.zeros(self.count, dtype=np.bool_)
        self.path_node = np.frombuffer(nodes.path_node, dtype=np.int64)
        self.path_start = np.frombuffer(nodes.path_start, dtype=np.int64)
        self.flat = np.frombuffer(nodes.flat, dtype=np.uint16)
        self.by_path[self.path_node] = True
        self.id_order = np.argsort(self.ident, kind="stable")
        self.sorted_ids = self.ident[self.id_order]
        self._check_ids()
        self.parent = np.full(self.count, -1, dtype=np.int64)
        self._link_parent_ids(np.frombuffer(nodes.parent_id, dtype=np.int64))
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
        if self.count == 0:
            return np.full(len(ids), -1, dtype=np.int64)
        pos = np.minimum(np.searchsorted(self.sorted_ids, ids), self.count - 1)
        return np.where(self.sorted_ids[pos] == ids, self.id_order[pos], -1)

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


def _lengths(parsed: _Parsed, tree: _Tree) -> dict[str, NDArray[np.float64]]:
    """Length values in visit order (NaN where absent), complete paths' closing edges filled."""
    raw = {k: np.frombuffer(v, dtype=np.float64).copy() for k, v in parsed.nodes.lengths.items()}
    complete = tree.depth == tree.n - 1
    length = raw.pop("length")
    missing = complete & np.isnan(length)
    if missing.any():  # liberal: the closed tour's length is the path plus its closing edge
        matrix = parsed.instance.matrix
        length[missing] = raw[PARTIAL][missing] + matrix[tree.city[missing], 0]
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
            raise tree.fail(int(np.argmax(bad)), key, message)
    raw[LINK_OUT][complete] = length[complete] - raw[PARTIAL][complete]
    return raw


def _store(
    values: NDArray[Any], absent: NDArray[np.bool_], dtype: np.dtype[Any], pre: NDArray[np.int64]
) -> NDArray[Any]:
    """`values` (visit order) as a column of `dtype` in pre-order, absent entries as sentinel."""
    column = np.full(len(values), absent_value(dtype), dtype=dtype)
    column[pre[~absent]] = values[~absent].astype(dtype)
    return column


def _build(parsed: _Parsed) -> Trail:
    tree = _Tree(parsed)
    lengths = _lengths(parsed, tree)
    link_city = {
        k: np.frombuffer(v, dtype=np.intc).astype(np.int64)
        for k, v in parsed.nodes.link_city.items()
    }
    link_city[LINK_OUT][tree.depth == tree.n - 1] = 0
    names: tuple[str, ...] = FULL_COLUMNS
    if not np.isnan(lengths[BOUND]).all():
        names += (BOUND,)
    in_preorder = bool(np.array_equal(tree.pre, np.arange(tree.count)))
    if not in_preorder:
        names += (VISIT,)
    names += SOURCE_COLUMNS  # findings name the node by the solver's id and its line
    recorded = [v[~np.isnan(v)] for v in lengths.values()] + [
        np.array([b.length for b in parsed.best])
    ]
    integral = parsed.instance.integral and all(bool((v == np.floor(v)).all()) for v in recorded)
    longest = max((float(np.abs(v).max()) for v in recorded if v.size), default=0.0) + 1.0
    layout = column_layout(names, tree.n, integral, longest)
    source: dict[str, tuple[NDArray[Any], NDArray[np.bool_]]] = {
        CITY: (tree.city, np.zeros(tree.count, dtype=np.bool_)),
        DEPTH: (tree.depth, np.zeros(tree.count, dtype=np.bool_)),
        DECISION: (
            np.frombuffer(parsed.nodes.decision, dtype=np.uint8),
            np.zeros(tree.count, bool),
        ),
        LINK_IN_CITY: (link_city[LINK_IN], link_city[LINK_IN] == _NO_CITY),
        LINK_OUT_CITY: (link_city[LINK_OUT], link_city[LINK_OUT] == _NO_CITY),
        VISIT: (np.arange(tree.count), np.zeros(tree.count, dtype=np.bool_)),
        SOURCE_ID: (tree.ident, np.zeros(tree.count, dtype=np.bool_)),
        SOURCE_LINE: (tree.line, np.zeros(tree.count, dtype=np.bool_)),
    }
    for key, values in lengths.items():
        source[key] = (values, np.isnan(values))
    columns = {c.name: _store(*source[c.name], c.dtype, tree.pre) for c in layout}
    best = _updates(parsed, tree)
    solver = parsed.solver
    if not in_preorder:
        solver = replace(solver, visit_order=True)
    header = TrailHeader(instance=parsed.instance, solver=solver, columns=layout)
    end = None
    if parsed.status is not None:
        counts = np.bincount(columns[DECISION], minlength=len(DECISION_NAMES))
        last = best[-1] if best else None
        end = EndInfo(
            status=parsed.status,
            nodes=tree.count,
            recorded=tree.count,
            decisions={name: int(counts[i]) for i, name in enumerate(DECISION_NAMES)},
            seconds=0.0,
            length=None if last is None else last.length,
            tour=None if last is None else list(last.tour),
        )
    return Trail(parsed.path, header, columns, best, end, parsed.notice)


def _updates(parsed: _Parsed, tree: _Tree) -> list[BestUpdate]:
    """Incumbent updates: `at` is the visit position of the first node to see each one.

    A tour found at a node is in force from the next node visited on; a tour found outside
    the tree (id null) from the next node after the line that reports it.
    """
    ids = np.array([0 if b.ident is None else b.ident for b in parsed.best], dtype=np.int64)
    visit = tree.visit_of(ids)
    out: list[BestUpdate] = []
    for b, v in zip(parsed.best, visit.tolist(), strict=True):
        if b.ident is None:
            out.append(BestUpdate(at=b.seen, node=-1, length=b.length, tour=b.tour))
            continue
        if not 0 <= v < b.seen:
            raise InputError(
                parsed.path, f"'id': no node before this line has id {b.ident}", line=b.line
            )
        out.append(BestUpdate(at=v + 1, node=int(tree.pre[v]), length=b.length, tour=b.tour))
    return sorted(out, key=lambda u: u.at)


class JsonlFollower:
    """Follows a JSON Lines trace that is still being written, as `TrailFollower` follows a
    trail: `poll()` reads the lines appended since the last call.

    Each poll parses only the new whole lines (an unfinished last line waits for the next
    poll) and rebuilds `trail` from everything read, since a new node can change the
    pre-order ids of a search that is not depth-first.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._handle: BinaryIO = open(self.path, "rb")  # noqa: SIM115 (closed in close())
        self._reading = _Reading(self.path)
        self._tail = b""
        self._number = 0
        self._trail: Trail | None = None
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
        if data:
            lines = (self._tail + data).split(b"\n")
            self._tail = lines.pop()
            with _collector_paused():
                self._reading.feed(self._number + 1, lines)
            self._number += len(lines)
            limit = MAX_FRAME_BYTES if self._reading.parser.instance is None else MAX_LINE_BYTES
            if len(self._tail) > limit:
                message = f"line is longer than {limit} bytes"
                raise InputError(self.path, message, line=self._number + 1)
            if lines and self._reading.parser.instance is not None:
                self._trail = _build(self._reading.parsed())
        trail = self._trail
        if trail is None or trail is before:
            return (0 if before is None else before.count), 0, []
        new_best = trail.best[self._best_seen :]
        self._best_seen = len(trail.best)
        old = 0 if before is None else before.count
        kept = before is not None and all(
            np.array_equal(trail.columns[c][:old], before.columns[c]) for c in before.columns
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
