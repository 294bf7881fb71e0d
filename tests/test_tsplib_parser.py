"""The TSPLIB reader and writer: round trips, every malformed variant, and fuzzed files.

Round trips go both through our own writer (`format_instance`, `format_tour`) and through
files written here, number by number, from the TSPLIB definition of each EDGE_WEIGHT_FORMAT,
so a mistake shared by the writer and the reader cannot hide. Malformed input must raise
`InputError` (the one error the CLI prints as a single line) naming the offending line; the
fuzz property allows nothing else. Example counts stay small so the module runs in seconds.
"""

from __future__ import annotations

import tracemalloc
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.reference import DATA, instance_path
from tracer.base.errors import InputError, PrunetrailError
from tracer.base.instance import Instance, explicit_instance
from tracer.base.metrics import distance_matrix
from tracer.formats.cities_csv import parse_cities_csv
from tracer.formats.load import load_instance
from tracer.formats.tsplib import format_instance, format_tour, parse_instance, parse_tour

FAST = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])

COORD_TYPES = ["EUC_2D", "CEIL_2D", "ATT", "GEO", "MAN_2D", "MAX_2D"]
TRIANGLE_FORMATS = [
    "UPPER_ROW",
    "LOWER_ROW",
    "UPPER_DIAG_ROW",
    "LOWER_DIAG_ROW",
    "UPPER_COL",
    "LOWER_COL",
    "UPPER_DIAG_COL",
    "LOWER_DIAG_COL",
]
ALL_FORMATS = ["FULL_MATRIX", *TRIANGLE_FORMATS]


# --- The weight formats, written here from the TSPLIB definition -----------------------


def weight_numbers(matrix: list[list[int]], fmt: str) -> list[int]:
    """The numbers of EDGE_WEIGHT_SECTION for `matrix` in `fmt`, in file order.

    *_ROW formats walk the triangle row by row, *_COL formats column by column; DIAG
    includes the diagonal.
    """
    n = len(matrix)
    if fmt == "FULL_MATRIX":
        return [matrix[i][j] for i in range(n) for j in range(n)]
    upper = fmt.startswith("UPPER")
    diag = "_DIAG_" in fmt

    def keep(i: int, j: int) -> bool:
        if i == j:
            return diag
        return i < j if upper else i > j

    if fmt.endswith("_ROW"):
        return [matrix[i][j] for i in range(n) for j in range(n) if keep(i, j)]
    return [matrix[i][j] for j in range(n) for i in range(n) if keep(i, j)]


def explicit_text(
    n: int,
    numbers: Sequence[object],
    fmt: str,
    kind: str = "TSP",
    chunks: list[int] | None = None,
    separators: list[str] | None = None,
) -> str:
    """A TSPLIB EXPLICIT file; `chunks` gives how many numbers go on each line."""
    lines = [
        "NAME: handmade",
        f"TYPE: {kind}",
        f"DIMENSION: {n}",
        "EDGE_WEIGHT_TYPE: EXPLICIT",
        f"EDGE_WEIGHT_FORMAT: {fmt}",
        "EDGE_WEIGHT_SECTION",
    ]
    sizes = list(chunks or [])
    seps = separators or [" "]
    k = 0
    line_no = 0
    while k < len(numbers):
        size = sizes[line_no % len(sizes)] if sizes else max(n, 1)
        row = numbers[k : k + size]
        sep = seps[line_no % len(seps)]
        lines.append(sep + sep.join(str(v) for v in row) + sep)
        k += size
        line_no += 1
    lines.append("EOF")
    return "\n".join(lines) + "\n"


# --- Strategies -------------------------------------------------------------------------

_plain = st.floats(min_value=-1e5, max_value=1e5, allow_nan=False, allow_infinity=False)
_coordinate = st.one_of(_plain, st.integers(-10_000, 10_000).map(float))
_geo_coordinate = st.floats(min_value=-80.0, max_value=80.0, allow_nan=False)
_names = st.text(alphabet="abcdefghijklmnopqrstuvwxyz0123456789_", min_size=1, max_size=12)


@st.composite
def coord_instances(draw: st.DrawFn, metric: str) -> Instance:
    n = draw(st.integers(min_value=1, max_value=12))
    coord = _geo_coordinate if metric == "GEO" else _coordinate
    coords = draw(st.lists(st.tuples(coord, coord), min_size=n, max_size=n))
    return Instance(name=draw(_names), metric=metric, coords=np.array(coords, dtype=np.float64))


