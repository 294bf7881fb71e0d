"""Why a tour was lost: the node where its branch was cut, and which number was to blame.

A reference tour (the optimum, or any tour the user trusts) is followed through the tree
index from city 0 in both directions; the direction the trail went deeper is the one it
took. At the deepest node on that branch the verdict is reached in a fixed order, each
step ruling out the one before:

1. the branch reached a complete tour: nothing was cut (`none`, and where it was found);
2. the incumbent in force was wrong (its frame's length is not its tour's, or it is below
   the optimum): `incumbent`;
3. the prune's bound was below the incumbent: the prune rule was broken (`bound_rule`);
4. a recorded part differs from its independent recomputation (`tracer.analysis.
   rechecking.recompute_node`): the part with the largest excess is named;
5. every number is right, yet the bound exceeds the true cost of finishing the branch:
   the bound is not a lower bound (`inadmissible_bound`), and the part that exceeds its
   true counterpart along the best finish is named;
6. otherwise the prune was right (the incumbent was already as good): `none`.

With the exact-completion oracle the true finishing cost is exact for every node, so the
harmful prunes anywhere in the tree and the first node whose bound is not a lower bound
are listed as well; without it the reference tour gives the finishing cost on its branch.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.analysis.narrate import recorded_value
from tracer.analysis.oracle import CompletionTable, best_completions
from tracer.analysis.rechecking import REL_TOL, recompute_node
from tracer.analysis.tree_index import TreeIndex
from tracer.base import (
    CITY,
    DECISION,
    DECISION_NAMES,
    DEPTH,
    LINK_IN,
    LINK_OUT,
    PARTIAL,
    SUBTRACTED_TERMS,
    TREE,
    VISIT,
    BestUpdate,
    BlockSource,
    Decision,
    Instance,
    Trail,
    bound_terms,
    bound_values,
    explicit_instance,
    recorded_bound,
)

#: The verdicts, in the order they are tried.
CULPRITS: tuple[str, ...] = (
    "partial",
    "tree",
    "link_in",
    "link_out",
    "penalty",
    "bound_rule",
    "inadmissible_bound",
    "incumbent",
    "none",
)
#: Harmful prunes listed by default.
HARMFUL_SHOWN = 10
_PARTS = (PARTIAL, TREE, LINK_IN, LINK_OUT)


@dataclass
class WhyReport:
    """Where the reference tour's branch ended in the trail, and why.

    Attributes:
        cut_node: the node where the branch was cut (None when the tour was completed).
        path: the cut (or completing) node's path.
        decision: its recorded decision's name.
        bound: its recorded bound (None where none was evaluated).
        parts: each bound part: recorded, recomputed, and its true counterpart.
        incumbent: the incumbent in force at the node (None before any tour).
        completion: the cheapest tour through the node (oracle), else the reference tour's.
        culprit: one of `CULPRITS`.
        explanation: one sentence.
        found_at: the node where the reference tour was completed, if it was.
        harmful_prunes: the first prunes (anywhere) that cut away a tour better than the
            incumbent in force: id, path, bound, completion, incumbent.
        harmful_count: how many such prunes the trail holds (None without the oracle).
        first_inadmissible: the first node whose bound exceeds its best completion.
        tour: the reference tour, in the direction the trail took.
        tour_length: its length.
        node: the deepest node on the branch (the cut node, or found_at).
    """

    cut_node: int | None
    path: list[int]
    decision: str
    bound: float | None
    parts: dict[str, dict[str, float | None]]
    incumbent: float | None
    completion: float | None
    culprit: str
    explanation: str
    found_at: int | None = None
    harmful_prunes: list[dict[str, Any]] = field(default_factory=list)
    harmful_count: int | None = None
    first_inadmissible: int | None = None
    tour: list[int] = field(default_factory=list)
    tour_length: float = 0.0
    node: int = 0

    def to_json(self) -> dict[str, Any]:
        """The report as a JSON-ready map."""
        return {
            "cut_node": self.cut_node,
            "path": list(self.path),
            "decision": self.decision,
            "bound": _number(self.bound),
            "parts": {k: {n: _number(v) for n, v in p.items()} for k, p in self.parts.items()},
            "incumbent": _number(self.incumbent),
            "completion": _number(self.completion),
            "culprit": self.culprit,
            "explanation": self.explanation,
            "found_at": self.found_at,
            "harmful_prunes": [
                {k: _number(v) if isinstance(v, float) else v for k, v in p.items()}
                for p in self.harmful_prunes
            ],
            "harmful_count": self.harmful_count,
            "first_inadmissible": self.first_inadmissible,
            "tour": list(self.tour),
            "tour_length": _number(self.tour_length),
        }


def _number(value: float | None) -> float | int | None:
    """A length for JSON: whole numbers as ints, infinities and NaN as None."""
    if value is None or not math.isfinite(value):
        return None
    return int(value) if float(value).is_integer() else float(value)


class _Lengths:
    """Comparing lengths: exactly for integer metrics, within REL_TOL for float ones."""

    def __init__(self, matrix: NDArray[Any]) -> None:
        self.exact = matrix.dtype.kind in "iu"
        self.scale = float(np.abs(matrix).max(initial=0))

    def slack(self, value: float) -> float:
        return 0.0 if self.exact else REL_TOL * max(abs(value), self.scale)

    def same(self, a: float, b: float) -> bool:
        return abs(a - b) <= self.slack(b)

    def above(self, a: float, b: float) -> bool:
        """a > b beyond the tolerance."""
        return a - b > self.slack(b)

    def slacks(self, values: NDArray[np.float64]) -> NDArray[np.float64] | float:
        """The tolerance around each of `values` (0 when exact)."""
        if self.exact:
            return 0.0
        return np.asarray(REL_TOL * np.maximum(np.abs(values), self.scale), dtype=np.float64)


def explain(
    trail: Trail,
    index: TreeIndex,
    *,
    tour: Sequence[int] | None,
    table: CompletionTable | None,
    completions: NDArray[np.float64] | None = None,
    harmful_shown: int = HARMFUL_SHOWN,
) -> WhyReport:
    """Find where `tour`'s branch ended in the trail and say why.

    Args:
        trail: the trail.
        index: its tree index.
        tour: the reference tour (any rotation, either direction); None with a table means
            the optimum (a recorded incumbent of optimal length if the trail found one,
            else the table's optimal tour).
        table: the instance's completion table, when it is small enough for one.
        completions: `best_completions` of the trail, if already computed.
        harmful_shown: how many harmful prunes to list.

    Raises:
        ValueError: no tour and no table, a tour that is not a permutation of the cities,
            or an empty trail.
    """
    matrix, cycle = reference_cycle(trail, tour, table)
    if table is not None and completions is None:
        completions = best_completions(trail, index, table)
    follow = Follow(cycle)
    ids = np.arange(trail.count, dtype=np.int64)
    follow.add(trail, index, ids, 0, trail.count)
    harm = Harm(matrix, harmful_shown) if completions is not None else None
    if harm is not None and completions is not None:
        harm.add(trail, index, ids, 0, trail.count, completions)
    return judged(trail, follow, harm, table, matrix)


def reference_cycle(
    source: Trail | BlockSource, tour: Sequence[int] | None, table: CompletionTable | None
) -> tuple[NDArray[Any], list[int]]:
    """The instance's matrix and the reference tour from city 0 (`explain`'s arguments).

    Raises:
        ValueError: as `explain`.
    """
    if source.count == 0:
        raise ValueError("the trail holds no nodes")
    matrix = np.asarray(source.header.instance.matrix)
    if tour is None:
        if table is None:
            raise ValueError("give a reference tour, or a completion table for the optimum")
        tour = _optimal_reference(source, table, _Lengths(matrix))
    return matrix, _rotated(tour, source.header.instance.n)


def judged(
    source: Trail | BlockSource,
    follow: Follow,
    harm: Harm | None,
    table: CompletionTable | None,
    matrix: NDArray[Any],
) -> WhyReport:
    """The report once every record has been through `follow` (and `harm`, with the oracle):
    the verdict at the branch's deepest node, judged on that node's path rows."""
    view, view_index, row, ids, reaches_end = follow.branch(source)
    cycle = follow.direction
    length = _cycle_length(matrix, cycle)
    judge = _Judge(view, view_index, table, matrix, ids=ids)
    report = judge.verdict(row, cycle, length, reaches_end)
    report.tour, report.tour_length, report.node = cycle, length, int(ids[row])
    if harm is not None:
        harm.finish(report)
    else:
        report.first_inadmissible = judge.along_branch(row, cycle, length)
    return report


def _optimal_reference(
    trail: Trail | BlockSource, table: CompletionTable, lengths: _Lengths
) -> list[int]:
    """A recorded incumbent of optimal length (the trail's own optimum), else the table's."""
    n = trail.header.instance.n
    for frame in trail.best:
        if lengths.same(float(frame.length), table.optimum) and len(frame.tour) == n:
            tour = list(frame.tour)
            if sorted(tour) == list(range(n)) and lengths.same(
                _cycle_length(np.asarray(table.matrix), tour), table.optimum
            ):
                return tour
    return table.optimal_tour()


def _rotated(tour: Sequence[int], n: int) -> list[int]:
    """The tour as a list from city 0, checked to visit every city once."""
    cities = [int(c) for c in tour]
    if sorted(cities) != list(range(n)):
        raise ValueError(f"the reference tour is not a tour of the {n} cities 0..{n - 1}")
    at = cities.index(0)
    return cities[at:] + cities[:at]


def _cycle_length(matrix: NDArray[Any], cycle: Sequence[int]) -> float:
    cities = np.asarray(cycle, dtype=np.intp)
    return float(matrix[cities, np.roll(cities, -1)].sum())


class Follow:
    """The deepest node on a tour's branch, over both directions (forward wins a tie),
    found record block by record block in id order: in each direction the branch goes on
    at the first child, in id order, whose city is the tour's next one.

    For the node finally reached it keeps its path rows and the record after it (enough
    to judge it), and whether a later record leaves its subtree.
    """

    def __init__(self, cycle: list[int]) -> None:
        self.directions = (cycle, [cycle[0], *reversed(cycle[1:])])
        self.node = [0, 0]
        self.depth = [0, 0]
        self.live = [False, False]
        self.rows: list[dict[str, NDArray[Any]] | None] = [None, None]
        self.row_ids: list[NDArray[np.int64] | None] = [None, None]
        self.closed = [False, False]
        self._started = False

    @property
    def _pick(self) -> int:
        return 1 if self.depth[1] > self.depth[0] else 0

    @property
    def direction(self) -> list[int]:
        """The tour in the direction the trail went deeper."""
        return self.directions[self._pick]

    def add(self, trail: Trail, index: TreeIndex, ids: NDArray[np.int64], lo: int, hi: int) -> None:
        """Follow both directions through the rows [lo, hi) of a trail or window (`ids`:
        each row's trail id; rows before `lo` are the path the window starts from)."""
        if hi <= lo:
            return
        city = trail.columns[CITY]
        if not self._started:
            self._started = True
            for k, direction in enumerate(self.directions):
                self.live[k] = int(ids[lo]) == 0 and int(city[lo]) == direction[0]
                if int(ids[lo]) == 0:
                    self._keep(k, trail, index, ids, lo)
        parent = index.parent[lo:hi]
        parent_ids = np.where(parent >= 0, ids[np.maximum(parent, 0)], -1)
        cities = city[lo:hi]
        depth = trail.columns[DEPTH][lo:hi]
        for k, direction in enumerate(self.directions):
            while self.live[k] and self.depth[k] + 1 < len(direction):
                want = direction[self.depth[k] + 1]
                hits = np.flatnonzero((parent_ids == self.node[k]) & (cities == want))
                if not hits.size:
                    break
                self.node[k] = int(ids[lo + int(hits[0])])
                self.depth[k] += 1
                self._keep(k, trail, index, ids, lo + int(hits[0]))
            if not self.closed[k]:
                after = ids[lo:hi] > self.node[k]
                self.closed[k] = bool((after & (depth <= self.depth[k])).any())

    def _keep(
        self, k: int, trail: Trail, index: TreeIndex, ids: NDArray[np.int64], row: int
    ) -> None:
        """Keep the node's path rows and the row after it (if the window has it)."""
        rows = index.ancestors(row)
        if row + 1 < trail.count:
            rows.append(row + 1)
        pick = np.asarray(rows, dtype=np.intp)
        self.rows[k] = {name: column[pick] for name, column in trail.columns.items()}
        self.row_ids[k] = ids[pick]
        self.closed[k] = False

    def branch(self, source: Trail | Any) -> tuple[Trail, TreeIndex, int, NDArray[np.int64], bool]:
        """The deepest node's path as a small trail: (trail, index, the node's row, each
        row's trail id, whether its subtree runs to the end of the records)."""
        k = self._pick
        cols, ids = self.rows[k], self.row_ids[k]
        if cols is None or ids is None:
            raise ValueError("the trail holds no nodes")
        view = Trail(source.path, source.header, cols, source.best, source.end, source.notice)
        positions = cols.get(VISIT, ids)
        index = TreeIndex({**cols, VISIT: positions}, source.best)
        row = int(np.flatnonzero(ids == self.node[k])[0])
        return view, index, row, ids, not self.closed[k]


class Harm:
    """With the oracle's completions: the harmful prunes (counted, the first listed) and the
    first bound that is not a lower bound, gathered block by block in id order."""

    def __init__(self, matrix: NDArray[Any], shown: int) -> None:
        self.lengths = _Lengths(matrix)
        self.shown = shown
        self.count = 0
        self.listed: list[dict[str, Any]] = []
        self.first_over: int | None = None

    def add(
        self,
        trail: Trail,
        index: TreeIndex,
        ids: NDArray[np.int64],
        lo: int,
        hi: int,
        completion: NDArray[np.float64],
    ) -> None:
        """Count in the rows [lo, hi) (`completion`: theirs, in order)."""
        rows = np.arange(lo, hi, dtype=np.int64)
        incumbent = index.incumbent_at(rows)
        bound = bound_values(trail, slice(lo, hi))
        with np.errstate(invalid="ignore"):
            harmful = (trail.columns[DECISION][lo:hi] == Decision.PRUNE) & (
                incumbent - completion > self.lengths.slacks(completion)
            )
            over = bound - completion > self.lengths.slacks(completion)
        hits = np.flatnonzero(harmful)
        self.count += int(hits.size)
        for i in hits[: max(self.shown - len(self.listed), 0)]:
            self.listed.append(
                {
                    "id": int(ids[lo + i]),
                    "path": index.path(lo + int(i)),
                    "bound": _float(bound[i]),
                    "completion": float(completion[i]),
                    "incumbent": float(incumbent[i]),
                }
            )
        first = np.flatnonzero(over)
        if self.first_over is None and first.size:
            self.first_over = int(ids[lo + int(first[0])])

    def finish(self, report: WhyReport) -> None:
        """Put the findings into the report."""
        report.harmful_count = self.count
        report.harmful_prunes = self.listed
        report.first_inadmissible = self.first_over


def _frame_in_force(trail: Trail, node: int, position_of: int) -> BestUpdate | None:
    """The incumbent update in force when `node` was visited (None before any)."""
    visit = trail.columns.get(VISIT)
    position = int(visit[node]) if visit is not None else position_of
    before = [b for b in sorted(trail.best, key=lambda b: b.at) if b.at <= position]
    return before[-1] if before else None


class _Judge:
    """The verdict at one node, judged on its path rows (`Follow.branch`)."""

    def __init__(
        self,
        trail: Trail,
        index: TreeIndex,
        table: CompletionTable | None,
        matrix: NDArray[Any],
        *,
        ids: NDArray[np.int64],
    ) -> None:
        self.trail = trail
        self.index = index
        #: Each row's trail id (the rows are a branch's path and the record after it).
        self.ids = ids
        self.table = table
        self.matrix = matrix
        self.lengths = _Lengths(matrix)
        self.integral = trail.header.instance.integral

    def fmt(self, value: float | None) -> str:
        if value is None:
            return "none"
        if math.isinf(value):
            return "infinite"
        if self.integral and float(value).is_integer():
            return str(int(value))
        return f"{value:.6g}"

    # -- the node on the branch --------------------------------------------------------

    def verdict(self, row: int, cycle: list[int], length: float, reaches_end: bool) -> WhyReport:
        """The verdict at a row (`reaches_end`: its subtree runs to the last record)."""
        trail, index = self.trail, self.index
        node = row
        shown = int(self.ids[row])
        path = index.path(node)
        depth = len(path) - 1
        decision = int(trail.columns[DECISION][node])
        incumbent = float(index.incumbent_at(np.array([node], dtype=np.int64))[0])
        shown_incumbent = None if math.isinf(incumbent) else incumbent
        values = recompute_node(trail, index, node)
        finish = self._finish(path, cycle)
        walked = float(values["partial"] or 0.0)
        completion = walked + finish[0]
        parts = self._parts(node, values, finish[1], depth == trail.n - 1)
        bound = recorded_bound(trail, node) if depth < trail.n - 1 else None
        base = WhyReport(
            cut_node=shown,
            path=path,
            decision=DECISION_NAMES[decision] if decision < len(DECISION_NAMES) else "?",
            bound=bound,
            parts=parts,
            incumbent=shown_incumbent,
            completion=completion,
            culprit="none",
            explanation="",
        )
        if depth == trail.n - 1:
            base.cut_node = None
            base.found_at = shown
            base.explanation = (
                f"The tour was not cut: the search completed it at node {shown} "
                f"({self.fmt(length)}, decision {base.decision})."
            )
            return base
        if decision != Decision.PRUNE:
            base.cut_node = None
            stopped = reaches_end and (trail.end is None or trail.end.status != "complete")
            nxt = cycle[depth + 1]
            base.explanation = (
                f"The trail stops (status {trail.end.status if trail.end else 'unfinished'}) "
                f"inside node {shown}'s subtree before the branch reached city {nxt}."
                if stopped
                else f"Node {shown} was not pruned ({base.decision}), yet the search never "
                f"went on to city {nxt}: that child is missing from the trail."
            )
            return base
        return self._pruned(base, node, incumbent, values)

    def _id(self, row: int) -> int:
        return int(self.ids[row])

    def _finish(self, path: list[int], cycle: list[int]) -> tuple[float, list[int]]:
        """The true cost of finishing the branch and the cities of that finish (to city 0)."""
        if self.table is not None:
            mask = sum(1 << c for c in set(range(self.trail.n)) - set(path))
            cities = self.table.best_finish(path[-1], mask)
            return self.table.finish(path[-1], mask), cities
        rest = [*cycle[len(path) :], 0]
        steps = np.asarray([path[-1], *rest], dtype=np.intp)
        return float(self.matrix[steps[:-1], steps[1:]].sum()), rest

    def _parts(
        self, node: int, values: dict[str, float | int | None], finish: list[int], complete: bool
    ) -> dict[str, dict[str, float | None]]:
        """Each part: what the trail records, what it should be, and its true counterpart."""
        if complete:
            return {}
        last = self.index.path(node)[-1]
        chain = np.asarray([last, *finish], dtype=np.intp)
        edges = self.matrix[chain[:-1], chain[1:]].astype(np.float64)
        true = {
            PARTIAL: values.get(PARTIAL),
            LINK_IN: float(edges[0]) if len(edges) > 1 else None,
            TREE: float(edges[1:-1].sum()) if len(edges) > 1 else None,
            LINK_OUT: float(edges[-1]) if len(edges) > 1 else None,
        }
        out: dict[str, dict[str, float | None]] = {}
        for name in bound_terms(self.trail.header):
            recomputed = values.get(name)
            out[name] = {
                "recorded": recorded_value(self.trail, name, node),
                "recomputed": None if recomputed is None else float(recomputed),
                "true": None if name in SUBTRACTED_TERMS else _float(true.get(name)),
            }
        return out

    def _pruned(
        self, base: WhyReport, node: int, incumbent: float, values: dict[str, float | int | None]
    ) -> WhyReport:
        fmt = self.fmt
        row, node = node, self._id(node)
        frame = _frame_in_force(self.trail, row, node)
        wrong_frame = self._frame_wrong(frame)
        completion = base.completion if base.completion is not None else math.nan
        if wrong_frame is not None:
            base.culprit = "incumbent"
            base.explanation = wrong_frame
            return base
        bound = base.bound
        recomputed_only = False
        if bound is None:  # no bound recorded: the rule's own, else the path's length alone
            bound = _float(values.get("bound"))
            recomputed_only = bound is not None
        if bound is None:
            bound = _float(recorded_value(self.trail, PARTIAL, row))
        if bound is None:
            bound = float(values.get(PARTIAL) or 0.0)
        if (
            not math.isinf(incumbent)
            and not self.lengths.same(bound, incumbent)
            and bound < incumbent
        ):
            base.culprit = "bound_rule"
            base.explanation = (
                f"Node {node} was pruned although its bound, recomputed (the trail records "
                f"none), is {fmt(bound)}, below the incumbent {fmt(incumbent)}: the search's "
                "bound or its prune rule was wrong here."
                if recomputed_only
                else f"Node {node} was pruned with bound {fmt(bound)} below the incumbent "
                f"{fmt(incumbent)}: the prune rule (prune when bound >= incumbent) was broken."
            )
            return base
        if math.isinf(incumbent):
            base.culprit = "bound_rule"
            base.explanation = (
                f"Node {node} was pruned while no incumbent was in force: nothing can justify "
                "a prune before the first tour."
            )
            return base
        # How much each wrong part raised the bound (a subtracted part by being too small).
        excess = {
            name: (part["recorded"] - part["recomputed"])
            * (-1.0 if name in SUBTRACTED_TERMS else 1.0)
            for name, part in base.parts.items()
            if part["recorded"] is not None
            and part["recomputed"] is not None
            and not self.lengths.same(part["recorded"], part["recomputed"])
        }
        if excess:
            name = max(excess, key=lambda k: excess[k])
            part = base.parts[name]
            base.culprit = name
            base.explanation = (
                f"Node {node} was pruned (bound {fmt(bound)} against the incumbent "
                f"{fmt(incumbent)}) on a wrong {name}: recorded {fmt(part['recorded'])}, "
                f"recomputed {fmt(part['recomputed'])}; the best tour through it costs "
                f"{fmt(completion)}."
            )
            return base
        if self.lengths.above(bound, completion):
            over = {
                name: (part["recorded"] or 0.0) - part["true"]
                for name, part in base.parts.items()
                if name in _PARTS[1:] and part["recorded"] is not None and part["true"] is not None
            }
            worst = max(over, key=lambda k: over[k]) if over else None
            named = (
                f"; its {worst} ({fmt(base.parts[worst]['recorded'])}) exceeds the true "
                f"{worst} of the best finish ({fmt(base.parts[worst]['true'])})"
                if worst is not None and over[worst] > 0
                else ""
            )
            base.culprit = "inadmissible_bound"
            base.explanation = (
                f"Every recorded number at node {node} is right, but its bound {fmt(bound)} "
                f"exceeds the best tour through it ({fmt(completion)}): the bound is not a "
                f"lower bound{named}."
            )
            return base
        base.explanation = (
            f"Node {node} was pruned rightly: the best tour through it ({fmt(completion)}) "
            f"is no shorter than the incumbent in force ({fmt(incumbent)})."
        )
        return base

    def _frame_wrong(self, frame: BestUpdate | None) -> str | None:
        """Why the incumbent in force cannot be right, or None if it can."""
        if frame is None:
            return None
        n = self.trail.n
        tour = list(frame.tour)
        fmt = self.fmt
        if sorted(tour) != list(range(n)):
            return (
                f"The incumbent in force ({fmt(frame.length)}) comes from a best frame whose "
                "tour does not visit every city once."
            )
        real = _cycle_length(self.matrix, tour)
        if not self.lengths.same(float(frame.length), real):
            return (
                f"The incumbent in force says {fmt(frame.length)}, but its tour is "
                f"{fmt(real)} long: the incumbent was wrong."
            )
        if self.table is not None and self.lengths.above(self.table.optimum, frame.length):
            return (
                f"The incumbent in force ({fmt(frame.length)}) is below the optimum "
                f"({fmt(self.table.optimum)}): no tour is that short."
            )
        return None

    # -- the whole tree ----------------------------------------------------------------

    def along_branch(self, node: int, cycle: list[int], length: float) -> int | None:
        """Without the oracle: the first node on the branch whose bound exceeds the tour's."""
        chain = np.asarray(self.index.ancestors(node), dtype=np.int64)
        bound = bound_values(self.trail, chain)
        with np.errstate(invalid="ignore"):
            over = bound - length > self.lengths.slack(length)
        hits = np.flatnonzero(over)
        return self._id(int(chain[hits[0]])) if hits.size else None


def _float(value: float | int | None) -> float | None:
    if value is None:
        return None
    number = float(value)
    return None if math.isnan(number) else number


def remainder_instance(trail: Trail, index: TreeIndex, node: int) -> tuple[Instance, list[int]]:
    """The sub-problem left at a node: its two path ends and its unvisited cities.

    The new instance's city 0 is the start city, city 1 the path's end, then the unvisited
    cities ascending; finishing the branch is the cheapest path from city 1 through the rest
    to city 0. Distances are the original matrix's (EXPLICIT), so every metric carries over.

    Returns:
        The instance, and for each of its cities the original city number.
    """
    return path_remainder(trail.header.instance, index.path(node), node)


def path_remainder(original: Instance, path: list[int], node: int) -> tuple[Instance, list[int]]:
    """`remainder_instance` from the node's path (its cities from city 0) alone."""
    rest = sorted(set(range(original.n)) - set(path))
    cities = [0, path[-1], *rest] if path[-1] != 0 else [0, *rest]
    chosen = np.asarray(cities, dtype=np.intp)
    matrix = np.asarray(original.matrix)[np.ix_(chosen, chosen)]
    coords = original.coords[chosen] if original.coords is not None else None
    comment = (
        f"what is left at node {node} of {original.name}: city 1 is the start city, city 2 "
        f"the path's end {path[-1]}; original cities {' '.join(str(c) for c in cities)}"
    )
    name = f"{original.name}_node{node}"
    return explicit_instance(name, matrix, coords=coords, comment=comment), cities
