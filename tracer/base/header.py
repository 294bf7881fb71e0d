"""A trail's header: the instance, how the search was set up, and the column layout.

`to_wire` / `from_wire` are the only translation between this and the MessagePack map, so
the writer, the reader, the importer and hand-written writers all agree on one shape.
`from_wire` treats the map as untrusted: every field is type-checked and size-bounded.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from tracer.base.instance import Instance
from tracer.base.limits import (
    MAX_COLUMNS,
    MAX_COORDINATE,
    MAX_EDGE,
    MAX_HEADER_ITEMS,
    MAX_TEXT,
    MAX_TRAIL_CITIES,
    MAX_WORD,
)
from tracer.base.metrics import COORD_METRICS, EXPLICIT, FloatArray, Matrix, distance_matrix
from tracer.base.records import FieldError, is_int, is_number, text_value
from tracer.base.schema import (
    CITY_COLUMNS,
    DEPTH,
    FORMAT_NAME,
    FORMAT_VERSION,
    HEADER,
    KNOWN_COLUMNS,
    REQUIRED_COLUMNS,
    ROW_COLUMNS,
    Column,
    city_dtype,
)

#: Our bound's name in a header; any other name means only structural and decision checks.
TREE_LINKS = "tree+links"
NO_BOUND = "none"
#: tree+links with a penalty per unvisited city (Lagrangian relaxation of the degrees).
PENALTIES = "penalties"

#: Every bound name with a rule of ours (the re-check checks each against that rule).
OUR_BOUNDS = (TREE_LINKS, PENALTIES, NO_BOUND)

_LENGTH_DTYPES = ("<i4", "<i8", "<f8")
#: Every column dtype text a header may give: a number of at most 8 bytes, little-endian or
#: with no byte order. Checked before numpy sees the text, so file text never reaches
#: `np.dtype` (which warns on, or misreads, some of the strings it knows).
_COLUMN_DTYPES = frozenset(
    order + code
    for order in ("<", "|", "=", "")
    for code in ("i1", "i2", "i4", "i8", "u1", "u2", "u4", "u8", "f2", "f4", "f8")
)


def bound_name_clash(name: str) -> str | None:
    """Our bound name that `name` differs from by a single flipped bit, if any.

    Any name that is not ours is a foreign solver's bound, re-checked only for structure and
    decisions. A name one bit from ours is far likelier a damaged byte than a foreign name,
    and reading it as foreign would silently narrow the re-check, so readers refuse it.
    """
    data = name.encode("utf-8", "surrogatepass")
    for ours in OUR_BOUNDS:
        word = ours.encode()
        if len(word) == len(data):
            diff = [a ^ b for a, b in zip(word, data, strict=True) if a != b]
            if len(diff) == 1 and diff[0] & (diff[0] - 1) == 0:
                return ours
    return None


def bound_name(value: Any) -> str:
    """A bound's name from a file: ours, or a foreign solver's that cannot be mistaken for ours.

    Raises:
        FieldError: not text of at most `MAX_WORD` characters, or one bit from our names.
    """
    name = text_value(value, MAX_WORD)
    clash = bound_name_clash(name)
    if clash is not None:
        raise FieldError(
            f"{name!r} is one bit away from our bound {clash!r}: a damaged file? (a foreign "
            "bound's name must differ from ours by more)"
        )
    return name


class HeaderError(ValueError):
    """A header map that does not describe a trail (message says which field)."""


@dataclass(frozen=True)
class PenaltySettings:
    """How the penalties bound raised its penalties at each node.

    Attributes:
        steps: subgradient steps at each bounded node (warm-started from the parent's pi).
        root_steps: steps at the root, which starts from pi = 0.
        step_rule: how a step's size is chosen (the engine's names, e.g. "gap").
        quantum: every penalty is a whole multiple of this (a power of two, so sums of
            whole-number lengths and penalties are exact in float64); `pi` holds multiples.
    """

    steps: int
    root_steps: int
    step_rule: str
    quantum: float

    def to_wire(self) -> dict[str, Any]:
        """The settings as a MessagePack-ready map."""
        return {
            "steps": self.steps,
            "root_steps": self.root_steps,
            "step_rule": self.step_rule,
            "quantum": self.quantum,
        }


@dataclass(frozen=True)
class SolverInfo:
    """How the recorded search was set up.

    Attributes:
        bound: the bound's name ("tree+links", "none", or a foreign solver's own name).
        cutoff: small-remainder cutoff: nodes with k <= cutoff unvisited cities get no bound.
        engine: who wrote the trail.
        order: child order ("nearest", "index") if known.
        start: how the start tour was made ("none" for an infinite incumbent).
        fault: the planted fault's name, if any.
        record: what was recorded ("all", "decisions", "none").
        record_under: path prefix whose subtree (and path) alone was recorded, if any.
        visit_order: True when nodes were visited in another order than pre-order.
        penalties: the penalties bound's settings (None for any other bound).
    """

    bound: str = TREE_LINKS
    cutoff: int = 0
    engine: str = ""
    order: str | None = None
    start: str | None = None
    fault: str | None = None
    record: str = "all"
    record_under: tuple[int, ...] | None = None
    visit_order: bool = False
    penalties: PenaltySettings | None = None


@dataclass(frozen=True)
class TrailHeader:
    """Everything a reader needs before the first node."""

    instance: Instance
    solver: SolverInfo
    columns: tuple[Column, ...]
    extra: dict[str, Any] = field(default_factory=dict)

    def column(self, name: str) -> Column | None:
        """The column called `name`, if the trail has it."""
        return next((c for c in self.columns if c.name == name), None)


def storage_matrix(instance: Instance) -> Matrix:
    """The instance's matrix in the narrowest dtype that holds it exactly."""
    m = instance.matrix
    if m.dtype.kind == "f":
        return m.astype("<f8")
    info = np.iinfo(np.int32)
    if m.size and (m.max() > info.max or m.min() < info.min):
        return m.astype("<i8")
    return m.astype("<i4")


