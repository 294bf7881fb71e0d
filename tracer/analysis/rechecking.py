"""The independent re-check: every recorded number recomputed, every decision judged again.

This is the second implementation of the search's rule, written apart from the engine so a
mistake in one does not hide in the other (tests hold it against scipy's minimum spanning
tree). It never walks the tree one node at a time. The id range is cut into chunks; in each
chunk the visited set of every node (a bit mask) and its partial length are built level by
level (a node's mask is its parent's plus its own city), seeded with the masks of the
parents that lie before the chunk: in pre-order each of those is an ancestor of the chunk's
first node (on the search's path when the chunk begins), so there are fewer than n of
them, and their paths are walked once. Nodes that need a bound are then reduced to
their distinct unvisited sets (`np.unique` on the masks; the tree and the link back to the
start city depend on nothing else), grouped by set size, and a batch Prim runs once per
distinct set (`tracer.analysis._recheck_sets`). Every comparison is then one vectorised pass.

Lengths are compared exactly for integer metrics; for floating-point ones two lengths agree
when they differ by at most `REL_TOL` times the larger of the recomputed value and the
longest edge, and a decision whose two sides agree in that sense is accepted either way.

A finding names the node, the kind of check (`KINDS`), the column, both values and the
node's path. The report counts wrong records (a record is wrong once, however many of its
fields are) and keeps the first few findings in id order.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.analysis._recheck_penalties import penalised_parts
from tracer.analysis._recheck_sets import (
    all_cities,
    attaining,
    city_bits,
    distinct_sets,
    holds,
    least_edges,
    members,
    set_sizes,
    tree_weights,
    word_count,
)
from tracer.analysis.tree_index import ORPHAN, ROOT, TreeIndex
from tracer.base import (
    BOUND,
    CITY,
    DECISION,
    DECISION_NAMES,
    DEPTH,
    DESCENDING,
    LINK_IN,
    LINK_IN_CITY,
    LINK_OUT,
    LINK_OUT_CITY,
    NO_BOUND,
    PARTIAL,
    PENALTIES,
    PENALTY,
    PI,
    TREE,
    TREE_LINKS,
    Decision,
    Trail,
    is_absent,
)

#: The kinds of check, in the order a node's findings are listed.
KINDS: tuple[str, ...] = (
    "structure",
    "partial",
    "tree",
    "link_in",
    "link_out",
    "bound",
    "decision",
    "tour",
)
#: Relative tolerance for floating-point lengths (times max(|value|, longest edge)).
REL_TOL = 1e-9
#: The fixed start city of every path.
START = 0
#: Most node × city cells one chunk works on (bounds memory for large n).
CHUNK_CELLS = 1 << 22
#: Most nodes in one chunk, whatever n.
CHUNK_NODES = 1 << 18
_DESCENDING_CODES = np.array(sorted(int(d) for d in DESCENDING), dtype=np.uint8)

Value = int | float | str | None


@dataclass(frozen=True)
class Finding:
    """One wrong field of one record.

    Attributes:
        id: the node's id.
        kind: which check failed (one of `KINDS`).
        field: the column (or "best" for an incumbent frame).
        recorded: what the trail says (None where it records nothing).
        recomputed: what the rule gives (None where nothing should be recorded).
        path: the node's cities from the start city.
        detail: one line saying what is wrong.
    """

    id: int
    kind: str
    field: str
    recorded: Value
    recomputed: Value
    path: tuple[int, ...]
    detail: str

    def to_json(self) -> dict[str, Any]:
        """The finding as a JSON-ready map."""
        return {
            "id": self.id,
            "kind": self.kind,
            "field": self.field,
            "recorded": self.recorded,
            "recomputed": self.recomputed,
            "path": list(self.path),
            "detail": self.detail,
        }


@dataclass
class RecheckReport:
    """What the re-check found over an id range.

    Attributes:
        nodes_checked: records checked.
        wrong: records with at least one wrong field.
        by_kind: wrong records per kind (every kind listed, zeros included).
        first: the first findings in id order (at most the number asked for).
        kinds_checked: the kinds that apply to this trail (bound kind and columns decide).
        start: first id checked.
        stop: one past the last id checked.
        wrong_ids: the id of every wrong record in the range, ascending.
    """

    nodes_checked: int
    wrong: int
    by_kind: dict[str, int]
    first: list[Finding] = field(default_factory=list)
    kinds_checked: tuple[str, ...] = KINDS
    start: int = 0
    stop: int = 0
    wrong_ids: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    @property
    def ok(self) -> bool:
        """Whether every checked record is right."""
        return self.wrong == 0

    def to_json(self) -> dict[str, Any]:
        """The report as a JSON-ready map."""
        return {
            "nodes_checked": self.nodes_checked,
            "wrong": self.wrong,
            "by_kind": dict(self.by_kind),
            "first": [f.to_json() for f in self.first],
            "kinds_checked": list(self.kinds_checked),
            "range": [self.start, self.stop],
        }


@dataclass
class _Check:
    """One field's verdict over a chunk: which records are wrong and the values to show."""

    kind: str
    field: str
    bad: NDArray[np.bool_]
    detail: str
    recorded: NDArray[Any] | None = None
    recomputed: NDArray[Any] | None = None
    nothing_expected: NDArray[np.bool_] | None = None


