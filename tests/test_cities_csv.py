"""CSV city lists: layouts with and without a header, float distances, and bad rows.

Distances are checked against `math.dist`, an implementation independent of ours. Every bad
row must raise `InputError` naming its line, counted as an editor counts them (blank lines
included).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.reference import instance_path
from tracer.base.errors import InputError
from tracer.formats.cities_csv import parse_cities_csv
from tracer.formats.load import load_instance

_value = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)
_labels = st.text(alphabet="abcdefghijklmnopqrstuvwxyz ABCDEFGHIJ-", max_size=10).map(str.strip)


def _check_distances(coords: list[tuple[float, float]], matrix: np.ndarray) -> None:
    n = len(coords)
    assert matrix.shape == (n, n)
    for i in range(n):
        for j in range(n):
            expected = 0.0 if i == j else math.dist(coords[i], coords[j])
            assert matrix[i, j] == pytest.approx(expected, rel=1e-12, abs=1e-9), (i, j)


@settings(max_examples=40, deadline=None)
@given(
    coords=st.lists(st.tuples(_value, _value), min_size=1, max_size=10),
    header=st.booleans(),
)
def test_plain_csv_distances_equal_math_dist(
    coords: list[tuple[float, float]], header: bool
) -> None:
    """x,y rows, with or without a header, give coordinates and math.dist distances."""
    body = "".join(f"{x!r},{y!r}\n" for x, y in coords)
    text = ("x,y\n" if header else "") + body
    instance, labels = parse_cities_csv(text, "cities.csv")
    assert instance.n == len(coords)
    assert instance.metric == "euclidean"
    assert not instance.integral
    assert instance.coords is not None
    assert instance.coords.tolist() == [list(c) for c in coords]
    assert labels == [""] * len(coords)
    _check_distances(coords, instance.matrix)


@settings(max_examples=30, deadline=None)
@given(
    rows=st.lists(st.tuples(_value, _value, _labels), min_size=1, max_size=8),
    order=st.permutations(["x", "y", "label"]),
    label_word=st.sampled_from(["label", "name", "Label", "NAME"]),
)
def test_header_names_columns_in_any_order(
    rows: list[tuple[float, float, str]], order: list[str], label_word: str
) -> None:
    """A header naming x, y and label (or name) in any order maps each column by name."""
    header = ",".join(label_word if c == "label" else c for c in order)
    lines = [header]
    for x, y, label in rows:
        cell = {"x": repr(x), "y": repr(y), "label": label}
        lines.append(",".join(cell[c] for c in order))
    instance, labels = parse_cities_csv("\n".join(lines) + "\n", "cities.csv")
    assert instance.coords is not None
    assert instance.coords.tolist() == [[x, y] for x, y, _ in rows]
    assert labels == [label for _, _, label in rows]
    _check_distances([(x, y) for x, y, _ in rows], instance.matrix)


def test_label_column_without_header() -> None:
    """Without a header the third column is the label, and it may be left out on some rows."""
    text = "0,0,Home\n3,4,Mill Lane\n6,8\n"
    instance, labels = parse_cities_csv(text, "walk.csv")
    assert labels == ["Home", "Mill Lane", ""]
    assert instance.matrix[0, 1] == pytest.approx(5.0)
    assert instance.matrix[0, 2] == pytest.approx(10.0)
    assert instance.matrix[1, 2] == pytest.approx(math.dist((3, 4), (6, 8)))


def test_quoted_label_with_comma_and_crlf_and_blank_lines() -> None:
    """A quoted label may hold a comma; CRLF endings and blank lines are accepted."""
    text = 'x,y,name\r\n\r\n1.5,-2,"Smith, J."\r\n\r\n-0.5,7,Depot\r\n'
    instance, labels = parse_cities_csv(text, "c.csv")
    assert instance.n == 2
    assert labels == ["Smith, J.", "Depot"]
    assert instance.coords is not None
    assert instance.coords.tolist() == [[1.5, -2.0], [-0.5, 7.0]]
    assert instance.matrix[0, 1] == pytest.approx(math.dist((1.5, -2.0), (-0.5, 7.0)))


def test_name_is_the_file_stem() -> None:
    """The instance takes its name from the file's stem."""
    instance, _ = parse_cities_csv("1,2\n", "/some/where/harbour.csv")
    assert instance.name == "harbour"


