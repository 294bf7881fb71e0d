"""The compiled depth-first branch-and-bound loop, resumable so Python stays in charge.

One call runs the search until the record buffer is full, a step budget is spent, the
incumbent improved often enough to fill the event table, a node limit is reached, or the
search is done; every bit of search state lives in arrays the caller owns, so the next call
carries on exactly where this one stopped. That single shape gives streaming to disk, a live
progress bar, Ctrl-C and time limits without threads touching the search.

Bound at a node with path p0..pm and unvisited set U: partial length + minimum spanning tree
over U (Prim, O(k²)) + cheapest edge pm→U + cheapest edge U→p0. Planted faults reproduce
classic mistakes on purpose and record the numbers the faulty code really computed.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from tracer.base import Decision

# Return codes of `run_kernel`.
DONE = 0
BUFFER_FULL = 1
STEPS_SPENT = 2
EVENTS_FULL = 3
NODE_LIMIT = 4

# Planted faults (0 = none); the user-facing names live in tracer.search.faults.
FAULT_NONE = 0
FAULT_POSITIONS = 1  # tree over path positions m+1..n-1 instead of the unvisited cities
FAULT_STALE_KEYS = 2  # Prim's key table is not reset between nodes
FAULT_SQUARED = 3  # tree and links summed over squared edge lengths
FAULT_SPANS_ENDS = 4  # tree also spans the path's two end cities, links still added

# Slots of the integer state vector.
S_DEPTH = 0  # depth of the current node
S_PHASE = 1  # 0 enter the current node, 1 advance to its next child, 2 back up
S_NODES = 2  # nodes visited so far
S_RECORDED = 3  # nodes recorded so far (the next recorded node's id)
S_FILL = 4  # rows filled in the record buffer
S_EVENTS = 5  # incumbent improvements in the event table
S_STARTED = 6  # 1 once the root has been set up
STATE_SLOTS = 7

_ENTER = 0
_NEXT = 1
_BACK = 2

_EXPAND = int(Decision.EXPAND)
_PRUNE = int(Decision.PRUNE)
_SKIP = int(Decision.SKIP)
_TOUR_BETTER = int(Decision.TOUR_BETTER)
_TOUR = int(Decision.TOUR)


@njit(cache=True, nogil=True)
def _tree_weight(
    dist: np.ndarray,
    members: np.ndarray,
    k: int,
    key: np.ndarray,
    rest: np.ndarray,
    stale: bool,
    squared: bool,
) -> float:
    """Prim's minimum spanning tree weight over cities members[0:k].

    One pass per added city over the cities still outside the tree, updating their keys and
    finding the next closest at once (about k²/2 steps). Keys are kept by city in `key`;
    a correct tree overwrites them at the start, the stale-keys fault only lowers them.
    """
    if k <= 1:
        return 0.0
    first = members[0]
    m = k - 1
    best = np.inf
    at = 0
    for j in range(m):
        c = members[j + 1]
        rest[j] = c
        w = dist[first, c]
        if squared:
            w = w * w
        if stale and key[c] < w:
            w = key[c]
        key[c] = w
        if w < best:
            best = w
            at = j
    total = 0.0
    while True:
        pick = rest[at]
        total += best
        m -= 1
        rest[at] = rest[m]
        if m == 0:
            return total
        row = dist[pick]
        best = np.inf
        for j in range(m):
            c = rest[j]
            w = row[c]
            if squared:
                w = w * w
            kc = key[c]
            if w < kc:
                kc = w
                key[c] = w
            if kc < best:
                best = kc
                at = j


@njit(cache=True, nogil=True)
def run_kernel(
    dist: np.ndarray,  # float64 (n, n)
    children: np.ndarray,  # int32 (n, n-1): candidate next cities of each city, in order
    cutoff: int,
    use_bound: bool,
    fault: int,
    incumbent: np.ndarray,  # float64 (1,)
    state: np.ndarray,  # int64 (STATE_SLOTS,)
    path: np.ndarray,  # int32 (n,)
    visited: np.ndarray,  # bool (n,)
    partial_at: np.ndarray,  # float64 (n,)
    child_pos: np.ndarray,  # int32 (n,)
    match_at: np.ndarray,  # int32 (n,): common prefix length of path[0..d] with `prefix`
    prefix: np.ndarray,  # int32 (P,): record only this node's subtree and its path (P >= 1)
    record: bool,
    no_length: float,  # what an absent length is written as
    no_city: int,  # what an absent city is written as
    # the record buffer, one array per trail column, already in the trail's dtypes
    buf_city: np.ndarray,  # (B,)
    buf_depth: np.ndarray,
    buf_partial: np.ndarray,
    buf_tree: np.ndarray,
    buf_link_in: np.ndarray,
    buf_link_in_city: np.ndarray,
    buf_link_out: np.ndarray,
    buf_link_out_city: np.ndarray,
    buf_decision: np.ndarray,
    ev_at: np.ndarray,  # int64 (E,): first recorded id that sees the improvement
    ev_node: np.ndarray,  # int64 (E,): recorded id of the improving node, -1 if not recorded
    ev_length: np.ndarray,  # float64 (E,)
    ev_tour: np.ndarray,  # int32 (E, n)
    counts: np.ndarray,  # int64 (5,): nodes per decision code
    key: np.ndarray,  # float64 (n,): Prim's key table, by city
    rest: np.ndarray,  # int32 (n + 2,): scratch list of cities outside the tree
    members: np.ndarray,  # int32 (n + 2,): scratch list of tree cities
    max_steps: int,
    max_nodes: int,  # < 0: no limit
) -> int:
    """Advance the search; returns one of DONE, BUFFER_FULL, STEPS_SPENT, EVENTS_FULL,
    NODE_LIMIT. All state is in the arrays, so calling again resumes."""
    n = dist.shape[0]
    n_prefix = prefix.shape[0]
    cap = buf_city.shape[0]
    ev_cap = ev_at.shape[0]
    if state[S_STARTED] == 0:
        state[S_STARTED] = 1
        path[0] = 0
        visited[:] = False
        visited[0] = True
        partial_at[0] = 0.0
        key[:] = np.inf
        match_at[0] = 1 if prefix[0] == 0 else 0
        state[S_DEPTH] = 0
        state[S_PHASE] = _ENTER
    d = state[S_DEPTH]
    phase = state[S_PHASE]
    nodes = state[S_NODES]
    recorded = state[S_RECORDED]
    fill = state[S_FILL]
    events = state[S_EVENTS]
    steps = 0
    status = DONE
    inc = incumbent[0]
    stale = fault == FAULT_STALE_KEYS
    squared = fault == FAULT_SQUARED
    while True:
        if phase == _ENTER:
            if max_nodes >= 0 and nodes >= max_nodes:
                status = NODE_LIMIT
                break
            if fill >= cap:
                status = BUFFER_FULL
                break
            if events >= ev_cap:
                status = EVENTS_FULL
                break
            if steps >= max_steps:
                status = STEPS_SPENT
                break
            steps += 1
            nodes += 1
            last = path[d]
            k = n - 1 - d
            partial = partial_at[d]
            if d > 0:
                m = match_at[d - 1]
                if m == d and d < n_prefix and path[d] == prefix[d]:
                    m = d + 1
                match_at[d] = m
            keep = record and match_at[d] == min(d + 1, n_prefix)
            tree = no_length
            lin = no_length
            lin_city = no_city
            lout = no_length
            lout_city = no_city
            if k == 0:
                lout = dist[last, 0]
                lout_city = 0
                length = partial + lout
                decision = _TOUR_BETTER if length < inc else _TOUR
            elif not use_bound:
                decision = _SKIP
            elif k <= cutoff:
                decision = _PRUNE if partial >= inc else _SKIP
            else:
                # the unvisited cities, and both links, in one scan
                cnt = 0
                lin = np.inf
                lout = np.inf
                row_in = dist[last]
                for c in range(n):
                    if not visited[c]:
                        members[cnt] = c
                        cnt += 1
                        a = row_in[c]
                        b = dist[c, 0]
                        if squared:
                            a = a * a
                            b = b * b
                        if a < lin:
                            lin = a
                            lin_city = c
                        if b < lout:
                            lout = b
                            lout_city = c
                if fault == FAULT_POSITIONS:
                    for j in range(cnt):
                        members[j] = d + 1 + j
                elif fault == FAULT_SPANS_ENDS:
                    members[cnt] = last
                    cnt += 1
                    if last != 0:
                        members[cnt] = 0
                        cnt += 1
                tree = _tree_weight(dist, members, cnt, key, rest, stale, squared)
                bound = partial + tree + lin + lout
                decision = _PRUNE if bound >= inc else _EXPAND
            counts[decision] += 1
            if keep:
                buf_city[fill] = last
                buf_depth[fill] = d
                buf_partial[fill] = partial
                buf_tree[fill] = tree
                buf_link_in[fill] = lin
                buf_link_in_city[fill] = lin_city
                buf_link_out[fill] = lout
                buf_link_out_city[fill] = lout_city
                buf_decision[fill] = decision
                fill += 1
                recorded += 1
            if decision == _TOUR_BETTER:
                inc = partial + lout
                incumbent[0] = inc
                ev_at[events] = recorded
                ev_node[events] = recorded - 1 if keep else -1
                ev_length[events] = inc
                for j in range(n):
                    ev_tour[events, j] = path[j]
                events += 1
            if decision == _EXPAND or decision == _SKIP:  # noqa: SIM109 (compiled code)
                child_pos[d] = 0
                phase = _NEXT
            else:
                phase = _BACK
        elif phase == _NEXT:
            last = path[d]
            pos = child_pos[d]
            nxt = -1
            while pos < n - 1:
                c = children[last, pos]
                pos += 1
                if not visited[c]:
                    nxt = c
                    break
            child_pos[d] = pos
            if nxt < 0:
                phase = _BACK
            else:
                partial_at[d + 1] = partial_at[d] + dist[last, nxt]
                d += 1
                path[d] = nxt
                visited[nxt] = True
                phase = _ENTER
        else:
            if d == 0:
                status = DONE
                break
            visited[path[d]] = False
            d -= 1
            phase = _NEXT
    state[S_DEPTH] = d
    state[S_PHASE] = phase
    state[S_NODES] = nodes
    state[S_RECORDED] = recorded
    state[S_FILL] = fill
    state[S_EVENTS] = events
    return status
