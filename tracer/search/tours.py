"""Start tours: a first incumbent for the exact search, built and then locally improved.

The search prunes against the incumbent, so a good start tour shrinks the tree it records.
Each construction takes one Python step per city (greedy edge: per accepted edge) and does
the work of that step as numpy operations over all cities, which keeps a 1,000-city start
tour well under a second. Constructions run on any square matrix; the improvements in
`tracer.search.improve` need it symmetric. Tours are int64 arrays of 0-based cities, each city
once, the closing edge implied.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from tracer.base import IntArray, Matrix, PrunetrailError
from tracer.search.improve import IMPROVEMENTS

#: How many of the sorted candidate edges greedy edge examines one by one before it drops,
#: in one array operation, every edge that can no longer join the tour.
_GREEDY_BATCH = 1024


def _check_square(matrix: Matrix) -> int:
    """The number of cities of a square matrix, or a clear error for any other shape."""
    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1] or matrix.shape[0] == 0:
        raise PrunetrailError(
            f"a distance matrix must be square with at least one city, not {matrix.shape}"
        )
    return int(matrix.shape[0])


def tour_length(matrix: Matrix, tour: IntArray) -> int | float:
    """The length of the closed tour, closing edge included.

    Args:
        matrix: the distance matrix.
        tour: the cities in visiting order.

    Returns:
        A Python int when the matrix holds integers (so lengths compare exactly), else a float.
    """
    total = matrix[tour, np.roll(tour, -1)].sum()
    return int(total) if matrix.dtype.kind in "iu" else float(total)


def rotate_to_start(tour: IntArray, start: int = 0) -> IntArray:
    """The same cycle read from `start`, so equal tours compare equal as arrays.

    Args:
        tour: the cities in visiting order.
        start: the city to put first.

    Returns:
        A new int64 array beginning with `start`.
    """
    where = np.flatnonzero(tour == start)
    if where.size == 0:
        raise PrunetrailError(f"city {start} is not in the tour")
    return np.roll(np.asarray(tour, dtype=np.int64), -int(where[0]))


def _walk(succ: IntArray) -> IntArray:
    """The tour read from city 0 by following each city's successor."""
    tour = np.empty(succ.size, dtype=np.int64)
    city = 0
    for k in range(succ.size):
        tour[k] = city
        city = int(succ[city])
    return tour


def nearest_neighbour(matrix: Matrix, start: int = 0) -> IntArray:
    """Nearest neighbour: from `start`, always go to the closest unvisited city.

    Args:
        matrix: the distance matrix.
        start: the first city.

    Returns:
        The tour, beginning at `start`; ties go to the lowest-numbered city.
    """
    n = _check_square(matrix)
    if not 0 <= start < n:
        raise PrunetrailError(f"start city {start} is not one of the {n} cities")
    tour = np.empty(n, dtype=np.int64)
    tour[0] = start
    remaining = np.delete(np.arange(n, dtype=np.int64), start)
    for k in range(1, n):
        nearest = int(np.argmin(matrix[tour[k - 1], remaining]))
        tour[k] = remaining[nearest]
        remaining = np.delete(remaining, nearest)
    return tour


def greedy_edge(matrix: Matrix) -> IntArray:
    """Greedy edge: take edges shortest first whenever they keep the tour a set of paths.

    An edge joins the tour when neither end already has two tour edges and the ends lie on
    different paths; after n - 1 edges one path remains, and its two ends close the tour.
    The matrix is read as symmetric (the edge {i, j} weighs matrix[i, j], i < j).

    Args:
        matrix: the distance matrix.

    Returns:
        The tour, beginning at city 0; ties between equal edges go to the lower pair.
    """
    n = _check_square(matrix)
    if n < 3:
        return np.arange(n, dtype=np.int64)
    rows, cols = np.triu_indices(n, k=1)
    order = np.argsort(matrix[rows, cols], kind="stable")
    u = rows[order].astype(np.int64)
    v = cols[order].astype(np.int64)
    degree = np.zeros(n, dtype=np.int64)
    path = np.arange(n, dtype=np.int64)  # a label per city, shared by the cities of a path
    neighbours = np.full((n, 2), -1, dtype=np.int64)
    joined = 0
    while joined < n - 1:
        usable = (degree[u] < 2) & (degree[v] < 2) & (path[u] != path[v])
        u, v = u[usable], v[usable]
        for a, b in zip(u[:_GREEDY_BATCH].tolist(), v[:_GREEDY_BATCH].tolist(), strict=True):
            if degree[a] == 2 or degree[b] == 2 or path[a] == path[b]:
                continue
            neighbours[a, degree[a]] = b
            neighbours[b, degree[b]] = a
            degree[a] += 1
            degree[b] += 1
            path[path == path[b]] = path[a]
            joined += 1
            if joined == n - 1:
                break
        u, v = u[_GREEDY_BATCH:], v[_GREEDY_BATCH:]
    ends = np.flatnonzero(degree < 2)
    neighbours[ends[0], 1] = ends[1]
    neighbours[ends[1], 1] = ends[0]
    tour = np.empty(n, dtype=np.int64)
    previous, city = -1, 0
    for k in range(n):
        tour[k] = city
        a, b = neighbours[city]
        previous, city = city, int(b if a == previous else a)
    return tour


