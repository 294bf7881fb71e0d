"""Our distance rules against outside truth: TSPLIB's published optima and its format text.

Two kinds of reference, both from TSPLIB (G. Reinelt, "TSPLIB — A Traveling Salesman Problem
Library", ORSA Journal on Computing 3(4):376-384, 1991):

- the library's table of optimal tour lengths (bestSolutions.txt, mirrored in
  `tests/reference.py`): each optimal tour it ships, measured with our metric code, must have
  exactly the published length;
- the TSPLIB format description's distance rules: single distances worked out by hand, and a
  scalar re-implementation with `math` written here from the rules text (never from
  `tracer.base.metrics`), compared with the vectorised matrices.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.reference import (
    DATA,
    TSPLIB_ATSP_OPTIMUM,
    TSPLIB_OPTIMUM,
    instance_path,
    opt_tour_path,
)
from tracer.base.metrics import distance_matrix
from tracer.formats.load import load_instance, load_tour

OPTIMA_SOURCE = "TSPLIB, Reinelt 1991, table of optimal tour lengths (bestSolutions.txt)"
RULES_SOURCE = "TSPLIB format description, distance rules"

#: Edge-weight type (and, for EXPLICIT, format) of each instance with an optimal tour here,
#: as stated in its TSPLIB file header (see tests/data/README.md).
OPT_TOUR_KINDS: dict[str, tuple[str, str | None]] = {
    "att48": ("ATT", None),
    "berlin52": ("EUC_2D", None),
    "eil51": ("EUC_2D", None),
    "eil76": ("EUC_2D", None),
    "st70": ("EUC_2D", None),
    "pr76": ("EUC_2D", None),
    "kroA100": ("EUC_2D", None),
    "ulysses16": ("GEO", None),
    "ulysses22": ("GEO", None),
    "gr24": ("EXPLICIT", "LOWER_DIAG_ROW"),
    "gr48": ("EXPLICIT", "LOWER_DIAG_ROW"),
    "bayg29": ("EXPLICIT", "UPPER_ROW"),
    "fri26": ("EXPLICIT", "LOWER_DIAG_ROW"),
    "bays29": ("EXPLICIT", "FULL_MATRIX"),
}


def _opt_tour_names() -> list[str]:
    return sorted(p.name.removesuffix(".opt.tour") for p in DATA.glob("*.opt.tour"))


def _tour_length(matrix: np.ndarray, tour: np.ndarray) -> int:
    """Length of the closed tour, summed edge by edge in plain Python."""
    n = len(tour)
    return sum(int(matrix[tour[k], tour[(k + 1) % n]]) for k in range(n))


def _header_value(name: str, key: str) -> str | None:
    text = instance_path(name).read_text()
    match = re.search(rf"^\s*{key}\s*:\s*(\S+)", text, re.MULTILINE)
    return match.group(1) if match else None


def test_every_opt_tour_has_a_published_optimum() -> None:
    """Every optimal tour shipped in tests/data is one of the instances checked below."""
    assert _opt_tour_names() == sorted(OPT_TOUR_KINDS)


def _opt_tour_comment_length(name: str) -> int | None:
    """The optimal length TSPLIB's own .opt.tour file states in its COMMENT, e.g. "(426)"."""
    path = opt_tour_path(name)
    assert path is not None
    match = re.search(r"^\s*COMMENT\s*:.*\((\d+)\)", path.read_text(), re.MULTILINE)
    return int(match.group(1)) if match else None


def test_reference_table_matches_the_opt_tour_files() -> None:
    """tests/reference.py agrees with every length TSPLIB's .opt.tour files state themselves."""
    stated = {name: _opt_tour_comment_length(name) for name in _opt_tour_names()}
    checked = {name: length for name, length in stated.items() if length is not None}
    assert len(checked) >= 10  # most of TSPLIB's tour files name their length
    for name, length in checked.items():
        # Source: the instance's TSPLIB .opt.tour file, COMMENT line.
        assert TSPLIB_OPTIMUM[name] == length, f"{name}: {OPTIMA_SOURCE}"


def test_reference_table_matches_the_data_readme() -> None:
    """tests/data/README.md's table of optima holds the same numbers as tests/reference.py."""
    text = (DATA / "README.md").read_text()
    rows = re.findall(r"^\| (\w+)(?: \(ATSP\))? \| \d+ \| [^|]+ \| (\d+) \|$", text, re.MULTILINE)
    table = {name: int(value) for name, value in rows}
    assert table == {**TSPLIB_OPTIMUM, **TSPLIB_ATSP_OPTIMUM}