@st.composite
def symmetric_matrices(draw: st.DrawFn, max_n: int = 9) -> list[list[int]]:
    n = draw(st.integers(min_value=1, max_value=max_n))
    m = [[0] * n for _ in range(n)]
    for i in range(n):
        for j in range(i + 1, n):
            m[i][j] = m[j][i] = draw(st.integers(min_value=0, max_value=999_999))
    return m


def _as_array(matrix: list[list[int]]) -> np.ndarray:
    return np.array(matrix, dtype=np.int64).reshape(len(matrix), len(matrix))


# --- (a) Round trips --------------------------------------------------------------------


PER_CASE = settings(FAST, max_examples=12)


@pytest.mark.parametrize("metric", COORD_TYPES)
@PER_CASE
@given(data=st.data())
def test_coordinate_instance_round_trip(metric: str, data: st.DataObject) -> None:
    """A coordinate instance written by format_instance parses back to the same coordinates."""
    instance = data.draw(coord_instances(metric))
    back = parse_instance(format_instance(instance), "rt.tsp")
    assert back.name == instance.name
    assert back.metric == instance.metric
    assert back.n == instance.n
    assert back.explicit is None
    assert back.coords is not None and instance.coords is not None
    assert back.coords.tolist() == instance.coords.tolist()
    expected = distance_matrix(instance.coords, instance.metric)
    assert np.array_equal(back.matrix, expected)


@pytest.mark.parametrize("with_display", [False, True], ids=["bare", "display"])
@pytest.mark.parametrize("fmt", ALL_FORMATS)
@PER_CASE
@given(matrix=symmetric_matrices(), data=st.data())
def test_explicit_instance_round_trip(
    matrix: list[list[int]], fmt: str, with_display: bool, data: st.DataObject
) -> None:
    """A symmetric matrix written by format_instance in any weight format parses back equal."""
    n = len(matrix)
    display = None
    if with_display:
        display = np.array(
            data.draw(st.lists(st.tuples(_coordinate, _coordinate), min_size=n, max_size=n)),
            dtype=np.float64,
        )
    instance = explicit_instance("rt", _as_array(matrix), coords=display)
    back = parse_instance(format_instance(instance, fmt), "rt.tsp")
    assert back.metric == "EXPLICIT"
    assert back.symmetric
    assert back.matrix.tolist() == matrix
    if display is None:
        assert back.coords is None
    else:
        assert back.coords is not None
        assert back.coords.tolist() == display.tolist()


@FAST
@given(data=st.data())
def test_asymmetric_full_matrix_round_trip(data: st.DataObject) -> None:
    """An asymmetric matrix is written as TYPE ATSP FULL_MATRIX and parses back equal."""
    n = data.draw(st.integers(min_value=2, max_value=8))
    cells = st.integers(min_value=0, max_value=9999)
    m = [[0 if i == j else data.draw(cells) for j in range(n)] for i in range(n)]
    m[0][1] = m[1][0] + 1
    text = format_instance(explicit_instance("asym", _as_array(m)), "FULL_MATRIX")
    assert "ATSP" in text
    back = parse_instance(text, "asym.atsp")
    assert not back.symmetric
    assert back.matrix.tolist() == m


@pytest.mark.parametrize("fmt", ALL_FORMATS)
@PER_CASE
@given(
    matrix=symmetric_matrices(),
    chunks=st.lists(st.integers(min_value=1, max_value=7), min_size=1, max_size=6),
    separators=st.lists(st.sampled_from([" ", "  ", "\t", " \t "]), min_size=1, max_size=3),
)
def test_wrapped_weights_parse_the_same(
    matrix: list[list[int]], fmt: str, chunks: list[int], separators: list[str]
) -> None:
    """Numbers laid out per the format definition and wrapped arbitrarily parse to the matrix."""
    n = len(matrix)
    numbers = weight_numbers(matrix, fmt)
    text = explicit_text(n, numbers, fmt, chunks=chunks, separators=separators)
    assert parse_instance(text, "wrap.tsp").matrix.tolist() == matrix
    one_line = explicit_text(n, numbers, fmt, chunks=[max(len(numbers), 1)])
    assert parse_instance(one_line, "wrap.tsp").matrix.tolist() == matrix


