"""Tests for the recording API: small solvers written here, recorded, read back and checked.

The solvers are deliberately independent of prunetrail's own search: plain Python, a
minimum spanning tree by Prim's method, nearest-first children (depth-first) or a priority
queue (best-first). Every node they record is checked against what they logged.
"""

from __future__ import annotations

import heapq
import itertools
import math
import random
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest

from tracer.analysis.rechecking import recheck
from tracer.base.errors import InputError
from tracer.base.instance import Instance
from tracer.base.schema import DECISION_BY_NAME, VISIT, Decision, absent_value, is_absent
from tracer.trails.jsonl import import_jsonl
from tracer.trails.reader import Trail, read_trail
from tracer.trails.recorder import Recorder

Matrix = Sequence[Sequence[float]]


@dataclass
class Visit:
    """What the solver knew and did at one node."""

    ident: int
    parent: int | None
    path: list[int]
    partial: float
    decision: str
    incumbent: float
    tree: float | None = None
    link_in: tuple[int, float] | None = None
    link_out: tuple[int, float] | None = None
    length: float | None = None


@dataclass
class Log:
    """Every visit in visit order, and each incumbent update with the visits before it."""

    visits: list[Visit] = field(default_factory=list)
    updates: list[tuple[int | None, float, list[int], int]] = field(default_factory=list)


def mst_weight(d: Matrix, cities: list[int]) -> float:
    """Prim's minimum spanning tree weight over `cities`."""
    if len(cities) < 2:
        return 0
    key = {c: d[cities[0]][c] for c in cities[1:]}
    total: float = 0
    while key:
        c = min(key, key=lambda x: (key[x], x))
        total += key.pop(c)
        for other in key:
            key[other] = min(key[other], d[c][other])
    return total


def cheapest(d: Matrix, source: int, cities: list[int]) -> tuple[int, float]:
    """The nearest of `cities` to `source` (lowest index on ties)."""
    city = min(cities, key=lambda c: (d[source][c], c))
    return city, d[source][city]


class Solver:
    """Shared state of the two test searches: the matrix, incumbent, recorder and log."""

    def __init__(self, d: Matrix, rec: Recorder, cutoff: int, start: list[int] | None) -> None:
        self.d, self.rec, self.cutoff, self.n = d, rec, cutoff, len(d)
        self.log = Log()
        self.incumbent = math.inf
        if start is not None:
            self.improve(None, start, tour_length(d, start))

    def improve(self, ident: int | None, tour: list[int], length: float) -> None:
        self.incumbent = length
        self.rec.best(length, tour, node=ident)
        self.log.updates.append((ident, length, tour, len(self.log.visits)))

    def visit(self, parent: int | None, path: list[int], partial: float) -> Visit:
        """Decide at a node, record it, and update the incumbent at a better tour."""
        d, last = self.d, path[-1]
        rest = [c for c in range(self.n) if c not in path]
        node = Visit(len(self.log.visits), parent, path, partial, "expand", self.incumbent)
        if not rest:
            node.length = partial + d[last][0]
            node.decision = "tour_better" if node.length < self.incumbent else "tour"
        elif len(rest) <= self.cutoff:
            node.decision = "prune" if partial >= self.incumbent else "skip"
        else:
            node.tree = mst_weight(d, rest)
            node.link_in = cheapest(d, last, rest)
            node.link_out = cheapest(d, 0, rest)
            bound = partial + node.tree + node.link_in[1] + node.link_out[1]
            node.decision = "prune" if bound >= self.incumbent else "expand"
        ident = self.rec.node(
            parent,
            last,
            partial,
            node.tree,
            node.link_in,
            node.link_out,
            decision=node.decision,
            length=node.length,
        )
        assert ident == node.ident
        self.log.visits.append(node)
        if node.decision == "tour_better":
            assert node.length is not None
            self.improve(ident, path, node.length)
        return node

    def children(self, path: list[int]) -> list[int]:
        return sorted(
            (c for c in range(self.n) if c not in path), key=lambda c: (self.d[path[-1]][c], c)
        )

    def depth_first(self, parent: int | None = None, path: list[int] | None = None) -> None:
        path = path or [0]
        partial = sum(self.d[a][b] for a, b in itertools.pairwise(path))
        node = self.visit(parent, path, partial)
        if node.decision in ("expand", "skip"):
            for c in self.children(path):
                self.depth_first(node.ident, [*path, c])

    def best_first(self) -> None:
        """Lowest parent bound first (ties by creation order): not pre-order."""
        order = itertools.count()
        queue: list[tuple[float, int, int | None, list[int], float]] = [(0, 0, None, [0], 0)]
        while queue:
            _, _, parent, path, partial = heapq.heappop(queue)
            node = self.visit(parent, path, partial)
            if node.decision not in ("expand", "skip"):
                continue
            key = partial if node.tree is None else partial + node.tree
            for c in self.children(path):
                step = partial + self.d[path[-1]][c]
                heapq.heappush(queue, (key, next(order), node.ident, [*path, c], step))