def to_wire(header: TrailHeader) -> dict[str, Any]:
    """The header as a MessagePack-ready map."""
    inst = header.instance
    matrix = storage_matrix(inst)
    s = header.solver
    return {
        "kind": HEADER,
        "format": FORMAT_NAME,
        "version": FORMAT_VERSION,
        "instance": {
            "name": inst.name,
            "n": inst.n,
            "metric": inst.metric,
            "coords": None if inst.coords is None else inst.coords.astype("<f8").tobytes(),
            "matrix": matrix.tobytes(),
            "matrix_dtype": matrix.dtype.str,
        },
        "solver": {
            "engine": s.engine,
            "bound": s.bound,
            "cutoff": s.cutoff,
            "order": s.order,
            "start": s.start,
            "fault": s.fault,
            "record": s.record,
            "record_under": None if s.record_under is None else list(s.record_under),
            "visit_order": s.visit_order,
            **({} if s.penalties is None else {"penalties": s.penalties.to_wire()}),
        },
        "columns": [c.to_wire() for c in header.columns],
        **header.extra,
    }


def _need(cond: bool, message: str) -> None:
    if not cond:
        raise HeaderError(message)


def _text(value: Any, what: str, limit: int = MAX_TEXT) -> str:
    """Text of at most `limit` characters: longer text is refused (`tracer.base.limits`)."""
    try:
        return text_value(value, limit)
    except FieldError as exc:
        raise HeaderError(f"{what} {exc}") from None


def _bound(value: Any) -> str:
    try:
        return bound_name(value)
    except FieldError as exc:
        raise HeaderError(f"solver.bound {exc}") from None


def _flag(value: Any, what: str) -> bool:
    _need(isinstance(value, bool), f"{what} must be true or false")
    return bool(value)


def _optional_text(value: Any, what: str) -> str | None:
    return None if value is None else _text(value, what)