@pytest.mark.parametrize("name", sorted(OPT_TOUR_KINDS))
def test_opt_tour_length_equals_published_optimum(name: str) -> None:
    """The shipped optimal tour, measured with our metric code, has TSPLIB's optimal length."""
    instance = load_instance(instance_path(name))
    weight_type, weight_format = OPT_TOUR_KINDS[name]
    assert instance.metric == weight_type
    assert _header_value(name, "EDGE_WEIGHT_FORMAT") == weight_format
    tour_file = opt_tour_path(name)
    assert tour_file is not None
    tour = load_tour(tour_file, instance)
    assert sorted(tour.tolist()) == list(range(instance.n))
    # Source: TSPLIB, Reinelt 1991, table of optimal tour lengths; the tour is TSPLIB's file.
    assert _tour_length(instance.matrix, tour) == TSPLIB_OPTIMUM[name], OPTIMA_SOURCE


@pytest.mark.parametrize("name", sorted(TSPLIB_ATSP_OPTIMUM))
def test_atsp_files_load_asymmetric(name: str) -> None:
    """TSPLIB's asymmetric instances load as explicit, non-symmetric matrices."""
    instance = load_instance(instance_path(name))
    dimension = _header_value(name, "DIMENSION")
    assert dimension is not None
    assert instance.n == int(dimension)
    assert instance.metric == "EXPLICIT"
    assert instance.matrix.shape == (instance.n, instance.n)
    assert instance.symmetric is False


# --- The distance rules, written here from the TSPLIB format description ----------------


def _nint(x: float) -> int:
    return int(x + 0.5)


def ref_euc_2d(a: tuple[float, float], b: tuple[float, float]) -> int:
    return _nint(math.sqrt((a[0] - b[0]) ** 2 + (a[1] - b[1]) ** 2))


def ref_ceil_2d(a: tuple[float, float], b: tuple[float, float]) -> int:
    return math.ceil(math.sqrt((a[0] - b[0]) ** 2 + (a[1] - b[1]) ** 2))


def ref_man_2d(a: tuple[float, float], b: tuple[float, float]) -> int:
    return _nint(abs(a[0] - b[0]) + abs(a[1] - b[1]))


def ref_max_2d(a: tuple[float, float], b: tuple[float, float]) -> int:
    return max(_nint(abs(a[0] - b[0])), _nint(abs(a[1] - b[1])))


def ref_att(a: tuple[float, float], b: tuple[float, float]) -> int:
    r = math.sqrt(((a[0] - b[0]) ** 2 + (a[1] - b[1]) ** 2) / 10.0)
    t = _nint(r)
    return t + 1 if t < r else t


def _geo_rad(x: float) -> float:
    deg = int(x)
    minutes = x - deg
    return 3.141592 * (deg + 5.0 * minutes / 3.0) / 180.0


def ref_geo_real(a: tuple[float, float], b: tuple[float, float]) -> float:
    """The GEO value before the final truncation: RRR * acos(...) + 1."""
    lat_a, lon_a = _geo_rad(a[0]), _geo_rad(a[1])
    lat_b, lon_b = _geo_rad(b[0]), _geo_rad(b[1])
    q1 = math.cos(lon_a - lon_b)
    q2 = math.cos(lat_a - lat_b)
    q3 = math.cos(lat_a + lat_b)
    return 6378.388 * math.acos(0.5 * ((1.0 + q1) * q2 - (1.0 - q1) * q3)) + 1.0


def ref_geo(a: tuple[float, float], b: tuple[float, float]) -> int:
    return int(ref_geo_real(a, b))


REFERENCE_RULES = {
    "EUC_2D": ref_euc_2d,
    "CEIL_2D": ref_ceil_2d,
    "MAN_2D": ref_man_2d,
    "MAX_2D": ref_max_2d,
    "ATT": ref_att,
    "GEO": ref_geo,
}

