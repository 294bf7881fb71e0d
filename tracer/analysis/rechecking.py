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

import copy
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numba import njit
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
from tracer.analysis.lazy_tree import LazyTreeIndex
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
    VISIT,
    BlockSource,
    Decision,
    Trail,
    bound_values,
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
#: The kind of a decision that descended where the rule prunes: wasteful, not wrong (unless
#: the check is strict, when it is a `decision` finding).
MISSED = "missed_prune"
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
        root: whether the value is wrong although every value it is computed from is right
            (False: a knock-on of the wrong value at node `root_id`).
        root_id: for a knock-on, the node holding the root finding that explains it.
        hint: a likely cause, where the pattern is certain.
        numbers: for a decision, the arithmetic: the bound and its parts as recorded, the
            bound recomputed, the incumbent in force and the rule applied.
    """

    id: int
    kind: str
    field: str
    recorded: Value
    recomputed: Value
    path: tuple[int, ...]
    detail: str
    root: bool = True
    root_id: int | None = None
    hint: str | None = None
    numbers: dict[str, Value] | None = None

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
            "root": self.root,
            "root_id": self.root_id,
            "hint": self.hint,
            "numbers": self.numbers,
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
        roots: findings that are root causes (the rest are knock-ons of one of them).
        knock_on_count: findings that are knock-ons.
        knock_ons: for the node of each listed root finding (`first_roots`), how many
            knock-on findings it explains.
        first_roots: the first root findings in id order.
        missed_prunes: nodes that descended although the rule prunes them (a cost in time,
            never a lost tour); not wrong unless the check is strict.
        missed_ids: their ids, ascending.
        first_missed: the first of them as findings.
        strict: whether missed prunes count as wrong decisions.
    """

    nodes_checked: int
    wrong: int
    by_kind: dict[str, int]
    first: list[Finding] = field(default_factory=list)
    kinds_checked: tuple[str, ...] = KINDS
    start: int = 0
    stop: int = 0
    wrong_ids: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    roots: int = 0
    knock_on_count: int = 0
    knock_ons: dict[int, int] = field(default_factory=dict)
    first_roots: list[Finding] = field(default_factory=list)
    missed_prunes: int = 0
    missed_ids: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    first_missed: list[Finding] = field(default_factory=list)
    strict: bool = False

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
            "roots": self.roots,
            "knock_ons": self.knock_on_count,
            "first_roots": [
                {**f.to_json(), "knock_ons": self.knock_ons.get(f.id, 0)} for f in self.first_roots
            ],
            "missed_prunes": self.missed_prunes,
            "first_missed": [f.to_json() for f in self.first_missed],
            "strict": self.strict,
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
    #: Where the wrong value follows from a wrong input (a knock-on), and the node of the
    #: root finding behind it (filled in by `_attribute`).
    knock: NDArray[np.bool_] | None = None
    root_of: NDArray[np.int64] | None = None


@dataclass(frozen=True)
class _FrameFinding:
    """A wrong incumbent frame, shown at its node (or, without one, where it took effect)."""

    id: int
    recorded: Value
    recomputed: Value
    detail: str


@dataclass(frozen=True)
class _FramePlan:
    """One incumbent frame: where its findings are shown, its node (-1: none in the
    trail), its length and tour, and its findings before and after its node's."""

    at: int
    node: int
    recorded: Value
    tour: tuple[int, ...]
    own: list[_FrameFinding]
    later: list[_FrameFinding]


