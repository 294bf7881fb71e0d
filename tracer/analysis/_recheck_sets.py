"""City sets for the re-check: visited sets as bit masks, and batch Prim over unvisited sets.

A node's bound depends on its unvisited set U far more than on anything else: the tree weight
depends on U alone and the link back to the start city too. Holding each set as a row of
64-bit words (one word up to 64 cities, more words beyond) lets `np.unique` find the few
distinct sets among many nodes, and Prim's algorithm then runs once per distinct set, for a
whole batch of equal-sized sets at a time: every step of Prim is one argmin and one
minimum over a (batch, k) array, so the Python loop runs k times per batch, not per node.
Batches are cut into sub-batches so memory stays bounded whatever their size.

Nothing here knows about trails or decisions; `rechecking` applies the search's rule.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

#: Cities per mask word.
WORD_BITS = 64
#: Most (set, city) cells in one Prim sub-batch (B × k), about 8 MB of keys.
PRIM_CELLS = 1 << 20

Masks = NDArray[np.uint64]
Cities = NDArray[np.intp]


def word_count(n: int) -> int:
    """Words in the mask of an n-city set."""
    return max(1, -(-n // WORD_BITS))


def city_bits(n: int) -> tuple[Cities, Masks]:
    """Each city's word index and its bit within that word."""
    cities = np.arange(n, dtype=np.intp)
    return cities // WORD_BITS, np.left_shift(np.uint64(1), (cities % WORD_BITS).astype(np.uint64))


def all_cities(n: int) -> Masks:
    """The mask (one row of words) holding every city 0..n-1."""
    word, bit = city_bits(n)
    full = np.zeros(word_count(n), dtype=np.uint64)
    np.bitwise_or.at(full, word, bit)
    return full


def set_sizes(masks: Masks) -> NDArray[np.intp]:
    """How many cities each mask row holds."""
    return np.asarray(np.bitwise_count(masks).sum(axis=1, dtype=np.intp), dtype=np.intp)


def holds(masks: Masks, cities: Cities) -> NDArray[np.bool_]:
    """Whether row i of `masks` holds cities[i] (cities must be 0..n-1)."""
    shift = (cities % WORD_BITS).astype(np.uint64)
    if masks.shape[1] == 1:
        words = masks[:, 0]
    else:
        words = masks[np.arange(len(cities)), cities // WORD_BITS]
    return np.asarray((words >> shift) & np.uint64(1), dtype=np.bool_)


def distinct_sets(masks: Masks) -> tuple[Masks, NDArray[np.intp]]:
    """The distinct rows of `masks` and, for each input row, the index of its distinct row."""
    if masks.shape[1] == 1:
        unique, inverse = np.unique(masks[:, 0], return_inverse=True)
        return unique[:, None], inverse.reshape(-1)
    unique, inverse = np.unique(masks, axis=0, return_inverse=True)
    return unique, inverse.reshape(-1)


def members(masks: Masks, n: int, k: int) -> Cities:
    """The cities of each mask row, ascending, as a (rows, k) array; every row holds k."""
    word, bit = city_bits(n)
    inside = (masks[:, word] & bit) != 0
    return np.nonzero(inside)[1].reshape(len(masks), k)


def _unreachable(dtype: np.dtype[Any]) -> int | float:
    """A key larger than any edge, for cities already in the tree."""
    return float("inf") if dtype.kind == "f" else int(np.iinfo(np.int64).max)


def tree_weights(matrix: NDArray[Any], sets: Cities) -> NDArray[Any]:
    """Minimum-spanning-tree weight over each row's cities (batch Prim on complete graphs).

    Each step adds, in every row at once, the city nearest the tree and relaxes the keys
    with that city's distances, gathered straight from the matrix (a (B, k) gather a step,
    never a (B, k, k) one).

    Args:
        matrix: the symmetric n×n distance matrix (int64 or float64).
        sets: (B, k) city indices, each row k distinct cities.

    Returns:
        (B,) weights in the matrix's dtype; 0 for sets of fewer than two cities.
    """
    count, k = sets.shape
    out = np.zeros(count, dtype=matrix.dtype)
    if k < 2 or count == 0:
        return out
    far = _unreachable(matrix.dtype)
    n = matrix.shape[0]
    flat = matrix.reshape(-1)
    step = max(1, PRIM_CELLS // k)
    for lo in range(0, count, step):
        part = sets[lo : lo + step]
        rows = np.arange(len(part))
        starts = part * n
        joined = np.zeros(part.shape, dtype=np.bool_)
        joined[:, 0] = True
        key = flat.take(starts[:, :1] + part)
        key[:, 0] = far
        total = np.zeros(len(part), dtype=matrix.dtype)
        for _ in range(k - 1):
            nearest = key.argmin(axis=1)
            total += key[rows, nearest]
            joined[rows, nearest] = True
            np.minimum(key, flat.take(starts[rows, nearest][:, None] + part), out=key)
            key[joined] = far
        out[lo : lo + step] = total
    return out


def least_edges(matrix: NDArray[Any], ends: Cities, columns: Cities) -> NDArray[Any]:
    """For each i, the cheapest edge from ends[i] to one of the cities columns[:, i].

    Args:
        matrix: the n×n distance matrix.
        ends: (B,) the city each edge leaves.
        columns: (k, B) with k >= 1 candidate cities per column (set-major, so the minimum
            is an elementwise reduction over k rows).
    """
    n = matrix.shape[0]
    return np.asarray(matrix.reshape(-1).take(ends * n + columns).min(axis=0))


def attaining(matrix: NDArray[Any], ends: Cities, masks: Masks, n: int) -> Cities:
    """For each row, the first city of the mask row that is nearest to ends[i] (for display).

    Rows with an empty set get -1.
    """
    word, bit = city_bits(n)
    inside = (masks[:, word] & bit) != 0
    lengths = np.where(inside, matrix[ends], _unreachable(matrix.dtype))
    best = lengths.argmin(axis=1)
    return np.where(inside.any(axis=1), best, -1)