@dataclass(frozen=True)
class _FrameFinding:
    """A wrong incumbent frame, shown at its node (or, without one, where it took effect)."""

    id: int
    recorded: Value
    recomputed: Value
    detail: str


class _Rule:
    """The trail's settings, matrix and tolerance, shared by every chunk."""

    def __init__(self, trail: Trail, index: TreeIndex) -> None:
        solver = trail.header.solver
        self.trail = trail
        self.index = index
        self.columns = trail.columns
        self.n = trail.n
        self.matrix: NDArray[Any] = np.ascontiguousarray(trail.header.instance.matrix)
        self.exact = self.matrix.dtype.kind in "iu"
        if self.exact:
            self.matrix = self.matrix.astype(np.int64)
        self.scale = float(np.abs(self.matrix).max(initial=0))
        self.bound = solver.bound
        # The penalties bound is checkable where the trail keeps each node's π.
        self.penalised = self.bound == PENALTIES and PI in trail.columns
        self.quantum = solver.penalties.quantum if solver.penalties is not None else 1.0
        self.ours = self.bound in (TREE_LINKS, NO_BOUND) or self.penalised
        #: Whether the rule evaluates a bound above the cutoff.
        self.evaluates = self.bound == TREE_LINKS or self.penalised
        self.cutoff = solver.cutoff
        self.words = word_count(self.n)
        self.word, self.bit = city_bits(self.n)
        self.full = all_cities(self.n)
        self.frame_nodes = np.array(sorted({b.node for b in trail.best}), dtype=np.int64)
        self.frame_findings = self._check_frames()

    @property
    def kinds(self) -> tuple[str, ...]:
        """The kinds of check that apply, given the bound's name and the columns present."""
        have = set(self.columns)
        kinds = {"structure", "decision", "tour"}
        if PARTIAL in have:
            kinds.add("partial")
        if self.ours:
            for kind, names in (
                ("tree", (TREE,)),
                ("link_in", (LINK_IN, LINK_IN_CITY)),
                ("link_out", (LINK_OUT, LINK_OUT_CITY)),
                ("bound", (BOUND, PENALTY)),
            ):
                if have.intersection(names):
                    kinds.add(kind)
        return tuple(k for k in KINDS if k in kinds)

    def tolerance(self, values: NDArray[Any]) -> NDArray[np.float64] | int:
        """How far a float length may be from `values` and still agree (0 when exact)."""
        if self.exact:
            return 0
        return np.asarray(REL_TOL * np.maximum(np.abs(values), self.scale), dtype=np.float64)

    def agrees(self, recorded: NDArray[Any], recomputed: NDArray[Any]) -> NDArray[np.bool_]:
        """Where a recorded length equals the recomputed one (exactly, or within tolerance)."""
        if self.exact and recorded.dtype.kind in "iu":
            return np.asarray(recorded.astype(np.int64) == recomputed, dtype=np.bool_)
        diff = np.abs(recorded.astype(np.float64) - recomputed)
        return np.asarray(diff <= self.tolerance(recomputed), dtype=np.bool_)

    def tour_length(self, tour: tuple[int, ...]) -> int | float:
        """The closed tour's length, from the matrix."""
        cities = np.array(tour, dtype=np.intp)
        total = self.matrix[cities, np.roll(cities, -1)].sum()
        return int(total) if self.exact else float(total)

    def _check_frames(self) -> list[_FrameFinding]:
        """Every incumbent frame against its tour, its node and the frame before it."""
        out: list[_FrameFinding] = []
        count = self.trail.count
        decision = self.columns[DECISION]
        before = math.inf
        for frame in self.trail.best:
            recorded = _plain(frame.length, self.exact)
            node = frame.node if 0 <= frame.node < count else -1
            at = node if node >= 0 else min(max(frame.at, 0), count - 1)
            if sorted(frame.tour) != list(range(self.n)) or frame.tour[:1] != (START,):
                out.append(
                    _FrameFinding(
                        at,
                        recorded,
                        None,
                        "the best frame's tour is not a tour of every city from 0",
                    )
                )
            else:
                length = self.tour_length(frame.tour)
                if not self.agrees(np.array([frame.length]), np.array([length]))[0]:
                    out.append(
                        _FrameFinding(
                            at, recorded, length, "the best frame's length is not its tour's"
                        )
                    )
            if node >= 0:
                if decision[node] != Decision.TOUR_BETTER:
                    out.append(
                        _FrameFinding(
                            at, recorded, None, "the best frame names a node that is not a tour"
                        )
                    )
                elif tuple(self.index.path(node)) != frame.tour:
                    out.append(
                        _FrameFinding(
                            at, recorded, None, "the best frame's tour is not its node's path"
                        )
                    )
            if frame.length >= before:
                out.append(
                    _FrameFinding(
                        at,
                        recorded,
                        _plain(before, self.exact),
                        "the best frame does not improve on the incumbent before it",
                    )
                )
            before = min(before, frame.length)
        return out