def test_column_formats_read_column_by_column() -> None:
    """A hand-written 4-city UPPER_COL section fills the upper triangle column by column."""
    # d(1,2)=1; d(1,3)=2, d(2,3)=3; d(1,4)=4, d(2,4)=5, d(3,4)=6 (columns 2, 3, 4).
    text = explicit_text(4, [1, 2, 3, 4, 5, 6], "UPPER_COL")
    expected = [[0, 1, 2, 4], [1, 0, 3, 5], [2, 3, 0, 6], [4, 5, 6, 0]]
    assert parse_instance(text).matrix.tolist() == expected
    # The same six numbers as UPPER_ROW: d(1,2)=1, d(1,3)=2, d(1,4)=3, d(2,3)=4, ...
    text = explicit_text(4, [1, 2, 3, 4, 5, 6], "UPPER_ROW")
    expected = [[0, 1, 2, 3], [1, 0, 4, 5], [2, 4, 0, 6], [3, 5, 6, 0]]
    assert parse_instance(text).matrix.tolist() == expected


@FAST
@given(
    tour=st.integers(min_value=1, max_value=60).flatmap(lambda n: st.permutations(list(range(n)))),
    give_n=st.booleans(),
)
def test_tour_round_trip(tour: list[int], give_n: bool) -> None:
    """A tour written by format_tour parses back to the same 0-based sequence."""
    text = format_tour("t", tour)
    back = parse_tour(text, "t.tour", len(tour) if give_n else None)
    assert back.tolist() == tour


@FAST
@given(
    tour=st.integers(min_value=1, max_value=30).flatmap(lambda n: st.permutations(list(range(n)))),
    per_line=st.integers(min_value=1, max_value=9),
)
def test_tour_numbers_wrap_across_lines(tour: list[int], per_line: int) -> None:
    """TOUR_SECTION numbers spread over lines, with -1 mid-line, parse the same."""
    nodes = [str(c + 1) for c in tour] + ["-1"]
    rows = [" ".join(nodes[k : k + per_line]) for k in range(0, len(nodes), per_line)]
    text = "NAME : t\nTYPE : TOUR\nTOUR_SECTION\n" + "\n".join(rows) + "\nEOF\n"
    assert parse_tour(text, "t.tour", len(tour)).tolist() == tour


# --- (b) Malformed variants -------------------------------------------------------------

COORD_TEXT = """NAME : five
TYPE : TSP
COMMENT : five cities
DIMENSION : 5
EDGE_WEIGHT_TYPE : EUC_2D
NODE_COORD_SECTION
1 0 0
2 3 4
3 6 0
4 3 -4
5 1.5 2.5
EOF
"""

MATRIX_4 = [[0, 3, 4, 5], [3, 0, 6, 7], [4, 6, 0, 8], [5, 7, 8, 0]]
FULL_TEXT = explicit_text(4, weight_numbers(MATRIX_4, "FULL_MATRIX"), "FULL_MATRIX")
LOWER_TEXT = explicit_text(
    4, weight_numbers(MATRIX_4, "LOWER_DIAG_ROW"), "LOWER_DIAG_ROW", chunks=[1, 2, 3, 4]
)
TOUR_TEXT = "NAME : t\nTYPE : TOUR\nDIMENSION : 5\nTOUR_SECTION\n1\n3\n5\n2\n4\n-1\nEOF\n"


def line_number(text: str, prefix: str) -> int:
    """The 1-based number of the only line of `text` that starts with `prefix`."""
    found = [k for k, line in enumerate(text.splitlines(), 1) if line.startswith(prefix)]
    assert len(found) == 1, (prefix, found)
    return found[0]


def replace_line(text: str, prefix: str, new: str | None) -> str:
    """`text` with the line starting with `prefix` replaced by `new` (or removed if None)."""
    lines = text.splitlines()
    k = line_number(text, prefix) - 1
    if new is None:
        del lines[k]
    else:
        lines[k] = new
    return "\n".join(lines) + "\n"


def expect_error(
    parse: Callable[[str, str], object], text: str, line: int | None, *words: str
) -> InputError:
    """Parsing `text` raises InputError at `line` whose message mentions each of `words`."""
    with pytest.raises(InputError) as caught:
        parse(text, "bad.tsp")
    error = caught.value
    assert error.line == line, str(error)
    prefix = "bad.tsp:" if line is None else f"bad.tsp:{line}:"
    assert str(error).startswith(prefix), str(error)
    for word in words:
        assert word.lower() in error.message.lower(), (word, str(error))
    return error


def test_valid_bases_parse() -> None:
    """The hand-written bases the malformed cases start from are themselves valid."""
    assert parse_instance(COORD_TEXT).matrix[0, 1] == 5
    assert parse_instance(FULL_TEXT).matrix.tolist() == MATRIX_4
    assert parse_instance(LOWER_TEXT).matrix.tolist() == MATRIX_4
    assert parse_tour(TOUR_TEXT, "t", 5).tolist() == [0, 2, 4, 1, 3]


