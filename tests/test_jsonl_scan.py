"""The compiled lane of the JSON Lines importer (`tracer/trails/_jsonl_scan.py`) against
msgspec: it may leave any line to the typed path, but a line it reads must be one the
typed path (msgspec's decoder plus its checks) accepts, with the same values bit for bit;
and a whole file reads the same, or fails with the same message, with or without it.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import msgspec
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.foreign_traces import jsonl_lines, solve_to_trail
from tracer.base import InputError
from tracer.formats import load_instance
from tracer.search.driver import SearchSettings
from tracer.trails import jsonl
from tracer.trails._jsonl_scan import DONE, FLOAT_ROWS, OTHER_KIND, UNSUPPORTED, scan_nodes
from tracer.trails._jsonl_typed import NodeLine, decode_line, node_batch

ROOT = Path(__file__).resolve().parents[1]
N = 6
KEYS = ("partial", "tree", "bound", "length", "link_in", "link_out")
EXAMPLES = [300, pytest.param(5000, marks=pytest.mark.thorough, id="thorough")]


def scan_one(line: bytes, n: int = N, row: int = 1) -> tuple[int, tuple[Any, ...] | None]:
    """Run the lane on one line as row `row`: (why it stopped, the values read or None)."""
    buf = np.frombuffer(line, dtype=np.uint8)
    size = row + 1
    out = (
        np.zeros(size, np.int64),
        np.zeros(size, np.int64),
        np.zeros(size, np.int32),
        np.zeros(size, np.uint8),
        np.zeros((FLOAT_ROWS, size), np.float64),
        np.zeros((2, size), np.int32),
        np.zeros(size, np.int64),
    )
    _, rows, lines, why = scan_nodes(buf, 0, n, 1 << 20, 1 << 20, 7, 0, row, *out)
    if rows == row:
        return why, None
    assert (rows, lines, why) == (row + 1, 1, DONE)
    ident, parent, city, decision, lengths, link_city, number = (a[..., row] for a in out)
    assert number == 7
    return why, (
        int(ident),
        int(parent),
        int(city),
        int(decision),
        tuple(float(v) for v in lengths),
        (int(link_city[0]), int(link_city[1])),
    )


def typed_one(line: bytes, n: int = N) -> tuple[Any, ...] | None:
    """The typed path's values for one node line, or None where it leaves the line."""
    try:
        node = decode_line(line)
    except (msgspec.DecodeError, msgspec.ValidationError):
        return None
    if type(node) is not NodeLine:
        return None
    batch = node_batch([node], n, 1)
    if batch is None:
        return None
    return (
        int(batch.ident[0]),
        int(batch.parent_id[0]),
        int(batch.city[0]),
        int(batch.decision[0]),
        tuple(float(batch.lengths[k][0]) for k in KEYS),
        (int(batch.link_city["link_in"][0]), int(batch.link_city["link_out"][0])),
    )


def same_values(a: tuple[Any, ...], b: tuple[Any, ...]) -> bool:
    """Equal tuples, floats compared bit for bit (NaN equal to NaN, -0.0 apart from 0.0)."""
    *head_a, floats_a, links_a = a
    *head_b, floats_b, links_b = b
    bits = [np.float64(x).tobytes() for x in floats_a] == [
        np.float64(x).tobytes() for x in floats_b
    ]
    return head_a == head_b and links_a == links_b and bits


# -- lines drawn to sit near every edge of the lane's subset ---------------------------------

digits = st.text("0123456789", min_size=1, max_size=20)
#: Numbers a solver prints: whole numbers and short decimals (the lane reads these).
plain_numbers = st.one_of(
    st.integers(-(10**6), 10**15).map(str),
    st.builds(lambda x, k: f"{x:.{k}f}", st.floats(-1e6, 1e9), st.integers(0, 9)),
    st.builds(lambda m, e: f"{m}e{e}", st.integers(-999, 999), st.integers(-25, 25)),
)
#: Numbers at and past every edge of the lane's subset, valid JSON or not.
edge_numbers = st.one_of(
    st.integers(-(10**20), 10**20).map(str),
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
    st.builds(
        lambda s, i, f, e: f"{s}{i}{'.' + f if f else ''}{e}",
        st.sampled_from(["", "-", "+"]),
        digits,
        st.one_of(st.just(""), digits),
        st.sampled_from(["", "e5", "E-3", "e+22", "e23", "e-22", "e-23", "e", "e400", "E+0"]),
    ),
    st.sampled_from(["0", "-0", "-0.0", "0.0", "00", "01", "1.", ".5", "1e5", "true", "null"]),
    st.sampled_from(['"7"', "[]", "{}", "1_000", "NaN", "Infinity", "9007199254740993"]),
)
spaces = st.sampled_from(["", " ", "  ", "\t", "\r", " \r"])