def _array(value: Any, what: str, dtype: str, count: int, limit: float) -> np.ndarray:
    """A numeric array from raw little-endian bytes or nested lists, exactly `count` long.

    Every value must be finite and at most `limit` in magnitude (`tracer.base.limits`).
    """
    arr = _numbers(value, what, dtype, count)
    _need(bool(np.isfinite(arr).all()), f"{what} must hold finite numbers")
    _need(
        bool((np.abs(arr) <= limit).all()), f"{what} holds a number beyond ±{limit:g} (the limit)"
    )
    return arr


def _numbers(value: Any, what: str, dtype: str, count: int) -> np.ndarray:
    if isinstance(value, bytes | bytearray):
        itemsize = np.dtype(dtype).itemsize
        _need(
            len(value) == count * itemsize,
            f"{what} holds {len(value)} bytes, expected {count * itemsize}",
        )
        return np.frombuffer(value, dtype=dtype).copy()
    _need(isinstance(value, list), f"{what} must be raw bytes or a list")
    flat: list[Any] = []
    for row in value:
        if isinstance(row, list):
            flat.extend(row)
        else:
            flat.append(row)
        _need(len(flat) <= count, f"{what} holds more than {count} numbers")
    _need(len(flat) == count, f"{what} holds {len(flat)} numbers, expected {count}")
    _need(all(is_number(v) for v in flat), f"{what} must hold only finite numbers")
    if dtype != "<f8" and all(is_int(v) for v in flat):
        _need(all(abs(v) <= 2**62 for v in flat), f"{what} holds a number beyond ±2**62")
        return np.array(flat, dtype="<i8")
    return np.array(flat, dtype=np.float64)


def _instance(raw: Any) -> Instance:
    _need(isinstance(raw, dict), "instance must be a map")
    name = _text(raw.get("name", "trail"), "instance.name")
    n = raw.get("n")
    _need(is_int(n), "instance.n must be a whole number")
    _need(1 <= n <= MAX_TRAIL_CITIES, f"instance.n must be 1..{MAX_TRAIL_CITIES}, found {n}")
    _need(n * n <= MAX_HEADER_ITEMS, "instance too large")
    metric = _text(raw.get("metric", EXPLICIT), "instance.metric")
    coords: FloatArray | None = None
    if raw.get("coords") is not None:
        coords = _array(raw["coords"], "instance.coords", "<f8", 2 * n, MAX_COORDINATE)
        coords = coords.astype(np.float64)
        coords = coords.reshape(n, 2)
    matrix: Matrix
    if raw.get("matrix") is not None:
        dtype = _text(raw.get("matrix_dtype", "<i8"), "instance.matrix_dtype")
        _need(dtype in _LENGTH_DTYPES, f"instance.matrix_dtype must be one of {_LENGTH_DTYPES}")
        matrix = _array(raw["matrix"], "instance.matrix", dtype, n * n, MAX_EDGE).reshape(n, n)
        matrix = matrix.astype(np.float64 if matrix.dtype.kind == "f" else np.int64)
        np.fill_diagonal(matrix, 0)
    else:
        _need(coords is not None, "instance needs a matrix or coordinates")
        _need(
            metric in COORD_METRICS,
            f"instance.metric {metric!r} is not one of "
            f"{', '.join(COORD_METRICS)} (give a matrix instead)",
        )
        assert coords is not None
        matrix = distance_matrix(coords, metric)
    return Instance(name=name, metric=metric, coords=coords, explicit=matrix)


