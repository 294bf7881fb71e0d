"""Independent optima for small instances, written here and not shared with the engine.

Held-Karp dynamic programming (Held & Karp 1962, common practice for exact small TSPs) and
plain brute force over permutations; the two are also checked against each other.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
from numpy.typing import NDArray


def held_karp(matrix: NDArray[np.float64] | NDArray[np.int64]) -> float:
    """Optimal tour length by Held-Karp over subsets (O(2^n n^2)), start city 0."""
    n = matrix.shape[0]
    if n == 1:
        return 0.0
    d = np.asarray(matrix, dtype=np.float64)
    full = 1 << (n - 1)
    cost = np.full((full, n - 1), math.inf)
    for j in range(n - 1):
        cost[1 << j, j] = d[0, j + 1]
    for subset in range(1, full):
        for j in range(n - 1):
            if not subset >> j & 1 or math.isinf(cost[subset, j]):
                continue
            here = cost[subset, j]
            for k in range(n - 1):
                if subset >> k & 1:
                    continue
                nxt = subset | 1 << k
                value = here + d[j + 1, k + 1]
                if value < cost[nxt, k]:
                    cost[nxt, k] = value
    return float(min(cost[full - 1, j] + d[j + 1, 0] for j in range(n - 1)))


def brute_force(matrix: NDArray[np.float64] | NDArray[np.int64]) -> float:
    """Optimal tour length by trying every permutation of cities 1..n-1."""
    n = matrix.shape[0]
    d = np.asarray(matrix, dtype=np.float64)
    best = math.inf
    for perm in itertools.permutations(range(1, n)):
        tour = (0, *perm)
        length = sum(d[tour[i], tour[(i + 1) % n]] for i in range(n))
        best = min(best, length)
    return 0.0 if n == 1 else best


def permutation_tree_size(n: int) -> int:
    """Nodes of the full permutation tree from a fixed start: sum over m of (n-1)!/(n-1-m)!."""
    return sum(math.factorial(n - 1) // math.factorial(n - 1 - m) for m in range(n))