# (base, line prefix to replace, replacement or None to delete, expected line, words)
_MALFORMED_HEADERS = [
    pytest.param(COORD_TEXT, "TYPE", "TYPE : CVRP", "TYPE", ["TYPE", "CVRP"], id="type"),
    pytest.param(COORD_TEXT, "TYPE", "TYPE :", "TYPE", ["TYPE"], id="type-empty"),
    pytest.param(
        COORD_TEXT,
        "EDGE_WEIGHT_TYPE",
        "EDGE_WEIGHT_TYPE : EUC_3D",
        "EDGE_WEIGHT_TYPE",
        ["EDGE_WEIGHT_TYPE", "EUC_3D"],
        id="weight-type",
    ),
    pytest.param(
        FULL_TEXT,
        "EDGE_WEIGHT_FORMAT",
        "EDGE_WEIGHT_FORMAT : UPPER_TRIANGLE",
        "EDGE_WEIGHT_FORMAT",
        ["EDGE_WEIGHT_FORMAT", "UPPER_TRIANGLE"],
        id="weight-format",
    ),
    pytest.param(COORD_TEXT, "DIMENSION", None, None, ["DIMENSION"], id="dimension-missing"),
    pytest.param(FULL_TEXT, "DIMENSION", None, None, ["DIMENSION"], id="dimension-missing-x"),
    pytest.param(
        COORD_TEXT,
        "DIMENSION",
        "DIMENSION : five",
        "DIMENSION",
        ["DIMENSION", "five"],
        id="dimension-word",
    ),
    pytest.param(
        COORD_TEXT, "DIMENSION", "DIMENSION : 5.0", "DIMENSION", ["DIMENSION"], id="dim-float"
    ),
    pytest.param(COORD_TEXT, "DIMENSION", "DIMENSION : 0", "DIMENSION", ["DIMENSION"], id="dim-0"),
    pytest.param(FULL_TEXT, "DIMENSION", "DIMENSION: 0", "DIMENSION", ["DIMENSION"], id="dim-0-x"),
    pytest.param(
        COORD_TEXT, "DIMENSION", "DIMENSION : -3", "DIMENSION", ["DIMENSION"], id="dim-negative"
    ),
    pytest.param(
        COORD_TEXT, "DIMENSION", "DIMENSION : 4", "5 1.5", ["node 5", "outside"], id="dim-small"
    ),
    pytest.param(
        COORD_TEXT,
        "DIMENSION",
        "DIMENSION : 6",
        "NODE_COORD_SECTION",
        ["node 6", "missing"],
        id="dim-large",
    ),
    pytest.param(
        FULL_TEXT, "DIMENSION", "DIMENSION: 5", " 5 7 8 0", ["needs 25"], id="dim-large-matrix"
    ),
    pytest.param(
        FULL_TEXT, "DIMENSION", "DIMENSION: 3", " 4 6 0 8", ["more than the 9"], id="dim-small-m"
    ),
    pytest.param(COORD_TEXT, "NODE_COORD_SECTION", None, "1 0 0", ["KEYWORD"], id="no-ncs-line"),
    pytest.param(FULL_TEXT, "EDGE_WEIGHT_SECTION", None, " 0 3 4 5", [], id="no-ews-line"),
    pytest.param(COORD_TEXT, "2 3 4", "2 3 four", "2 3 four", ["four"], id="coord-word-y"),
    pytest.param(COORD_TEXT, "2 3 4", "2 3x 4", "2 3x", ["3x"], id="coord-junk-x"),
    pytest.param(COORD_TEXT, "2 3 4", "2 3 nan", "2 3 nan", [], id="coord-nan"),
    pytest.param(COORD_TEXT, "2 3 4", "2 3 1e999", "2 3 1e999", ["finite"], id="coord-inf"),
    pytest.param(COORD_TEXT, "2 3 4", "two 3 4", "two 3 4", [], id="node-word"),
    pytest.param(COORD_TEXT, "2 3 4", "2.0 3 4", "2.0 3 4", ["node number"], id="node-float"),
    pytest.param(COORD_TEXT, "2 3 4", "2 3", "2 3", ["3 fields", "found 2"], id="coord-2-fields"),
    pytest.param(COORD_TEXT, "2 3 4", "2 3 4 5", "2 3 4 5", ["found 4"], id="coord-4-fields"),
    pytest.param(COORD_TEXT, "2 3 4", "2 3 4 x", "2 3 4 x", ["found 4"], id="coord-4-junk"),
    pytest.param(COORD_TEXT, "2 3 4", "1 3 4", "1 3 4", ["node 1", "twice"], id="node-repeat"),
    pytest.param(COORD_TEXT, "2 3 4", "9 3 4", "9 3 4", ["node 9", "outside"], id="node-range"),
    pytest.param(FULL_TEXT, " 3 0 6", " 3 0 six 7 ", " 3 0 six", [], id="weight-word"),
    pytest.param(FULL_TEXT, " 3 0 6", " 3 0 6x 7 ", " 3 0 6x", ["6x"], id="weight-junk"),
    pytest.param(FULL_TEXT, " 5 7 8 0", " 5 7 8 0 1 ", " 5 7 8 0 1", ["more than"], id="too-many"),
    pytest.param(FULL_TEXT, " 5 7 8 0", " 5 7 8 ", " 5 7 8", ["found 15", "needs 16"], id="few"),
    pytest.param(
        LOWER_TEXT, " 5 7 8 0", " 5 7 8 0 9 ", " 5 7 8 0 9", ["more than the 10"], id="tri-many"
    ),
    pytest.param(LOWER_TEXT, " 5 7 8 0", " 5 7 ", " 5 7 ", ["found 8", "needs 10"], id="tri-few"),
    pytest.param(
        FULL_TEXT,
        " 3 0 6",
        " 3 0 6 9 ",
        "EDGE_WEIGHT_SECTION",
        ["not symmetric", "ATSP"],
        id="tsp-asymmetric",
    ),
    pytest.param(
        LOWER_TEXT,
        "TYPE",
        "TYPE: ATSP",
        "EDGE_WEIGHT_FORMAT",
        ["ATSP", "FULL_MATRIX", "LOWER_DIAG_ROW"],
        id="atsp-triangle",
    ),
    pytest.param(COORD_TEXT, "TYPE", None, None, ["TYPE"], id="type-missing"),
    pytest.param(COORD_TEXT, "TYPE", "TYPE : TOUR", None, ["tour"], id="type-tour"),
    pytest.param(COORD_TEXT, "EDGE_WEIGHT_TYPE", None, None, ["EDGE_WEIGHT_TYPE"], id="no-ewt"),
    pytest.param(FULL_TEXT, "EDGE_WEIGHT_FORMAT", None, "EDGE_WEIGHT_TYPE", [], id="no-format"),
    pytest.param(COORD_TEXT, "EDGE_WEIGHT_TYPE", "DIMENSION : 5", 5, ["twice"], id="dim-twice"),
    pytest.param(COORD_TEXT, "COMMENT", "COMMENT five", "COMMENT five", [], id="no-colon"),
    pytest.param(COORD_TEXT, "EOF", "NODE_COORD_SECTION", 12, ["twice"], id="section-twice"),
]


