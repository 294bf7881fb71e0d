"""The exact-completion oracle: the cheapest finish of every node, from one Held–Karp table.

For a small instance, one dynamic programme over the subsets of cities 1..n-1 gives, for
every path end and every set of unvisited cities, the length of the cheapest way through
them all and back to city 0. A node's best possible completion is then its path length
plus one table entry, so every node of a trail of any bound kind, ours or a foreign
solver's, can be judged: a bound above it is not a lower bound, a prune with it below the
incumbent cut away a better tour.

It is written apart from the search (no import of it) and shares nothing with the engine
but the distance matrix. The table is held as (n-1) rows, one per end city j, each over
the 2^(n-2) subsets of the other cities (j's own bit squeezed out, since j is never
unvisited at its own end), so it takes (n-1)·2^(n-2) entries: int32 where every entry
fits (integer metrics), else int64, float64 for fractional lengths. At n = 20 that is
20 MB of int32; at 24 cities 386 MB. A memory limit refuses larger tables before
anything is allocated.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numba import njit
from numpy.typing import NDArray

from tracer.analysis.tree_index import TreeIndex
from tracer.base import CITY, DEPTH, InputError, Instance, Trail

#: Most cities the oracle takes (the table doubles with each city).
ORACLE_MAX_CITIES = 24
#: Table size refused unless the caller raises the limit.
DEFAULT_MEMORY_LIMIT = 1 << 30


class OracleSizeError(InputError):
    """The oracle will not build a table for this instance (too many cities, or memory)."""


@njit(cache=True, nogil=True)
def _squeeze(subset: int, j: int) -> int:
    """The subset with bit j removed and the higher bits moved down one place."""
    low = subset & ((1 << j) - 1)
    return low | ((subset >> (j + 1)) << j)


@njit(cache=True, nogil=True)
def _fill(d: np.ndarray, cost: np.ndarray) -> None:
    """Held–Karp from the end: cost[j, S'] = cheapest path from city j+1 through S to 0.

    S runs up in numeric order, so every S minus one city is done before S. For each S
    the entries of its cities k (the cost of going on from k) are gathered once and then
    reused by every end city j outside S.
    """
    m = d.shape[0] - 1
    through = np.empty(m, dtype=cost.dtype)
    via = np.empty(m, dtype=np.int64)
    for subset in range(1 << m):
        count = 0
        for k in range(m):
            if subset >> k & 1:
                through[count] = cost[k, _squeeze(subset ^ (1 << k), k)]
                via[count] = k + 1
                count += 1
        for j in range(m):
            if subset >> j & 1:
                continue
            if count == 0:
                best = d[j + 1, 0]
            else:
                best = d[j + 1, via[0]] + through[0]
                for t in range(1, count):
                    value = d[j + 1, via[t]] + through[t]
                    if value < best:
                        best = value
            cost[j, _squeeze(subset, j)] = best


@njit(cache=True, nogil=True)
def _from_start(d: np.ndarray, cost: np.ndarray, subset: int) -> float:
    """Cheapest way from city 0 through the cities of `subset` (bits for cities 1..) to 0."""
    m = d.shape[0] - 1
    if subset == 0:
        return 0.0
    best = math.inf
    for j in range(m):
        if subset >> j & 1:
            value = float(d[0, j + 1] + cost[j, _squeeze(subset ^ (1 << j), j)])
            if value < best:
                best = value
    return best


@njit(cache=True, nogil=True)
def _completions(
    city: np.ndarray, depth: np.ndarray, parent: np.ndarray, d: np.ndarray, cost: np.ndarray
) -> np.ndarray:
    """Path length plus cheapest finish of every node (NaN on a path that is not one).

    Pre-order: a node's parent is the last node one level up, so the visited mask and the
    path length of each open level sit on a stack indexed by depth. The path length is
    recomputed from the matrix, not read from the trail.
    """
    count = city.shape[0]
    n = d.shape[0]
    everyone = (1 << (n - 1)) - 1
    out = np.empty(count, dtype=np.float64)
    top = int(depth.max()) + 1 if count else 1
    masks = np.zeros(top, dtype=np.int64)
    lengths = np.zeros(top, dtype=np.float64)
    ok = np.zeros(top, dtype=np.bool_)
    for i in range(count):
        c = int(city[i])
        level = int(depth[i])
        p = int(parent[i])
        good = c < n
        if p == -1:
            good = good and c == 0
            mask = 1
            length = 0.0
        elif p >= 0 and level >= 1 and ok[level - 1]:
            mask = masks[level - 1]
            good = good and not (mask >> c & 1)
            length = lengths[level - 1] + float(d[int(city[p]), c]) if good else 0.0
            mask |= 1 << c
        else:
            good = False
            mask = 0
            length = 0.0
        if level < top:
            masks[level] = mask
            lengths[level] = length
            ok[level] = good
        if not good:
            out[i] = np.nan
            continue
        unvisited = everyone & ~(mask >> 1)
        if c == 0:
            out[i] = length + _from_start(d, cost, unvisited)
        else:
            out[i] = length + float(cost[c - 1, _squeeze(unvisited, c - 1)])
    return out


def table_bytes(n: int, integral: bool = True, longest: float = 0.0) -> int:
    """Bytes the completion table of an n-city instance takes."""
    if n < 2:
        return 0
    return (n - 1) * (1 << (n - 2)) * _table_dtype(n, integral, longest).itemsize


def _table_dtype(n: int, integral: bool, longest: float) -> np.dtype[Any]:
    """int32 when n edges of the longest length fit, else int64; float64 for fractions."""
    if not integral:
        return np.dtype(np.float64)
    if n * longest < np.iinfo(np.int32).max:
        return np.dtype(np.int32)
    return np.dtype(np.int64)


@dataclass(frozen=True, eq=False)
class CompletionTable:
    """The cheapest finish from every (path end, unvisited set) of one instance.

    Attributes:
        n: the instance's city count.
        matrix: its distance matrix (int64 or float64).
        cost: (n-1, 2^(n-2)): row j-1 for end city j, over the other cities' subsets.
        optimum: the optimal tour's length.
    """

    n: int
    matrix: NDArray[Any]
    cost: NDArray[Any]
    optimum: float

    @property
    def nbytes(self) -> int:
        """Bytes the table holds."""
        return int(self.cost.nbytes)

    def finish(self, last: int, unvisited_mask: int) -> float:
        """Cheapest way from `last` through the unvisited cities back to city 0.

        Args:
            last: the path's end city.
            unvisited_mask: bit c set for each unvisited city c (bit 0, city 0, never).
        """
        subset = unvisited_mask >> 1
        if not 0 <= last < self.n or unvisited_mask & 1 or subset >> max(self.n - 1, 0):
            raise ValueError("a city outside the instance, or city 0 left unvisited")
        if last == 0:
            return float(_from_start(self.matrix, self.cost, subset))
        if subset >> (last - 1) & 1:
            raise ValueError(f"city {last} is both the path's end and unvisited")
        return float(self.cost[last - 1, _squeeze(subset, last - 1)])

    def optimal_tour(self) -> list[int]:
        """An optimal tour from city 0 (the first cheapest choice at every step)."""
        everyone = sum(1 << c for c in range(1, self.n))
        return [0, *self.best_finish(0, everyone)[:-1]] if self.n > 1 else [0]

    def best_finish(self, last: int, unvisited_mask: int) -> list[int]:
        """The cities of a cheapest finish from `last`, in order, ending with city 0.

        Args:
            last: the path's end city.
            unvisited_mask: bit c set for each unvisited city c.
        """
        self.finish(last, unvisited_mask)  # validates the arguments
        subset = unvisited_mask >> 1
        here = last
        d = self.matrix
        out: list[int] = []
        while subset:
            remaining = [j for j in range(self.n - 1) if subset >> j & 1]
            steps = [
                float(d[here, j + 1]) + float(self.cost[j, _squeeze(subset ^ (1 << j), j)])
                for j in remaining
            ]
            pick = remaining[int(np.argmin(steps))]
            here = pick + 1
            out.append(here)
            subset ^= 1 << pick
        return [*out, 0]


def completion_table(instance: Instance, memory_limit_bytes: int | None = None) -> CompletionTable:
    """Build the Held–Karp table of an instance.

    Args:
        instance: up to `ORACLE_MAX_CITIES` cities.
        memory_limit_bytes: largest table to build (default `DEFAULT_MEMORY_LIMIT`).

    Raises:
        OracleSizeError: the instance has too many cities, or the table would pass the limit.
    """
    n = instance.n
    limit = DEFAULT_MEMORY_LIMIT if memory_limit_bytes is None else memory_limit_bytes
    where = instance.source or instance.name
    if n > ORACLE_MAX_CITIES:
        raise OracleSizeError(
            where,
            f"{n} cities is more than the exact-completion oracle takes "
            f"({ORACLE_MAX_CITIES}); its table would need {_size(table_bytes(n))}",
        )
    matrix = np.ascontiguousarray(instance.matrix)
    integral = matrix.dtype.kind in "iu"
    matrix = matrix.astype(np.int64 if integral else np.float64)
    longest = float(np.abs(matrix).max(initial=0))
    need = table_bytes(n, integral, longest)
    if need > limit:
        raise OracleSizeError(
            where,
            f"the exact-completion table for {n} cities needs {_size(need)}, more than the "
            f"memory limit of {_size(limit)}; raise the limit or use a reference tour",
        )
    dtype = _table_dtype(n, integral, longest)
    cost = np.zeros((max(n - 1, 0), 1 << max(n - 2, 0)), dtype=dtype)
    if n >= 2:
        _fill(matrix, cost)
    full = (1 << max(n - 1, 0)) - 1
    optimum = float(_from_start(matrix, cost, full))
    return CompletionTable(n, matrix, cost, optimum)


def best_completions(trail: Trail, index: TreeIndex, table: CompletionTable) -> NDArray[np.float64]:
    """Path length plus the cheapest finish, for every node of a trail.

    NaN where it cannot be known: an orphan (its path is not recorded), a repeated city or
    one outside the instance, and every node below such a one.

    Raises:
        ValueError: the table is of another instance size than the trail.
    """
    if table.n != trail.n:
        raise ValueError(f"the table is for {table.n} cities, the trail has {trail.n}")
    return np.asarray(
        _completions(
            trail.columns[CITY], trail.columns[DEPTH], index.parent, table.matrix, table.cost
        ),
        dtype=np.float64,
    )


def _size(count: int) -> str:
    """Bytes in the largest whole unit, for messages."""
    value = float(count)
    for unit in ("B", "KB", "MB", "GB", "TB"):
        if value < 1024 or unit == "TB":
            return f"{value:.0f} {unit}" if unit == "B" else f"{value:.1f} {unit}"
        value /= 1024
    return f"{value:.1f} TB"