#: (text, bad line, words the message must hold)
_BAD_ROWS = [
    pytest.param("1,2\n3,4\n5\n", 3, ["found 1"], id="one-field"),
    pytest.param("x,y\n1,2\n\n7\n", 4, ["found 1"], id="one-field-after-blank"),
    pytest.param("1,2\n3,4,a,b\n", 2, ["found 4"], id="four-fields"),
    pytest.param("1,2\n3,abc\n", 2, ["y", "abc"], id="non-numeric-y"),
    pytest.param("x,y\n1,2\nfoo,4\n", 3, ["x", "foo"], id="non-numeric-x"),
    pytest.param("1,2\n3,\n", 2, ["y"], id="empty-field"),
    pytest.param("1,2\nnan,4\n", 2, ["finite", "x"], id="nan-x"),
    pytest.param("1,2\n3,NaN\n", 2, ["finite", "y"], id="nan-y"),
    pytest.param("1,2\n3,-inf\n", 2, ["finite"], id="inf"),
    pytest.param("1,2\n3,1e999\n", 2, ["finite"], id="overflow"),
    pytest.param("label,x,y\nA,1,2\nB,2\n", 3, ["found 2"], id="header-short-row"),
    pytest.param("label,x,y\nA,1,2\nB,2,zz\n", 3, ["zz"], id="header-bad-y"),
    pytest.param("a,b\n1,2\n", 1, ["x", "y"], id="header-without-x-y"),
    pytest.param("\n\nlat,lon\n1,2\n", 3, ["x", "y"], id="header-after-blank-lines"),
]


@pytest.mark.parametrize(("text", "line", "words"), _BAD_ROWS)
def test_bad_row_names_its_line(text: str, line: int, words: list[str]) -> None:
    """A malformed row raises InputError whose text starts with path:line."""
    with pytest.raises(InputError) as caught:
        parse_cities_csv(text, "bad.csv")
    error = caught.value
    assert error.line == line, str(error)
    assert str(error).startswith(f"bad.csv:{line}: "), str(error)
    for word in words:
        assert word in error.message, (word, str(error))


@pytest.mark.parametrize("text", ["", "\n\n", " , \n", "x,y\n", "x,y,label\n\n"], ids=repr)
def test_no_cities_is_an_input_error(text: str) -> None:
    """A file with no city rows (empty, blank, or a header alone) raises InputError."""
    with pytest.raises(InputError, match="no cities"):
        parse_cities_csv(text, "empty.csv")


def test_overlong_field_is_an_input_error() -> None:
    """A field longer than the CSV reader's limit is an InputError, not a csv.Error."""
    text = "1,2\n3," + "4" * 200_000 + "\n"
    with pytest.raises(InputError) as caught:
        parse_cities_csv(text, "long.csv")
    assert caught.value.line == 2


def test_load_instance_dispatches_csv(tmp_path: Path) -> None:
    """load_instance reads .csv (any case) as a city list and other files as TSPLIB."""
    for name in ("towns.csv", "TOWNS.CSV"):
        path = tmp_path / name
        path.write_text("x,y\n0,0\n3,4\n")
        instance = load_instance(path)
        assert instance.metric == "euclidean"
        assert instance.matrix[0, 1] == pytest.approx(5.0)
    tsplib = load_instance(instance_path("burma14"))
    assert tsplib.metric == "GEO"
    as_tsplib = tmp_path / "towns.tsp"
    as_tsplib.write_text("x,y\n0,0\n3,4\n")
    with pytest.raises(InputError):
        load_instance(as_tsplib)


def test_load_instance_missing_csv(tmp_path: Path) -> None:
    """A .csv path that does not exist is an InputError naming the path."""
    path = tmp_path / "absent.csv"
    with pytest.raises(InputError, match=r"absent\.csv"):
        load_instance(path)
