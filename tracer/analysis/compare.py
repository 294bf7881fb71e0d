"""Two searches of one instance side by side: counts, and where they first part ways.

Nodes are matched by path, level by level: a node of A matches the node of B whose parent
matches A's parent and whose city is the same, so the matching is exact (no hashing) and
takes one sort per depth, however the two searches ordered their children. Every kind of
difference is then a vectorised comparison over the matched pairs, and the first node in
A's path order (its pre-order ids) where any kind occurs is the answer; it is the node a
lockstep walk of both trees, children matched by city, would stop at.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.analysis.stats import depth_decision_counts
from tracer.analysis.tree_index import TreeIndex
from tracer.base import (
    CITY,
    COMPLETE,
    DECISION,
    DECISION_NAMES,
    PrunetrailError,
    Trail,
    bound_values,
)

#: Kinds of difference at a node, in the order they are reported.
DIFFERENCE_KINDS = ("decision", "bound", "children", "child_order")
#: Relative tolerance for comparing fractional bounds (integer metrics compare exactly).
_REL_TOL = 1e-9


class InstanceMismatchError(PrunetrailError):
    """The two trails are searches of different instances; comparing them means nothing."""


def instance_digest(trail: Trail) -> dict[str, Any]:
    """What identifies a trail's instance: n, metric, and digests of matrix and coordinates."""
    inst = trail.header.instance
    matrix = np.ascontiguousarray(inst.matrix, dtype=np.float64)
    coords = None
    if inst.coords is not None:
        raw = np.ascontiguousarray(inst.coords, dtype=np.float64).tobytes()
        coords = hashlib.sha256(raw).hexdigest()[:16]
    return {
        "name": inst.name,
        "n": inst.n,
        "metric": inst.metric,
        "matrix": hashlib.sha256(matrix.tobytes()).hexdigest()[:16],
        "coordinates": coords,
    }


def same_instance(a: Trail, b: Trail) -> None:
    """Refuse unless both trails searched the same instance.

    Raises:
        InstanceMismatchError: naming each fact that differs.
    """
    da, db = instance_digest(a), instance_digest(b)
    facts = [("n", "cities"), ("metric", "metric"), ("matrix", "distance matrix")]
    differ = [
        f"{label} {da[key]} vs {db[key]}" if key != "matrix" else label
        for key, label in facts
        if da[key] != db[key]
    ]
    coords = da["coordinates"] and db["coordinates"] and da["n"] == db["n"]
    if coords and da["coordinates"] != db["coordinates"] and da["matrix"] != db["matrix"]:
        differ.append("coordinates")
    if differ:
        raise InstanceMismatchError(
            f"{a.path} ({da['name']}) and {b.path} ({db['name']}) are searches of different "
            f"instances (they differ in {'; '.join(differ)}); compare runs of one instance"
        )


def match_nodes(
    a: TreeIndex,
    b: TreeIndex,
    n: int,
    levels: tuple[list[NDArray[np.int64]], list[NDArray[np.int64]]] | None = None,
) -> NDArray[np.int64]:
    """For every node of A, the id of the node of B with the same path, or -1.

    Args:
        levels: each tree's node ids per depth (`levels`), if already at hand.
    """
    match = np.full(a.count, -1, dtype=np.int64)
    if not a.count or not b.count:
        return match
    if int(a.depth[0]) == 0 and int(b.depth[0]) == 0 and int(a.city[0]) == int(b.city[0]):
        match[0] = 0
    levels_a, levels_b = levels or (levels_of(a.depth), levels_of(b.depth))
    for d in range(1, min(len(levels_a), len(levels_b))):
        ids_a, ids_b = levels_a[d], levels_b[d]
        if not len(ids_a) or not len(ids_b):
            continue
        parent_a = a.parent[ids_a].astype(np.int64)
        ok = parent_a >= 0
        ids_a, parent_a = ids_a[ok], parent_a[ok]
        mapped = match[parent_a]
        ok = mapped >= 0
        ids_a, mapped = ids_a[ok], mapped[ok]
        parent_b = b.parent[ids_b].astype(np.int64)
        ok = parent_b >= 0
        ids_b, parent_b = ids_b[ok], parent_b[ok]
        key_b = parent_b * n + b.city[ids_b].astype(np.int64)
        order = np.argsort(key_b, kind="stable")
        key_b, ids_b = key_b[order], ids_b[order]
        key_a = mapped * n + a.city[ids_a].astype(np.int64)
        pos = np.minimum(np.searchsorted(key_b, key_a), len(key_b) - 1)
        hit = key_b[pos] == key_a
        match[ids_a[hit]] = ids_b[pos[hit]]
    return match


