"""Local improvement of a start tour: 2-opt and Or-opt, each run to a local optimum.

Both loop in Python over one position of the tour at a time and score every move from that
position in one numpy expression, so a sweep costs n array operations rather than n² Python
steps. A move is taken only when it shortens the tour by more than a tolerance (zero for
integer distances, a hair relative to the longest edge for float ones), so every run ends.
Both read d(i, j) as d(j, i), hence the symmetric matrix they insist on. Each returns a new
tour that begins with the same city as the tour it was given.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from tracer.base import IntArray, Matrix, PrunetrailError

#: Relative tolerance for float distances: a move must gain this share of the longest edge.
FLOAT_TOLERANCE = 1e-10

#: Longest segment Or-opt moves.
OR_OPT_SEGMENT = 3


def _checked_tour(matrix: Matrix, tour: IntArray) -> IntArray:
    """A copy of `tour`, after checking it visits each city of `matrix` exactly once."""
    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1] or matrix.shape[0] == 0:
        raise PrunetrailError(
            f"a distance matrix must be square with at least one city, not {matrix.shape}"
        )
    n = matrix.shape[0]
    t = np.array(tour, dtype=np.int64)
    if t.shape != (n,) or not np.array_equal(np.sort(t), np.arange(n)):
        raise PrunetrailError(f"the tour must visit each of the {n} cities exactly once")
    return t


def _tolerance(matrix: Matrix) -> float:
    """The gain a move must beat, after checking the matrix is symmetric."""
    if not np.array_equal(matrix, matrix.T):
        raise PrunetrailError(
            "2-opt and Or-opt need a symmetric distance matrix (d(i, j) = d(j, i) for every "
            "pair); this one is asymmetric"
        )
    if matrix.dtype.kind in "iu":
        return 0.0
    return FLOAT_TOLERANCE * float(np.abs(matrix).max())


def _two_opt(matrix: Matrix, tour: IntArray, tolerance: float) -> tuple[IntArray, bool]:
    """2-opt from `tour` to a local optimum; also whether any move was made.

    The tour is held with its first city repeated at the end, so edge k is (t[k], t[k+1])
    for every k. Reversing t[i+1..j] (1 <= i+1 <= j <= n-1) never moves t[0], so the copy
    at the end stays right without upkeep.
    """
    n = tour.size
    t = np.append(tour, tour[0])
    moved = False
    improved = n >= 4
    while improved:
        improved = False
        for i in range(n - 2):
            # Edge i against every later edge j that shares no city with it.
            last = n - 1 if i == 0 else n
            a, b = t[i], t[i + 1]
            c, e = t[i + 2 : last], t[i + 3 : last + 1]
            change = matrix[a, c] + matrix[b, e] - matrix[a, b] - matrix[c, e]
            k = int(np.argmin(change))
            if change[k] < -tolerance:
                j = i + 2 + k
                t[i + 1 : j + 1] = t[i + 1 : j + 1][::-1].copy()
                improved = moved = True
    return t[:n], moved


def _doubled(matrix: Matrix, tour: IntArray) -> tuple[IntArray, Matrix]:
    """The tour twice over, end to end, and the length of each of its edges."""
    twice = np.concatenate((tour, tour))
    return twice, matrix[twice[:-1], twice[1:]]


def _or_opt(matrix: Matrix, tour: IntArray, tolerance: float) -> tuple[IntArray, bool]:
    """Or-opt from `tour` to a local optimum; also whether any move was made.

    For each position the tour is read from there, so the segment is r[:length], its
    neighbours are r[-1] and r[length], and the places it can go are the edges of the path
    r[length:] (the edge joining that path's ends is where it came from). The segment's
    first city is r[0] whatever its length, so one row of distances from r[0] and one from
    r[length - 1], read along r, score every place for both orientations. The tour and
    its edge lengths are kept twice over, end to end, so each r is a view, not a copy.
    """
    n = tour.size
    t = tour.copy()
    twice, edges = _doubled(matrix, t)
    moved = False
    improved = True
    while improved:
        improved = False
        for i in range(n):
            r = twice[i : i + n]
            along = edges[i : i + n - 1]  # along[k] = d(r[k], r[k+1])
            from_first = matrix[r[0], r]
            for length in range(1, OR_OPT_SEGMENT + 1):
                if n - length < 2:
                    break
                from_last = matrix[r[length - 1], r]
                before, after = r[-1], r[length]
                saved = from_first[-1] + from_last[length] - matrix[before, after]
                edge = along[length:]
                ahead = from_first[length:-1] + from_last[length + 1 :] - edge
                turned = from_last[length:-1] + from_first[length + 1 :] - edge
                cost = np.minimum(ahead, turned) - saved
                k = int(np.argmin(cost))
                if cost[k] < -tolerance:
                    segment = r[:length] if ahead[k] <= turned[k] else r[length - 1 :: -1]
                    rest = r[length:]
                    t = np.concatenate((rest[: k + 1], segment, rest[k + 1 :]))
                    twice, edges = _doubled(matrix, t)
                    improved = moved = True
                    break
    return np.roll(t, -int(np.flatnonzero(t == tour[0])[0])), moved


def _no_improvement(matrix: Matrix, tour: IntArray) -> IntArray:
    """The tour unchanged (checked, copied): for a start tour used as built."""
    return _checked_tour(matrix, tour)


def two_opt(matrix: Matrix, tour: IntArray) -> IntArray:
    """2-opt: reverse a stretch of the tour while swapping two edges shortens it.

    Args:
        matrix: a symmetric distance matrix.
        tour: the start tour.

    Returns:
        A tour no single 2-opt move shortens.
    """
    t, tolerance = _checked_tour(matrix, tour), _tolerance(matrix)
    return _two_opt(matrix, t, tolerance)[0]


def or_opt(matrix: Matrix, tour: IntArray) -> IntArray:
    """Or-opt: move a run of 1, 2 or 3 cities, either way round, while that shortens it.

    Args:
        matrix: a symmetric distance matrix.
        tour: the start tour.

    Returns:
        A tour no single segment move shortens.
    """
    t, tolerance = _checked_tour(matrix, tour), _tolerance(matrix)
    return _or_opt(matrix, t, tolerance)[0]


def two_opt_or_opt(matrix: Matrix, tour: IntArray) -> IntArray:
    """2-opt and Or-opt in turn until neither finds a move.

    Each pass ends at its own local optimum, so the first pass that makes no move leaves a
    tour that is a local optimum of both.

    Args:
        matrix: a symmetric distance matrix.
        tour: the start tour.

    Returns:
        A tour neither a 2-opt move nor a segment move shortens.
    """
    t, tolerance = _checked_tour(matrix, tour), _tolerance(matrix)
    t, _ = _two_opt(matrix, t, tolerance)
    passes = (_or_opt, _two_opt)
    step = 0
    while True:
        t, moved = passes[step % 2](matrix, t, tolerance)
        if not moved:
            return t
        step += 1


#: Start-tour improvements by the name the CLI and the trail header use.
IMPROVEMENTS: dict[str, Callable[[Matrix, IntArray], IntArray]] = {
    "none": _no_improvement,
    "2opt": two_opt,
    "oropt": or_opt,
    "2opt+oropt": two_opt_or_opt,
}
