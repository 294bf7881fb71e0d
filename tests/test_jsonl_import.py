"""Tests for the JSON Lines importer: round trips, renumbering, visit order, every error."""

from __future__ import annotations

import copy
import json
import re
from pathlib import Path
from typing import Any

import msgpack
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tracer.base.errors import InputError
from tracer.base.schema import (
    BOUND,
    DECISION_BY_NAME,
    MAX_TRAIL_CITIES,
    VISIT,
    Decision,
    absent_value,
)
from tracer.trails import jsonl as jsonl_import
from tracer.trails.jsonl import import_jsonl, read_jsonl
from tracer.trails.opening import open_trail
from tracer.trails.reader import Trail, read_trail

SPEC = Path(__file__).resolve().parent.parent / "tracer" / "TRAIL_FORMAT.md"

MATRIX = [[0, 2, 9, 4], [2, 0, 6, 3], [9, 6, 0, 5], [4, 3, 5, 0]]
#: A small valid trace (line numbers in comments); every malformed variant starts here.
BASE: list[dict[str, Any]] = [
    {  # 1
        "kind": "header",
        "instance": {"name": "square", "matrix": MATRIX},
        "solver": {"bound": "tree+links", "cutoff": 0, "start": None},
    },
    {  # 2
        "kind": "node",
        "id": 100,
        "parent": None,
        "city": 0,
        "partial": 0,
        "tree": 8,
        "link_in": [1, 2],
        "link_out": [1, 2],
        "decision": "expand",
    },
    {  # 3
        "kind": "node",
        "id": 101,
        "parent": 100,
        "city": 1,
        "partial": 2,
        "tree": 5,
        "link_in": [3, 3],
        "link_out": [3, 4],
        "decision": "expand",
    },
    {  # 4
        "kind": "node",
        "id": 102,
        "parent": 101,
        "city": 3,
        "partial": 5,
        "tree": 0,
        "link_in": [2, 5],
        "link_out": [2, 9],
        "decision": "expand",
    },
    {  # 5
        "kind": "node",
        "id": 103,
        "parent": 102,
        "city": 2,
        "partial": 10,
        "decision": "tour_better",
        "length": 19,
    },
    {"kind": "best", "id": 103, "length": 19, "tour": [0, 1, 3, 2]},  # 6
    {  # 7
        "kind": "node",
        "id": 104,
        "parent": 100,
        "city": 3,
        "partial": 4,
        "tree": 6,
        "link_in": [1, 3],
        "link_out": [1, 2],
        "decision": "prune",
    },
    {"kind": "end", "status": "complete"},  # 8
]


def write_lines(path: Path, lines: list[Any]) -> Path:
    """Write dicts as JSON lines (strings and bytes as they are)."""
    with open(path, "wb") as f:
        for item in lines:
            if isinstance(item, bytes):
                f.write(item + b"\n")
            elif isinstance(item, str):
                f.write(item.encode() + b"\n")
            else:
                f.write(json.dumps(item).encode() + b"\n")
    return path


def base_file(tmp_path: Path) -> Path:
    return write_lines(tmp_path / "base.jsonl", BASE)


def same_trails(a: Trail, b: Trail) -> None:
    """Assert two trails hold the same nodes, updates, end and settings."""
    assert list(a.columns) == list(b.columns)
    for name in a.columns:
        assert a.columns[name].dtype == b.columns[name].dtype, name
        np.testing.assert_array_equal(a.columns[name], b.columns[name], err_msg=name)
    assert a.best == b.best
    assert a.header.solver == b.header.solver
    assert a.header.columns == b.header.columns
    np.testing.assert_array_equal(a.header.instance.matrix, b.header.instance.matrix)
    assert (a.end is None) == (b.end is None)
    if a.end is not None and b.end is not None:
        assert (a.end.status, a.end.nodes, a.end.length) == (
            b.end.status,
            b.end.nodes,
            b.end.length,
        )
        assert dict(a.end.decisions) == dict(b.end.decisions)


def implicit_parents(depth: np.ndarray) -> list[int]:
    """Parent of each pre-order node: the last earlier node one level up."""
    parents: list[int] = []
    stack: list[int] = []
    for d in depth.tolist():
        del stack[d:]
        parents.append(stack[-1] if stack else -1)
        stack.append(len(parents) - 1)
    return parents