#: Single distances worked out by hand from the rules text: (metric, a, b, distance, why).
HAND_CASES = [
    ("EUC_2D", (0.0, 0.0), (3.0, 4.0), 5, "exact"),
    ("EUC_2D", (0.0, 0.0), (1.0, 1.0), 1, "sqrt 2 = 1.414 rounds down"),
    ("EUC_2D", (0.0, 0.0), (1.5, 2.0), 3, "2.5 rounds half up (nint, not banker's)"),
    ("EUC_2D", (10.0, -2.0), (13.0, 2.0), 5, "negative coordinate"),
    ("CEIL_2D", (0.0, 0.0), (3.0, 4.1), 6, "sqrt 25.81 = 5.08 goes up"),
    ("CEIL_2D", (0.0, 0.0), (1.0, 1.0), 2, "sqrt 2 goes up"),
    ("CEIL_2D", (0.0, 0.0), (3.0, 4.0), 5, "exact stays"),
    ("ATT", (0.0, 0.0), (10.0, 0.0), 4, "r = sqrt 10 = 3.16, nint 3 < r, so 4"),
    ("ATT", (0.0, 0.0), (12.0, 0.0), 4, "r = sqrt 14.4 = 3.79, nint 4 >= r, stays 4"),
    ("ATT", (0.0, 0.0), (30.0, 10.0), 10, "r = sqrt 100 = 10 exactly, stays 10"),
    ("MAN_2D", (0.0, 0.0), (0.25, 3.25), 4, "3.5 rounds half up"),
    ("MAN_2D", (0.0, 0.0), (-1.5, -1.0), 3, "negative deltas, 2.5 rounds up"),
    ("MAN_2D", (2.0, 2.0), (3.0, 3.2), 2, "2.2 rounds down"),
    ("MAX_2D", (0.0, 0.0), (-2.5, 1.4), 3, "max(nint 2.5, nint 1.4) = max(3, 1)"),
    ("MAX_2D", (0.0, 0.0), (0.4, 7.6), 8, "max(nint 0.4, nint 7.6) = max(0, 8)"),
    # GEO: -12.30 is -12 degrees and -30 minutes (truncation), i.e. -12.5 degrees; with the
    # longitude equal the distance is RRR * PI * 12.5 / 180 + 1 = 1391.548 + 1, truncated.
    # (Flooring the degrees instead would give -11.833 degrees and 1318.)
    ("GEO", (-12.30, 20.0), (0.0, 20.0), 1392, "truncated degrees of a negative latitude"),
    # One degree of longitude along the equator: RRR * PI / 180 + 1 = 111.32 + 1.
    ("GEO", (0.0, 10.0), (0.0, 11.0), 112, "one degree along the equator"),
]


@pytest.mark.parametrize(("metric", "a", "b", "expected", "why"), HAND_CASES)
def test_hand_computed_distance(
    metric: str, a: tuple[float, float], b: tuple[float, float], expected: int, why: str
) -> None:
    """A single distance worked by hand from the TSPLIB rules text matches our metric code."""
    # Source: TSPLIB format description, distance rules (nint(x) = int(x + 0.5)).
    assert REFERENCE_RULES[metric](a, b) == expected, f"reference rule: {why}"
    matrix = distance_matrix(np.array([a, b]), metric)
    assert int(matrix[0, 1]) == expected, f"{metric} {why} ({RULES_SOURCE})"
    assert int(matrix[1, 0]) == expected
    assert int(matrix[0, 0]) == int(matrix[1, 1]) == 0


_coordinate = st.floats(min_value=-5000.0, max_value=5000.0, allow_nan=False).map(
    lambda v: round(v, 3)
)
#: GEO coordinates as TSPLIB writes them, DDD.MM with a sign, kept away from the poles.
_geo_coordinate = st.tuples(
    st.sampled_from([-1.0, 1.0]),
    st.integers(min_value=0, max_value=79),
    st.integers(min_value=0, max_value=59),
).map(lambda sdm: sdm[0] * (sdm[1] + sdm[2] / 100.0))


@settings(max_examples=40, deadline=None)
@given(
    metric=st.sampled_from(sorted(REFERENCE_RULES)),
    data=st.data(),
)
def test_matrix_matches_scalar_rules(metric: str, data: st.DataObject) -> None:
    """Every cell of a random instance's matrix matches the rules text applied with math."""
    coord = _geo_coordinate if metric == "GEO" else _coordinate
    points = data.draw(st.lists(st.tuples(coord, coord), min_size=2, max_size=8))
    matrix = distance_matrix(np.array(points, dtype=np.float64), metric)
    rule = REFERENCE_RULES[metric]
    for i, a in enumerate(points):
        for j, b in enumerate(points):
            if i == j:
                assert matrix[i, j] == 0
                continue
            if metric == "GEO":
                real = ref_geo_real(a, b)
                if abs(real - round(real)) < 1e-6:
                    continue  # a last-bit difference between cos implementations could tip it
            assert int(matrix[i, j]) == rule(a, b), f"{metric} {a} {b} ({RULES_SOURCE})"