@pytest.mark.parametrize(("base", "prefix", "new", "at", "words"), _MALFORMED_HEADERS)
def test_malformed_instance_names_the_line(
    base: str, prefix: str, new: str | None, at: str | int | None, words: list[str]
) -> None:
    """Each malformed instance variant raises InputError naming the line that is wrong."""
    text = replace_line(base, prefix, new)
    line = line_number(text, at) if isinstance(at, str) else at
    expect_error(parse_instance, text, line, *words)


def _without_section(text: str, section: str) -> str:
    lines = text.splitlines()
    start = lines.index(section)
    return "\n".join(lines[:start] + lines[lines.index("EOF") :]) + "\n"


@pytest.mark.parametrize(
    ("base", "section"),
    [(COORD_TEXT, "NODE_COORD_SECTION"), (FULL_TEXT, "EDGE_WEIGHT_SECTION")],
)
def test_missing_section(base: str, section: str) -> None:
    """A file whose needed data section is absent altogether says which section is missing."""
    expect_error(parse_instance, _without_section(base, section), None, "missing", section)


#: (line of TOUR_TEXT to change, its new text or None to delete, words); nodes 1 3 5 2 4.
_MALFORMED_TOURS = [
    pytest.param(7, "3", ["node 3", "twice"], id="repeat"),
    pytest.param(7, "6", ["node 6", "outside"], id="outside"),
    pytest.param(7, "0", ["node 0", "outside"], id="zero"),
    pytest.param(7, "-2", ["outside"], id="negative"),
    pytest.param(7, "x3", [], id="word"),
    pytest.param(7, "3.0", ["3.0"], id="float"),
    pytest.param(7, "5 1", ["node 1", "twice"], id="repeat-same-line"),
    pytest.param(7, None, ["node 5", "missing"], id="misses"),
]