# -- reading valid traces --------------------------------------------------------------------


def test_hand_made_file_reads_as_expected(tmp_path: Path) -> None:
    """The base trace reads into the expected narrow columns, updates and end."""
    trail = read_jsonl(base_file(tmp_path))
    cols = trail.columns
    assert trail.count == 5
    assert [c.name for c in trail.header.columns][-3:] == ["decision", "source_id", "source_line"]
    assert cols["city"].dtype == np.uint8 and cols["partial"].dtype == np.int32
    assert cols["city"].tolist() == [0, 1, 3, 2, 3]
    assert cols["depth"].tolist() == [0, 1, 2, 3, 1]
    assert cols["partial"].tolist() == [0, 2, 5, 10, 4]
    absent = absent_value(cols["tree"].dtype)
    assert cols["tree"].tolist() == [8, 5, 0, absent, 6]
    assert cols["link_in"][3] == absent and cols["link_in_city"][3] == 255
    assert cols["link_out"].tolist() == [2, 4, 9, 9, 2]  # 19 - 10 closes the tour
    assert cols["link_out_city"].tolist() == [1, 3, 2, 0, 1]
    assert cols["decision"].tolist() == [0, 0, 0, 3, 1]
    assert VISIT not in cols and BOUND not in cols
    assert not trail.header.solver.visit_order
    assert [(b.at, b.node, b.length, b.tour) for b in trail.best] == [(4, 3, 19.0, (0, 1, 3, 2))]
    assert trail.end is not None and trail.end.status == "complete"
    assert trail.end.length == 19 and trail.end.decisions["expand"] == 3
    assert trail.notice is None
    assert trail.header.instance.name == "square"


def test_import_round_trip(tmp_path: Path) -> None:
    """import_jsonl writes a trail that reads back equal to the JSON Lines read."""
    src = base_file(tmp_path)
    written = import_jsonl(src, tmp_path / "base.trail")
    same_trails(written, read_jsonl(src))
    same_trails(written, read_trail(tmp_path / "base.trail"))


def test_best_first_keeps_visit_order_and_renumbers(tmp_path: Path) -> None:
    """A best-first trace becomes pre-order with a visit column; `at` is a visit position."""
    header = {**BASE[0], "solver": {"bound": "own", "start": "made up"}}
    node = {"kind": "node", "partial": 1, "decision": "expand"}
    lines = [
        header,
        {"kind": "best", "id": None, "length": 30, "tour": [0, 2, 1, 3]},
        {**node, "id": 5, "parent": None, "city": 0},
        {**node, "id": 6, "parent": 5, "city": 1},
        {"kind": "best", "id": None, "length": 25, "tour": [0, 3, 1, 2]},  # found elsewhere
        {**node, "id": 7, "parent": 5, "city": 2, "bound": 12.5},
        {**node, "id": 8, "parent": 7, "city": 3},
        {**node, "id": 9, "parent": 6, "city": 3},
        {**node, "id": 10, "parent": 9, "city": 2, "decision": "tour_better", "length": 19},
        {"kind": "best", "id": 10, "length": 19, "tour": [0, 1, 3, 2]},
        {**node, "id": 11, "parent": 8, "city": 1, "decision": "tour", "length": 22},
        {"kind": "end", "status": "limit"},
    ]
    trail = read_jsonl(write_lines(tmp_path / "bf.jsonl", lines))
    # pre-order: 5, 6, 9, 10, 7, 8, 11 (children of the root in visit order: 6 then 7)
    assert trail.columns["city"].tolist() == [0, 1, 3, 2, 2, 3, 1]
    assert trail.columns["depth"].tolist() == [0, 1, 2, 3, 1, 2, 3]
    assert trail.columns[VISIT].tolist() == [0, 1, 4, 5, 2, 3, 6]
    assert trail.header.solver.visit_order and trail.header.solver.bound == "own"
    assert np.isnan(trail.columns[BOUND][0]) and trail.columns[BOUND][4] == 12.5
    assert trail.columns["partial"].dtype == np.float64  # a fractional bound was recorded
    assert [(b.at, b.node) for b in trail.best] == [(0, -1), (2, -1), (6, 3)]
    assert trail.end is not None and trail.end.status == "limit" and trail.end.length == 19
    import_jsonl(tmp_path / "bf.jsonl", tmp_path / "bf.trail")
    same_trails(trail, read_trail(tmp_path / "bf.trail"))