def tour_length(d: Matrix, tour: list[int]) -> float:
    return sum(d[a][b] for a, b in itertools.pairwise([*tour, tour[0]]))


def brute_force(d: Matrix) -> float:
    """The optimal tour length, by trying every tour from city 0."""
    rest = range(1, len(d))
    return min(tour_length(d, [0, *p]) for p in itertools.permutations(rest))


def random_instance(seed: int, n: int, kind: str) -> tuple[Instance | np.ndarray, Matrix]:
    """An invented instance (EUC_2D points, float points, or a random symmetric matrix)."""
    rng = random.Random(seed)
    if kind == "matrix":
        m = np.zeros((n, n), dtype=np.int64)
        for i, j in itertools.combinations(range(n), 2):
            m[i, j] = m[j, i] = rng.randint(1, 50)
        return m, m.tolist()
    coords = np.array([[rng.uniform(0, 100), rng.uniform(0, 100)] for _ in range(n)])
    metric = "EUC_2D" if kind == "points" else "euclidean"
    inst = Instance(name=f"invented-{seed}", metric=metric, coords=coords)
    return inst, inst.matrix.tolist()


def implicit_parents(depth: np.ndarray) -> list[int]:
    """Parent of each pre-order node: the last earlier node one level up."""
    parents: list[int] = []
    stack: list[int] = []
    for level in depth.tolist():
        del stack[level:]
        parents.append(stack[-1] if stack else -1)
        stack.append(len(parents) - 1)
    return parents


def check_trail(trail: Trail, log: Log) -> None:
    """Every recorded node, the visit order and the incumbent updates match the solver's log."""
    count = len(log.visits)
    cols = trail.columns
    assert trail.count == count
    visit = cols[VISIT] if VISIT in cols else np.arange(count)
    assert sorted(visit.tolist()) == list(range(count))
    assert trail.header.solver.visit_order == (VISIT in cols)
    assert (VISIT in cols) == (visit.tolist() != list(range(count)))
    pre_of = np.empty(count, dtype=np.int64)
    pre_of[visit] = np.arange(count)
    parents = implicit_parents(cols["depth"])
    for j in range(count):
        node = log.visits[int(visit[j])]
        assert int(cols["city"][j]) == node.path[-1]
        assert int(cols["depth"][j]) == len(node.path) - 1
        assert (parents[j] == -1) == (node.parent is None)
        if node.parent is not None:
            assert int(visit[parents[j]]) == node.parent
        assert cols["decision"][j] == DECISION_BY_NAME[node.decision]
        assert cols["partial"][j] == node.partial
        if node.tree is None:
            assert is_absent(cols["tree"][j : j + 1])[0]
        else:
            assert cols["tree"][j] == node.tree
        if node.link_in is not None and node.link_out is not None:
            assert (cols["link_in_city"][j], cols["link_in"][j]) == node.link_in
            assert (cols["link_out_city"][j], cols["link_out"][j]) == node.link_out
        if node.length is not None:
            assert cols["link_out_city"][j] == 0
            assert cols["partial"][j] + cols["link_out"][j] == pytest.approx(node.length)
            assert cols["link_in_city"][j] == absent_value(cols["link_in_city"].dtype)
    for p in range(count):  # siblings keep their visit order
        kids = [int(visit[j]) for j in range(count) if parents[j] == p]
        assert kids == sorted(kids)
    expected = [
        (seen if ident is None else ident + 1, -1 if ident is None else int(pre_of[ident]), length)
        for ident, length, _, seen in log.updates
    ]
    assert [(b.at, b.node, b.length) for b in trail.best] == expected
    assert [list(b.tour) for b in trail.best] == [tour for _, _, tour, _ in log.updates]
    at = np.array([b.at for b in trail.best])
    lengths = np.array([math.inf] + [b.length for b in trail.best])
    in_force = lengths[np.searchsorted(at, np.arange(count), side="right")]
    assert in_force.tolist() == [v.incumbent for v in log.visits]