class CheckRule:
    """The trail's settings, matrix and tolerance, shared by every chunk."""

    def __init__(
        self, trail: Trail, index: TreeIndex, strict: bool = False, *, total: int | None = None
    ) -> None:
        solver = trail.header.solver
        self.trail = trail
        self.index = index
        self.strict = strict
        self._chains: NDArray[np.int32] | None = None
        self.columns = trail.columns
        #: The rows are ids 0.. of the whole trail, unless this is a window (`view`): then
        #: rows [0, seeded) are carried ancestors (their ids and partial-chain roots in
        #: `ids` and `roots`) and rows from `seeded` on are ids `first`, `first + 1`, ...
        self.total = trail.count if total is None else total
        self.seeded = 0
        self.first = 0
        self.ids: NDArray[np.int64] | None = None
        self.roots: NDArray[np.int64] | None = None
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
        self.frame_plan = self._plan_frames()

    def view(
        self,
        window: Trail,
        index: TreeIndex,
        ids: NDArray[np.int64],
        roots: NDArray[np.int64],
        seeded: int,
    ) -> CheckRule:
        """The same rule over a window of rows: `seeded` carried ancestors (ids `ids`,
        partial-chain roots `roots`), then consecutive records from id `ids[seeded]`."""
        rule = copy.copy(self)
        rule.trail, rule.index, rule.columns = window, index, window.columns
        rule.ids, rule.roots, rule.seeded = ids, roots, seeded
        rule.first = int(ids[seeded]) if seeded < len(ids) else 0
        rule._chains = None
        return rule

    def gid(self, row: int) -> int:
        """The trail id of a row."""
        return row if self.ids is None else int(self.ids[row])

    def gids(self, lo: int, hi: int) -> NDArray[np.int64]:
        """The trail ids of the rows [lo, hi)."""
        if self.ids is None:
            return np.arange(lo, hi, dtype=np.int64)
        return self.ids[lo:hi]

    def row(self, node: int) -> int:
        """The row of a trail id at or after the window's first record."""
        return node - self.first + self.seeded

    def root_ids(self, rows: NDArray[Any]) -> NDArray[np.int64]:
        """The trail ids of rows named as partial-chain roots (a carried row: its own root)."""
        rows = rows.astype(np.int64)
        return rows if self.roots is None else self.roots[rows]

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

    @property
    def chains(self) -> NDArray[np.int32]:
        """For every node, the node whose wrong partial its own recorded partial follows
        from (itself when it follows from nothing wrong; see `_partial_chains`)."""
        if self._chains is None:
            if PARTIAL in self.columns:
                self._chains = _partial_chains(
                    self.index.parent,
                    self.columns[DEPTH],
                    self.columns[CITY],
                    self.columns[PARTIAL],
                    self.matrix.astype(np.float64),
                    0.0 if self.exact else REL_TOL,
                    self.scale,
                    self.seeded,
                )
            else:
                self._chains = np.arange(self.trail.count, dtype=np.int32)
        return self._chains

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

    def _plan_frames(self) -> list[_FramePlan]:
        """Every incumbent frame against its tour and the frame before it (its node is
        checked when that node's rows are at hand, `frames_in`)."""
        out: list[_FramePlan] = []
        count = self.total
        before = math.inf
        for frame in self.trail.best:
            recorded = _plain(frame.length, self.exact)
            node = frame.node if 0 <= frame.node < count else -1
            at = node if node >= 0 else min(max(frame.at, 0), count - 1)
            own: list[_FrameFinding] = []
            if sorted(frame.tour) != list(range(self.n)) or frame.tour[:1] != (START,):
                own.append(
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
                    own.append(
                        _FrameFinding(
                            at, recorded, length, "the best frame's length is not its tour's"
                        )
                    )
            later: list[_FrameFinding] = []
            if frame.length >= before:
                later.append(
                    _FrameFinding(
                        at,
                        recorded,
                        _plain(before, self.exact),
                        "the best frame does not improve on the incumbent before it",
                    )
                )
            before = min(before, frame.length)
            out.append(_FramePlan(at, node, recorded, frame.tour, own, later))
        return out

    def frames_in(self, lo: int, hi: int) -> list[_FrameFinding]:
        """The wrong incumbent frames shown at the rows [lo, hi), in frame order."""
        if hi <= lo:
            return []
        first, last = self.gid(lo), self.gid(hi - 1)
        decision = self.columns[DECISION]
        out: list[_FrameFinding] = []
        for plan in self.frame_plan:
            at, recorded = plan.at, plan.recorded
            if not first <= at <= last:
                continue
            out += plan.own
            if plan.node >= 0:
                row = self.row(plan.node)
                if decision[row] != Decision.TOUR_BETTER:
                    out.append(
                        _FrameFinding(
                            at, recorded, None, "the best frame names a node that is not a tour"
                        )
                    )
                elif tuple(self.index.path(row)) != plan.tour:
                    out.append(
                        _FrameFinding(
                            at, recorded, None, "the best frame's tour is not its node's path"
                        )
                    )
            out += plan.later
        return out


@njit(cache=True, nogil=True)
def _partial_chains(
    parent: np.ndarray,
    depth: np.ndarray,
    city: np.ndarray,
    partial: np.ndarray,
    d: np.ndarray,
    rel: float,
    scale: float,
    seeded: int,
) -> np.ndarray:
    """`CheckRule.chains` in one pre-order pass (the first `seeded` rows, carried ancestors of a
    window, only set up the stack: each is its own root here, translated by the caller).

    A node's recorded partial follows from upstream when it is its parent's recorded
    partial plus the edge (the error came from above), or when its error is its previous
    sibling's error plus the edge to that sibling (a running length that kept the
    sibling's step: the error came from the side). Either way its root is that node's;
    otherwise it is its own. Lengths agree within `rel` times the larger of the value and
    `scale` (exactly when `rel` is 0). Sequential, so compiled; in pre-order the parent is
    the last node one level up and the previous sibling the last node at the same level,
    so the true partial, the error and the root of each live on a stack by depth.
    """
    count = parent.shape[0]
    out = np.empty(count, dtype=np.int32)
    top = int(depth.max()) + 2 if count else 1
    node = np.full(top, -1, dtype=np.int64)
    true = np.zeros(top, dtype=np.float64)
    error = np.zeros(top, dtype=np.float64)
    for i in range(count):
        p = parent[i]
        level = int(depth[i])
        before = node[level]
        before_error = error[level]
        node[level] = i
        node[level + 1] = -1
        out[i] = i
        if p < 0:  # the root (its partial should be 0) or an orphan (not judged)
            true[level] = 0.0 if p == -1 else float(partial[i])
            error[level] = float(partial[i]) - true[level]
            continue
        edge = d[city[p], city[i]]
        true[level] = true[level - 1] + edge
        error[level] = float(partial[i]) - true[level]
        if i < seeded:
            continue
        step = float(partial[p]) + edge
        if abs(float(partial[i]) - step) <= rel * max(abs(step), scale):
            out[i] = out[p]
        elif before >= 0 and parent[before] == p and before_error != 0.0:
            carried = before_error + d[city[p], city[before]]
            if abs(error[level] - carried) <= rel * max(abs(carried), scale):
                out[i] = out[before]
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
    strict: bool = False,
) -> RecheckReport:
    """Recompute and judge every record in the id range [start, stop).

    Args:
        trail: the trail to check.
        index: its tree index (built here if not given).
        start: first id to check.
        stop: one past the last id (default: the end of the trail).
        first: how many findings to keep, in id order (and as many root findings and
            missed prunes).
        on_progress: called after each chunk with (records done, records in the range).
        strict: count missed prunes (descending where the rule prunes) as wrong decisions.

    Returns:
        The report: records checked, wrong records, wrong records per kind, first findings.
    """
    if index is None:
        index = TreeIndex(trail.columns, trail.best)
    stop = trail.count if stop is None else min(stop, trail.count)
    start = max(0, min(start, stop))
    rule = CheckRule(trail, index, strict)
    tally = Tally(rule, start, stop, first)
    step = chunk_rows(rule.n)
    for lo in range(start, stop, step):
        hi = min(stop, lo + step)
        tally.add(rule, lo, hi)
        if on_progress is not None:
            on_progress(hi - start, stop - start)
    return tally.finish()