@st.composite
def searches(draw: st.DrawFn) -> tuple[int, list[list[int]], list[int]]:
    """A random search tree (paths by visit order) over n cities, and random distinct ids."""
    rng = draw(st.randoms(use_true_random=False))
    n = draw(st.integers(2, 6))
    paths: list[list[int]] = [[0]]
    for _ in range(draw(st.integers(0, 30))):
        parent = rng.choice(paths)
        free = [c for c in range(n) if c not in parent and [*parent, c] not in paths]
        if free:
            paths.append([*parent, rng.choice(free)])
    # a random visit order in which every parent comes before its children
    visited, waiting = [paths[0]], [p for p in paths[1:]]
    while waiting:
        ready = [p for p in waiting if p[:-1] in visited]
        pick = rng.choice(ready)
        waiting.remove(pick)
        visited.append(pick)
    ids = draw(
        st.lists(
            st.integers(-(2**62), 2**62), min_size=len(paths), max_size=len(paths), unique=True
        )
    )
    return n, visited, ids


def search_lines(n: int, paths: list[list[int]], ids: list[int], form: str) -> list[dict[str, Any]]:
    """JSON lines of a search, each node by parent id or by path ("mixed": alternately)."""
    header = {"kind": "header", "instance": {"matrix": np.ones((n, n), int).tolist()}}
    lines: list[dict[str, Any]] = [{**header, "solver": {"bound": "tree+links"}}]
    id_of = {tuple(p): i for p, i in zip(paths, ids, strict=True)}
    for k, (path, ident) in enumerate(zip(paths, ids, strict=True)):
        line: dict[str, Any] = {"kind": "node", "id": ident, "partial": len(path) - 1}
        if form == "path" or (form == "mixed" and k % 2):
            line["path"] = path
        else:
            line["parent"] = id_of.get(tuple(path[:-1])) if len(path) > 1 else None
            line["city"] = path[-1]
        complete = len(path) == n
        line["decision"] = "tour" if complete else "expand"
        if complete:
            line["length"] = n
        lines.append(line)
    return [*lines, {"kind": "end", "status": "complete"}]


@settings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(searches())
def test_renumbering_is_preorder_in_visit_order(
    tmp_path: Path, search: tuple[int, list[list[int]], list[int]]
) -> None:
    """Any tree in any parent-first visit order becomes pre-order, siblings in visit order."""
    n, paths, ids = search
    trail = read_jsonl(write_lines(tmp_path / "s.jsonl", search_lines(n, paths, ids, "parent")))
    count = len(paths)
    visit = trail.columns[VISIT] if VISIT in trail.columns else np.arange(count)
    assert sorted(visit.tolist()) == list(range(count))
    parents = implicit_parents(trail.columns["depth"])
    for j in range(count):
        path = paths[int(visit[j])]
        assert int(trail.columns["city"][j]) == path[-1]
        if parents[j] >= 0:
            assert paths[int(visit[parents[j]])] == path[:-1]
    for p in range(count):  # the children of every node come in visit order
        kids = [int(visit[j]) for j in range(count) if parents[j] == p]
        assert kids == sorted(kids)
    assert trail.header.solver.visit_order == (VISIT in trail.columns)
    assert (VISIT in trail.columns) == (visit.tolist() != list(range(count)))


@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(searches())
def test_path_form_equals_parent_form(
    tmp_path: Path, search: tuple[int, list[list[int]], list[int]]
) -> None:
    """Giving nodes by path (or mixing both forms) reads the same as giving parent ids."""
    n, paths, ids = search
    trails = [
        read_jsonl(write_lines(tmp_path / f"{form}.jsonl", search_lines(n, paths, ids, form)))
        for form in ("parent", "path", "mixed")
    ]
    same_trails(trails[0], trails[1])
    same_trails(trails[0], trails[2])