def levels_of(depth: NDArray[Any]) -> list[NDArray[np.int64]]:
    """Node ids at each depth, ascending (a stable sort of small integers: a radix sort)."""
    if not len(depth):
        return []
    order = np.argsort(depth, kind="stable").astype(np.int64)
    edges = np.searchsorted(depth[order], np.arange(int(depth.max()) + 2))
    return [order[edges[d] : edges[d + 1]] for d in range(len(edges) - 1)]


def _sibling_rank(index: TreeIndex, levels: list[NDArray[np.int64]]) -> NDArray[np.int64]:
    """Each node's position among its parent's children (0 for the first).

    In pre-order the nodes of one depth, taken by id, have non-decreasing parents, so each
    parent's children are one run of its level and a rank is a position in that run.
    """
    rank = np.zeros(index.count, dtype=np.int64)
    for ids in levels:
        if not len(ids):
            continue
        parent = index.parent[ids]
        starts = np.flatnonzero(np.r_[True, parent[1:] != parent[:-1]])
        run = np.repeat(starts, np.diff(np.r_[starts, len(ids)]))
        rank[ids] = np.arange(len(ids)) - run
    return rank


def _child_counts(index: TreeIndex) -> NDArray[np.int64]:
    parent = index.parent.astype(np.int64)
    return np.bincount(parent[parent >= 0], minlength=index.count).astype(np.int64)


@dataclass
class Difference:
    """The first node (in A's path order) where the two searches differ, and how.

    Attributes:
        node_a: its id in A.
        node_b: the id of the node with the same path in B.
        path: its path.
        kinds: which of `DIFFERENCE_KINDS` apply.
        decision_a, decision_b: the decisions' names.
        bound_a, bound_b: the bounds (None where none was evaluated or recorded).
        incumbent_a, incumbent_b: the incumbents in force.
        children_a, children_b: the children's cities in the order each search tried them.
    """

    node_a: int
    node_b: int
    path: list[int]
    kinds: list[str]
    decision_a: str
    decision_b: str
    bound_a: float | None
    bound_b: float | None
    incumbent_a: float | None
    incumbent_b: float | None
    children_a: list[int]
    children_b: list[int]

    @property
    def explanation(self) -> str:
        """One sentence for people."""
        parts = []
        if "decision" in self.kinds:
            parts.append(f"A decided {self.decision_a}, B {self.decision_b}")
        if "bound" in self.kinds:
            parts.append(f"the bound is {_num(self.bound_a)} in A, {_num(self.bound_b)} in B")
        if "children" in self.kinds:
            parts.append(f"A has {len(self.children_a)} children, B {len(self.children_b)}")
        if "child_order" in self.kinds:
            parts.append("the children were tried in another order")
        if "decision" in self.kinds and self.incumbent_a != self.incumbent_b:
            parts.append(
                f"the incumbent in force is {_num(self.incumbent_a)} in A, "
                f"{_num(self.incumbent_b)} in B"
            )
        return "; ".join(parts)

    def to_json(self) -> dict[str, Any]:
        return {
            "node_a": self.node_a,
            "node_b": self.node_b,
            "path": self.path,
            "kinds": self.kinds,
            "decision_a": self.decision_a,
            "decision_b": self.decision_b,
            "bound_a": self.bound_a,
            "bound_b": self.bound_b,
            "incumbent_a": self.incumbent_a,
            "incumbent_b": self.incumbent_b,
            "children_a": self.children_a,
            "children_b": self.children_b,
            "explanation": self.explanation,
        }


def _num(value: float | None) -> str:
    if value is None:
        return "none"
    return f"{value:g}" if not float(value).is_integer() else f"{int(value)}"


