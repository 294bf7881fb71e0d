"""One table of limits: every path that reads the same fact accepts and refuses it alike.

The limits live in `tracer/base/limits.py`. Before they did, a matrix entry was capped at
1e12 by the TSPLIB reader, 2**53 by the JSON Lines importer and 2**62 by the trail header,
and a long name was cut by one reader and refused by another. Each test here feeds the
same value, once at its limit and once beyond, to every reader that takes it.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import msgpack
import numpy as np
import pytest

from tracer.base import (
    DECISION_COLUMNS,
    MAX_COORDINATE,
    MAX_EDGE,
    MAX_LENGTH,
    MAX_TEXT,
    MAX_TRAIL_CITIES,
    HeaderError,
    InputError,
    SolverInfo,
    TrailHeader,
    column_layout,
    explicit_instance,
    from_wire,
    to_wire,
)
from tracer.formats.cities_csv import parse_cities_csv
from tracer.formats.tsplib import parse_instance
from tracer.trails.jsonl import check_header, read_jsonl
from tracer.trails.reader import CorruptTrailError, read_trail

Reader = Callable[[Any], object]


def _tsplib_coords(x: float, name: str = "edge") -> object:
    text = (
        f"NAME : {name}\nTYPE : TSP\nDIMENSION : 2\nEDGE_WEIGHT_TYPE : EUC_2D\n"
        f"NODE_COORD_SECTION\n1 0 0\n2 {x!r} 0\nEOF\n"
    )
    return parse_instance(text, "edge.tsp")


def _csv_coords(x: float) -> object:
    return parse_cities_csv(f"x,y\n0,0\n{x!r},0\n", "edge.csv")


def _jsonl_header(instance: dict[str, Any]) -> None:
    line = {"kind": "header", "instance": instance, "solver": {"bound": "tree+links"}}
    check_header(json.dumps(line), "edge.jsonl")


def _jsonl_coords(x: float) -> object:
    _jsonl_header({"coords": [[0, 0], [x, 0]], "metric": "EUC_2D"})
    return None


def _trail_header(instance: dict[str, Any]) -> object:
    layout = [c.to_wire() for c in column_layout(DECISION_COLUMNS, 2, True, 1.0)]
    wire = {"kind": "header", "format": "prunetrail", "version": 1}
    return from_wire({**wire, "instance": instance, "columns": layout})


def _trail_coords(x: float) -> object:
    return _trail_header({"n": 2, "metric": "EUC_2D", "coords": [[0.0, 0.0], [x, 0.0]]})


def _tsplib_matrix(w: float) -> object:
    text = (
        "NAME : edge\nTYPE : TSP\nDIMENSION : 2\nEDGE_WEIGHT_TYPE : EXPLICIT\n"
        f"EDGE_WEIGHT_FORMAT : UPPER_ROW\nEDGE_WEIGHT_SECTION\n{int(w)}\nEOF\n"
    )
    return parse_instance(text, "edge.tsp")


def _jsonl_matrix(w: float) -> object:
    _jsonl_header({"matrix": [[0, int(w)], [int(w), 0]]})
    return None


def _trail_matrix(w: float) -> object:
    return _trail_header({"n": 2, "matrix": [[0, int(w)], [int(w), 0]]})


def _refused(read: Reader, value: Any) -> bool:
    try:
        read(value)
    except (InputError, HeaderError):
        return True
    return False


COORDINATE_READERS = [_tsplib_coords, _csv_coords, _jsonl_coords, _trail_coords]
EDGE_READERS = [_tsplib_matrix, _jsonl_matrix, _trail_matrix]


@pytest.mark.parametrize("read", COORDINATE_READERS, ids=lambda r: r.__name__)
def test_coordinate_limit_is_the_same_for_every_reader(read: Reader) -> None:
    """A coordinate at MAX_COORDINATE is accepted and one beyond it refused, by each reader."""
    assert not _refused(read, MAX_COORDINATE)
    assert _refused(read, MAX_COORDINATE * 1.5)


@pytest.mark.parametrize("read", EDGE_READERS, ids=lambda r: r.__name__)
def test_edge_weight_limit_is_the_same_for_every_reader(read: Reader) -> None:
    """A matrix entry at MAX_EDGE is accepted and one beyond it refused, by each reader."""
    assert not _refused(read, MAX_EDGE)
    assert _refused(read, MAX_EDGE * 2)


def test_edge_limit_keeps_every_trail_length_exact() -> None:
    """The largest trail's longest tour stays below 2**53, so float64 sums are exact."""
    assert MAX_TRAIL_CITIES * MAX_EDGE < MAX_LENGTH
    assert 4 * MAX_COORDINATE <= MAX_EDGE  # |dx| + |dy| bounds every planar distance


@pytest.mark.parametrize(
    "read",
    [
        lambda name: _tsplib_coords(1.0, name),
        lambda name: _jsonl_header({"name": name, "matrix": [[0, 1], [1, 0]]}),
        lambda name: _trail_header({"name": name, "n": 2, "matrix": [[0, 1], [1, 0]]}),
    ],
    ids=["tsplib", "jsonl", "trail"],
)
def test_long_names_are_refused_alike(read: Reader) -> None:
    """A name of MAX_TEXT characters is kept whole; one more character is refused, never cut."""
    assert not _refused(read, "n" * MAX_TEXT)
    assert _refused(read, "n" * (MAX_TEXT + 1))


def test_a_stem_we_make_a_name_from_is_cut() -> None:
    """A CSV file's name comes from its stem, which we cut to MAX_TEXT ourselves."""
    instance, _ = parse_cities_csv("x,y\n0,0\n1,1\n", "c" * (MAX_TEXT + 40) + ".csv")
    assert instance.name == "c" * MAX_TEXT


def test_short_best_tour_is_refused_by_both_trace_readers(tmp_path: Path) -> None:
    """A best tour missing a city is refused by the trail reader and by the JSON Lines
    importer alike: a best tour is every city once, from city 0."""
    matrix = np.array([[0, 1, 2], [1, 0, 3], [2, 3, 0]])
    instance = explicit_instance("tri", matrix)
    layout = column_layout(DECISION_COLUMNS, 3, True, 10.0)
    header = TrailHeader(instance=instance, solver=SolverInfo(engine="test"), columns=layout)
    trail = tmp_path / "short.trail"
    best = {"kind": "best", "at": 0, "node": -1, "length": 3, "tour": [0, 1]}
    trail.write_bytes(
        b"".join(msgpack.packb(f, use_bin_type=True) for f in (to_wire(header), best))
    )
    with pytest.raises(CorruptTrailError, match="tour"):
        read_trail(trail)
    lines = [
        {"kind": "header", "instance": {"matrix": matrix.tolist()}, "solver": {"bound": "x"}},
        {"kind": "best", "id": None, "length": 3, "tour": [0, 1]},
    ]
    traced = tmp_path / "short.jsonl"
    traced.write_text("".join(json.dumps(line) + "\n" for line in lines))
    with pytest.raises(InputError, match="tour"):
        read_jsonl(traced)