def test_dtypes_follow_the_recorded_numbers(tmp_path: Path) -> None:
    """Float metrics and fractional lengths give f8, big lengths i8, 255+ cities u2."""
    euclid = [
        {**BASE[0], "instance": {"coords": [[0, 0], [1, 0], [1, 1], [0, 1]], "metric": "euclidean"}}
    ]
    trail = read_jsonl(write_lines(tmp_path / "e.jsonl", euclid + BASE[1:]))
    assert trail.columns["partial"].dtype == np.float64
    big = copy.deepcopy(BASE)
    big[2]["tree"] = 2**40
    assert read_jsonl(write_lines(tmp_path / "b.jsonl", big)).columns["tree"].dtype == np.int64
    coords = [[i, 0] for i in range(300)]
    wide = [{**BASE[0], "instance": {"coords": coords, "metric": "EUC_2D"}}, BASE[1]]
    trail = read_jsonl(write_lines(tmp_path / "w.jsonl", wide))
    assert trail.columns["city"].dtype == np.uint16 and trail.columns["link_in_city"][0] == 1


def test_missing_end_is_a_crashed_run(tmp_path: Path) -> None:
    """Without an end line the trail has no end, says so, and imports without an end frame."""
    src = write_lines(tmp_path / "crash.jsonl", BASE[:-1])
    trail = import_jsonl(src, tmp_path / "crash.trail")
    assert trail.end is None and trail.notice is not None and "no end line" in trail.notice
    back = read_trail(tmp_path / "crash.trail")
    assert back.end is None and back.count == 5


def test_cut_file_keeps_every_complete_line(tmp_path: Path) -> None:
    """A file cut after the header (at line ends and in between) keeps every whole line."""
    data = base_file(tmp_path).read_bytes()
    header_end = data.index(b"\n") + 1
    ends, node_ends, pos = [], [], 0  # where each line's JSON text ends
    for raw in data.split(b"\n")[:-1]:
        ends.append(pos + len(raw))
        if b'"kind": "node"' in raw:
            node_ends.append(ends[-1])
        pos += len(raw) + 1
    sizes = {*range(header_end, len(data) - 1, 7), *(e + k for e in ends[1:-1] for k in (-1, 0, 1))}
    cut = tmp_path / "cut.jsonl"
    seen = 0
    for size in sorted(sizes):
        cut.write_bytes(data[:size])
        trail = read_jsonl(cut)
        assert trail.notice is not None
        assert trail.count == sum(end <= size for end in node_ends)
        seen = trail.count
    assert seen == 5
    cut.write_bytes(data[:-1])  # only the last newline missing: the end line is whole
    assert read_jsonl(cut).notice is None
    cut.write_bytes(data[: header_end - 5])
    with pytest.raises(InputError, match="no header"):
        read_jsonl(cut)


def test_open_trail_dispatches_on_the_suffix(tmp_path: Path) -> None:
    """open_trail reads .jsonl (any case) as JSON Lines and anything else as a trail."""
    src = base_file(tmp_path)
    upper = tmp_path / "BASE.JSONL"
    upper.write_bytes(src.read_bytes())
    import_jsonl(src, tmp_path / "base.trail")
    same_trails(open_trail(src), open_trail(upper))
    same_trails(open_trail(src), open_trail(tmp_path / "base.trail"))
    with pytest.raises(InputError):
        open_trail(tmp_path / "base.jsonl.trail")


def test_blank_lines_and_unknown_keys_are_ignored(tmp_path: Path) -> None:
    """Blank lines are skipped and keys outside the format are ignored."""
    lines: list[Any] = [BASE[0], "", "   "] + [{**line, "note": [1, {"x": 2}]} for line in BASE[1:]]
    spaced = read_jsonl(write_lines(tmp_path / "x.jsonl", lines))
    plain = read_jsonl(base_file(tmp_path))
    assert (spaced.columns.pop("source_line") == plain.columns.pop("source_line") + 2).all()
    same_trails(spaced, plain)


# -- malformed traces ------------------------------------------------------------------------


def _set(line: int, key: str, value: Any) -> Any:
    def mutate(lines: list[Any]) -> None:
        lines[line - 1][key] = value

    return mutate


def _drop(line: int, key: str) -> Any:
    def mutate(lines: list[Any]) -> None:
        del lines[line - 1][key]

    return mutate


def _replace(line: int, value: Any) -> Any:
    def mutate(lines: list[Any]) -> None:
        lines[line - 1] = value

    return mutate


