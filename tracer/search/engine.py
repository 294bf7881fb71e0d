"""The compiled depth-first branch-and-bound loop, resumable so Python stays in charge.

One call runs the search until the record buffer is full, a step budget is spent, the
incumbent improved often enough to fill the event table, a node limit is reached, or the
search is done; every bit of search state lives in arrays the caller owns, so the next call
carries on exactly where this one stopped. That single shape gives streaming to disk, a live
progress bar, Ctrl-C and time limits without threads touching the search.

The caller's arrays travel as four named tuples: `Rule` (the settings), `Scratch` (the
search state), `Record` (the record buffer: one array per column of
`tracer.base.ENGINE_COLUMNS`, in the trail's dtypes, so a new column is a schema entry and
one line here) and `Events` (incumbent improvements). Numba compiles them as tuples.

Bound at a node with path p0..pm and unvisited set U (tree+links): partial length + minimum
spanning tree over U (Prim, O(k²)) + cheapest edge pm→U + cheapest edge U→p0. The penalties
bound adds a penalty π_u to every edge at u, so the same structure is found over penalised
lengths and 2·Σπ is taken off again (valid for every π: in a tour's remainder every city of
U has degree 2); subgradient steps raise it, warm-started from the parent's π. Penalties are
whole multiples of a power-of-two quantum, so over whole-number lengths every sum is exact
and the re-check can reproduce each recorded number bit for bit. Planted faults reproduce
classic mistakes on purpose and record the numbers the faulty code really computed.
"""

from __future__ import annotations

from collections import namedtuple
from typing import Any

import numpy as np
from numba import njit

from tracer.base import ENGINE_COLUMNS, Decision

# Return codes of `run_kernel`.
DONE = 0
BUFFER_FULL = 1
STEPS_SPENT = 2
EVENTS_FULL = 3
NODE_LIMIT = 4

# Bound kinds (the user-facing names live in tracer.search.driver).
BOUND_NONE = 0
BOUND_TREE_LINKS = 1
BOUND_PENALTIES = 2

# Planted faults (0 = none); the user-facing names live in tracer.search.faults.
FAULT_NONE = 0
FAULT_POSITIONS = 1  # tree over path positions m+1..n-1 instead of the unvisited cities
FAULT_STALE_KEYS = 2  # Prim's key table is not reset between nodes
FAULT_SQUARED = 3  # tree and links summed over squared edge lengths
FAULT_SPANS_ENDS = 4  # tree also spans the path's two end cities, links still added
FAULT_PENALTY_ONCE = 5  # penalties bound: the penalty term takes each π once, not twice

# Step rules of the penalties bound.
STEP_GAP = 0  # Polyak: t = λ (incumbent − bound) / Σ(deg − 2)², λ shrinking each step
#: The gap rule's λ at a node's first step, and its factor per step (measured in
#: tests/bench/bench_penalties.py: 2 and 0.9 took up to 8% more nodes, 0.98 up to 14%).
STEP_START = 3.0
STEP_DECAY = 0.95

# Slots of the integer state vector.
S_DEPTH = 0  # depth of the current node
S_PHASE = 1  # 0 enter the current node, 1 advance to its next child, 2 back up
S_NODES = 2  # nodes visited so far
S_RECORDED = 3  # nodes recorded so far (the next recorded node's id)
S_FILL = 4  # rows filled in the record buffer
S_EVENTS = 5  # incumbent improvements in the event table
S_STARTED = 6  # 1 once the root has been set up
STATE_SLOTS = 7

#: The record buffer: one array per engine column, named as the schema names them.
#: (Built from the schema, so its fields are not known to the type checker.)
Record: Any = namedtuple("Record", ENGINE_COLUMNS)  # type: ignore[misc]
#: The event table: first recorded id that sees the improvement, recorded id of the
#: improving node (-1 if not recorded), its length, its tour (E, n).
Events = namedtuple("Events", ("at", "node", "length", "tour"))
#: The search's state between calls (all by depth or by city; see `new_scratch`).
Scratch = namedtuple(
    "Scratch",
    (
        "path",  # int32 (n,): the current path
        "visited",  # bool (n,)
        "partial_at",  # float64 (n,): partial length at each depth
        "child_pos",  # int32 (n,): next child to try at each depth
        "match_at",  # int32 (n,): common prefix length of path[0..d] with the record prefix
        "key",  # float64 (n,): Prim's key table, by city
        "rest",  # int32 (n + 2,): cities outside the tree
        "members",  # int32 (n + 2,): tree cities
        "pi",  # int64 (n, n): penalties bound, each depth's π in quanta, by city
        "best_pi",  # int64 (n,): the best π of the current node
        "value",  # float64 (n,): π in length units, by city
        "near",  # int32 (n,): the tree city each outside city is closest to
        "degree",  # int64 (n,): degrees in the relaxed structure
    ),
)
#: The search's settings: cutoff, bound kind, fault, whether to record, the absent value of
#: a bound part and of a city, the penalties bound's steps (per node, at the root), step
#: rule, quantum, largest |π| in quanta, and whether lengths are whole numbers.
Rule = namedtuple(
    "Rule",
    (
        "cutoff",
        "bound",
        "fault",
        "record",
        "no_part",
        "no_city",
        "steps",
        "root_steps",
        "step_rule",
        "quantum",
        "pi_limit",
        "integral",
    ),
)

