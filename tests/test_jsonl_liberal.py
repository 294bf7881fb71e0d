"""JSON Lines from other people's solvers: liberal where the meaning is clear, clear messages
where it is not, the typed fast path agreeing with the field-by-field checks, and the
Recorder's own bound."""

from __future__ import annotations

import copy
import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from tests.foreign_traces import jsonl_lines, solve_to_trail
from tests.reference import instance_path
from tracer.analysis import TreeIndex, recheck
from tracer.base import InputError, Trail
from tracer.formats.load import load_instance
from tracer.search.driver import SearchSettings
from tracer.trails import jsonl
from tracer.trails.jsonl import read_jsonl
from tracer.trails.recorder import Recorder

MATRIX = [[0, 2, 9, 4], [2, 0, 6, 3], [9, 6, 0, 5], [4, 3, 5, 0]]
HEADER: dict[str, Any] = {
    "kind": "header",
    "instance": {"name": "square", "matrix": MATRIX},
    "solver": {"bound": "tree+links", "cutoff": 0, "start": None},
}
#: Root, then the path 0 1 3 2 (a complete path: its tour is 2 + 3 + 5 + 9 = 19).
NODES: list[dict[str, Any]] = [
    {"kind": "node", "id": 1, "parent": None, "city": 0, "partial": 0, "tree": 8,
     "link_in": [1, 2], "link_out": [1, 2], "decision": "expand"},
    {"kind": "node", "id": 2, "parent": 1, "city": 1, "partial": 2, "tree": 5,
     "link_in": [3, 3], "link_out": [3, 4], "decision": "expand"},
    {"kind": "node", "id": 3, "parent": 2, "city": 3, "partial": 5, "tree": 0,
     "link_in": [2, 5], "link_out": [2, 9], "decision": "expand"},
    {"kind": "node", "id": 4, "parent": 3, "city": 2, "partial": 10, "length": 19,
     "decision": "tour_better"},
    {"kind": "best", "id": 4, "length": 19, "tour": [0, 1, 3, 2]},
]  # fmt: skip


def write(path: Path, lines: list[Any]) -> Path:
    """Lines as JSON (dicts) or verbatim (str)."""
    path.write_text("".join((x if isinstance(x, str) else json.dumps(x)) + "\n" for x in lines))
    return path


def trace(tmp_path: Path, **changes: Any) -> list[dict[str, Any]]:
    """The small trace, with `header__key=value` or `node3__key=value` changes."""
    lines = [copy.deepcopy(HEADER), *copy.deepcopy(NODES), {"kind": "end", "status": "complete"}]
    for spec, value in changes.items():
        where, _, key = spec.partition("__")
        target = lines[0] if where == "header" else lines[int(where.removeprefix("node")) + 1]
        if "." in key:
            outer, inner = key.split(".")
            target = target[outer]
            key = inner
        if value is None:
            target.pop(key, None)
        else:
            target[key] = value
    return lines


def checked(trail: Trail) -> int:
    """The number of wrong records the re-check finds."""
    return recheck(trail, TreeIndex(trail.columns, trail.best)).wrong


def test_absent_length_at_a_complete_path_is_computed(tmp_path: Path) -> None:
    """A complete path without `length` gets partial + closing edge; the trace checks."""
    trail = read_jsonl(write(tmp_path / "a.jsonl", trace(tmp_path, node3__length=None)))
    assert trail.columns["link_out"][3] == MATRIX[2][0]  # the closing edge 2 -> 0
    assert int(trail.columns["partial"][3] + trail.columns["link_out"][3]) == 19
    assert checked(trail) == 0


def test_given_length_is_still_checked(tmp_path: Path) -> None:
    """A wrong `length` at a complete path is still reported by the re-check."""
    trail = read_jsonl(write(tmp_path / "w.jsonl", trace(tmp_path, node3__length=18)))
    assert checked(trail) >= 1


def test_complete_path_pruned_by_the_solver_imports(tmp_path: Path) -> None:
    """A complete path the solver pruned by its own bound imports (the re-check judges it)."""
    lines = trace(tmp_path, node3__decision="prune", node3__length=None)
    lines.pop(5)  # no best line: the pruned tour never became the incumbent
    trail = read_jsonl(write(tmp_path / "p.jsonl", lines))
    assert trail.count == 4 and int(trail.columns["decision"][3]) == 1


