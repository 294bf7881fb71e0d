"""Where a search spends itself: per-depth counts, prune rates and bound tightness.

Everything is one pass of `np.bincount` over depth × decision (and weighted bincounts for
the tightness sums), so a 10-million-node trail takes a fraction of a second and no
Python object is made per node. Tightness is bound ÷ best possible completion when the
exact-completion oracle's values are given (`tracer.analysis.oracle.best_completions`);
otherwise bound ÷ the final incumbent, which is labelled so, since it measures the bound
against the best tour found rather than against the best tour through each node.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    BOUND,
    DECISION,
    DECISION_NAMES,
    DEPTH,
    NO_BOUND,
    TREE,
    BestUpdate,
    Decision,
    EndInfo,
    Trail,
    TrailHeader,
    bound_values,
)

#: Where the tightness figures come from.
ORACLE = "oracle"
FINAL_INCUMBENT = "final incumbent"

_DECISIONS = len(DECISION_NAMES)


def bounded_mask(trail: Trail, bounds: NDArray[np.float64] | None = None) -> NDArray[np.bool_]:
    """Which nodes had their bound evaluated.

    From the recorded numbers where the trail has them; for a decisions-only trail, from
    the rule (an expand or prune with more unvisited cities than the cutoff).
    """
    cols = trail.columns
    if TREE in cols or BOUND in cols:
        values = bound_values(trail, slice(None)) if bounds is None else bounds
        return np.asarray(~np.isnan(values), dtype=np.bool_)
    if trail.header.solver.bound == NO_BOUND:
        return np.zeros(trail.count, dtype=np.bool_)
    unvisited = trail.n - 1 - cols[DEPTH].astype(np.int64)
    decision = cols[DECISION]
    judged = (decision == Decision.EXPAND) | (decision == Decision.PRUNE)
    return np.asarray(judged & (unvisited > trail.header.solver.cutoff), dtype=np.bool_)


def depth_decision_counts(trail: Trail, depths: int | None = None) -> NDArray[np.int64]:
    """counts[d, code]: nodes at depth d with decision `code` (one bincount)."""
    depth = trail.columns[DEPTH].astype(np.intp)
    decision = trail.columns[DECISION].astype(np.intp)
    rows = max(depths or 0, trail.n, int(depth.max()) + 1 if len(depth) else 0)
    flat = np.bincount(depth * _DECISIONS + decision, minlength=rows * _DECISIONS)
    return np.asarray(flat[: rows * _DECISIONS].reshape(rows, _DECISIONS), dtype=np.int64)


def effective_branching_factor(nodes: int, depth: int) -> float:
    """The b with 1 + b + b² + … + b^depth = nodes (the uniform tree of the same size)."""
    if nodes <= 1 or depth <= 0:
        return 0.0 if nodes <= 1 else float(nodes - 1)

    def size(b: float) -> float:
        if b == 1.0:
            return float(depth + 1)
        log_top = (depth + 1) * math.log(b)
        if log_top > 700:
            return math.inf
        return (math.exp(log_top) - 1.0) / (b - 1.0)

    lo, hi = 0.0, float(nodes)
    for _ in range(200):
        mid = (lo + hi) / 2
        if size(mid) < nodes:
            lo = mid
        else:
            hi = mid
    return (lo + hi) / 2


@dataclass(frozen=True)
class Improvement:
    """One incumbent improvement: the node whose tour it is (-1: start tour), the first id
    that sees it, the new length, and the node's depth (None when not recorded)."""

    node: int
    at: int
    length: float
    depth: int | None = None


