"""Start tours: constructions and local improvements, checked by brute force written here.

Every check that a tour is a local optimum enumerates all moves in plain Python (its own
loops, its own tour lengths), never the vectorised move scoring in `tracer.search.improve`; each
construction is checked against a slow, literal reading of its rule. Quality is judged
against TSPLIB's published optima (G. Reinelt, "TSPLIB — A Traveling Salesman Problem
Library", ORSA Journal on Computing 3(4):376-384, 1991; `tests/reference.py`).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.reference import TSPLIB_OPTIMUM
from tracer.base.errors import PrunetrailError
from tracer.base.instance import Instance
from tracer.base.metrics import distance_matrix
from tracer.search.improve import IMPROVEMENTS, or_opt, two_opt, two_opt_or_opt
from tracer.search.tours import (
    CONSTRUCTIONS,
    cheapest_insertion,
    farthest_insertion,
    greedy_edge,
    nearest_neighbour,
    rotate_to_start,
    start_tour,
    tour_length,
)

LoadReference = Callable[[str], Instance]
FAST = settings(max_examples=25, deadline=None)
#: Float gains smaller than this share of the longest edge count as no gain.
FLOAT_SLACK = 1e-9


@st.composite
def symmetric_matrices(draw: st.DrawFn, max_n: int = 9) -> np.ndarray:
    """A random symmetric matrix with a zero diagonal, integer or float."""
    n = draw(st.integers(1, max_n))
    upper = draw(st.lists(st.integers(0, 1000), min_size=n * (n - 1) // 2, max_size=n * n))
    m = np.zeros((n, n), dtype=np.int64)
    rows, cols = np.triu_indices(n, k=1)
    m[rows, cols] = upper[: rows.size]
    m += m.T
    if draw(st.booleans()):
        return m / 7.0
    return m


def _random_cities(n: int, seed: int, metric: str = "euclidean") -> np.ndarray:
    """The distance matrix of n cities drawn uniformly from a square, seeded."""
    coords = np.random.default_rng(seed).uniform(0.0, 1000.0, size=(n, 2))
    return distance_matrix(coords, metric)


def _length(d: list[list[float]], tour: list[int]) -> float:
    """Tour length by plain summation, closing edge included."""
    return sum(d[tour[k - 1]][tour[k]] for k in range(len(tour)))


def _slack(matrix: np.ndarray) -> float:
    """How much a move may gain and still count as none."""
    if matrix.dtype.kind in "iu":
        return 0.0
    return FLOAT_SLACK * float(np.abs(matrix).max())


def _is_permutation(tour: np.ndarray, n: int) -> bool:
    """Whether `tour` is an int64 array holding each of 0..n-1 once."""
    return tour.dtype == np.int64 and sorted(tour.tolist()) == list(range(n))


def _best_two_opt_gain(matrix: np.ndarray, tour: np.ndarray) -> float:
    """The largest shortening any single 2-opt move gives, by trying every pair of edges."""
    d = matrix.tolist()
    t = tour.tolist()
    n = len(t)
    base = _length(d, t)
    best = 0.0
    for i in range(n):
        for j in range(i + 2, n):
            if i == 0 and j == n - 1:
                continue  # the two edges share city t[0]
            moved = t[: i + 1] + t[i + 1 : j + 1][::-1] + t[j + 1 :]
            best = max(best, base - _length(d, moved))
    return best


def _best_segment_gain(matrix: np.ndarray, tour: np.ndarray) -> float:
    """The largest shortening any move of 1-3 consecutive cities gives, trying every one."""
    d = matrix.tolist()
    t = tour.tolist()
    n = len(t)
    base = _length(d, t)
    best = 0.0
    for start in range(n):
        r = t[start:] + t[:start]
        for size in (1, 2, 3):
            if size > n - 2:
                break
            segment, rest = r[:size], r[size:]
            for cut in range(1, len(rest)):
                for piece in (segment, segment[::-1]):
                    moved = rest[:cut] + piece + rest[cut:]
                    best = max(best, base - _length(d, moved))
    return best


@pytest.mark.parametrize("name", list(CONSTRUCTIONS))
@FAST
@given(matrix=symmetric_matrices())
def test_constructions_return_permutations(name: str, matrix: np.ndarray) -> None:
    """Every construction visits each city of a random matrix exactly once."""
    assert _is_permutation(CONSTRUCTIONS[name](matrix), matrix.shape[0])


@pytest.mark.parametrize("name", list(IMPROVEMENTS))
@FAST
@given(matrix=symmetric_matrices(), data=st.data())
def test_improvements_return_shorter_permutations(
    name: str, matrix: np.ndarray, data: st.DataObject
) -> None:
    """Every improvement returns a permutation no longer than its start, same first city."""
    n = matrix.shape[0]
    start = np.array(data.draw(st.permutations(range(n))), dtype=np.int64)
    tour = IMPROVEMENTS[name](matrix, start)
    assert _is_permutation(tour, n)
    assert tour[0] == start[0]
    assert tour_length(matrix, tour) <= tour_length(matrix, start) + _slack(matrix)


@FAST
@given(matrix=symmetric_matrices(), data=st.data())
def test_two_opt_leaves_no_improving_move_random(matrix: np.ndarray, data: st.DataObject) -> None:
    """On random matrices no pair of edges of a 2-opt tour can be swapped to shorten it."""
    start = np.array(data.draw(st.permutations(range(matrix.shape[0]))), dtype=np.int64)
    assert _best_two_opt_gain(matrix, two_opt(matrix, start)) <= _slack(matrix)


@pytest.mark.parametrize("name", ["bayg29", "eil51", "kroA100"])
def test_two_opt_leaves_no_improving_move_reference(
    load_reference: LoadReference, name: str
) -> None:
    """From nearest neighbour on a TSPLIB instance, 2-opt leaves no improving edge swap."""
    matrix = load_reference(name).matrix
    tour = two_opt(matrix, nearest_neighbour(matrix))
    assert _best_two_opt_gain(matrix, tour) == 0


def test_two_opt_leaves_no_improving_move_float() -> None:
    """On random float distances 2-opt stops with no swap gaining beyond the tolerance."""
    matrix = _random_cities(60, seed=3)
    tour = two_opt(matrix, nearest_neighbour(matrix))
    assert _best_two_opt_gain(matrix, tour) <= _slack(matrix)


@FAST
@given(matrix=symmetric_matrices(), data=st.data())
def test_or_opt_leaves_no_improving_move_random(matrix: np.ndarray, data: st.DataObject) -> None:
    """On random matrices no run of 1-3 cities of an Or-opt tour can be moved to shorten it."""
    start = np.array(data.draw(st.permutations(range(matrix.shape[0]))), dtype=np.int64)
    assert _best_segment_gain(matrix, or_opt(matrix, start)) <= _slack(matrix)


@pytest.mark.parametrize("name", ["gr24", "att48"])
def test_or_opt_leaves_no_improving_move_reference(
    load_reference: LoadReference, name: str
) -> None:
    """From nearest neighbour on a TSPLIB instance, Or-opt leaves no improving segment move."""
    matrix = load_reference(name).matrix
    tour = or_opt(matrix, nearest_neighbour(matrix))
    assert _best_segment_gain(matrix, tour) == 0


def test_or_opt_leaves_no_improving_move_float() -> None:
    """On random float distances Or-opt stops with no move gaining beyond the tolerance."""
    matrix = _random_cities(40, seed=5)
    tour = or_opt(matrix, nearest_neighbour(matrix))
    assert _best_segment_gain(matrix, tour) <= _slack(matrix)


def test_combined_improvement_is_local_optimum_of_both() -> None:
    """2-opt then Or-opt in turn ends where neither kind of move shortens the tour."""
    matrix = _random_cities(45, seed=11, metric="EUC_2D")
    tour = two_opt_or_opt(matrix, greedy_edge(matrix))
    assert _best_two_opt_gain(matrix, tour) == 0
    assert _best_segment_gain(matrix, tour) == 0


@pytest.mark.parametrize("name", sorted(TSPLIB_OPTIMUM))
def test_nn_two_opt_close_to_published_optimum(load_reference: LoadReference, name: str) -> None:
    """A nearest-neighbour + 2-opt tour is within 10% of the TSPLIB optimum, never below it.

    Optima: TSPLIB (Reinelt 1991), via tests/reference.py. The 10% allowance is a rule of
    thumb from memory of Johnson & McGeoch's experimental study of local search for the TSP
    (2-opt tours land a few percent above optimal), not a figure quoted from it.
    """
    matrix = load_reference(name).matrix
    length = tour_length(matrix, start_tour(matrix, "nn", "2opt"))
    optimum = TSPLIB_OPTIMUM[name]
    assert optimum <= length <= 1.10 * optimum


def test_nearest_neighbour_always_takes_the_closest_city() -> None:
    """Each step of nearest neighbour goes to an unvisited city at the least distance."""
    matrix = _random_cities(50, seed=7, metric="EUC_2D")
    tour = nearest_neighbour(matrix, start=17).tolist()
    assert tour[0] == 17
    for k in range(1, len(tour)):
        unvisited = set(range(50)) - set(tour[:k])
        assert matrix[tour[k - 1], tour[k]] == min(matrix[tour[k - 1], j] for j in unvisited)


def test_greedy_edge_takes_the_literal_greedy_edges() -> None:
    """Greedy edge uses exactly the edges a slow shortest-first scan with path checks picks."""
    n = 40
    matrix = _random_cities(n, seed=13)
    edges = sorted((matrix[i, j], i, j) for i in range(n) for j in range(i + 1, n))
    degree = [0] * n
    label = list(range(n))
    chosen: set[frozenset[int]] = set()
    for _, i, j in edges:
        if degree[i] < 2 and degree[j] < 2 and label[i] != label[j]:
            chosen.add(frozenset((i, j)))
            degree[i] += 1
            degree[j] += 1
            old = label[j]
            label = [label[i] if x == old else x for x in label]
    ends = [c for c in range(n) if degree[c] < 2]
    chosen.add(frozenset(ends))
    t = greedy_edge(matrix).tolist()
    assert {frozenset((t[k - 1], t[k])) for k in range(n)} == chosen


def _places(matrix: np.ndarray, tour: list[int], city: int) -> list[tuple[float, int]]:
    """What placing `city` after each position of `tour` adds to its length, per position."""
    size = len(tour)
    return [
        (
            matrix[tour[p], city]
            + matrix[city, tour[(p + 1) % size]]
            - matrix[tour[p], tour[(p + 1) % size]],
            p,
        )
        for p in range(size)
    ]


def _slow_insertion(matrix: np.ndarray, farthest: bool) -> list[int]:
    """Insertion from city 0 by trying every city and every place at every step."""
    n = matrix.shape[0]
    tour = [0]
    while len(tour) < n:
        free = [c for c in range(n) if c not in tour]
        if farthest:
            city = max(free, key=lambda c: min(matrix[t, c] for t in tour))
            _, place = min(_places(matrix, tour, city))
        else:
            _, place, city = min((*min(_places(matrix, tour, c)), c) for c in free)
        tour.insert(place + 1, city)
    return tour


@pytest.mark.parametrize(
    ("build", "farthest"), [(farthest_insertion, True), (cheapest_insertion, False)]
)
def test_insertions_match_the_literal_rule(
    build: Callable[[np.ndarray], np.ndarray], farthest: bool
) -> None:
    """Farthest and cheapest insertion build the tour a slow step-by-step version builds."""
    matrix = _random_cities(30, seed=17)
    assert build(matrix).tolist() == _slow_insertion(matrix, farthest)


def test_tour_length_is_exact_python_int_on_integer_matrices(load_reference: LoadReference) -> None:
    """Tour length on an integer matrix is a Python int equal to the plain edge sum."""
    matrix = load_reference("burma14").matrix
    tour = np.arange(14, dtype=np.int64)[::-1].copy()
    length = tour_length(matrix, tour)
    assert type(length) is int
    assert length == _length(matrix.tolist(), tour.tolist())
    assert type(tour_length(matrix / 2.0, tour)) is float


def test_rotate_to_start_keeps_the_cycle() -> None:
    """Rotation puts the chosen city first and keeps the visiting order."""
    tour = np.array([3, 1, 4, 0, 2], dtype=np.int64)
    assert rotate_to_start(tour).tolist() == [0, 2, 3, 1, 4]
    assert rotate_to_start(tour, start=4).tolist() == [4, 0, 2, 3, 1]
    with pytest.raises(PrunetrailError, match="city 7"):
        rotate_to_start(tour, start=7)


@pytest.mark.parametrize("improve", list(IMPROVEMENTS))
@pytest.mark.parametrize("start", list(CONSTRUCTIONS))
def test_start_tour_begins_at_city_zero(
    load_reference: LoadReference, start: str, improve: str
) -> None:
    """Every construction and improvement pair gives an int64 permutation from city 0."""
    matrix = load_reference("ulysses22").matrix
    tour = start_tour(matrix, start, improve)
    assert _is_permutation(tour, 22)
    assert tour[0] == 0


def test_start_tour_rejects_unknown_names() -> None:
    """An unknown construction or improvement is a user error that lists the choices."""
    matrix = _random_cities(5, seed=1)
    with pytest.raises(PrunetrailError, match="greedy"):
        start_tour(matrix, start="spiral")
    with pytest.raises(PrunetrailError, match="2opt"):
        start_tour(matrix, improve="3opt")


@pytest.mark.parametrize("improve", ["2opt", "oropt", "2opt+oropt"])
def test_improvements_reject_asymmetric_matrices(
    load_reference: LoadReference, improve: str
) -> None:
    """2-opt and Or-opt refuse an asymmetric matrix with a clear message."""
    matrix = load_reference("br17").matrix
    with pytest.raises(PrunetrailError, match="symmetric"):
        IMPROVEMENTS[improve](matrix, nearest_neighbour(matrix))


def test_improvements_reject_a_tour_that_is_not_a_permutation() -> None:
    """A tour that repeats or misses a city is refused rather than improved."""
    matrix = _random_cities(5, seed=2)
    with pytest.raises(PrunetrailError, match="exactly once"):
        two_opt(matrix, np.array([0, 1, 2, 2, 4], dtype=np.int64))