@dataclass
class Comparison:
    """Two trails of one instance compared.

    Attributes:
        counts_a, counts_b: nodes[depth, decision code] of each.
        first: the first difference in A's path order, None if the searches agree.
        first_of_kind: the A id of the first node with each kind of difference (or None).
        differing: how many matched nodes differ in each kind.
        only_a, only_b: nodes whose path the other search never visited.
        unfinished: for A and B, how a search that did not end complete ended ("limit",
            "interrupted", "no end frame"), else None; past its last node nothing is known.
    """

    counts_a: NDArray[np.int64]
    counts_b: NDArray[np.int64]
    first: Difference | None
    first_of_kind: dict[str, int | None]
    differing: dict[str, int]
    only_a: int
    only_b: int
    instance: dict[str, Any] = field(default_factory=dict)
    unfinished: dict[str, str | None] = field(default_factory=dict)

    def to_json(self) -> dict[str, Any]:
        depths = []
        for d in range(self.counts_a.shape[0]):
            a, b = self.counts_a[d], self.counts_b[d]
            if not a.sum() and not b.sum():
                continue
            depths.append(
                {
                    "depth": d,
                    "nodes_a": int(a.sum()),
                    "nodes_b": int(b.sum()),
                    "ratio": ratio(int(b.sum()), int(a.sum())),
                    "decisions": {
                        name: {"a": int(a[c]), "b": int(b[c]), "ratio": ratio(int(b[c]), int(a[c]))}
                        for c, name in enumerate(DECISION_NAMES)
                    },
                }
            )
        total_a, total_b = self.counts_a.sum(axis=0), self.counts_b.sum(axis=0)
        return {
            "instance": self.instance,
            "nodes_a": int(total_a.sum()),
            "nodes_b": int(total_b.sum()),
            "ratio": ratio(int(total_b.sum()), int(total_a.sum())),
            "decisions": {
                name: {
                    "a": int(total_a[c]),
                    "b": int(total_b[c]),
                    "ratio": ratio(int(total_b[c]), int(total_a[c])),
                }
                for c, name in enumerate(DECISION_NAMES)
            },
            "same": self.first is None,
            "first_difference": None if self.first is None else self.first.to_json(),
            "first_of_kind": self.first_of_kind,
            "differing": self.differing,
            "only_a": self.only_a,
            "only_b": self.only_b,
            "unfinished": self.unfinished,
            "depths": depths,
        }


def ratio(b: int, a: int) -> float | None:
    """b ÷ a, None where a is 0 (JSON has no infinity)."""
    return None if a == 0 else b / a


def _bounds_differ(
    bound_a: NDArray[np.float64], bound_b: NDArray[np.float64], exact: bool
) -> NDArray[np.bool_]:
    nan_a, nan_b = np.isnan(bound_a), np.isnan(bound_b)
    both = ~nan_a & ~nan_b
    if exact:
        close = bound_a == bound_b
    else:
        scale = np.maximum(np.abs(bound_a), np.abs(bound_b))
        close = np.abs(bound_a - bound_b) <= _REL_TOL * scale
    return np.asarray((nan_a != nan_b) | (both & ~close), dtype=np.bool_)