@dataclass
class DepthStats:
    """Per-depth figures of one trail (arrays indexed by depth 0..n-1).

    Attributes:
        n: the instance's city count.
        decisions: nodes[d, code] per decision code (`tracer.base.Decision`).
        bound_evaluations: nodes whose bound was evaluated, per depth.
        tightness_mean: mean bound ÷ reference at each depth (NaN where no bound).
        tightness_worst: the lowest (loosest) ratio at each depth.
        tightness_source: `ORACLE` or `FINAL_INCUMBENT`.
        reference_length: the final incumbent (None when no tour was found).
        improvements: the incumbent's improvements, in order.
        integral: whether lengths are whole numbers.
    """

    n: int
    decisions: NDArray[np.int64]
    bound_evaluations: NDArray[np.int64]
    tightness_mean: NDArray[np.float64]
    tightness_worst: NDArray[np.float64]
    tightness_source: str
    reference_length: float | None
    improvements: list[Improvement] = field(default_factory=list)
    integral: bool = True

    @property
    def nodes(self) -> NDArray[np.int64]:
        """Nodes per depth."""
        return np.asarray(self.decisions.sum(axis=1), dtype=np.int64)

    @property
    def total(self) -> int:
        """All nodes of the trail."""
        return int(self.decisions.sum())

    @property
    def prune_rate(self) -> NDArray[np.float64]:
        """Share of each depth's nodes that were pruned (NaN at an empty depth)."""
        nodes = self.nodes.astype(np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.asarray(self.decisions[:, Decision.PRUNE] / nodes, dtype=np.float64)

    @property
    def branching(self) -> NDArray[np.float64]:
        """Children per descending (expand or skip) node, per depth (NaN where none)."""
        descending = self.decisions[:, Decision.EXPAND] + self.decisions[:, Decision.SKIP]
        below = np.append(self.nodes[1:], 0).astype(np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            out = np.where(descending > 0, below / descending, np.nan)
        return np.asarray(out, dtype=np.float64)

    @property
    def max_depth(self) -> int:
        """The deepest depth holding a node (-1 for an empty trail)."""
        filled = np.flatnonzero(self.nodes)
        return int(filled[-1]) if len(filled) else -1

    @property
    def effective_branching_factor(self) -> float:
        """The branching factor of a uniform tree as big and as deep as this one."""
        return effective_branching_factor(self.total, self.max_depth)

    def to_json(self) -> dict[str, Any]:
        """The figures as JSON-ready values (NaN as null)."""
        depths = []
        rate, branching = self.prune_rate, self.branching
        for d in range(self.max_depth + 1):
            depths.append(
                {
                    "depth": d,
                    "unvisited": self.n - 1 - d,
                    "nodes": int(self.nodes[d]),
                    "decisions": {
                        name: int(self.decisions[d, code])
                        for code, name in enumerate(DECISION_NAMES)
                    },
                    "bound_evaluations": int(self.bound_evaluations[d]),
                    "prune_rate": _finite(rate[d]),
                    "tightness_mean": _finite(self.tightness_mean[d]),
                    "tightness_worst": _finite(self.tightness_worst[d]),
                    "branching": _finite(branching[d]),
                }
            )
        return {
            "n": self.n,
            "nodes": self.total,
            "decisions": {
                name: int(self.decisions[:, code].sum()) for code, name in enumerate(DECISION_NAMES)
            },
            "bound_evaluations": int(self.bound_evaluations.sum()),
            "tightness_source": self.tightness_source,
            "reference_length": self.reference_length,
            "effective_branching_factor": _finite(self.effective_branching_factor),
            "improvements": [
                {"node": i.node, "at": i.at, "length": i.length, "depth": i.depth}
                for i in self.improvements
            ],
            "depths": depths,
        }


def _finite(value: float | np.floating[Any]) -> float | None:
    number = float(value)
    return number if math.isfinite(number) else None


def final_length(trail: Trail) -> float | None:
    """The best tour length the search ended with (the end frame's, else the last update)."""
    return _final_length(trail.best, trail.end)


def _final_length(best: list[BestUpdate], end: EndInfo | None) -> float | None:
    if end is not None and end.length is not None:
        return float(end.length)
    lengths = [b.length for b in best if math.isfinite(b.length)]
    return min(lengths) if lengths else None


def depth_stats(trail: Trail, completions: NDArray[np.float64] | None = None) -> DepthStats:
    """Per-depth counts and tightness of a trail.

    Args:
        trail: the trail read into memory.
        completions: best possible completion of every node (the oracle's), NaN where
            unknown; None to measure tightness against the final incumbent instead.
    """
    tally = DepthTally(trail.header, trail.best, trail.end)
    tally.add(trail, 0, completions)
    return tally.finish(oracle=completions is not None)


class DepthTally:
    """`depth_stats` built block by block in id order: every sum is added in the same
    order whatever the blocks, so a streamed trail gives exactly the in-memory figures."""

    def __init__(self, header: TrailHeader, best: list[BestUpdate], end: EndInfo | None) -> None:
        self.header = header
        self.best = best
        self.end = end
        self.n = header.instance.n
        rows = self.n
        self.decisions = np.zeros((rows, _DECISIONS), dtype=np.int64)
        self.evaluations = np.zeros(rows, dtype=np.int64)
        self.sums = np.zeros(rows, dtype=np.float64)
        self.seen = np.zeros(rows, dtype=np.int64)
        self.worst = np.full(rows, np.inf)
        self.reference = _final_length(best, end)
        self._frame_nodes = np.array(sorted({int(b.node) for b in best}), dtype=np.int64)
        self._depths: dict[int, int] = {}

    def _grow(self, rows: int) -> None:
        """Room for depths up to `rows - 1`."""
        have = len(self.sums)
        if rows <= have:
            return
        more = rows - have
        self.decisions = np.vstack([self.decisions, np.zeros((more, _DECISIONS), np.int64)])
        self.evaluations = np.append(self.evaluations, np.zeros(more, np.int64))
        self.sums = np.append(self.sums, np.zeros(more))
        self.seen = np.append(self.seen, np.zeros(more, np.int64))
        self.worst = np.append(self.worst, np.full(more, np.inf))

    def add(self, block: Trail, first: int, completions: NDArray[np.float64] | None = None) -> None:
        """Count in consecutive records (ids from `first`), with their completions if any."""
        counts = depth_decision_counts(block)
        self._grow(counts.shape[0])
        rows = len(self.sums)
        self.decisions[: counts.shape[0]] += counts
        depth = block.columns[DEPTH].astype(np.intp)
        bounds = bound_values(block, slice(None))
        bounded = bounded_mask(block, bounds)
        self.evaluations += np.bincount(depth[bounded], minlength=rows)[:rows]
        if completions is not None:
            denominator = np.asarray(completions, dtype=np.float64)
        else:
            denominator = np.full(block.count, np.nan if self.reference is None else self.reference)
        with np.errstate(invalid="ignore", divide="ignore"):
            ratio = bounds / denominator
        known = bounded & np.isfinite(ratio) & (denominator > 0)
        at = depth[known]
        np.add.at(self.sums, at, ratio[known])  # in order of the rows: block sums stay exact
        self.seen += np.bincount(at, minlength=rows)[:rows]
        np.minimum.at(self.worst, at, ratio[known])
        here = self._frame_nodes[
            (self._frame_nodes >= first) & (self._frame_nodes < first + block.count)
        ]
        for node in here.tolist():
            self._depths[node] = int(depth[node - first])

    def finish(self, *, oracle: bool) -> DepthStats:
        """The figures of every record added."""
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(self.seen > 0, self.sums / self.seen, np.nan)
        worst = self.worst.copy()
        worst[self.seen == 0] = np.nan
        return DepthStats(
            n=self.n,
            decisions=self.decisions,
            bound_evaluations=self.evaluations,
            tightness_mean=np.asarray(mean, dtype=np.float64),
            tightness_worst=worst,
            tightness_source=ORACLE if oracle else FINAL_INCUMBENT,
            reference_length=self.reference,
            improvements=self._improvements(),
            integral=self.header.instance.integral,
        )

    def _improvements(self) -> list[Improvement]:
        """The updates that lowered the incumbent, in the order they took effect."""
        out: list[Improvement] = []
        best = math.inf
        for update in sorted(self.best, key=lambda b: b.at):
            if update.length < best:
                best = update.length
                node = int(update.node)
                out.append(
                    Improvement(node, int(update.at), float(update.length), self._depths.get(node))
                )
        return out