@pytest.mark.parametrize(
    ("key", "value", "kept"),
    [
        ("header__solver.start", 3, "3"),
        ("header__solver.start", True, "true"),
        ("header__solver.start", 2.5, "2.5"),
        ("header__instance.name", 17, "17"),
        ("header__solver.engine", "my-solver 2.1", "jsonl: my-solver 2.1"),
    ],
)
def test_informational_fields_take_any_scalar(
    tmp_path: Path, key: str, value: Any, kept: str
) -> None:
    """solver.start, solver.engine and the instance name accept any scalar, kept as text."""
    trail = read_jsonl(write(tmp_path / "i.jsonl", trace(tmp_path, **{key: value})))
    got = {
        "header__solver.start": trail.header.solver.start,
        "header__instance.name": trail.header.instance.name,
        "header__solver.engine": trail.header.solver.engine,
    }[key]
    assert got == kept


def test_informational_field_that_is_not_a_scalar_is_refused(tmp_path: Path) -> None:
    """A list where text is expected is still refused, naming the field."""
    path = write(tmp_path / "l.jsonl", trace(tmp_path, **{"header__solver.start": [1]}))
    with pytest.raises(InputError, match=r"'solver\.start'") as caught:
        read_jsonl(path)
    assert caught.value.line == 1


def test_missing_solver_says_missing(tmp_path: Path) -> None:
    """A header without `solver` says it is missing, not that it found null."""
    path = write(tmp_path / "s.jsonl", trace(tmp_path, header__solver=None))
    with pytest.raises(InputError, match=r"'solver': is missing") as caught:
        read_jsonl(path)
    assert "null" not in str(caught.value)


def test_link_written_length_first_says_the_order(tmp_path: Path) -> None:
    """A link written [length, city] names the city out of range and the [city, length] order."""
    path = write(tmp_path / "k.jsonl", trace(tmp_path, node1__link_in=[9, 3]))
    with pytest.raises(InputError) as caught:
        read_jsonl(path)
    message = str(caught.value)
    assert caught.value.line == 3 and "'link_in'" in message
    assert "out of range 0..3" in message and "[city, length]" in message


def test_unknown_keys_are_ignored_on_both_paths(tmp_path: Path) -> None:
    """Keys the format does not define are ignored."""
    lines = trace(tmp_path)
    for line in lines:
        line["note"] = {"anything": [1, 2]}
    assert read_jsonl(write(tmp_path / "u.jsonl", lines)).count == 4


def test_only_the_solvers_own_bound_gets_structure_and_decision_checks(tmp_path: Path) -> None:
    """Nodes with only `bound` (a bound of the solver's own): the trace checks, a bad
    decision is found."""
    lines = trace(tmp_path, **{"header__solver.bound": "my-bound"})
    bounds = [12, 13, 15]
    for line, bound in zip(lines[1:4], bounds, strict=True):
        for key in ("tree", "link_in", "link_out"):
            line.pop(key)
        line["bound"] = bound
    trail = read_jsonl(write(tmp_path / "b.jsonl", lines))
    assert trail.header.solver.bound == "my-bound"
    assert trail.columns["bound"][:3].tolist() == bounds
    report = recheck(trail, TreeIndex(trail.columns, trail.best))
    assert "structure" in report.kinds_checked and "decision" in report.kinds_checked
    assert "tree" not in report.kinds_checked
    assert report.wrong == 0
    lines[4]["decision"] = "tour"  # it improved the infinite incumbent: tour_better is right
    lines.pop(5)
    wrong = read_jsonl(write(tmp_path / "bw.jsonl", lines))
    assert checked(wrong) >= 1


def test_typed_path_and_field_checks_read_the_same(tmp_path: Path, monkeypatch) -> None:
    """A real search's trace (TSPLIB gr17), with blank lines, reads the same on both paths."""
    instance = load_instance(instance_path("gr17"))
    source = solve_to_trail(instance, tmp_path / "g.trail", SearchSettings(max_nodes=20_000))
    lines = list(jsonl_lines(source))
    lines.insert(7, "")
    lines.insert(17_000, "   ")
    path = write(tmp_path / "g.jsonl", lines)
    fast = read_jsonl(path)
    monkeypatch.setattr(jsonl, "node_batch", lambda *args: None)  # every batch line by line
    slow = read_jsonl(path)
    for name, column in source.columns.items():
        assert np.array_equal(fast.columns[name], column), name
        assert np.array_equal(slow.columns[name], column), name
    assert fast.best == slow.best == source.best