_ENTER = 0
_NEXT = 1
_BACK = 2

_EXPAND = int(Decision.EXPAND)
_PRUNE = int(Decision.PRUNE)
_SKIP = int(Decision.SKIP)
_TOUR_BETTER = int(Decision.TOUR_BETTER)
_TOUR = int(Decision.TOUR)


def new_scratch(n: int) -> Scratch:
    """Zeroed search state for an n-city search."""
    return Scratch(
        path=np.zeros(n, dtype=np.int32),
        visited=np.zeros(n, dtype=np.bool_),
        partial_at=np.zeros(n, dtype=np.float64),
        child_pos=np.zeros(n, dtype=np.int32),
        match_at=np.zeros(n, dtype=np.int32),
        key=np.full(n, np.inf),
        rest=np.zeros(n + 2, dtype=np.int32),
        members=np.zeros(n + 2, dtype=np.int32),
        pi=np.zeros((n, n), dtype=np.int64),
        best_pi=np.zeros(n, dtype=np.int64),
        value=np.zeros(n, dtype=np.float64),
        near=np.zeros(n, dtype=np.int32),
        degree=np.zeros(n, dtype=np.int64),
    )


def new_events(n: int, rows: int) -> Events:
    """An empty event table of `rows` incumbent improvements."""
    return Events(
        at=np.zeros(rows, dtype=np.int64),
        node=np.zeros(rows, dtype=np.int64),
        length=np.zeros(rows, dtype=np.float64),
        tour=np.zeros((rows, n), dtype=np.int32),
    )


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
def _penalised_tree(dist: np.ndarray, members: np.ndarray, k: int, sc: Scratch) -> float:
    """Prim over members[0:k] with lengths d(u, v) + π_u + π_v; adds each tree city's
    degree to `sc.degree` (the same passes as `_tree_weight`, with a nearest-city table)."""
    value = sc.value
    key = sc.key
    rest = sc.rest
    near = sc.near
    degree = sc.degree
    if k <= 1:
        return 0.0
    first = members[0]
    m = k - 1
    best = np.inf
    at = 0
    base = value[first]
    for j in range(m):
        c = members[j + 1]
        rest[j] = c
        w = dist[first, c] + base
        key[c] = w
        near[c] = first
        if w + value[c] < best:
            best = w + value[c]
            at = j
    total = 0.0
    while True:
        pick = rest[at]
        total += best
        degree[pick] += 1
        degree[near[pick]] += 1
        m -= 1
        rest[at] = rest[m]
        if m == 0:
            return total
        row = dist[pick]
        base = value[pick]
        best = np.inf
        for j in range(m):
            c = rest[j]
            w = row[c] + base
            kc = key[c]
            if w < kc:
                kc = w
                key[c] = w
                near[c] = pick
            kc += value[c]
            if kc < best:
                best = kc
                at = j


@njit(cache=True, nogil=True)
def _penalties_bound(
    dist: np.ndarray,
    rule: Rule,
    sc: Scratch,
    d: int,
    cnt: int,
    partial: float,
    inc: float,
    parts: np.ndarray,
) -> float:
    """The penalties bound at the node at depth d (unvisited cities in sc.members[0:cnt]).

    Starts from the parent's π (zero at the root), takes up to `rule.steps` subgradient
    steps (`rule.root_steps` at the root), stops early once the bound reaches the incumbent
    or every degree is 2, and leaves the best π found in row d of `sc.pi` for the children.
    Writes the best π's tree, link in, its city, link out, its city and penalty term into
    `parts` and returns its bound (before rounding up).
    """
    members = sc.members
    value = sc.value
    degree = sc.degree
    pi = sc.pi[d]
    last = sc.path[d]
    q = rule.quantum
    if d > 0:
        above = sc.pi[d - 1]
        for j in range(cnt):
            pi[members[j]] = above[members[j]]
    else:
        for j in range(cnt):
            pi[members[j]] = 0
    steps = rule.root_steps if d == 0 else rule.steps
    once = rule.fault == FAULT_PENALTY_ONCE
    best = -np.inf
    lam = STEP_START
    for step in range(steps + 1):
        penalty = 0.0
        for j in range(cnt):
            c = members[j]
            v = pi[c] * q
            value[c] = v
            penalty += v
            degree[c] = 0
        if not once:
            penalty += penalty
        tree = _penalised_tree(dist, members, cnt, sc)
        lin = np.inf
        lin_city = 0
        lout = np.inf
        lout_city = 0
        row_in = dist[last]
        for j in range(cnt):
            c = members[j]
            a = row_in[c] + value[c]
            b = dist[c, 0] + value[c]
            if a < lin:
                lin = a
                lin_city = c
            if b < lout:
                lout = b
                lout_city = c
        degree[lin_city] += 1
        degree[lout_city] += 1
        bound = partial + tree + lin + lout - penalty
        if bound > best:
            best = bound
            parts[0] = tree
            parts[1] = lin
            parts[2] = lin_city
            parts[3] = lout
            parts[4] = lout_city
            parts[5] = penalty
            for j in range(cnt):
                sc.best_pi[members[j]] = pi[members[j]]
        reached = np.ceil(bound) if rule.integral else bound
        if reached >= inc or step == steps:
            break
        square = 0
        for j in range(cnt):
            g = degree[members[j]] - 2
            square += g * g
        if square == 0:
            break  # the relaxed structure is a path through U: nothing left to gain
        target = inc if inc < np.inf else abs(bound) * 1.05 + 1.0
        t = lam * (target - bound) / square / q
        for j in range(cnt):
            c = members[j]
            move = pi[c] + round(t * (degree[c] - 2))
            pi[c] = min(max(move, -rule.pi_limit), rule.pi_limit)
        lam *= STEP_DECAY
    for j in range(cnt):
        pi[members[j]] = sc.best_pi[members[j]]
    return best