def _plain(value: Any, exact: bool) -> int | float | None:
    """A numpy or Python number as a JSON-ready int or float."""
    number = float(value)
    if math.isnan(number):
        return None
    if exact and number.is_integer():
        return int(number)
    return number


def recheck(
    trail: Trail,
    index: TreeIndex | None = None,
    *,
    start: int = 0,
    stop: int | None = None,
    first: int = 20,
    on_progress: Callable[[int, int], None] | None = None,
) -> RecheckReport:
    """Recompute and judge every record in the id range [start, stop).

    Args:
        trail: the trail to check.
        index: its tree index (built here if not given).
        start: first id to check.
        stop: one past the last id (default: the end of the trail).
        first: how many findings to keep, in id order.
        on_progress: called after each chunk with (records done, records in the range).

    Returns:
        The report: records checked, wrong records, wrong records per kind, first findings.
    """
    if index is None:
        index = TreeIndex(trail.columns, trail.best)
    stop = trail.count if stop is None else min(stop, trail.count)
    start = max(0, min(start, stop))
    rule = _Rule(trail, index)
    report = RecheckReport(
        nodes_checked=stop - start,
        wrong=0,
        by_kind=dict.fromkeys(KINDS, 0),
        kinds_checked=rule.kinds,
        start=start,
        stop=stop,
    )
    step = max(1, min(CHUNK_CELLS // max(rule.n, 1), CHUNK_NODES))
    wrong_parts: list[NDArray[np.int64]] = []
    for lo in range(start, stop, step):
        hi = min(stop, lo + step)
        checks = _check_chunk(rule, lo, hi)
        frames = [f for f in rule.frame_findings if lo <= f.id < hi]
        wrong = np.zeros(hi - lo, dtype=np.bool_)
        for kind in KINDS:
            bad = np.zeros(hi - lo, dtype=np.bool_)
            for check in checks:
                if check.kind == kind:
                    bad |= check.bad
            if kind == "tour":
                bad[[f.id - lo for f in frames]] = True
            report.by_kind[kind] += int(bad.sum())
            wrong |= bad
        report.wrong += int(wrong.sum())
        wrong_parts.append(lo + np.flatnonzero(wrong).astype(np.int64))
        room = first - len(report.first)
        if room > 0 and wrong.any():
            report.first.extend(_findings(rule, lo, checks, frames, wrong, room))
        if on_progress is not None:
            on_progress(hi - start, stop - start)
    if wrong_parts:
        report.wrong_ids = np.concatenate(wrong_parts)
    return report


def recompute_node(trail: Trail, index: TreeIndex, node: int) -> dict[str, float | int | None]:
    """The independent values at one node, for showing beside what the trail recorded.

    Args:
        trail: the trail.
        index: its tree index.
        node: the node's id.

    Returns:
        partial, tree, link_in, link_out, bound (None where the rule evaluates no bound),
        length (the closed tour's, at a complete path), unvisited (how many cities are
        left), incumbent (in force at the node; None before any tour) and decision (the
        code the rule expects; None at an orphan).
    """
    if not 0 <= node < trail.count:
        raise IndexError(f"node {node} is not in the trail (0..{trail.count - 1})")
    rule = _Rule(trail, index)
    cols = trail.columns
    ids = np.array([node], dtype=np.int64)
    city = cols[CITY][node : node + 1].astype(np.intp)
    parent = index.parent[node : node + 1]
    visited, partial = _walk(rule, node, city, cols[DEPTH][node : node + 1], parent)
    unvisited = rule.full & ~visited
    k = int(set_sizes(unvisited)[0])
    live = bool(parent[0] != ORPHAN)
    bounded = np.array([live and k > 0 and rule.evaluates and k > rule.cutoff])
    parts = _bound_parts(rule, unvisited, city, bounded, node)
    bound = parts.total(partial)
    length = partial + rule.matrix[city, START]
    incumbent = float(index.incumbent_at(ids)[0])
    checks = _check_chunk(rule, node, node + 1)
    expected = next(c.recomputed for c in checks if c.kind == "decision")

    def value(values: NDArray[Any], wanted: bool) -> float | int | None:
        return _plain(values[0], rule.exact) if wanted else None

    evaluated = bool(bounded[0])
    return {
        "partial": value(partial, live),
        "tree": value(parts.tree, evaluated),
        "link_in": value(parts.link_in, evaluated),
        "link_out": value(np.where(k == 0, length - partial, parts.link_out), evaluated or k == 0),
        "bound": value(bound, evaluated),
        **({} if parts.penalty is None else {"penalty": value(parts.penalty, evaluated)}),
        "length": value(length, live and k == 0),
        "unvisited": k,
        "incumbent": None if math.isinf(incumbent) else _plain(incumbent, rule.exact),
        "decision": int(expected[0]) if live and expected is not None else None,
    }


def _findings(
    rule: _Rule,
    lo: int,
    checks: list[_Check],
    frames: list[_FrameFinding],
    wrong: NDArray[np.bool_],
    room: int,
) -> list[Finding]:
    """The first `room` findings of a chunk, in id order, then in `KINDS` order."""
    out: list[Finding] = []
    for j in np.flatnonzero(wrong)[:room]:
        node = lo + int(j)
        path = tuple(rule.index.path(node))
        here: list[Finding] = []
        for check in checks:
            if check.bad[j]:
                here.append(
                    Finding(
                        node,
                        check.kind,
                        check.field,
                        _shown(check.recorded, j, check.field, rule.exact, None),
                        _shown(
                            check.recomputed, j, check.field, rule.exact, check.nothing_expected
                        ),
                        path,
                        check.detail,
                    )
                )
        here += [
            Finding(node, "tour", "best", f.recorded, f.recomputed, path, f.detail)
            for f in frames
            if f.id == node
        ]
        out += sorted(here, key=lambda f: KINDS.index(f.kind))
    return out[:room]


def _shown(
    values: NDArray[Any] | None,
    j: int,
    name: str,
    exact: bool,
    nothing: NDArray[np.bool_] | None,
) -> Value:
    """One value of a check for display: a decision's name, a number, or None if absent."""
    if values is None or (nothing is not None and nothing[j]):
        return None
    cell = values[j : j + 1]
    if is_absent(cell)[0]:
        return None
    if name == DECISION:
        return DECISION_NAMES[int(cell[0])]
    return _plain(cell[0], exact or cell.dtype.kind in "iu")


# -- one chunk ------------------------------------------------------------------------------


def _walk(
    rule: _Rule, lo: int, city: NDArray[np.intp], depth: NDArray[Any], parent: NDArray[Any]
) -> tuple[NDArray[np.uint64], NDArray[Any]]:
    """Visited mask and partial length of every node in a chunk.

    (A city repeated on its own path is flagged by the tree index, `TreeIndex.repeated`.)

    Slots: 0 stands before a root (or an orphan): no city, partial 0 and the start city as
    its last, so a root at the start city gets partial d(0, 0) = 0. Then one slot per parent
    outside the chunk (its path walked once), then the chunk's nodes; levels are filled in
    order of depth, so every parent is filled before its children. Masks are (slots, words);
    with one word, the level step works on the flat column.
    """
    m = len(city)
    outside = (parent >= 0) & (parent < lo)
    seeds = np.unique(parent[outside])
    base = 1 + len(seeds)
    masks = np.zeros((base + m, rule.words), dtype=np.uint64)
    partial = np.zeros(base + m, dtype=rule.matrix.dtype)
    last = np.zeros(base + m, dtype=np.intp)
    for slot, node in enumerate(seeds, start=1):
        path = np.array(rule.index.path(int(node)), dtype=np.intp)
        np.bitwise_or.at(masks[slot], rule.word[path], rule.bit[path])
        partial[slot] = rule.matrix[path[:-1], path[1:]].sum()
        last[slot] = path[-1]
    last[base:] = city
    source = np.zeros(m, dtype=np.intp)
    inside = parent >= lo
    source[inside] = base + parent[inside] - lo
    source[outside] = 1 + np.searchsorted(seeds, parent[outside])
    order = np.argsort(depth, kind="stable")
    cuts = np.cumsum(np.bincount(depth))[:-1]
    word, bit = rule.word[city], rule.bit[city]
    single = masks[:, 0] if rule.words == 1 else None
    for level in np.split(order, cuts):
        if not len(level):
            continue
        src = source[level]
        own = base + level
        if single is not None:
            single[own] = single[src] | bit[level]
        else:
            rows = np.arange(len(level))
            grown = masks[src]
            grown[rows, word[level]] |= bit[level]
            masks[own] = grown
        partial[own] = partial[src] + rule.matrix[last[src], city[level]]
    return masks[base:], partial[base:]


@dataclass
class _Bound:
    """The recomputed parts of the bound in a chunk (zero where not evaluated)."""

    tree: NDArray[Any]
    link_in: NDArray[Any]
    link_out: NDArray[Any]
    #: The penalties bound: its term taken off the sum, π by node and city, and the first
    #: city attaining each link (None for tree+links).
    penalty: NDArray[Any] | None = None
    pi: NDArray[np.float64] | None = None
    attaining: tuple[NDArray[np.intp], NDArray[np.intp]] | None = None

    def total(self, partial: NDArray[Any]) -> NDArray[Any]:
        """The bound: partial + tree + both links (− the penalty term)."""
        bound: NDArray[Any] = partial + self.tree + self.link_in + self.link_out
        return bound if self.penalty is None else bound - self.penalty

    def edge(
        self, matrix: NDArray[Any], end: NDArray[np.intp], to: NDArray[np.intp]
    ) -> NDArray[Any]:
        """The (penalised) length of each link end -> to."""
        plain: NDArray[Any] = matrix[end, to]
        return plain if self.pi is None else plain + self.pi[np.arange(len(to)), to]


def _bound_parts(
    rule: _Rule,
    unvisited: NDArray[np.uint64],
    city: NDArray[np.intp],
    need: NDArray[np.bool_],
    lo: int,
) -> _Bound:
    """Tree and both links of the nodes in `need`, one batch Prim per distinct set size
    (the penalties bound: from each node's recorded π, `_recheck_penalties`)."""
    m = len(city)
    if rule.penalised:
        pen = penalised_parts(
            rule.matrix, rule.columns[PI][lo : lo + m], rule.quantum, city, unvisited, need, START
        )
        return _Bound(
            pen.tree,
            pen.link_in,
            pen.link_out,
            pen.penalty,
            pen.pi,
            (pen.link_in_city, pen.link_out_city),
        )
    dtype = rule.matrix.dtype
    parts = _Bound(np.zeros(m, dtype), np.zeros(m, dtype), np.zeros(m, dtype))
    nodes = np.flatnonzero(need)
    if not len(nodes):
        return parts
    sets, inverse = distinct_sets(unvisited[nodes])
    size = set_sizes(sets)
    tree = np.zeros(len(sets), dtype)
    out = np.zeros(len(sets), dtype)
    row = np.zeros(len(sets), np.intp)
    node_size = size[inverse]
    for k in np.unique(size):
        group = np.flatnonzero(size == k)
        row[group] = np.arange(len(group))
        cities = members(sets[group], rule.n, int(k))
        tree[group] = tree_weights(rule.matrix, cities)
        columns = np.ascontiguousarray(cities.T)
        out[group] = least_edges(rule.matrix, np.full(len(group), START, np.intp), columns)
        mine = np.flatnonzero(node_size == k)
        at = nodes[mine]
        parts.link_in[at] = least_edges(rule.matrix, city[at], columns[:, row[inverse[mine]]])
    parts.tree[nodes] = tree[inverse]
    parts.link_out[nodes] = out[inverse]
    return parts


def _verdict(
    rule: _Rule,
    value: NDArray[Any],
    incumbent: NDArray[np.float64],
    yes: Decision,
    no: Decision,
    *,
    at_least: bool,
) -> tuple[NDArray[np.uint8], NDArray[np.uint8]]:
    """The expected decision and an accepted alternative (they differ only on a float tie).

    Args:
        value: the bound, partial or tour length compared with the incumbent.
        incumbent: the incumbent in force at each node.
        yes: the decision when value >= incumbent (at_least) or value < incumbent (not).
        no: the decision otherwise.
    """
    value = value.astype(np.float64)
    hit = value >= incumbent if at_least else value < incumbent
    expected = np.where(hit, np.uint8(yes), np.uint8(no))
    alternative = expected.copy()
    if not rule.exact:
        tie = np.isfinite(incumbent) & (np.abs(value - incumbent) <= rule.tolerance(value))
        alternative[tie] = np.where(hit[tie], np.uint8(no), np.uint8(yes))
    return expected, alternative


def _has_child(index: TreeIndex, lo: int, hi: int) -> NDArray[np.bool_]:
    """Whether each node in [lo, hi) has a child (in pre-order, a first child is the next id).

    Read from the parent array, not from subtree ends: an orphan after a node lies inside
    that node's id range without being its child.
    """
    following = index.parent[lo + 1 : hi + 1]
    out = np.zeros(hi - lo, dtype=np.bool_)
    out[: len(following)] = following == np.arange(lo, lo + len(following))
    return out


def _check_chunk(rule: _Rule, lo: int, hi: int) -> list[_Check]:
    """Every field check over the ids [lo, hi)."""
    cols = rule.columns
    ids = np.arange(lo, hi)
    city = cols[CITY][lo:hi].astype(np.intp)
    depth = cols[DEPTH][lo:hi]
    decision = cols[DECISION][lo:hi]
    parent = rule.index.parent[lo:hi]
    visited, partial = _walk(rule, lo, city, depth, parent)
    repeated = rule.index.repeated[lo:hi]
    unvisited = rule.full & ~visited
    k = set_sizes(unvisited)
    live = parent != ORPHAN
    complete = live & (k == 0)
    open_ = live & (k > 0)
    bounded = open_ & (k > rule.cutoff) if rule.evaluates else np.zeros_like(live)
    parts = _bound_parts(rule, unvisited, city, bounded, lo)
    bound = parts.total(partial)
    closing = rule.matrix[city, START]
    length = partial + closing
    incumbent = rule.index.incumbent_at(ids)

    checks = [
        _Check(
            "structure",
            CITY,
            (ids == 0) & (city != START),
            "the root is not the start city 0",
            cols[CITY][lo:hi],
            np.full(hi - lo, START),
        ),
        _Check(
            "structure",
            DEPTH,
            (ids == 0) & (depth != 0),
            "the first record is not at depth 0",
            cols[DEPTH][lo:hi],
            np.zeros(hi - lo, np.intp),
        ),
        _Check(
            "structure",
            DEPTH,
            (parent == ROOT) & (ids > 0),
            "a second root: depth 0 after the first record",
            cols[DEPTH][lo:hi],
        ),
        _Check(
            "structure",
            DEPTH,
            (parent == ORPHAN) & (ids > 0),
            "depth jumps more than one level below the record before",
            cols[DEPTH][lo:hi],
        ),
        _Check(
            "structure",
            CITY,
            repeated,
            "the city is already on the path",
            cols[CITY][lo:hi],
        ),
        _Check(
            "structure",
            DECISION,
            ~np.isin(decision, _DESCENDING_CODES) & _has_child(rule.index, lo, hi),
            "a node whose decision does not descend has children",
            decision,
        ),
    ]
    if PARTIAL in cols:
        recorded = cols[PARTIAL][lo:hi]
        checks.append(
            _Check(
                "partial",
                PARTIAL,
                live & ~rule.agrees(recorded, partial),
                "partial is not the parent's partial plus the edge",
                recorded,
                partial,
            )
        )
    if rule.ours:
        checks += _number_checks(rule, lo, hi, live, bounded, complete, unvisited, city, parts)
        if BOUND in cols:
            recorded = cols[BOUND][lo:hi]
            # Where no bound is evaluated a recorded one is wrong; where one is, it may be
            # left out (the engine derives it), but if recorded it must be the sum.
            right = is_absent(recorded) | rule.agrees(recorded, bound)
            detail = "bound is not partial + tree + link_in + link_out"
            checks += _column_checks("bound", BOUND, recorded, bounded & live, right, bound, detail)
        if parts.penalty is not None and PENALTY in cols:
            recorded = cols[PENALTY][lo:hi]
            right = ~is_absent(recorded) & rule.agrees(recorded, parts.penalty)
            detail = "penalty is not twice the sum of the unvisited cities' penalties"
            checks += _column_checks(
                "bound", PENALTY, recorded, bounded & live, right, parts.penalty, detail
            )
        if rule.penalised and rule.exact:
            bound = np.ceil(bound)  # whole-number lengths: the engine rounds the bound up
    checks.append(
        _decision_check(
            rule, lo, hi, decision, incumbent, (partial, bound, length), (live, open_, bounded)
        )
    )
    checks.append(
        _Check(
            "tour",
            "best",
            live & (decision == Decision.TOUR_BETTER) & ~np.isin(ids, rule.frame_nodes),
            "a tour_better node without its best frame",
            None,
            length,
        )
    )
    return checks


def _column_checks(
    kind: str,
    name: str,
    recorded: NDArray[Any],
    expected: NDArray[np.bool_],
    right: NDArray[np.bool_],
    recomputed: NDArray[Any],
    detail: str,
) -> list[_Check]:
    """A column that must be right where `expected` and absent everywhere else."""
    present = ~is_absent(recorded)
    return [
        _Check(kind, name, expected & ~right, detail, recorded, recomputed),
        _Check(
            kind,
            name,
            ~expected & present,
            f"{name} is recorded where the rule computes none",
            recorded,
            recomputed,
            ~expected,
        ),
    ]


def _number_checks(
    rule: _Rule,
    lo: int,
    hi: int,
    live: NDArray[np.bool_],
    bounded: NDArray[np.bool_],
    complete: NDArray[np.bool_],
    unvisited: NDArray[np.uint64],
    city: NDArray[np.intp],
    parts: _Bound,
) -> list[_Check]:
    """Tree and link columns: right where the bound is evaluated, absent elsewhere.

    At a complete path link_out holds the closing edge to the start city instead. A link
    city is right when it is unvisited and its edge attains the recomputed least length
    (ties: any such city); the city shown as recomputed is the first that does.
    """
    cols = rule.columns
    out_value = np.where(complete, rule.matrix[city, START], parts.link_out)
    has_out = (bounded | complete) & live
    bounded = bounded & live
    checks: list[_Check] = []
    values = (
        (
            "tree",
            TREE,
            parts.tree,
            bounded,
            "not the minimum spanning tree weight of the unvisited cities",
        ),
        (
            "link_in",
            LINK_IN,
            parts.link_in,
            bounded,
            "not the cheapest edge from the path's end into the unvisited cities",
        ),
        (
            "link_out",
            LINK_OUT,
            out_value,
            has_out,
            "not the cheapest edge from the unvisited cities back to the start",
        ),
    )
    for kind, name, recomputed, expected, detail in values:
        if name in cols:
            recorded = cols[name][lo:hi]
            right = ~is_absent(recorded) & rule.agrees(recorded, recomputed)
            checks += _column_checks(kind, name, recorded, expected, right, recomputed, detail)
    cities = (
        ("link_in", LINK_IN_CITY, city, parts.link_in, bounded),
        ("link_out", LINK_OUT_CITY, np.full_like(city, START), out_value, has_out),
    )
    for kind, name, end, least, expected in cities:
        if name not in cols:
            continue
        recorded = cols[name][lo:hi]
        chosen = np.minimum(recorded.astype(np.intp), rule.n - 1)
        attains = (
            (recorded < rule.n)
            & holds(unvisited, chosen)
            & rule.agrees(parts.edge(rule.matrix, end, chosen), least)
        )
        right = np.where(complete, recorded == START, attains)
        shown = np.where(complete, START, -1)
        redo = np.flatnonzero(expected & ~right & ~complete)
        if parts.attaining is None:
            shown[redo] = attaining(rule.matrix, end[redo], unvisited[redo], rule.n)
        else:
            shown[redo] = parts.attaining[name == LINK_OUT_CITY][redo]
        detail = f"{name} is not an unvisited city attaining {name.removesuffix('_city')}"
        checks += _column_checks(kind, name, recorded, expected, right, shown, detail)
    return checks


def _decision_check(
    rule: _Rule,
    lo: int,
    hi: int,
    decision: NDArray[Any],
    incumbent: NDArray[np.float64],
    lengths: tuple[NDArray[Any], NDArray[Any], NDArray[Any]],
    groups: tuple[NDArray[np.bool_], NDArray[np.bool_], NDArray[np.bool_]],
) -> _Check:
    """The decision against the rule, with the incumbent in force at each node.

    Args:
        lengths: the recomputed partial, bound and (at complete paths) tour length.
        groups: nodes with a parent (orphans are not judged), nodes with unvisited cities,
            nodes whose bound the rule evaluates.

    A foreign bound is judged only where the trail records it (prune iff bound >=
    incumbent, and expand or skip both count as descending); elsewhere any of expand,
    prune and skip is accepted at an open path.
    """
    partial, bound, length = lengths
    live, open_, bounded = groups
    expected, alternative = _verdict(
        rule, length, incumbent, Decision.TOUR_BETTER, Decision.TOUR, at_least=False
    )
    if rule.evaluates:
        below = open_ & ~bounded
        for pick, value, no in ((bounded, bound, Decision.EXPAND), (below, partial, Decision.SKIP)):
            e, a = _verdict(rule, value, incumbent, Decision.PRUNE, no, at_least=True)
            expected = np.where(pick, e, expected)
            alternative = np.where(pick, a, alternative)
    else:
        # No bound, or a foreign one: an open path descends without a bound (skip), unless
        # a foreign solver's recorded bound says otherwise (below).
        expected = np.where(open_, np.uint8(Decision.SKIP), expected)
        alternative = np.where(open_, np.uint8(Decision.SKIP), alternative)
    bad = live & (decision != expected) & (decision != alternative)
    if not rule.ours:
        bad &= ~open_ | (decision > Decision.SKIP)
        if BOUND in rule.columns:
            recorded = rule.columns[BOUND][lo:hi]
            judged = open_ & ~is_absent(recorded)
            e, a = _verdict(
                rule, recorded, incumbent, Decision.PRUNE, Decision.EXPAND, at_least=True
            )
            pruned = decision == Decision.PRUNE
            fits = (pruned == (e == Decision.PRUNE)) | (pruned == (a == Decision.PRUNE))
            bad |= judged & ~fits
            expected = np.where(judged, e, expected)
    return _Check(
        "decision",
        DECISION,
        bad,
        "the decision does not follow from the bound and the incumbent in force",
        decision,
        expected,
    )