def _header(**changes: Any) -> Any:
    def mutate(lines: list[Any]) -> None:
        for where, value in changes.items():
            part, key = where.split("__")
            if value is _DROP:
                del lines[0][part][key]
            else:
                lines[0][part][key] = value

    return mutate


def _path(line: int, path: Any) -> Any:
    def mutate(lines: list[Any]) -> None:
        del lines[line - 1]["parent"], lines[line - 1]["city"]
        lines[line - 1]["path"] = path

    return mutate


_DROP = object()
_BAD_MATRIX = [row[:] for row in MATRIX]
_BAD_MATRIX[0][1] = 7

MALFORMED = [
    ("no instance", _replace(1, {"kind": "header", "solver": {"bound": "x"}}), 1, "instance"),
    ("neither coords nor matrix", _header(instance__matrix=_DROP), 1, "instance"),
    (
        "unknown metric",
        _header(instance__matrix=_DROP, instance__coords=[[0, 0]] * 4, instance__metric="ROUND"),
        1,
        "instance.metric",
    ),
    ("metric with a matrix", _header(instance__metric="EUC_2D"), 1, "instance.metric"),
    (
        "bad coordinate",
        _header(instance__coords=[[0, 0], [1, "a"], [0, 1], [1, 1]]),
        1,
        "instance.coords",
    ),
    (
        "coordinate too far",
        _header(
            instance__matrix=_DROP, instance__coords=[[0, 2.0**60]] * 4, instance__metric="EUC_2D"
        ),
        1,
        "instance.coords",
    ),
    ("coords and matrix disagree", _header(instance__coords=[[0, 0]] * 3), 1, "instance.coords"),
    ("asymmetric matrix", _header(instance__matrix=_BAD_MATRIX), 1, "instance.matrix"),
    ("ragged matrix", _header(instance__matrix=[[0, 1], [1]]), 1, "instance.matrix"),
    ("matrix of text", _header(instance__matrix=[["0", "1"], ["1", "0"]]), 1, "instance.matrix"),
    (
        "huge matrix entry",
        _header(instance__matrix=[[0, 10**30], [10**30, 0]]),
        1,
        "instance.matrix",
    ),
    (
        "too many cities",
        _header(instance__matrix=[[]] * (MAX_TRAIL_CITIES + 1)),
        1,
        "instance.matrix",
    ),
    ("long name", _header(instance__name="x" * 201), 1, "instance.name"),
    ("no bound name", _header(solver__bound=_DROP), 1, "solver.bound"),
    ("negative cutoff", _header(solver__cutoff=-1), 1, "solver.cutoff"),
    ("no solver", _drop(1, "solver"), 1, "solver"),
    ("first line not a header", _replace(1, BASE[7]), 1, "kind"),
    ("second header", _replace(3, BASE[0]), 3, "kind"),
    ("unknown kind", _set(3, "kind", "leaf"), 3, "kind"),
    ("line after end", lambda lines: lines.append(BASE[7]), 9, "kind"),
    ("missing id", _drop(3, "id"), 3, "id"),
    ("id as text", _set(3, "id", "101"), 3, "id"),
    ("id beyond 64 bits", _set(3, "id", 2**64), 3, "id"),
    ("duplicate id", _set(4, "id", 101), 4, "id"),
    ("unknown parent", _set(4, "parent", 999), 4, "parent"),
    ("parent visited later", _set(3, "parent", 102), 3, "parent"),
    ("own parent", _set(3, "parent", 101), 3, "parent"),
    ("missing parent", _drop(3, "parent"), 3, "parent"),
    ("root with a parent", _set(2, "parent", 7), 2, "parent"),
    ("second root", _set(3, "parent", None), 3, "parent"),
    ("path too long", _set(7, "parent", 103), 7, "parent"),
    ("city out of range", _set(3, "city", 4), 3, "city"),
    ("city missing", _drop(3, "city"), 3, "city"),
    ("city already on the path", _set(4, "city", 1), 4, "city"),
    ("city 0 again", _set(4, "city", 0), 4, "city"),
    ("sibling adds the same city", _set(7, "city", 1), 7, "city"),
    ("unknown decision", _set(3, "decision", "explore"), 3, "decision"),
    ("decision as a code", _set(3, "decision", 0), 3, "decision"),
    ("missing decision", _drop(3, "decision"), 3, "decision"),
    ("missing partial", _drop(3, "partial"), 3, "partial"),
    ("null partial", _set(3, "partial", None), 3, "partial"),
    ("partial as text", _set(3, "partial", "2"), 3, "partial"),
    ("partial too large", _set(3, "partial", 1e300), 3, "partial"),
    ("tree as a boolean", _set(3, "tree", True), 3, "tree"),
    ("short link", _set(3, "link_in", [1]), 3, "link_in"),
    ("link city out of range", _set(3, "link_out", [9, 3]), 3, "link_out"),
    ("link length as text", _set(3, "link_out", [2, "3"]), 3, "link_out"),
    ("length before the path is complete", _set(3, "length", 12), 3, "length"),
    ("tree at a complete path", _set(5, "tree", 0), 5, "tree"),
    ("link_out at a complete path", _set(5, "link_out", [0, 9]), 5, "link_out"),
    ("unknown path prefix", _path(5, [0, 2, 3, 1]), 5, "path"),
    ("city twice on a path", _path(7, [0, 1, 1]), 7, "path"),
    ("path not from city 0", _path(7, [1, 3]), 7, "path"),
    ("path of text", _path(7, "0 3"), 7, "path"),
    ("root path not [0]", _path(2, [0, 1]), 2, "path"),
    ("path prefix visited later", _path(4, [0, 3, 1]), 4, "path"),
    ("sibling with the same path", _path(7, [0, 1]), 7, "path"),
    ("path and parent", _set(7, "path", [0, 3]), 7, "path"),
    ("best without id", _drop(6, "id"), 6, "id"),
    ("best of an unknown node", _set(6, "id", 55), 6, "id"),
    ("best of a later node", _set(6, "id", 104), 6, "id"),
    ("best without length", _drop(6, "length"), 6, "length"),
    ("best tour too short", _set(6, "tour", [0, 1, 3]), 6, "tour"),
    ("best tour not from 0", _set(6, "tour", [1, 3, 2, 0]), 6, "tour"),
    ("best tour repeats", _set(6, "tour", [0, 1, 1, 2]), 6, "tour"),
    ("unknown status", _set(8, "status", "done"), 8, "status"),
    ("not JSON", _replace(3, "{not json"), 3, None),
    ("NaN", _replace(3, '{"kind": "node", "partial": NaN}'), 3, None),
    ("a list, not an object", _replace(3, [1, 2]), 3, None),
    ("deep nesting", _replace(3, "[" * 100_000 + "]" * 100_000), 3, None),
    ("not UTF-8", _replace(3, b'{"kind": "\xff"}'), 3, None),
]