CASES = [
    pytest.param(seed, n, kind, search, cutoff, start, id=f"{kind}-{search}-n{n}-c{cutoff}-s{seed}")
    for seed, n, kind, search, cutoff, start in [
        (1, 5, "points", "depth_first", 0, False),
        (2, 6, "points", "depth_first", 2, True),
        (3, 7, "matrix", "depth_first", 0, True),
        (4, 6, "matrix", "depth_first", 1, False),
        (5, 6, "floats", "depth_first", 0, False),
        (6, 5, "points", "best_first", 0, False),
        (7, 6, "points", "best_first", 2, True),
        (8, 7, "matrix", "best_first", 0, False),
        (9, 6, "matrix", "best_first", 1, True),
        (10, 6, "floats", "best_first", 2, False),
    ]
]


@pytest.mark.parametrize(("seed", "n", "kind", "search", "cutoff", "start"), CASES)
def test_recorded_search_reads_back_node_by_node(
    tmp_path: Path, seed: int, n: int, kind: str, search: str, cutoff: int, start: bool
) -> None:
    """A recorded test search reads back exactly, and its optimum equals brute force."""
    instance, d = random_instance(seed, n, kind)
    path = tmp_path / "run.trail"
    begin = list(range(n)) if start else None
    with Recorder(path, instance, cutoff=cutoff, start="index order" if start else None) as rec:
        solver = Solver(d, rec, cutoff, begin)
        getattr(solver, search)()
    assert not rec.jsonl_path.exists()
    trail = read_trail(path)
    check_trail(trail, solver.log)
    assert trail.end is not None and trail.end.status == "complete"
    assert trail.end.length == pytest.approx(brute_force(d), rel=1e-12)
    assert trail.end.nodes == len(solver.log.visits)
    decisions = [v.decision for v in solver.log.visits]
    assert dict(trail.end.decisions) == {k: decisions.count(k) for k in DECISION_BY_NAME}
    assert trail.header.solver.cutoff == cutoff
    assert trail.header.solver.start == ("index order" if start else None)
    np.testing.assert_allclose(trail.header.instance.matrix, np.array(d))
    if kind == "floats":
        assert trail.columns["partial"].dtype == np.float64
    else:
        assert trail.columns["partial"].dtype == np.int32
    if search == "best_first":
        assert VISIT in trail.columns  # these instances are big enough to leave pre-order
    report = recheck(trail)  # the independent re-check agrees with this independent solver
    assert report.ok, report.first[:3]