@njit(cache=True, nogil=True)
def run_kernel(
    dist: np.ndarray,  # float64 (n, n)
    children: np.ndarray,  # int32 (n, n-1): candidate next cities of each city, in order
    rule: Rule,
    incumbent: np.ndarray,  # float64 (1,)
    state: np.ndarray,  # int64 (STATE_SLOTS,)
    sc: Scratch,
    prefix: np.ndarray,  # int32 (P,): record only this node's subtree and its path (P >= 1)
    rec: Any,  # a Record: (B,) per column, already in the trail's dtypes
    ev: Events,
    counts: np.ndarray,  # int64 (5,): nodes per decision code
    max_steps: int,
    max_nodes: int,  # < 0: no limit
) -> int:
    """Advance the search; returns one of DONE, BUFFER_FULL, STEPS_SPENT, EVENTS_FULL,
    NODE_LIMIT. All state is in the arrays, so calling again resumes."""
    n = dist.shape[0]
    n_prefix = prefix.shape[0]
    cap = rec.decision.shape[0]  # rows of the record buffer
    ev_cap = ev.at.shape[0]
    path = sc.path
    visited = sc.visited
    partial_at = sc.partial_at
    members = sc.members
    match_at = sc.match_at
    child_pos = sc.child_pos
    key = sc.key
    rest = sc.rest
    # the record buffer's columns, unpacked once (each a plain array in the loop)
    b_city = rec.city
    b_depth = rec.depth
    b_partial = rec.partial
    b_tree = rec.tree
    b_link_in = rec.link_in
    b_link_in_city = rec.link_in_city
    b_link_out = rec.link_out
    b_link_out_city = rec.link_out_city
    b_decision = rec.decision
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
    fault = rule.fault
    stale = fault == FAULT_STALE_KEYS
    squared = fault == FAULT_SQUARED
    cutoff = rule.cutoff
    unbounded = rule.bound == BOUND_NONE
    penalised = rule.bound == BOUND_PENALTIES
    record = rule.record
    no_part = rule.no_part
    no_city = rule.no_city
    parts = np.zeros(6)
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
            tree = no_part
            lin = no_part
            lin_city = no_city
            lout = no_part
            lout_city = no_city
            penalty = no_part
            bounded = False
            cnt = 0
            if k == 0:
                lout = dist[last, 0]
                lout_city = 0
                length = partial + lout
                decision = _TOUR_BETTER if length < inc else _TOUR
            elif unbounded:
                decision = _SKIP
            elif k <= cutoff:
                decision = _PRUNE if partial >= inc else _SKIP
            elif penalised:
                for c in range(n):
                    if not visited[c]:
                        members[cnt] = c
                        cnt += 1
                bound = _penalties_bound(dist, rule, sc, d, cnt, partial, inc, parts)
                tree = parts[0]
                lin = parts[1]
                lin_city = int(parts[2])
                lout = parts[3]
                lout_city = int(parts[4])
                penalty = parts[5]
                bounded = True
                if rule.integral:
                    bound = np.ceil(bound)
                decision = _PRUNE if bound >= inc else _EXPAND
            else:
                # the unvisited cities, and both links, in one scan
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
                b_city[fill] = last
                b_depth[fill] = d
                b_partial[fill] = partial
                b_tree[fill] = tree
                b_link_in[fill] = lin
                b_link_in_city[fill] = lin_city
                b_link_out[fill] = lout
                b_link_out_city[fill] = lout_city
                b_decision[fill] = decision
                if penalised:
                    rec.penalty[fill] = penalty
                    row = rec.pi[fill]
                    row[:] = 0
                    if bounded:
                        pi = sc.pi[d]
                        for j in range(cnt):
                            row[members[j]] = pi[members[j]]
                fill += 1
                recorded += 1
            if decision == _TOUR_BETTER:
                inc = partial + lout
                incumbent[0] = inc
                ev.at[events] = recorded
                ev.node[events] = recorded - 1 if keep else -1
                ev.length[events] = inc
                for j in range(n):
                    ev.tour[events, j] = path[j]
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