@pytest.mark.parametrize(("at", "new", "words"), _MALFORMED_TOURS)
def test_malformed_tour_names_the_line(at: int, new: str | None, words: list[str]) -> None:
    """A tour that repeats, misses or misnames a node raises InputError at the right line."""
    lines = TOUR_TEXT.splitlines()
    assert lines[at - 1] == "5"
    if new is None:
        del lines[at - 1]
        at = lines.index("TOUR_SECTION") + 1
    else:
        lines[at - 1] = new
    expect_error(lambda t, p: parse_tour(t, p, 5), "\n".join(lines) + "\n", at, *words)


def test_tour_without_section_or_nodes() -> None:
    """A tour file without TOUR_SECTION, or with only -1 in it, raises InputError."""
    expect_error(parse_tour, "NAME : t\nTYPE : TOUR\nEOF\n", None, "TOUR_SECTION")
    text = "NAME : t\nTYPE : TOUR\nTOUR_SECTION\n-1\nEOF\n"
    expect_error(parse_tour, text, line_number(text, "TOUR_SECTION"), "no nodes")


def test_tour_dimension_must_match_instance() -> None:
    """A tour file whose DIMENSION differs from the instance's city count names that line."""
    text = TOUR_TEXT
    expect_error(lambda t, p: parse_tour(t, p, 6), text, line_number(text, "DIMENSION"), "6")


def test_tour_without_dimension_misses_a_node() -> None:
    """Without DIMENSION in the file, the instance's n decides that a node is missing."""
    text = "NAME : t\nTYPE : TOUR\nTOUR_SECTION\n1 2 3\n-1\nEOF\n"
    expect_error(lambda t, p: parse_tour(t, p, 4), text, 3, "node 4", "missing")


_JUNK_NUMBERS = ["abc", "1..2", "--1", "0x1g", "inf", "-nan", "1e400", "3,5", "½"]


@FAST
@given(row=st.integers(min_value=0, max_value=4), data=st.data())
def test_bad_coordinate_line_anywhere(row: int, data: st.DataObject) -> None:
    """A coordinate line broken in any of several ways, on any row, is named by its line."""
    lines = COORD_TEXT.splitlines()
    first = lines.index("NODE_COORD_SECTION") + 1  # 0-based index of node 1's line
    k = first + row
    node, x, y = lines[k].split()
    junk = data.draw(st.sampled_from(_JUNK_NUMBERS))
    other = data.draw(st.sampled_from([v for v in range(1, 6) if v != int(node)]))
    variants = {
        "two fields": (f"{node} {x}", k),
        "four fields": (f"{node} {x} {y} {y}", k),
        "junk x": (f"{node} {junk} {y}", k),
        "junk y": (f"{node} {x} {junk}", k),
        "fractional node": (f"{node}.5 {x} {y}", k),
        # The repeat is noticed where the node appears for the second time.
        "repeated node": (f"{other} {x} {y}", max(k, first + other - 1)),
    }
    new, bad = variants[data.draw(st.sampled_from(sorted(variants)))]
    lines[k] = new
    expect_error(parse_instance, "\n".join(lines) + "\n", bad + 1)