def compare_trails(
    a: Trail, b: Trail, index_a: TreeIndex | None = None, index_b: TreeIndex | None = None
) -> Comparison:
    """Compare two trails of one instance.

    Raises:
        InstanceMismatchError: the trails are of different instances.
    """
    same_instance(a, b)
    ia = index_a or TreeIndex(a.columns, a.best)
    ib = index_b or TreeIndex(b.columns, b.best)
    rows = max(a.n, 1)
    counts_a = depth_decision_counts(a, rows)
    counts_b = depth_decision_counts(b, rows)
    rows = max(counts_a.shape[0], counts_b.shape[0])
    counts_a, counts_b = _pad(counts_a, rows), _pad(counts_b, rows)

    levels_a, levels_b = levels_of(ia.depth), levels_of(ib.depth)
    match = match_nodes(ia, ib, a.n, (levels_a, levels_b))
    pair_a = np.flatnonzero(match >= 0)
    pair_b = match[pair_a]
    flagged: dict[str, NDArray[np.int64]] = {}
    da, db = a.columns[DECISION], b.columns[DECISION]
    flagged["decision"] = pair_a[da[pair_a] != db[pair_b]]
    bounds_a, bounds_b = bound_values(a, slice(None)), bound_values(b, slice(None))
    exact = a.header.instance.integral and b.header.instance.integral
    flagged["bound"] = pair_a[_bounds_differ(bounds_a[pair_a], bounds_b[pair_b], exact)]

    # Children: a node whose child count differs, or with a child the other never visited.
    children_a, children_b = _child_counts(ia), _child_counts(ib)
    count_differs = pair_a[children_a[pair_a] != children_b[pair_b]]
    reverse = np.full(ib.count, -1, dtype=np.int64)
    reverse[pair_b] = pair_a
    parent_a, parent_b = ia.parent.astype(np.int64), ib.parent.astype(np.int64)
    lost_a = np.flatnonzero((match < 0) & (parent_a >= 0))
    lost_a = parent_a[lost_a][match[parent_a[lost_a]] >= 0]
    lost_b = np.flatnonzero((reverse < 0) & (parent_b >= 0))
    lost_b = reverse[parent_b[lost_b]]
    lost_b = lost_b[lost_b >= 0]
    children = np.unique(np.concatenate([count_differs, lost_a, lost_b]))
    # A search cut short (a limit, Ctrl-C) has not finished the children of the nodes on
    # its last path: those child lists are not known to differ.
    open_a, open_b = _open_path(a, ia), _open_path(b, ib)
    unfinished = np.isin(children, open_a) | np.isin(match[children], open_b)
    flagged["children"] = children[~unfinished]

    # Child order: a matched child at another position among its siblings.
    rank_a, rank_b = _sibling_rank(ia, levels_a), _sibling_rank(ib, levels_b)
    moved = pair_a[(rank_a[pair_a] != rank_b[pair_b]) & (parent_a[pair_a] >= 0)]
    flagged["child_order"] = np.unique(parent_a[moved])

    first_of_kind = {
        kind: (int(flagged[kind].min()) if len(flagged[kind]) else None)
        for kind in DIFFERENCE_KINDS
    }
    firsts = [v for v in first_of_kind.values() if v is not None]
    first = None
    if firsts:
        node = min(firsts)
        kinds = [k for k in DIFFERENCE_KINDS if first_of_kind[k] == node or node in flagged[k]]
        first = _difference(a, b, ia, ib, node, int(match[node]), kinds, bounds_a, bounds_b)
    elif a.count != b.count or (a.count and match[0] < 0):
        # Nothing matched differs, yet the trees differ: the roots themselves do not match.
        first = _difference(a, b, ia, ib, 0, 0, ["children"], bounds_a, bounds_b)
    return Comparison(
        counts_a=counts_a,
        counts_b=counts_b,
        first=first,
        first_of_kind=first_of_kind,
        differing={kind: len(flagged[kind]) for kind in DIFFERENCE_KINDS},
        only_a=int((match < 0).sum()),
        only_b=int((reverse < 0).sum()),
        instance=instance_digest(a),
        unfinished={"a": _unfinished(a), "b": _unfinished(b)},
    )


def _unfinished(trail: Trail) -> str | None:
    if trail.end is None:
        return "no end frame"
    return None if trail.end.status == COMPLETE else trail.end.status


def _open_path(trail: Trail, index: TreeIndex) -> NDArray[np.int64]:
    """Ids of the nodes on the last path of a trail that did not end complete (else none)."""
    if trail.count == 0 or (trail.end is not None and trail.end.status == COMPLETE):
        return np.zeros(0, dtype=np.int64)
    return np.array(index.ancestors(trail.count - 1), dtype=np.int64)


def _pad(counts: NDArray[np.int64], rows: int) -> NDArray[np.int64]:
    out = np.zeros((rows, counts.shape[1]), dtype=np.int64)
    out[: counts.shape[0]] = counts
    return out


def _difference(
    a: Trail,
    b: Trail,
    ia: TreeIndex,
    ib: TreeIndex,
    node_a: int,
    node_b: int,
    kinds: list[str],
    bounds_a: NDArray[np.float64],
    bounds_b: NDArray[np.float64],
) -> Difference:
    def value(bounds: NDArray[np.float64], node: int) -> float | None:
        v = float(bounds[node]) if 0 <= node < len(bounds) else math.nan
        return None if math.isnan(v) else v

    def incumbent(index: TreeIndex, node: int) -> float | None:
        if not 0 <= node < index.count:
            return None
        v = float(index.incumbent_at(np.array([node], dtype=np.int64))[0])
        return v if math.isfinite(v) else None

    def children(trail: Trail, index: TreeIndex, node: int) -> list[int]:
        if not 0 <= node < index.count:
            return []
        return [int(trail.columns[CITY][c]) for c in index.children(node)]

    def decision(trail: Trail, node: int) -> str:
        if not 0 <= node < trail.count:
            return "none"
        return DECISION_NAMES[int(trail.columns[DECISION][node])]

    return Difference(
        node_a=node_a,
        node_b=node_b,
        path=ia.path(node_a) if node_a < ia.count else [],
        kinds=kinds,
        decision_a=decision(a, node_a),
        decision_b=decision(b, node_b),
        bound_a=value(bounds_a, node_a),
        bound_b=value(bounds_b, node_b),
        incumbent_a=incumbent(ia, node_a),
        incumbent_b=incumbent(ib, node_b),
        children_a=children(a, ia, node_a),
        children_b=children(b, ib, node_b),
    )
