"""The shape of a search tree from its depth-first pre-order depths: the one routine for it.

Node ids are depth-first pre-order, so the parent of a node is the last earlier node one
level up, every subtree is one contiguous id range [id, end), and the cities on a node's
path are the cities on the stack when it is reached. One compiled pass with that stack
gives all three facts the layers above need: the tree index (parents and subtree ends), the
JSON Lines importer (a city repeated on its own path is refused) and the re-check (a
repeated city is a structure finding). Memory: a stack of depth + 1 ids and one counter per
city, besides the outputs.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from numpy.typing import NDArray

#: Parent of the root.
ROOT = -1
#: Parent of a node whose depth jumps more than one level below its predecessor.
ORPHAN = -2


@njit(cache=True, nogil=True)
def _shape(
    depth: NDArray[np.integer], city: NDArray[np.integer]
) -> tuple[NDArray[np.int32], NDArray[np.int32], NDArray[np.bool_]]:
    count = depth.shape[0]
    parent = np.empty(count, dtype=np.int32)
    end = np.empty(count, dtype=np.int32)
    repeated = np.zeros(count, dtype=np.bool_)
    stack = np.empty(int(depth.max()) + 2 if count else 1, dtype=np.int32)
    cities = int(city.max()) + 1 if count else 1
    on_path = np.zeros(max(cities, 1), dtype=np.int32)  # stacked nodes holding each city
    top = 0
    for i in range(count):
        d = int(depth[i])
        while top > d:
            top -= 1
            node = stack[top]
            end[node] = i
            if city[node] >= 0:
                on_path[city[node]] -= 1
        c = int(city[i])
        if d == top:
            parent[i] = stack[top - 1] if top > 0 else ROOT
            repeated[i] = c >= 0 and on_path[c] > 0
            stack[top] = i
            top += 1
            if c >= 0:
                on_path[c] += 1
        else:
            parent[i] = ORPHAN
            end[i] = i + 1
    while top > 0:
        top -= 1
        end[stack[top]] = count
    return parent, end, repeated


def tree_shape(
    depth: NDArray[np.integer], city: NDArray[np.integer]
) -> tuple[NDArray[np.int32], NDArray[np.int32], NDArray[np.bool_]]:
    """Parent, subtree end (exclusive) and repeated-city flag of every node.

    Args:
        depth: each node's depth, in depth-first pre-order (non-negative).
        city: each node's city (non-negative).

    Returns:
        parent: the parent's id, `ROOT` for a node at depth 0, `ORPHAN` for a node more
            than one level below its predecessor (its subtree is itself alone).
        end: one past the last id of each node's subtree.
        repeated: whether the node's city is already on its parent's path (an orphan's
            path is unknown: never repeated).
    """
    if len(depth) != len(city):
        raise ValueError("depth and city columns differ in length")
    if len(depth) >= np.iinfo(np.int32).max:
        raise ValueError("too many nodes for a 32-bit tree")
    parent, end, repeated = _shape(depth, city)
    return parent, end, repeated