def chunk_rows(n: int) -> int:
    """How many records one chunk checks at a time, for `n` cities (bounds its memory)."""
    return max(1, min(CHUNK_CELLS // max(n, 1), CHUNK_NODES))


class Tally:
    """The report built chunk by chunk, in id order, over the id range [start, stop)."""

    def __init__(self, rule: CheckRule, start: int, stop: int, first: int) -> None:
        self.first = first
        self.report = RecheckReport(
            nodes_checked=stop - start,
            wrong=0,
            by_kind=dict.fromkeys(KINDS, 0),
            kinds_checked=rule.kinds,
            start=start,
            stop=stop,
            strict=rule.strict,
        )
        self._wrong: list[NDArray[np.int64]] = []
        self._missed: list[NDArray[np.int64]] = []

    @property
    def latest_wrong(self) -> NDArray[np.int64]:
        """The wrong ids found by the last `add`, ascending."""
        return self._wrong[-1] if self._wrong else np.zeros(0, dtype=np.int64)

    def add(self, rule: CheckRule, lo: int, hi: int) -> None:
        """Check the rows [lo, hi) of the rule's trail (or window) and count them in."""
        report, first = self.report, self.first
        checks = _check_chunk(rule, lo, hi)
        frames = rule.frames_in(lo, hi)
        at = rule.gid(lo) if hi > lo else 0
        frame_rows = [f.id - at for f in frames]
        wrong = np.zeros(hi - lo, dtype=np.bool_)
        for kind in KINDS:
            bad = np.zeros(hi - lo, dtype=np.bool_)
            for check in checks:
                if check.kind == kind:
                    bad |= check.bad
            if kind == "tour":
                bad[frame_rows] = True
            report.by_kind[kind] += int(bad.sum())
            wrong |= bad
        report.wrong += int(wrong.sum())
        self._wrong.append(at + np.flatnonzero(wrong).astype(np.int64))
        rooted = np.zeros(hi - lo, dtype=np.bool_)
        rooted[frame_rows] = True
        report.roots += len(frames)
        knocks: list[tuple[_Check, NDArray[np.bool_]]] = []
        for check in checks:
            if check.kind not in KINDS:
                continue
            knock = check.bad & check.knock if check.knock is not None else check.bad & False
            rooted |= check.bad & ~knock
            report.roots += int((check.bad & ~knock).sum())
            report.knock_on_count += int(knock.sum())
            knocks.append((check, knock))
        missed = np.zeros(hi - lo, dtype=np.bool_)
        for check in checks:
            if check.kind == MISSED:
                missed |= check.bad
        report.missed_prunes += int(missed.sum())
        self._missed.append(at + np.flatnonzero(missed).astype(np.int64))
        room = first - len(report.first)
        if room > 0 and wrong.any():
            report.first.extend(_findings(rule, lo, checks, frames, wrong, room))
        room = first - len(report.first_roots)
        if room > 0 and rooted.any():
            report.first_roots.extend(
                _findings(rule, lo, checks, frames, rooted, room, only_roots=True)
            )
        _count_knock_ons(report, knocks)
        room = first - len(report.first_missed)
        if room > 0 and missed.any():
            report.first_missed.extend(
                _findings(rule, lo, checks, [], missed, room, kinds=(MISSED,))
            )

    def finish(self) -> RecheckReport:
        """The report, with the wrong and missed ids gathered."""
        report = self.report
        if self._wrong:
            report.wrong_ids = np.concatenate(self._wrong)
        if self._missed:
            report.missed_ids = np.concatenate(self._missed)
        return report


def _count_knock_ons(report: RecheckReport, knocks: list[tuple[_Check, NDArray[np.bool_]]]) -> None:
    """Add a chunk's knock-ons to the counts of the listed root findings they follow from
    (only those: a trail with millions of roots keeps no count per root)."""
    listed = np.array(sorted({f.id for f in report.first_roots}), dtype=np.int64)
    if not listed.size:
        return
    for check, knock in knocks:
        if check.root_of is None or not knock.any():
            continue
        behind = check.root_of[knock]
        behind, counts = np.unique(behind[np.isin(behind, listed)], return_counts=True)
        for node, many in zip(behind.tolist(), counts.tolist(), strict=True):
            report.knock_ons[node] = report.knock_ons.get(node, 0) + many


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
    if isinstance(index, LazyTreeIndex):
        return _recompute_in_window(trail, index, node)
    return recompute_row(CheckRule(trail, index), node)


def _recompute_in_window(
    trail: Trail, index: LazyTreeIndex, node: int
) -> dict[str, float | int | None]:
    """`recompute_node` on a trail read block by block: in a window of the search's path
    before the node, the node and its lookahead, as the streaming re-check cuts them."""
    before = node - 1
    while before >= 0 and int(index.parent[before]) == ORPHAN:
        before -= 1
    carried = index.ancestors(before) if before >= 0 else []
    ids = np.array([*carried, *range(node, min(node + 2, trail.count))], dtype=np.int64)
    small, small_index = window_trail(trail, {n: c[ids] for n, c in trail.columns.items()}, ids)
    seeded = len(carried)
    rule = CheckRule(small, small_index, total=trail.count)
    return recompute_row(rule.view(small, small_index, ids, ids, seeded), seeded)


def window_trail(
    source: Trail | BlockSource, columns: dict[str, NDArray[Any]], ids: NDArray[np.int64]
) -> tuple[Trail, TreeIndex]:
    """Some rows of a trail (ids `ids`, ascending) as a small trail with its own tree index,
    whose incumbent lookups use trail ids (or visit positions), so they agree with the whole
    trail's."""
    positions = columns.get(VISIT, ids)
    index = TreeIndex({**columns, VISIT: positions}, source.best)
    small = Trail(source.path, source.header, columns, source.best, source.end, source.notice)
    return small, index


def recompute_row(rule: CheckRule, node: int) -> dict[str, float | int | None]:
    """`recompute_node` at one row of the rule's trail or window."""
    cols, index = rule.columns, rule.index
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
    rule: CheckRule,
    lo: int,
    checks: list[_Check],
    frames: list[_FrameFinding],
    rows: NDArray[np.bool_],
    room: int,
    kinds: tuple[str, ...] = KINDS,
    only_roots: bool = False,
) -> list[Finding]:
    """The first `room` findings at the marked rows of a chunk, in id order, then by kind.

    Each carries whether it is a root finding, the node of its root if not, a hint where
    the pattern is certain, and for a decision the arithmetic behind it.
    """
    out: list[Finding] = []
    for j in np.flatnonzero(rows)[:room]:
        node = lo + int(j)
        shown = rule.gid(node)
        path = tuple(rule.index.path(node))
        here: list[Finding] = []
        for check in checks:
            if check.kind not in kinds or not check.bad[j]:
                continue
            knock = bool(check.knock[j]) if check.knock is not None else False
            if knock and only_roots:
                continue
            root_id = int(check.root_of[j]) if knock and check.root_of is not None else None
            numbers = None
            detail = check.detail
            if check.field == DECISION and check.kind in ("decision", MISSED):
                numbers, detail = _arithmetic(rule, node, check, j)
            here.append(
                Finding(
                    shown,
                    check.kind,
                    check.field,
                    _shown(check.recorded, j, check.field, rule.exact, None),
                    _shown(check.recomputed, j, check.field, rule.exact, check.nothing_expected),
                    path,
                    detail,
                    root=not knock,
                    root_id=root_id,
                    hint=_hint(rule, node, check.kind, check.field, numbers),
                    numbers=numbers,
                )
            )
        here += [
            Finding(shown, "tour", "best", f.recorded, f.recomputed, path, f.detail)
            for f in frames
            if f.id == shown
        ]
        out += sorted(here, key=lambda f: kinds.index(f.kind) if f.kind in kinds else 0)
    return out[:room]


def _recorded(rule: CheckRule, name: str, node: int) -> Value:
    """A length column's recorded value at one node (None if absent or not recorded)."""
    column = rule.columns.get(name)
    if column is None or bool(is_absent(column[node : node + 1])[0]):
        return None
    return _plain(column[node], rule.exact or column.dtype.kind in "iu")


def _arithmetic(rule: CheckRule, node: int, check: _Check, j: int) -> tuple[dict[str, Value], str]:
    """The numbers a decision was judged on, and one line saying what the rule wanted."""
    values = recompute_row(rule, node)
    incumbent = values["incumbent"]
    decision = DECISION_NAMES[int(rule.columns[DECISION][node])]
    wanted = DECISION_NAMES[int(check.recomputed[j])] if check.recomputed is not None else "?"
    numbers: dict[str, Value] = {}
    parts = [name for name in (PARTIAL, TREE, LINK_IN, LINK_OUT, PENALTY) if name in rule.columns]
    for name in parts:
        numbers[name] = _recorded(rule, name, node)
    if BOUND in rule.columns:
        numbers["bound"] = _recorded(rule, BOUND, node)
    elif all(numbers.get(name) is not None for name in parts if name != PENALTY) and parts:
        total = sum(
            -float(v) if name == PENALTY else float(v)
            for name, v in numbers.items()
            if v is not None and name in parts
        )
        numbers["bound"] = _plain(total, rule.exact)
    numbers["recomputed_bound"] = values["bound"]
    numbers["incumbent"] = incumbent
    shown_incumbent = "none (no tour yet)" if incumbent is None else _text(incumbent)
    unvisited = int(values["unvisited"] or 0)
    if unvisited == 0:
        rule_text = "tour_better when the tour's length < incumbent, else tour"
        judged = f"length {_text(values['length'])}"
    elif values["bound"] is not None:
        rule_text = "prune when bound >= incumbent"
        shown = [_text(numbers[name]) for name in parts if numbers.get(name) is not None]
        sign = "+".join(shown) if len(shown) == len(parts) else None
        judged = f"bound {_text(values['bound'])}" + (f" ({sign})" if sign else "")
        if numbers.get("bound") is not None and not _same(
            rule, float(numbers["bound"] or 0), float(values["bound"])
        ):
            judged += f", recorded {_text(numbers['bound'])}"
    elif rule.evaluates:
        rule_text = f"with {rule.cutoff} or fewer cities left, prune when partial >= incumbent"
        judged = f"partial {_text(values['partial'])}"
    else:
        recorded_bound = numbers.get("bound")
        rule_text = "prune when the recorded bound >= incumbent"
        judged = f"recorded bound {_text(recorded_bound)}"
    numbers["rule"] = rule_text
    detail = f"{decision}, but {judged} against incumbent {shown_incumbent} gives {wanted}"
    return numbers, f"{detail} ({rule_text})"


def _text(value: Value) -> str:
    if value is None:
        return "none"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def _hint(
    rule: CheckRule, node: int, kind: str, name: str, numbers: dict[str, Value] | None
) -> str | None:
    """A likely cause, given only where the pattern is certain."""
    index = rule.index
    if numbers is not None:
        decision = int(rule.columns[DECISION][node])
        incumbent = numbers.get("incumbent")
        if decision == Decision.PRUNE and incumbent is None:
            return (
                "no incumbent was in force: the trace seems to lack its start tour "
                "(a `best` line with a null id)"
            )
        judged = numbers.get("bound")
        if judged is None or numbers.get("recomputed_bound") is None:
            judged = numbers.get(PARTIAL)
        if (
            decision in DESCENDING
            and incumbent is not None
            and judged is not None
            and _same(rule, float(judged), float(incumbent))
        ):
            return "the bound equals the incumbent: the prune rule may use > instead of >="
        return None
    parent = int(index.parent[node])
    if parent < 0 or kind not in ("tree", "partial"):
        return None
    siblings = index.children(parent)
    at = siblings.index(node) if node in siblings else 0
    if at == 0:
        return None
    before = siblings[at - 1]
    if kind == "tree" and name == TREE:
        mine, theirs = _recorded(rule, TREE, node), _recorded(rule, TREE, before)
        if mine is not None and theirs is not None and _same(rule, float(mine), float(theirs)):
            return "this tree weight equals the previous sibling's"
    if kind == "partial":
        recorded = _recorded(rule, PARTIAL, node)
        true = recompute_row(rule, node)[PARTIAL]
        city = rule.columns[CITY]
        edge = float(rule.matrix[int(city[parent]), int(city[before])])
        if (
            recorded is not None
            and true is not None
            and edge > 0
            and _same(rule, float(recorded) - float(true), edge)
        ):
            return "the partial exceeds the true one by exactly the edge to the previous sibling"
    return None


def _same(rule: CheckRule, a: float, b: float) -> bool:
    """Two lengths agree (exactly, or within the float tolerance)."""
    return bool(rule.agrees(np.array([a]), np.array([b]))[0])


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
    rule: CheckRule, lo: int, city: NDArray[np.intp], depth: NDArray[Any], parent: NDArray[Any]
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
        # from slot 0's start city, as inside the chunk (a root elsewhere is wrong, but its
        # partial must not depend on where the chunks are cut)
        partial[slot] = rule.matrix[START, path[0]] + rule.matrix[path[:-1], path[1:]].sum()
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
    rule: CheckRule,
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
    rule: CheckRule,
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


def _check_chunk(rule: CheckRule, lo: int, hi: int) -> list[_Check]:
    """Every field check over the ids [lo, hi)."""
    cols = rule.columns
    rows = np.arange(lo, hi)
    ids = rule.gids(lo, hi)
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
    incumbent = rule.index.incumbent_at(rows)

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
    checks += _decision_check(
        rule, lo, hi, decision, incumbent, (partial, bound, length), (live, open_, bounded)
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
    _attribute(rule, lo, hi, checks, incumbent, (open_, bounded, complete))
    return checks


def _attribute(
    rule: CheckRule,
    lo: int,
    hi: int,
    checks: list[_Check],
    incumbent: NDArray[np.float64],
    groups: tuple[NDArray[np.bool_], NDArray[np.bool_], NDArray[np.bool_]],
) -> None:
    """Mark each wrong value as a root finding or a knock-on, and name the knock-on's root.

    A partial is a knock-on when it follows from a wrong partial above it or beside it
    (`_partial_chains`). A recorded bound, or a decision, is a knock-on when it follows from the
    recorded numbers at its node while one of them is wrong: its root is that node (a wrong
    tree or link) or the root of its wrong partial. Everything else is a root finding.
    """
    if not any(check.bad.any() for check in checks):
        return  # a clean chunk: nothing to attribute (the common case, kept cheap)
    rows = np.arange(lo, hi, dtype=np.int64)
    chains = rule.chains[lo:hi].astype(np.int64)
    m = hi - lo
    partial_bad = np.zeros(m, dtype=np.bool_)
    part_bad = np.zeros(m, dtype=np.bool_)
    for check in checks:
        if check.kind == "partial":
            partial_bad |= check.bad
        elif check.kind in ("tree", "link_in", "link_out") or check.field == PENALTY:
            part_bad |= check.bad
    upstream = rule.root_ids(np.where(part_bad, rows, chains))
    inputs_bad = part_bad | partial_bad
    follows = _follows_recorded(rule, lo, hi, incumbent, groups)
    for check in checks:
        if check.kind == "partial":
            check.knock = check.bad & (chains != rows)
            check.root_of = rule.root_ids(chains)
        elif check.field == BOUND and check.kind == "bound":
            recorded = rule.columns[BOUND][lo:hi]
            total = bound_values(rule.trail, slice(lo, hi)) if rule.ours else None
            same = (
                rule.agrees(recorded, np.nan_to_num(total, nan=np.inf))
                if total is not None
                else np.zeros(m, dtype=np.bool_)
            )
            check.knock = check.bad & inputs_bad & same
            check.root_of = upstream
        elif check.field == DECISION and check.kind in ("decision", MISSED):
            check.knock = check.bad & inputs_bad & follows
            check.root_of = upstream


def _follows_recorded(
    rule: CheckRule,
    lo: int,
    hi: int,
    incumbent: NDArray[np.float64],
    groups: tuple[NDArray[np.bool_], NDArray[np.bool_], NDArray[np.bool_]],
) -> NDArray[np.bool_]:
    """Where the recorded decision is what the rule gives on the recorded numbers."""
    open_, bounded, complete = groups
    cols = rule.columns
    decision = cols[DECISION][lo:hi]
    m = hi - lo
    if PARTIAL not in cols:
        return np.zeros(m, dtype=np.bool_)
    partial = cols[PARTIAL][lo:hi].astype(np.float64)
    partial = np.where(is_absent(cols[PARTIAL][lo:hi]), np.nan, partial)
    bound = bound_values(rule.trail, slice(lo, hi))
    city = cols[CITY][lo:hi].astype(np.intp)
    length = partial + rule.matrix[city, START]
    out = np.zeros(m, dtype=np.bool_)
    for pick, value, yes, no, at_least in (
        (bounded, bound, Decision.PRUNE, Decision.EXPAND, True),
        (open_ & ~bounded, partial, Decision.PRUNE, Decision.SKIP, True),
        (complete, length, Decision.TOUR_BETTER, Decision.TOUR, False),
    ):
        with np.errstate(invalid="ignore"):
            e, a = _verdict(rule, value, incumbent, yes, no, at_least=at_least)
        out |= pick & ~np.isnan(value) & ((decision == e) | (decision == a))
    return out


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
    rule: CheckRule,
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
    rule: CheckRule,
    lo: int,
    hi: int,
    decision: NDArray[Any],
    incumbent: NDArray[np.float64],
    lengths: tuple[NDArray[Any], NDArray[Any], NDArray[Any]],
    groups: tuple[NDArray[np.bool_], NDArray[np.bool_], NDArray[np.bool_]],
) -> list[_Check]:
    """The decision against the rule, with the incumbent in force at each node: the wrong
    decisions, and apart from them the missed prunes.

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
    # Descending where the rule prunes costs time but loses no tour: a missed prune.
    missed = bad & np.isin(decision, _DESCENDING_CODES) & (expected == Decision.PRUNE)
    detail = "the decision does not follow from the bound and the incumbent in force"
    return [
        _Check("decision", DECISION, bad & ~missed, detail, decision, expected),
        _Check(
            "decision" if rule.strict else MISSED,
            DECISION,
            missed,
            "descended although the rule prunes here (a missed prune)",
            decision,
            expected,
        ),
    ]