@pytest.mark.parametrize(
    ("mutate", "line", "key"), [m[1:] for m in MALFORMED], ids=[m[0] for m in MALFORMED]
)
def test_malformed_line_names_line_and_field(
    tmp_path: Path, mutate: Any, line: int, key: str | None
) -> None:
    """Each malformed variant raises InputError naming its line and field."""
    lines = copy.deepcopy(BASE)
    mutate(lines)
    path = write_lines(tmp_path / "bad.jsonl", lines)
    with pytest.raises(InputError) as info:
        read_jsonl(path)
    assert info.value.line == line, info.value
    assert info.value.path == str(path)
    if key is not None:
        assert info.value.message.startswith(f"{key!r}:"), info.value


def test_node_count_is_bounded(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """More nodes than a trail holds are refused at the first node too many."""
    monkeypatch.setattr(jsonl_import, "MAX_TRAIL_NODES", 2)
    with pytest.raises(InputError, match="more than 2 nodes") as info:
        read_jsonl(base_file(tmp_path))
    assert info.value.line == 4


def test_line_length_is_bounded(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A line longer than the line limit is refused before it is decoded."""
    lines = copy.deepcopy(BASE)
    lines[2]["note"] = "x" * 300
    monkeypatch.setattr(jsonl_import, "MAX_LINE_BYTES", 250)
    with pytest.raises(InputError, match="longer than 250 bytes") as info:
        read_jsonl(write_lines(tmp_path / "long.jsonl", lines))
    assert info.value.line == 3


def test_unreadable_and_empty_files(tmp_path: Path) -> None:
    """A missing file and an empty one are InputErrors, not crashes."""
    with pytest.raises(InputError, match="cannot read"):
        read_jsonl(tmp_path / "absent.jsonl")
    (tmp_path / "empty.jsonl").write_bytes(b"")
    with pytest.raises(InputError, match="no header"):
        read_jsonl(tmp_path / "empty.jsonl")


_json_values = st.recursive(
    st.none()
    | st.booleans()
    | st.integers()
    | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=4),
    lambda inner: (
        st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=3), inner, max_size=3)
    ),
    max_leaves=6,
)


@settings(
    max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(st.integers(0, len(BASE) - 1), st.data())
def test_any_damaged_value_is_an_input_error_or_reads(
    tmp_path: Path, index: int, data: st.DataObject
) -> None:
    """Replacing or dropping any value of any line reads, or raises InputError, never worse."""
    lines = copy.deepcopy(BASE)
    key = data.draw(st.sampled_from(sorted(lines[index])))
    if data.draw(st.booleans()):
        del lines[index][key]
    else:
        lines[index][key] = data.draw(_json_values)
    path = write_lines(tmp_path / "fuzz.jsonl", lines)
    try:
        trail = read_jsonl(path)
    except InputError as exc:
        assert exc.line is not None and 1 <= exc.line <= len(lines)
    else:
        assert trail.count <= 5


# -- the examples in TRAIL_FORMAT.md ---------------------------------------------------------


def spec_examples(kind: str) -> list[list[str]]:
    """The lines of each example block marked `<!-- example: kind -->` in the spec."""
    text = SPEC.read_text(encoding="utf-8")
    blocks = re.findall(rf"<!-- example: {kind} -->\n```json\n(.*?)```", text, flags=re.DOTALL)
    return [block.strip().splitlines() for block in blocks]


def test_spec_examples_read_and_agree(tmp_path: Path) -> None:
    """The spec's MessagePack example reads as a trail equal to its JSON Lines example."""
    (frames,) = spec_examples("msgpack")
    packed = b"".join(msgpack.packb(json.loads(line), use_bin_type=True) for line in frames)
    (tmp_path / "example.trail").write_bytes(packed)
    from_frames = read_trail(tmp_path / "example.trail")
    assert from_frames.notice is None and from_frames.count == 8
    depth_first, _ = spec_examples("jsonl")
    from_lines = read_jsonl(write_lines(tmp_path / "example.jsonl", depth_first))
    assert from_lines.notice is None
    codes = from_lines.columns["decision"].tolist()
    assert sorted(set(codes)) == [int(d) for d in Decision]  # every decision appears
    for name, column in from_frames.columns.items():
        np.testing.assert_array_equal(column, from_lines.columns[name], err_msg=name)
    assert from_frames.best == from_lines.best
    assert from_frames.end is not None and from_lines.end is not None
    assert dict(from_frames.end.decisions) == dict(from_lines.end.decisions)
    # the nodes frame the spec describes reads the same as its node frames
    header = msgpack.packb(json.loads(frames[0]), use_bin_type=True)
    block: dict[str, Any] = {
        "kind": "nodes",
        "first": 0,
        "count": 8,
        "codec": "none",
        "columns": {k: v.tobytes() for k, v in from_frames.columns.items()},
    }
    assert block["columns"]["city"] == bytes.fromhex("0001020303020302")
    (tmp_path / "block.trail").write_bytes(header + msgpack.packb(block, use_bin_type=True))
    np.testing.assert_array_equal(
        read_trail(tmp_path / "block.trail").columns["tree"], from_frames.columns["tree"]
    )


def test_spec_best_first_example_is_as_described(tmp_path: Path) -> None:
    """The spec's best-first example has the visit column and `at` the text states."""
    _, best_first = spec_examples("jsonl")
    trail = read_jsonl(write_lines(tmp_path / "bf.jsonl", best_first))
    assert trail.count == 12
    assert trail.columns[VISIT].tolist() == [0, 1, 2, 7, 3, 10, 4, 5, 8, 6, 11, 9]
    assert [(b.at, b.node, b.length) for b in trail.best] == [(8, 3, 14.0)]
    assert trail.columns["decision"][8] == DECISION_BY_NAME["tour"]  # id 90, pre-order 8