@FAST
@given(matrix=symmetric_matrices(max_n=6), fmt=st.sampled_from(ALL_FORMATS), data=st.data())
def test_bad_weight_anywhere(matrix: list[list[int]], fmt: str, data: st.DataObject) -> None:
    """A non-numeric edge weight at any position is named by its line."""
    n = len(matrix)
    numbers: list[object] = list(weight_numbers(matrix, fmt))
    if not numbers:
        return
    pos = data.draw(st.integers(min_value=0, max_value=len(numbers) - 1))
    numbers[pos] = data.draw(st.sampled_from(["x", "1.2.3", "7q", "nan", "-inf", "1e999", "#"]))
    per_line = data.draw(st.integers(min_value=1, max_value=5))
    text = explicit_text(n, numbers, fmt, chunks=[per_line])
    first = line_number(text, "EDGE_WEIGHT_SECTION") + 1
    expect_error(parse_instance, text, first + pos // per_line)


@FAST
@given(matrix=symmetric_matrices(max_n=6), fmt=st.sampled_from(ALL_FORMATS), data=st.data())
def test_wrong_number_count(matrix: list[list[int]], fmt: str, data: st.DataObject) -> None:
    """One number too many or too few in EDGE_WEIGHT_SECTION is refused in every format."""
    n = len(matrix)
    numbers = weight_numbers(matrix, fmt)
    extra = data.draw(st.booleans())
    if not extra and not numbers:
        return
    changed = [*numbers, 1] if extra else numbers[:-1]
    text = explicit_text(n, changed, fmt, chunks=[1])
    first = line_number(text, "EDGE_WEIGHT_SECTION") + 1
    if extra:
        expect_error(parse_instance, text, first + len(numbers), "more than")
    else:
        at = first + len(changed) - 1 if changed else first - 1
        expect_error(parse_instance, text, at, f"needs {len(numbers)}")


@FAST
@given(
    matrix=symmetric_matrices(max_n=6).filter(lambda m: len(m) >= 2),
    fmt=st.sampled_from(TRIANGLE_FORMATS),
)
def test_atsp_refuses_every_triangle(matrix: list[list[int]], fmt: str) -> None:
    """TYPE ATSP with any triangle format raises InputError at EDGE_WEIGHT_FORMAT."""
    text = explicit_text(len(matrix), weight_numbers(matrix, fmt), fmt, kind="ATSP")
    expect_error(parse_instance, text, line_number(text, "EDGE_WEIGHT_FORMAT"), "ATSP")


@FAST
@given(
    matrix=symmetric_matrices(max_n=6).filter(lambda m: len(m) >= 2),
    data=st.data(),
)
def test_tsp_refuses_asymmetric_full_matrix(matrix: list[list[int]], data: st.DataObject) -> None:
    """TYPE TSP with a FULL_MATRIX that differs from its transpose anywhere is refused."""
    n = len(matrix)
    i = data.draw(st.integers(min_value=0, max_value=n - 1))
    j = data.draw(st.integers(min_value=0, max_value=n - 1).filter(lambda v: v != i))
    m = [row[:] for row in matrix]
    m[i][j] += 1
    text = explicit_text(n, weight_numbers(m, "FULL_MATRIX"), "FULL_MATRIX")
    expect_error(parse_instance, text, line_number(text, "EDGE_WEIGHT_SECTION"), "symmetric")
    atsp = parse_instance(text.replace("TYPE: TSP", "TYPE: ATSP"))
    assert atsp.matrix.tolist() == m


@FAST
@given(tour=st.permutations(list(range(8))), data=st.data())
def test_tour_repeat_anywhere(tour: list[int], data: st.DataObject) -> None:
    """A tour with one node overwritten by another is refused at the second occurrence."""
    i = data.draw(st.integers(min_value=0, max_value=7))
    j = data.draw(st.integers(min_value=0, max_value=7).filter(lambda v: v != i))
    bad = list(tour)
    bad[j] = bad[i]
    text = format_tour("t", bad)
    first = line_number(text, "TOUR_SECTION") + 1
    expect_error(lambda t, p: parse_tour(t, p, 8), text, first + max(i, j), "twice")


# --- Fuzz: arbitrary damage either parses or is an InputError --------------------------

FUZZ_INSTANCES = ["ulysses16", "gr24", "bayg29", "bays29", "br17", "gr17"]
FUZZ_TOURS = ["ulysses16", "gr24"]
_JUNK = st.one_of(
    st.sampled_from(
        [
            "",
            "-1",
            "0",
            "-0",
            "nan",
            "inf",
            "1e999",
            "99999999999999999999999",
            ":",
            "EOF",
            "TYPE",
            "TYPE : ATSP",
            "DIMENSION : 2000",
            "DIMENSION : 3",
            "NODE_COORD_SECTION",
            "EDGE_WEIGHT_SECTION",
            "DISPLAY_DATA_SECTION",
            "TOUR_SECTION",
            "EDGE_WEIGHT_FORMAT : UPPER_COL",
            "EDGE_WEIGHT_TYPE : EUC_2D",
        ]
    ),
    st.text(max_size=6),
)


def _read(path: Path) -> str:
    return path.read_text()


@st.composite
def damaged(draw: st.DrawFn, text: str) -> str:
    lines = text.splitlines()
    for _ in range(draw(st.integers(min_value=1, max_value=3))):
        if not lines:
            break
        k = draw(st.integers(min_value=0, max_value=len(lines) - 1))
        action = draw(st.sampled_from(["delete", "duplicate", "junk"]))
        if action == "delete":
            del lines[k]
        elif action == "duplicate":
            lines.insert(k, lines[k])
        else:
            tokens = lines[k].split() or [""]
            t = draw(st.integers(min_value=0, max_value=len(tokens) - 1))
            tokens[t] = draw(_JUNK)
            lines[k] = " ".join(tokens)
    return "\n".join(lines) + "\n"


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data(), name=st.sampled_from(FUZZ_INSTANCES))
def test_fuzzed_instance_parses_or_raises_input_error(data: st.DataObject, name: str) -> None:
    """A damaged reference instance either parses to a sane instance or raises InputError."""
    text = data.draw(damaged(_read(instance_path(name))))
    try:
        instance = parse_instance(text, "fuzz.tsp")
    except InputError as error:
        assert str(error).startswith("fuzz.tsp")
        assert error.line is None or error.line >= 1
        return
    assert instance.n >= 1
    assert instance.matrix.shape == (instance.n, instance.n)