def mostly(draw: st.DrawFn, good: st.SearchStrategy[str], bad: st.SearchStrategy[str]) -> str:
    """A value from `good` eleven times in twelve, else one from `bad`."""
    return draw(bad if draw(st.integers(0, 11)) == 0 else good)


@st.composite
def node_lines(draw: st.DrawFn) -> bytes:
    """A node line, mostly valid, with edge and invalid values, keys and spacing mixed in."""
    numbers = st.one_of(plain_numbers, edge_numbers)
    fields: dict[str, str] = {
        "kind": mostly(
            draw, st.just('"node"'), st.sampled_from(['"best"', '"nod"', "null", '"n\\u006fde"'])
        ),
        "id": mostly(
            draw, st.integers(-(2**62), 2**62).map(str), st.one_of(edge_numbers, st.just("2e3"))
        ),
        "parent": mostly(draw, st.integers(-5, 2**62).map(str), edge_numbers),
        "city": mostly(draw, st.integers(0, N - 1).map(str), st.integers(-2, N + 1).map(str)),
        "partial": mostly(draw, plain_numbers, edge_numbers),
        "decision": mostly(
            draw,
            st.sampled_from(['"expand"', '"prune"', '"skip"', '"tour"', '"tour_better"']),
            st.sampled_from(['"Expand"', '"tours"', "1", '"ex\\u0070and"', "null"]),
        ),
    }
    for key in ("tree", "bound", "length"):
        if draw(st.booleans()):
            fields[key] = mostly(draw, plain_numbers, st.one_of(edge_numbers, st.just("null")))
    for key in ("link_in", "link_out"):
        if draw(st.booleans()):
            fields[key] = mostly(
                draw,
                st.builds(
                    lambda c, s1, x, s2: f"[{s1}{c}{s2},{s1}{x}{s2}]",
                    st.integers(0, N - 1).map(str),
                    spaces,
                    plain_numbers,
                    spaces,
                ),
                st.one_of(
                    st.just("null"),
                    st.builds(lambda c, x: f"[{c},{x}]", numbers, numbers),
                    st.sampled_from(["[1]", "[1, 2, 3]", "[]", '"1,2"']),
                ),
            )
    extra = draw(
        st.dictionaries(
            st.sampled_from(["note", "depth", "t", "é", "path", "Kind", "id"]),
            st.one_of(numbers, st.sampled_from(['"x"', '"a\\"b"', "true", "false", "[1]", "{}"])),
            max_size=2,
        )
    )
    if draw(st.integers(0, 7)) == 0:  # a missing required field
        del fields[draw(st.sampled_from(sorted(fields)))]
    items = draw(st.permutations([*fields.items(), *extra.items()]))
    sep = draw(spaces)
    body = ",".join(f'{sep}"{k}"{draw(spaces)}:{draw(spaces)}{v}' for k, v in items)
    text = draw(spaces) + "{" + body + draw(spaces) + "}" + draw(spaces)
    if draw(st.integers(0, 9)) == 0:  # now and then a damaged byte
        at = draw(st.integers(0, max(len(text) - 1, 0)))
        text = (
            text[:at]
            + draw(st.sampled_from(["", "}", ",", '"', "\\", "x", "\x00"]))
            + text[at + 1 :]
        )
    return text.encode()


@pytest.mark.parametrize("examples", EXAMPLES)
def test_lane_reads_only_what_msgspec_reads(examples: int) -> None:
    """Every line the lane reads, msgspec's typed path reads too, to the same values."""

    @settings(
        max_examples=examples, deadline=None, database=None, suppress_health_check=list(HealthCheck)
    )
    @given(node_lines())
    def check(line: bytes) -> None:
        why, scanned = scan_one(line)
        if scanned is None:
            assert why in (OTHER_KIND, UNSUPPORTED)
            return
        typed = typed_one(line)
        assert typed is not None, line
        assert same_values(scanned, typed), (line, scanned, typed)

    check()