def farthest_insertion(matrix: Matrix) -> IntArray:
    """Farthest insertion: place the city farthest from the tour where it costs least.

    Placing the outliers first fixes the tour's outline early, so later cities only fill
    it in. The tour grows from city 0 alone as a successor array; placing k between i and
    succ[i] costs d(i, k) + d(k, succ[i]) - d(i, succ[i]).

    Args:
        matrix: the distance matrix.

    Returns:
        The tour, beginning at city 0 (the city the construction starts from).
    """
    n = _check_square(matrix)
    succ = np.zeros(n, dtype=np.int64)
    placed = np.zeros(n, dtype=bool)
    placed[0] = True
    cities = np.arange(n, dtype=np.int64)
    in_tour = [0]
    near = matrix[0].copy()  # every city's distance to the nearest placed city
    for _ in range(n - 1):
        free = cities[~placed]
        k = int(free[np.argmax(near[free])])
        tour_cities = np.asarray(in_tour, dtype=np.int64)
        nxt = succ[tour_cities]
        cost = matrix[tour_cities, k] + matrix[k, nxt] - matrix[tour_cities, nxt]
        after = int(tour_cities[np.argmin(cost)])
        succ[after], succ[k] = k, succ[after]
        placed[k] = True
        in_tour.append(k)
        near = np.minimum(near, matrix[k])
    return _walk(succ)


def cheapest_insertion(matrix: Matrix) -> IntArray:
    """Cheapest insertion: place the city, and the place, that lengthen the tour least.

    The tour grows from city 0 alone as a successor array. Every unplaced city keeps its
    best place (the city to follow) and what it costs; a step breaks one edge, so only the
    cities whose best place was that edge look again over the whole tour, and the rest
    compare their best with the two new edges.

    Args:
        matrix: the distance matrix.

    Returns:
        The tour, beginning at city 0 (the city the construction starts from).
    """
    n = _check_square(matrix)
    succ = np.zeros(n, dtype=np.int64)
    placed = np.zeros(n, dtype=bool)
    placed[0] = True
    cities = np.arange(n, dtype=np.int64)
    in_tour = [0]
    best_after = np.zeros(n, dtype=np.int64)
    best_cost = matrix[0, :] + matrix[:, 0]
    for _ in range(n - 1):
        free = cities[~placed]
        k = int(free[np.argmin(best_cost[free])])
        after = int(best_after[k])
        before = int(succ[after])
        succ[after], succ[k] = k, before
        placed[k] = True
        in_tour.append(k)
        free = cities[~placed]
        stale = free[best_after[free] == after]
        if stale.size:
            tour_cities = np.asarray(in_tour, dtype=np.int64)
            nxt = succ[tour_cities]
            cost = (
                matrix[np.ix_(tour_cities, stale)]
                + matrix[np.ix_(stale, nxt)].T
                - matrix[tour_cities, nxt][:, None]
            )
            pick = np.argmin(cost, axis=0)
            best_after[stale] = tour_cities[pick]
            best_cost[stale] = cost[pick, np.arange(stale.size)]
        fresh = free[best_after[free] != after]
        for i, j in ((after, k), (k, before)):
            cost = matrix[i, fresh] + matrix[fresh, j] - matrix[i, j]
            better = cost < best_cost[fresh]
            best_after[fresh[better]] = i
            best_cost[fresh[better]] = cost[better]
    return _walk(succ)


#: Start-tour constructions by the name the CLI and the trail header use.
CONSTRUCTIONS: dict[str, Callable[[Matrix], IntArray]] = {
    "nn": nearest_neighbour,
    "greedy": greedy_edge,
    "farthest": farthest_insertion,
    "cheapest": cheapest_insertion,
}


def start_tour(matrix: Matrix, start: str = "nn", improve: str = "2opt+oropt") -> IntArray:
    """The first incumbent: a construction, then a local improvement, read from city 0.

    Args:
        matrix: the distance matrix.
        start: a key of `CONSTRUCTIONS`.
        improve: a key of `tracer.search.improve.IMPROVEMENTS`.

    Returns:
        An int64 permutation of the cities beginning with city 0.
    """
    if start not in CONSTRUCTIONS:
        raise PrunetrailError(
            f"unknown start tour {start!r}; choose one of {', '.join(CONSTRUCTIONS)}"
        )
    if improve not in IMPROVEMENTS:
        raise PrunetrailError(
            f"unknown improvement {improve!r}; choose one of {', '.join(IMPROVEMENTS)}"
        )
    tour = IMPROVEMENTS[improve](matrix, CONSTRUCTIONS[start](matrix))
    return rotate_to_start(tour)