def test_typed_path_reports_the_same_line_and_field(tmp_path: Path) -> None:
    """A bad value deep in a long trace is named by line and field, as line by line."""
    instance = load_instance(instance_path("gr17"))
    source = solve_to_trail(instance, tmp_path / "g.trail", SearchSettings(max_nodes=20_000))
    lines = list(jsonl_lines(source))
    bad = json.loads(lines[18_000])
    bad["city"] = 17
    lines[18_000] = json.dumps(bad)
    with pytest.raises(InputError) as caught:
        read_jsonl(write(tmp_path / "bad.jsonl", lines))
    assert caught.value.line == 18_001 and "'city'" in str(caught.value)


def test_recorder_accepts_the_solvers_own_bound(tmp_path: Path) -> None:
    """Recorder.node(bound=...) keeps the bound column; a trace of its own bound checks."""
    with Recorder(tmp_path / "r.trail", MATRIX, bound="my-bound") as rec:
        root = rec.node(None, 0, 0, decision="expand", bound=12)
        one = rec.node(root, 1, 2, decision="expand", bound=13)
        three = rec.node(one, 3, 5, decision="expand", bound=15)
        last = rec.node(three, 2, 10, decision="tour_better")
        rec.best(19, [0, 1, 3, 2], node=last)
    trail = rec.close()
    assert trail.columns["bound"][:3].tolist() == [12, 13, 15]
    assert int(trail.columns["partial"][3] + trail.columns["link_out"][3]) == 19
    assert checked(trail) == 0


def test_spec_recorder_example_runs_and_checks(tmp_path: Path, monkeypatch, capsys) -> None:
    """The Recorder example in TRAIL_FORMAT.md runs, and its trail checks with its own bound."""
    import re

    spec = (Path(__file__).resolve().parents[1] / "tracer" / "TRAIL_FORMAT.md").read_text()
    blocks = re.findall(r"<!-- example: recorder -->\n```python\n(.*?)```", spec, re.DOTALL)
    assert len(blocks) == 1
    monkeypatch.chdir(tmp_path)
    namespace: dict[str, Any] = {"__name__": "recorder_example"}
    exec(compile(blocks[0], "TRAIL_FORMAT.md", "exec"), namespace)  # our own documentation
    trail = namespace["trail"]
    assert (tmp_path / "rectangle.trail").exists() and trail.end.status == "complete"
    assert trail.best[-1].length == 14  # the rectangle's perimeter, 3 + 4 + 3 + 4
    assert trail.header.solver.bound == "partial+return" and "bound" in trail.columns
    assert checked(trail) == 0
    assert "best tour 14" in capsys.readouterr().out


def test_findings_name_the_solvers_id_and_line(tmp_path: Path, capsys) -> None:
    """check on an imported trace names a wrong node by the solver's own id and its line."""
    from tracer.cli import main

    lines = trace(tmp_path)
    ids = [500, 493, 486, 479]  # ids the solver chose, nothing like pre-order
    for i, line in enumerate(lines[1:5]):
        line["id"] = ids[i]
        line["parent"] = None if i == 0 else ids[i - 1]
    lines[5]["id"] = ids[3]
    lines[3]["partial"] = 6  # wrong: 2 + 3 = 5 (line 4 of the file, the solver's node 486)
    path = write(tmp_path / "f.jsonl", lines)
    assert main(["check", str(path), "--json"]) == 1
    got = json.loads(capsys.readouterr().out)
    first = got["first"][0]
    assert first["id"] == 2 and first["source_id"] == 486 and first["source_line"] == 4
    assert main(["check", str(path)]) == 1
    text = capsys.readouterr().out
    assert "486" in text and "line" in text


def test_follower_counts_a_blank_line_read_alone(tmp_path: Path) -> None:
    """A poll that reads only a newline still counts that line: a later error names the
    line as an editor numbers it."""
    path = tmp_path / "live.jsonl"
    header = {
        "kind": "header",
        "instance": {"coords": [[0, 0], [1, 0], [1, 1]], "metric": "EUC_2D"},
        "solver": {"bound": "tree+links"},
    }
    path.write_text(json.dumps(header) + "\n")
    follower = jsonl.JsonlFollower(path)
    try:
        follower.poll()
        with path.open("a") as f:
            f.write("\n")
        follower.poll()
        with path.open("a") as f:
            f.write("{not json\n")
        with pytest.raises(InputError) as caught:
            follower.poll()
        assert caught.value.line == 3
    finally:
        follower.close()