def test_lane_reads_the_common_shapes() -> None:
    """The lines a solver typically prints are read by the lane itself (it is not dead code),
    and values of every kind it reads match the decoder's (source: msgspec)."""
    lines = [
        b'{"kind": "node", "id": 5, "parent": 4, "city": 3, "partial": 70, "decision": "expand",'
        b' "tree": 1354, "link_in": [3, 27], "link_out": [5, 80]}',
        b'{"kind":"node","id":-9,"parent":0,"city":0,"partial":12.25,"decision":"prune",'
        b'"bound":1.5e3,"tree":null,"link_in":null,"note":"x","t":0.001}',
        b'{"id":7,"decision":"tour_better","partial":1e-7,"parent":6,"city":5,"length":19,'
        b'"kind":"node"}\r',
        b'  {"kind":"node","id":8,"parent":7,"city":2,"partial":0.1,"decision":"skip"}  ',
    ]
    for line in lines:
        _, scanned = scan_one(line)
        assert scanned is not None, line
        typed = typed_one(line)
        assert typed is not None and same_values(scanned, typed), line
    assert math.isclose(scan_one(lines[1])[1][4][2], 1500.0)  # type: ignore[index]


def test_lane_leaves_the_root_and_other_kinds() -> None:
    """The root (checked only by the typed path) and best or end lines are left alone."""
    root = b'{"kind":"node","id":1,"parent":null,"city":0,"partial":0,"decision":"expand"}'
    assert scan_one(root, row=0) == (UNSUPPORTED, None)
    child = b'{"kind":"node","id":1,"parent":0,"city":0,"partial":0,"decision":"expand"}'
    assert scan_one(child, row=0) == (UNSUPPORTED, None)  # a root must have parent null
    assert scan_one(b'{"kind": "best", "id": null}')[0] == OTHER_KIND
    assert scan_one(b"   ")[0] == OTHER_KIND  # a blank line


# -- whole files: the same trail, or the same error, with and without the lane -------------


def without_lane(buf: Any, pos: int, *args: Any) -> tuple[int, int, int, int]:
    """A stand-in for the lane that reads nothing, so every line takes the typed path."""
    return pos, args[5], 0, UNSUPPORTED


def read_both(path: Path, monkeypatch: pytest.MonkeyPatch) -> tuple[Any, Any]:
    """The file read with the lane and without it: each a Trail or the error's text."""
    results = []
    for lane in (None, without_lane):
        with monkeypatch.context() as patch:
            if lane is not None:
                patch.setattr(jsonl, "scan_nodes", lane)
            try:
                results.append(jsonl.read_jsonl(path))
            except InputError as exc:
                results.append(str(exc))
    return results[0], results[1]


def same(a: Any, b: Any) -> None:
    """Two read results are the same trail or the same error."""
    if isinstance(a, str) or isinstance(b, str):
        assert a == b
        return
    assert list(a.columns) == list(b.columns)
    for name in a.columns:
        assert a.columns[name].dtype == b.columns[name].dtype, name
        assert a.columns[name].tobytes() == b.columns[name].tobytes(), name
    assert a.best == b.best and a.end == b.end and a.notice == b.notice
    assert a.header.solver == b.header.solver and a.header.columns == b.header.columns


def test_imported_trace_is_the_same_with_and_without_the_lane(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A search of ours printed as JSON Lines reads to identical columns either way."""
    instance = load_instance(ROOT / "tests" / "data" / "gr17.tsp")
    trail = solve_to_trail(instance, tmp_path / "g.trail", SearchSettings(max_nodes=20_000))
    path = tmp_path / "g.jsonl"
    path.write_text("\n".join(jsonl_lines(trail)) + "\n")
    with_lane, typed = read_both(path, monkeypatch)
    assert not isinstance(with_lane, str)
    same(with_lane, typed)
    assert with_lane.count == trail.count


@pytest.mark.parametrize("examples", EXAMPLES)
def test_damaged_files_read_or_fail_the_same_either_way(
    examples: int, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A small valid trace with drawn node lines spliced in: the same trail or error."""
    header = {
        "kind": "header",
        "instance": {
            "name": "six",
            "coords": [[i, i * i % 7] for i in range(N)],
            "metric": "EUC_2D",
        },
        "solver": {"bound": "tree+links", "cutoff": 0},
    }
    root = {"kind": "node", "id": 4, "parent": None, "city": 0, "partial": 0, "decision": "expand"}

    @settings(
        max_examples=examples // 3,
        deadline=None,
        database=None,
        suppress_health_check=list(HealthCheck),
    )
    @given(st.lists(node_lines(), min_size=1, max_size=4), st.booleans())
    def check(drawn: list[bytes], ended: bool) -> None:
        path = tmp_path / "t.jsonl"
        text = [json.dumps(header).encode(), json.dumps(root).encode(), *drawn]
        if ended:
            text.append(b'{"kind": "end", "status": "complete"}')
        path.write_bytes(b"\n".join(text) + b"\n")
        same(*read_both(path, monkeypatch))

    check()