def _columns(raw: Any, n: int) -> tuple[Column, ...]:
    _need(
        isinstance(raw, list) and 1 <= len(raw) <= MAX_COLUMNS,
        f"columns must be a list of 1..{MAX_COLUMNS} [name, dtype] pairs",
    )
    out: list[Column] = []
    for item in raw:
        _need(
            isinstance(item, list) and len(item) in (2, 3),
            "each column must be [name, dtype] (or [name, dtype, n] for a row column)",
        )
        name = _text(item[0], "column name", MAX_WORD)
        dtype_str = _text(item[1], f"column {name}'s dtype", MAX_WORD)
        _need(name in KNOWN_COLUMNS, f"unknown column {name!r}")
        _need(
            (len(item) == 3) == (name in ROW_COLUMNS),
            f"column {name} must be given as "
            + ("[name, dtype, n]" if name in ROW_COLUMNS else "[name, dtype]"),
        )
        _need(len(item) == 2 or item[2] == n, f"row column {name} must hold n = {n} values")
        _need(all(c.name != name for c in out), f"column {name!r} given twice")
        _need(
            dtype_str in _COLUMN_DTYPES,
            f"column {name}'s dtype {dtype_str!r} must be a little-endian number's dtype "
            "string, such as '|u1', '<i4' or '<f8'",
        )
        dtype = np.dtype(dtype_str).newbyteorder("<")
        out.append(Column(name, np.dtype((dtype, (n,))) if len(item) == 3 else dtype))
    for name in REQUIRED_COLUMNS:
        _need(any(c.name == name for c in out), f"columns must include {name!r}")
    cities = city_dtype(n)
    for c in out:
        if c.name in (*CITY_COLUMNS, DEPTH):
            _need(
                c.dtype.kind == "u" and c.dtype.itemsize >= cities.itemsize,
                f"column {c.name} must be unsigned, at least {cities.str}",
            )
    return tuple(out)


def _number(value: Any, what: str) -> float:
    _need(
        is_number(value) and 0 < value < 1e300,
        f"{what} must be a positive number",
    )
    return float(value)


def _count(value: Any, what: str, limit: int) -> int:
    _need(
        is_int(value) and 0 <= value <= limit,
        f"{what} must be a whole number 0..{limit}",
    )
    return int(value)


def _penalties(raw: Any) -> PenaltySettings | None:
    if raw is None:
        return None
    _need(isinstance(raw, dict), "solver.penalties must be a map")
    return PenaltySettings(
        steps=_count(raw.get("steps"), "solver.penalties.steps", 1 << 20),
        root_steps=_count(raw.get("root_steps"), "solver.penalties.root_steps", 1 << 24),
        step_rule=_text(raw.get("step_rule", ""), "solver.penalties.step_rule", MAX_WORD),
        quantum=_number(raw.get("quantum"), "solver.penalties.quantum"),
    )


def _solver(raw: Any, n: int) -> SolverInfo:
    if raw is None:
        raw = {}
    _need(isinstance(raw, dict), "solver must be a map")
    cutoff = raw.get("cutoff", 0)
    _need(
        is_int(cutoff) and cutoff >= 0,
        "solver.cutoff must be a whole number >= 0",
    )
    under = raw.get("record_under")
    prefix: tuple[int, ...] | None = None
    if under is not None:
        _need(
            isinstance(under, list)
            and 1 <= len(under) <= n
            and all(is_int(c) and 0 <= c < n for c in under),
            "solver.record_under must be a list of cities",
        )
        prefix = tuple(int(c) for c in under)
    return SolverInfo(
        bound=_bound(raw.get("bound", TREE_LINKS)),
        cutoff=min(int(cutoff), n),
        engine=_text(raw.get("engine", ""), "solver.engine"),
        order=_optional_text(raw.get("order"), "solver.order"),
        start=_optional_text(raw.get("start"), "solver.start"),
        fault=_optional_text(raw.get("fault"), "solver.fault"),
        record=_text(raw.get("record", "all"), "solver.record", MAX_WORD),
        record_under=prefix,
        visit_order=_flag(raw.get("visit_order", False), "solver.visit_order"),
        penalties=_penalties(raw.get("penalties")),
    )


def from_wire(raw: Any) -> TrailHeader:
    """Validate a header map read from a file and build the header.

    Raises:
        HeaderError: naming the first field that is missing or wrong.
    """
    _need(isinstance(raw, dict) and raw.get("kind") == HEADER, "the first frame must be a header")
    _need(raw.get("format") == FORMAT_NAME, f"format must be {FORMAT_NAME!r}")
    version = raw.get("version")
    _need(
        version == FORMAT_VERSION,
        f"version {version!r} is not one this reader knows ({FORMAT_VERSION})",
    )
    instance = _instance(raw.get("instance"))
    return TrailHeader(
        instance=instance,
        solver=_solver(raw.get("solver"), instance.n),
        columns=_columns(raw.get("columns"), instance.n),
    )