@settings(max_examples=60, deadline=None)
@given(data=st.data(), name=st.sampled_from(FUZZ_TOURS))
def test_fuzzed_tour_parses_or_raises_input_error(data: st.DataObject, name: str) -> None:
    """A damaged optimal-tour file either parses to a permutation or raises InputError."""
    n = load_instance(instance_path(name)).n
    text = data.draw(damaged(_read(DATA / f"{name}.opt.tour")))
    try:
        tour = parse_tour(text, "fuzz.tour", n)
    except InputError:
        return
    assert sorted(tour.tolist()) == list(range(n))


# --- Large instances load without a matrix ----------------------------------------------

LARGE_N = 20_000


def _write_large(tmp_path: Path, suffix: str) -> Path:
    rng = np.random.default_rng(7)
    xy = rng.integers(0, 1_000_000, size=(LARGE_N, 2))
    path = tmp_path / f"large{suffix}"
    if suffix == ".csv":
        body = "\n".join(f"{x},{y}" for x, y in xy.tolist())
        path.write_text("x,y\n" + body + "\n")
    else:
        body = "\n".join(f"{i} {x} {y}" for i, (x, y) in enumerate(xy.tolist(), 1))
        head = f"NAME : large\nTYPE : TSP\nDIMENSION : {LARGE_N}\nEDGE_WEIGHT_TYPE : EUC_2D\n"
        path.write_text(head + "NODE_COORD_SECTION\n" + body + "\nEOF\n")
    return path


@pytest.mark.parametrize("suffix", [".tsp", ".csv"])
def test_large_instance_loads_without_matrix(tmp_path: Path, suffix: str) -> None:
    """20,000 cities load with n right and no matrix; asking for one is a PrunetrailError."""
    path = _write_large(tmp_path, suffix)
    full_matrix_bytes = LARGE_N * LARGE_N * 8
    tracemalloc.start()
    try:
        instance = load_instance(path)
        _, load_peak = tracemalloc.get_traced_memory()
        tracemalloc.reset_peak()
        with pytest.raises(PrunetrailError, match="20000"):
            _ = instance.matrix
        _, matrix_peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert instance.n == LARGE_N
    assert instance.coords is not None and instance.coords.shape == (LARGE_N, 2)
    assert "matrix" not in vars(instance)  # never built, not even cached
    assert load_peak < full_matrix_bytes // 20
    assert matrix_peak < full_matrix_bytes // 100


def test_huge_coordinate_is_refused_with_its_line() -> None:
    """A coordinate beyond MAX_COORDINATE is refused (it would overflow integer distances)."""
    text = (
        "NAME : big\nTYPE : TSP\nDIMENSION : 2\nEDGE_WEIGHT_TYPE : EUC_2D\n"
        "NODE_COORD_SECTION\n1 0 0\n2 99999999999999999999999 0\nEOF\n"
    )
    with pytest.raises(InputError, match="larger than") as caught:
        parse_instance(text, "big.tsp")
    assert caught.value.line == 7


def test_huge_edge_weight_is_refused_with_its_line() -> None:
    """An explicit weight beyond MAX_EDGE is refused, naming the line that holds it."""
    text = (
        "NAME : big\nTYPE : TSP\nDIMENSION : 3\nEDGE_WEIGHT_TYPE : EXPLICIT\n"
        "EDGE_WEIGHT_FORMAT : UPPER_ROW\nEDGE_WEIGHT_SECTION\n1 2\n10000000000000\nEOF\n"
    )
    with pytest.raises(InputError, match="larger than") as caught:
        parse_instance(text, "big.tsp")
    assert caught.value.line == 8


def test_huge_csv_coordinate_is_refused() -> None:
    """A CSV coordinate beyond MAX_COORDINATE is refused with its line."""
    with pytest.raises(InputError, match="larger than") as caught:
        parse_cities_csv("x,y\n0,0\n1e200,3\n", "big.csv")
    assert caught.value.line == 3