def _followed_lines(tmp_path: Path, kind: str) -> list[str]:
    """A trace of a real search as lines: in pre-order, with its layout widening late, or
    breadth-first (every parent still visited before its children)."""
    trail = solve_to_trail(
        load_instance(instance_path("burma14")),
        tmp_path / "source.trail",
        SearchSettings(cutoff=2, max_nodes=3000),
    )
    lines = list(jsonl_lines(trail))
    head, body, end = lines[0], lines[1:-1], lines[-1]
    if kind == "widening":  # a fractional length, then a first bound, well into the run
        items = [json.loads(line) for line in body]
        nodes = [x for x in items if x["kind"] == "node" and "tree" in x]
        nodes[len(nodes) // 3]["partial"] += 0.5
        nodes[2 * len(nodes) // 3]["bound"] = nodes[2 * len(nodes) // 3]["partial"] + 1
        body = [json.dumps(x) for x in items]
    if kind == "breadth-first":
        items = [json.loads(line) for line in body]
        depth = {None: -1}
        for x in items:
            if x["kind"] == "node":
                depth[x["id"]] = depth[x["parent"]] + 1
        nodes = sorted((x for x in items if x["kind"] == "node"), key=lambda x: depth[x["id"]])
        body = [json.dumps(x) for x in nodes + [x for x in items if x["kind"] == "best"]]
    return [head, *body, end]


def _same_trail(a: Trail, b: Trail) -> None:
    """The two trails hold the same header, columns (dtypes too), updates, end and notice."""
    assert (a.header.solver, a.header.columns) == (b.header.solver, b.header.columns)
    assert np.array_equal(a.header.instance.matrix, b.header.instance.matrix)
    assert a.columns.keys() == b.columns.keys()
    for name in a.columns:
        assert a.columns[name].dtype == b.columns[name].dtype, name
        assert np.array_equal(a.columns[name], b.columns[name], equal_nan=True), name
    assert (a.best, a.end, a.notice) == (b.best, b.end, b.notice)


@pytest.mark.parametrize("kind", ["pre-order", "widening", "breadth-first"])
def test_follower_polled_many_times_reads_as_one_read(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, kind: str
) -> None:
    """A trace polled as it grows (cut anywhere, mid-line too) gives at every poll the trail
    one read of its whole lines gives; a pre-order trace is rebuilt only when its column
    layout changes, and otherwise only grows by the new rows."""
    data = "".join(line + "\n" for line in _followed_lines(tmp_path, kind)).encode()
    builds = []
    build = jsonl._build
    monkeypatch.setattr(jsonl, "_build", lambda parsed: builds.append(1) or build(parsed))
    live, whole = tmp_path / "live.jsonl", tmp_path / "whole.jsonl"
    live.write_bytes(b"")
    cuts = [*sorted(np.random.default_rng(7).integers(1, len(data), 60).tolist()), len(data)]
    follower = jsonl.JsonlFollower(live)
    layouts: list[object] = [None]
    count = 0
    try:
        for cut in cuts:
            live.write_bytes(data[:cut])
            first, new, _ = follower.poll()
            got = follower.trail
            if got is None:
                continue
            assert first in (0, count) and first + new == got.count, cut
            count = got.count
            if got.header.columns != layouts[-1]:
                layouts.append(got.header.columns)
            whole.write_bytes(data[: data.rfind(b"\n", 0, cut) + 1])
            with monkeypatch.context() as plain:
                plain.setattr(jsonl, "_build", build)
                _same_trail(got, read_jsonl(whole))
    finally:
        follower.close()
    assert got is not None and got.end is not None  # the last poll read the whole trace
    if kind != "breadth-first":
        assert len(builds) == len(layouts) - 1, (len(builds), len(layouts))
    if kind == "widening":
        assert len(layouts) - 1 >= 3  # the first layout, then the float lengths, the bound
    assert ("visit" in got.columns) == (kind == "breadth-first")
