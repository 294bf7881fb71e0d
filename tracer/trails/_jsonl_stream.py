"""The tree of a JSON Lines trace already in depth-first pre-order, worked out as its nodes
stream past, so `import` can write blocks as it reads with memory bounded by a setting.

In such a trace every node's parent is on the path of the node just before it (the stack of
a depth-first search), so one compiled pass carrying only that stack gives each node's depth
and checks what the whole-file path checks (`_Tree` in `jsonl.py`) for it: the parent is
known and visited before, no sibling adds the same city, no city repeats on a path, no path
holds more than n cities. The pass also insists on ids that grow line by line (so they are
distinct without remembering them); any node it cannot vouch for stops it, and the caller
then imports the whole file in memory, which reports the problem as usual or handles the
other orders.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from numpy.typing import NDArray

#: Why a walk stopped early (WALKED: it did not).
WALKED, NOT_INCREASING, NOT_ON_PATH, REPEATED, TOO_DEEP = range(5)
#: Largest instance walked: the sibling stamps take (n + 1) × n int64 (8.4 MB at 1024).
MAX_WALK_CITIES = 1024


class WalkState:
    """What the walk carries from one batch of nodes to the next: O(n²) numbers at most."""

    def __init__(self, n: int) -> None:
        self.n = n
        self.stack_id = np.zeros(n + 1, dtype=np.int64)
        self.stack_city = np.zeros(n + 1, dtype=np.int64)
        self.stack_visit = np.zeros(n + 1, dtype=np.int64)
        self.on_path = np.zeros(n, dtype=np.bool_)
        #: stamp[d, c]: the visit position + 1 of the parent whose child at depth d added c.
        self.stamp = np.zeros((n + 1, n), dtype=np.int64)
        #: [stack height, nodes walked, last id]
        self.scalars = np.zeros(3, dtype=np.int64)


@njit(cache=True, nogil=True)
def _walk(
    ident: NDArray[np.int64],
    parent_id: NDArray[np.int64],
    city: NDArray[np.int32],
    depth: NDArray[np.int64],
    stack_id: NDArray[np.int64],
    stack_city: NDArray[np.int64],
    stack_visit: NDArray[np.int64],
    on_path: NDArray[np.bool_],
    stamp: NDArray[np.int64],
    scalars: NDArray[np.int64],
) -> tuple[int, int]:
    n = on_path.shape[0]
    top, visit, last = scalars[0], scalars[1], scalars[2]
    for i in range(ident.shape[0]):
        c = int(city[i])
        if visit == 0:  # the root (the parsing lanes checked its parent null and city 0)
            d = 0
        else:
            if ident[i] <= last:
                scalars[0], scalars[1], scalars[2] = top, visit, last
                return i, NOT_INCREASING
            k = top - 1
            while k >= 0 and stack_id[k] != parent_id[i]:
                k -= 1
            if k < 0:
                scalars[0], scalars[1], scalars[2] = top, visit, last
                return i, NOT_ON_PATH
            d = k + 1
            if d >= n:
                scalars[0], scalars[1], scalars[2] = top, visit, last
                return i, TOO_DEEP
            while top > d:
                top -= 1
                on_path[stack_city[top]] = False
            if on_path[c] or stamp[d, c] == stack_visit[k] + 1:
                scalars[0], scalars[1], scalars[2] = top, visit, last
                return i, REPEATED
            stamp[d, c] = stack_visit[k] + 1
        stack_id[d], stack_city[d], stack_visit[d] = ident[i], c, visit
        on_path[c] = True
        top = d + 1
        depth[i] = d
        last = ident[i]
        visit += 1
    scalars[0], scalars[1], scalars[2] = top, visit, last
    return ident.shape[0], WALKED


def walk(
    state: WalkState,
    ident: NDArray[np.int64],
    parent_id: NDArray[np.int64],
    city: NDArray[np.int32],
) -> tuple[NDArray[np.int64], int]:
    """Depths of the next nodes (visit order), and WALKED or why the walk stopped (then the
    depths are valid only up to the node it stopped at, and the state must not be reused)."""
    depth = np.empty(len(ident), dtype=np.int64)
    done, why = _walk(
        ident,
        parent_id,
        city,
        depth,
        state.stack_id,
        state.stack_city,
        state.stack_visit,
        state.on_path,
        state.stamp,
        state.scalars,
    )
    return depth[:done], why