def test_crash_inside_with_leaves_an_interrupted_trail(tmp_path: Path) -> None:
    """An exception inside `with Recorder(...)` propagates and leaves a readable trail."""
    instance, d = random_instance(11, 6, "points")
    path = tmp_path / "crash.trail"

    class CrashError(Exception):
        pass

    class Crashing(Solver):
        def visit(self, parent: int | None, path: list[int], partial: float) -> Visit:
            if len(self.log.visits) == 10:
                raise CrashError
            return super().visit(parent, path, partial)

    with pytest.raises(CrashError), Recorder(path, instance) as rec:
        Crashing(d, rec, 0, None).depth_first()
    trail = read_trail(path)
    assert trail.end is not None and trail.end.status == "interrupted"
    assert trail.count == 10 and trail.notice is None
    assert not rec.jsonl_path.exists()


def test_lines_are_on_disk_before_close(tmp_path: Path) -> None:
    """Each line reaches the file as it is recorded, so a killed run can still be imported."""
    instance, d = random_instance(12, 5, "matrix")
    rec = Recorder(tmp_path / "live.trail", instance)
    solver = Solver(d, rec, 0, None)
    solver.depth_first()
    recovered = import_jsonl(rec.jsonl_path, tmp_path / "recovered.trail")
    assert recovered.end is None and recovered.count == len(solver.log.visits)
    check_trail(read_trail(tmp_path / "recovered.trail"), solver.log)
    rec.close("interrupted")
    assert read_trail(tmp_path / "live.trail").end is not None


def test_bad_calls_fail_at_the_call(tmp_path: Path) -> None:
    """Unknown decisions, non-finite lengths and bad instances are refused when passed."""
    with pytest.raises(InputError, match=r"'instance\.matrix'"):
        Recorder(tmp_path / "a.trail", np.array([[0, 1], [2, 0]]))
    with pytest.raises(ValueError, match="square matrix"):
        Recorder(tmp_path / "b.trail", [[0, 1, 2]])
    with pytest.raises(InputError, match=r"'solver\.cutoff'"):
        Recorder(tmp_path / "c.trail", np.zeros((3, 3)), cutoff=-2)
    with Recorder(tmp_path / "d.trail", np.zeros((3, 3))) as rec:
        with pytest.raises(ValueError, match="unknown decision"):
            rec.node(None, 0, 0, decision="explore")
        with pytest.raises(ValueError, match="finite"):
            rec.node(None, 0, math.inf, decision="expand")
        with pytest.raises(ValueError, match="status"):
            rec.close("finished")
        assert rec.node(None, 0, 0, decision="expand") == 0


def test_malformed_recording_keeps_its_lines(tmp_path: Path) -> None:
    """A recording the importer rejects names its line and field, and keeps the .jsonl."""
    rec = Recorder(tmp_path / "bad.trail", np.ones((3, 3)))
    root = rec.node(None, 0, 0, decision="expand")
    rec.node(root + 5, 1, 1.0, decision="expand")
    with pytest.raises(InputError, match="'parent': no node has id 5") as info:
        rec.close()
    assert info.value.line == 3
    assert rec.jsonl_path.exists() and not (tmp_path / "bad.trail").exists()


def test_numpy_scalars_and_decision_codes_are_accepted(tmp_path: Path) -> None:
    """numpy numbers and Decision members go in as plain JSON numbers and names."""
    m = np.array([[0, 2], [2, 0]])
    with Recorder(tmp_path / "np.trail", m) as rec:
        root = rec.node(
            None,
            np.int64(0),
            np.int32(0),
            np.float64(0),
            (np.int8(1), m[0, 1]),
            (1, 2),
            decision=Decision.EXPAND,
        )
        leaf = rec.node(root, 1, m[0, 1], decision=Decision.TOUR_BETTER, length=np.int64(4))
        rec.best(np.int64(4), np.array([0, 1]), node=leaf)
    trail = read_trail(tmp_path / "np.trail")
    assert trail.columns["decision"].tolist() == [0, 3]
    assert trail.columns["link_out"].tolist() == [2, 2]
    assert trail.best[0].at == 2 and trail.best[0].length == 4
