"""The independent re-check: clean engine trails pass, planted and hand-made errors are found.

Trails come from the engine (`tracer.search.driver.run_search`) on TSPLIB instances (G. Reinelt,
"TSPLIB — A Traveling Salesman Problem Library", ORSA Journal on Computing 3(4):376-384,
1991; files in tests/data) and on seeded random cities. Tree weights are cross-checked
against the reference minimum spanning tree of scipy
(`scipy.sparse.csgraph.minimum_spanning_tree`), never against the engine's own numbers.
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.sparse.csgraph import minimum_spanning_tree

from tracer.analysis import rechecking as recheck_module
from tracer.analysis._recheck_sets import (
    all_cities,
    city_bits,
    distinct_sets,
    least_edges,
    members,
    set_sizes,
    tree_weights,
    word_count,
)
from tracer.analysis.rechecking import KINDS, RecheckReport, recheck
from tracer.analysis.tree_index import TreeIndex
from tracer.base.frames import EndInfo
from tracer.base.header import TREE_LINKS, TrailHeader
from tracer.base.instance import Instance
from tracer.base.schema import (
    BOUND,
    CITY,
    DECISION,
    DEPTH,
    FULL_COLUMNS,
    LINK_IN,
    LINK_IN_CITY,
    LINK_OUT,
    LINK_OUT_CITY,
    PARTIAL,
    TREE,
    Column,
    Decision,
    is_absent,
)
from tracer.search.driver import SearchSettings, StartTour, run_search, trail_header
from tracer.search.faults import FAULTS, fault_bound
from tracer.search.tours import start_tour, tour_length
from tracer.trails.reader import Trail, read_trail
from tracer.trails.writer import TrailWriter

LoadReference = Callable[[str], Instance]
Record = Callable[..., Trail]
FAST = settings(max_examples=60, deadline=None)
#: Node cap for the larger instances, so the whole file runs in well under a minute.
CAP = 200_000


def _start(instance: Instance) -> StartTour:
    """The nn+2opt+oropt start tour of an instance."""
    tour = start_tour(instance.matrix)
    return StartTour("nn+2opt+oropt", tour, tour_length(instance.matrix, tour))


def _random_instance(n: int, seed: int, metric: str = "euclidean") -> Instance:
    """n cities drawn uniformly from a 1000 × 1000 square, seeded."""
    coords = np.random.default_rng(seed).uniform(0.0, 1000.0, size=(n, 2))
    return Instance(name=f"random{n}", metric=metric, coords=coords)


@pytest.fixture(scope="session")
def record(tmp_path_factory: pytest.TempPathFactory) -> Record:
    """Run the engine into a trail file and read it back (cached per session)."""
    cache: dict[tuple[Any, ...], Trail] = {}
    folder = tmp_path_factory.mktemp("trails")

    def run(instance: Instance, search: SearchSettings, start: bool = True) -> Trail:
        key = (instance.name, search, start)
        if key not in cache:
            begin = _start(instance) if start else None
            path = folder / f"t{len(cache)}.trail"
            writer = TrailWriter(path, trail_header(instance, search, begin, "prunetrail"))
            result = run_search(instance, search, start=begin, sink=writer)
            writer.close(
                EndInfo(
                    result.status,
                    result.nodes,
                    result.recorded,
                    result.decisions,
                    result.seconds,
                    result.length,
                    result.tour,
                )
            )
            cache[key] = read_trail(path)
        return cache[key]

    return run


def _copy(trail: Trail) -> Trail:
    """A trail whose columns and best frames can be changed without touching the original."""
    columns = {name: values.copy() for name, values in trail.columns.items()}
    return dataclasses.replace(trail, columns=columns, best=list(trail.best))


def _assert_clean(report: RecheckReport, trail: Trail) -> None:
    """Every record of the trail was checked and none is wrong."""
    assert report.nodes_checked == trail.count
    assert report.ok, report.first[:3]
    assert report.by_kind == dict.fromkeys(KINDS, 0)
    assert report.first == []


# -- (a) clean trails ----------------------------------------------------------------------


@pytest.mark.parametrize("cutoff", range(7))
@pytest.mark.parametrize("name", ["burma14", "ulysses16", "gr17"])
def test_clean_reference_trails(
    load_reference: LoadReference, record: Record, name: str, cutoff: int
) -> None:
    """An engine trail of a TSPLIB instance has no wrong record at any cutoff 0..6."""
    trail = record(load_reference(name), SearchSettings(cutoff=cutoff, max_nodes=CAP))
    report = recheck(trail)
    _assert_clean(report, trail)
    assert report.kinds_checked == tuple(k for k in KINDS if k != "bound")
    decisions = np.bincount(trail.columns[DECISION], minlength=len(Decision))
    assert decisions[Decision.PRUNE] > 0
    assert decisions[Decision.SKIP] == 0 or cutoff > 0


def test_clean_without_start_tour(load_reference: LoadReference, record: Record) -> None:
    """With an infinite start incumbent the trail improves many times and still checks out."""
    trail = record(
        load_reference("ulysses16"), SearchSettings(cutoff=2, max_nodes=CAP), start=False
    )
    assert len(trail.best) > 3
    assert trail.best[0].node >= 0
    _assert_clean(recheck(trail), trail)


def test_clean_decisions_only(load_reference: LoadReference, record: Record) -> None:
    """A decisions-only trail is checked against recomputed numbers; none of them is wrong."""
    trail = record(load_reference("burma14"), SearchSettings(cutoff=3, record="decisions"))
    assert set(trail.columns) == {CITY, DEPTH, DECISION}
    report = recheck(trail)
    _assert_clean(report, trail)
    assert report.kinds_checked == ("structure", "decision", "tour")


def test_decisions_only_still_judges_decisions(
    load_reference: LoadReference, record: Record
) -> None:
    """With no numbers recorded, a flipped decision is still found from recomputed bounds
    (a prune turned expand is a missed prune: wrong only when strict)."""
    trail = _copy(record(load_reference("burma14"), SearchSettings(cutoff=3, record="decisions")))
    index = TreeIndex(trail.columns, trail.best)
    leaves = np.flatnonzero(
        (trail.columns[DECISION] == Decision.PRUNE) & (index.end == np.arange(trail.count) + 1)
    )
    node = int(leaves[len(leaves) // 2])
    trail.columns[DECISION][node] = Decision.EXPAND
    loose = recheck(trail)
    assert (loose.wrong, loose.missed_prunes, loose.missed_ids.tolist()) == (0, 1, [node])
    report = recheck(trail, strict=True)
    assert report.wrong == 1
    assert (report.first[0].id, report.first[0].kind) == (node, "decision")
    assert (report.first[0].recorded, report.first[0].recomputed) == ("expand", "prune")


@pytest.mark.parametrize("prefix", [(0, 7, 10), (0, 13), (0, 8, 9, 10), (0, 3, 13, 2)])
def test_clean_recorded_under_prefix(
    load_reference: LoadReference, record: Record, prefix: tuple[int, ...]
) -> None:
    """A trail holding one subtree plus its path checks out, incumbents from outside included."""
    trail = record(
        load_reference("burma14"), SearchSettings(cutoff=2, record_under=prefix), start=False
    )
    assert tuple(int(c) for c in trail.columns[CITY][: len(prefix)]) == prefix
    _assert_clean(recheck(trail), trail)


@pytest.mark.parametrize("start", [True, False])
def test_clean_full_enumeration(record: Record, start: bool) -> None:
    """With bound "none" on random float cities every open node is a skip and checks out."""
    instance = _random_instance(9, seed=7)
    assert instance.matrix.dtype == np.float64
    trail = record(instance, SearchSettings(cutoff=0, bound="none"), start=start)
    assert trail.count == sum(np.prod(range(8 - d + 1, 9)) for d in range(9))
    report = recheck(trail)
    _assert_clean(report, trail)
    assert set(np.unique(trail.columns[DECISION])) <= {
        Decision.SKIP,
        Decision.TOUR,
        Decision.TOUR_BETTER,
    }


@pytest.mark.parametrize(("metric", "cutoff"), [("euclidean", 0), ("euclidean", 3), ("EUC_2D", 2)])
def test_clean_random_cities(record: Record, metric: str, cutoff: int) -> None:
    """Random cities, float (within the stated tolerance) or integer, check out."""
    trail = record(_random_instance(13, seed=3, metric=metric), SearchSettings(cutoff=cutoff))
    _assert_clean(recheck(trail), trail)


@pytest.mark.parametrize(
    ("metric", "scale", "accepted"), [("euclidean", 0.3, True), ("EUC_2D", 30, False)]
)
def test_tie_with_the_incumbent(record: Record, metric: str, scale: float, accepted: bool) -> None:
    """Bound equal to the incumbent: float lengths accept either decision, integers only prune
    (strictly: otherwise the expand is a missed prune)."""
    corners = np.array([[0, 0], [1, 0], [1, 1], [0, 1], [2, 0], [2, 1]], dtype=np.float64)
    instance = Instance(name=f"ladder-{metric}", metric=metric, coords=corners * scale)
    clean = record(instance, SearchSettings(cutoff=0))
    assert clean.count == 1
    assert clean.columns[DECISION][0] == Decision.PRUNE
    trail = _copy(clean)
    trail.columns[DECISION][0] = Decision.EXPAND
    report = recheck(trail, strict=True)
    assert report.wrong == (0 if accepted else 1)
    assert recheck(trail).missed_prunes == (0 if accepted else 1)


@pytest.mark.parametrize("n", [80, 130])
def test_clean_beyond_one_mask_word(record: Record, n: int) -> None:
    """More than 64 cities (masks of several words) check out, and a wrong tree is still found."""
    assert word_count(n) > 1
    trail = record(_random_instance(n, seed=n), SearchSettings(cutoff=3, max_nodes=4000), False)
    _assert_clean(recheck(trail), trail)
    bad = _copy(trail)
    node = trail.count - 1 - int(np.flatnonzero(~is_absent(trail.columns[TREE])[::-1])[0])
    bad.columns[TREE][node] *= 0.5
    report = recheck(bad)
    assert report.wrong == 1
    assert (report.first[0].id, report.first[0].kind) == (node, "tree")


# -- (b) planted faults ----------------------------------------------------------------------


def _first_difference(clean: Trail, faulty: Trail) -> int:
    """The first id at which the two trails' records differ (in any column)."""
    common = min(clean.count, faulty.count)
    differs = np.zeros(common, dtype=np.bool_)
    for name in FULL_COLUMNS:
        a = clean.columns[name][:common].astype(np.float64)
        b = faulty.columns[name][:common].astype(np.float64)
        differs |= (a != b) & ~(np.isnan(a) & np.isnan(b))
    hits = np.flatnonzero(differs)
    assert hits.size or clean.count != faulty.count
    return int(hits[0]) if hits.size else common


@pytest.mark.parametrize("fault", sorted(f for f in FAULTS if fault_bound(f) == TREE_LINKS))
@pytest.mark.parametrize(
    ("name", "cutoff", "start"), [("burma14", 0, False), ("ulysses16", 3, True), ("gr17", 2, False)]
)
def test_planted_fault_is_found_where_it_starts(
    load_reference: LoadReference,
    record: Record,
    fault: str,
    name: str,
    cutoff: int,
    start: bool,
) -> None:
    """Every planted fault is found, first at the node where the trail leaves the clean one."""
    instance = load_reference(name)
    clean = record(instance, SearchSettings(cutoff=cutoff, max_nodes=CAP), start=start)
    faulty = record(
        instance, SearchSettings(cutoff=cutoff, max_nodes=CAP, fault=fault), start=start
    )
    assert faulty.header.solver.fault == fault
    report = recheck(faulty)
    assert report.wrong > 0
    first = _first_difference(clean, faulty)
    assert report.first[0].id == first
    assert "tree" in {f.kind for f in report.first if f.id == first}


# -- (c) hand-made corruptions -----------------------------------------------------------------


def _pruned_leaf(trail: Trail, index: TreeIndex) -> int:
    """A pruned node with a recorded bound and no children, from the middle of the trail."""
    ids = np.arange(trail.count)
    candidates = np.flatnonzero(
        (trail.columns[DECISION] == Decision.PRUNE)
        & ~is_absent(trail.columns[TREE])
        & (index.end == ids + 1)
        & (trail.columns[DEPTH] > 2)
    )
    return int(candidates[len(candidates) // 2])


def _first_tour_better(trail: Trail, index: TreeIndex) -> int:
    """The first node that improved the incumbent."""
    return int(np.flatnonzero(trail.columns[DECISION] == Decision.TOUR_BETTER)[0])


def _add(name: str, amount: int) -> Callable[[Trail, int, TreeIndex], None]:
    """A change adding `amount` to column `name` at the node."""

    def change(trail: Trail, node: int, index: TreeIndex) -> None:
        trail.columns[name][node] += amount

    return change


def _own_city(name: str) -> Callable[[Trail, int, TreeIndex], None]:
    """A change setting column `name` to the node's own (visited) city."""

    def change(trail: Trail, node: int, index: TreeIndex) -> None:
        trail.columns[name][node] = trail.columns[CITY][node]

    return change


def _parent_city(trail: Trail, node: int, index: TreeIndex) -> None:
    """The node adds its parent's city again."""
    trail.columns[CITY][node] = trail.columns[CITY][index.parent[node]]


def _deeper(trail: Trail, node: int, index: TreeIndex) -> None:
    """The node's depth jumps two levels below the record before it."""
    trail.columns[DEPTH][node] = trail.columns[DEPTH][node - 1] + 2


def _expand(trail: Trail, node: int, index: TreeIndex) -> None:
    """The node claims it was expanded."""
    trail.columns[DECISION][node] = Decision.EXPAND


def _longer_best(trail: Trail, node: int, index: TreeIndex) -> None:
    """The node's best frame reports a length one more than its tour's."""
    at = next(i for i, b in enumerate(trail.best) if b.node == node)
    trail.best[at] = dataclasses.replace(trail.best[at], length=trail.best[at].length + 1)


CORRUPTIONS = [
    ("city", _pruned_leaf, _parent_city, "structure", True),
    ("depth", _pruned_leaf, _deeper, "structure", True),
    ("partial", _pruned_leaf, _add(PARTIAL, 1), "partial", True),
    ("tree", _pruned_leaf, _add(TREE, -1), "tree", True),
    ("link_in", _pruned_leaf, _add(LINK_IN, 1), "link_in", True),
    ("link_in_city", _pruned_leaf, _own_city(LINK_IN_CITY), "link_in", True),
    ("link_out", _pruned_leaf, _add(LINK_OUT, -1), "link_out", True),
    ("link_out_city", _pruned_leaf, _own_city(LINK_OUT_CITY), "link_out", True),
    ("closing edge", _first_tour_better, _add(LINK_OUT, 1), "link_out", False),
    ("decision", _pruned_leaf, _expand, "decision", True),
    ("best length", _first_tour_better, _longer_best, "tour", False),
]


@pytest.mark.parametrize(
    ("what", "pick", "change", "kind", "alone"), CORRUPTIONS, ids=[c[0] for c in CORRUPTIONS]
)
def test_hand_corruption_is_caught(
    load_reference: LoadReference,
    record: Record,
    what: str,
    pick: Callable[[Trail, TreeIndex], int],
    change: Callable[[Trail, int, TreeIndex], None],
    kind: str,
    alone: bool,
) -> None:
    """One field changed at one record is reported first, at that record, with its kind."""
    clean = record(load_reference("burma14"), SearchSettings(cutoff=2), start=False)
    trail = _copy(clean)
    index = TreeIndex(clean.columns, clean.best)
    node = pick(trail, index)
    change(trail, node, index)
    report = recheck(trail, strict=True)
    assert report.first[0].id == node
    assert report.first[0].kind == kind
    assert report.by_kind[kind] >= 1
    if alone:
        assert report.wrong == 1


def test_structure_errors(load_reference: LoadReference, record: Record) -> None:
    """A wrong root city, a pruned node with children and a second root are structure errors."""
    clean = record(load_reference("burma14"), SearchSettings(cutoff=2), start=False)
    index = TreeIndex(clean.columns, clean.best)
    trail = _copy(clean)
    trail.columns[CITY][0] = 5
    assert recheck(trail).first[0].kind == "structure"
    assert recheck(trail).first[0].id == 0

    trail = _copy(clean)
    parent = int(np.flatnonzero(index.end > np.arange(clean.count) + 1)[5])
    trail.columns[DECISION][parent] = Decision.PRUNE
    report = recheck(trail)
    assert (report.first[0].id, report.first[0].kind, report.first[0].field) == (
        parent,
        "structure",
        DECISION,
    )

    again = {name: np.concatenate([v, v[:1]]) for name, v in clean.columns.items()}
    trail = dataclasses.replace(clean, columns=again)
    report = recheck(trail)
    assert report.wrong == 1
    assert (report.first[0].id, report.first[0].kind) == (clean.count, "structure")


def test_missing_best_frame_is_a_tour_error(load_reference: LoadReference, record: Record) -> None:
    """A tour_better node whose best frame is gone is a tour error (and later decisions too)."""
    clean = record(load_reference("burma14"), SearchSettings(cutoff=2), start=False)
    trail = _copy(clean)
    node = _first_tour_better(trail, TreeIndex(trail.columns, trail.best))
    trail.best[:] = [b for b in trail.best if b.node != node]
    report = recheck(trail)
    assert (report.first[0].id, report.first[0].kind) == (node, "tour")


def test_frame_that_does_not_improve(load_reference: LoadReference, record: Record) -> None:
    """A best frame repeating the incumbent before it is a tour error where it takes effect."""
    clean = record(load_reference("burma14"), SearchSettings(cutoff=2), start=False)
    trail = _copy(clean)
    last = trail.best[-1]
    trail.best.append(dataclasses.replace(last, node=-1, at=last.at + 5))
    report = recheck(trail)
    assert report.wrong == 1
    assert (report.first[0].id, report.first[0].kind) == (last.at + 5, "tour")
    assert report.first[0].recomputed == last.length


# -- the report ---------------------------------------------------------------------------------


def test_report_json_and_progress(load_reference: LoadReference, record: Record) -> None:
    """The report serialises to JSON with its keys, and progress reaches the range's size."""
    trail = _copy(record(load_reference("burma14"), SearchSettings(cutoff=0)))
    trail.columns[TREE][10:40] += 1
    seen: list[tuple[int, int]] = []
    report = recheck(trail, first=5, on_progress=lambda done, total: seen.append((done, total)))
    data = json.loads(json.dumps(report.to_json()))
    assert {"nodes_checked", "wrong", "by_kind", "first"} <= set(data)
    assert data["wrong"] == 30
    assert not report.ok
    assert data["by_kind"]["tree"] == 30
    assert [f["id"] for f in data["first"]] == list(range(10, 15))
    assert data["first"][0]["path"] == [int(c) for c in TreeIndex(trail.columns, []).path(10)]
    assert seen
    assert seen[-1] == (trail.count, trail.count)


def test_wrong_ids_lists_every_wrong_record(
    load_reference: LoadReference, record: Record, monkeypatch: pytest.MonkeyPatch
) -> None:
    """wrong_ids holds every spoiled id, sorted, across chunks, beyond the findings kept."""
    trail = _copy(record(load_reference("ulysses16"), SearchSettings(cutoff=1, max_nodes=60_000)))
    spoiled = np.sort(np.random.default_rng(9).choice(trail.count, size=300, replace=False))
    trail.columns[PARTIAL][spoiled] += 5
    monkeypatch.setattr(recheck_module, "CHUNK_CELLS", 16 * 997)
    report = recheck(trail, first=3)
    assert report.wrong_ids.dtype == np.int64
    assert np.array_equal(report.wrong_ids, spoiled)
    assert len(report.first) == 3
    assert recheck(record(load_reference("burma14"), SearchSettings(cutoff=0))).wrong_ids.size == 0


def test_recompute_node_matches_the_clean_record(
    load_reference: LoadReference, record: Record
) -> None:
    """recompute_node gives back a clean trail's recorded numbers; its tree matches scipy."""
    trail = record(load_reference("burma14"), SearchSettings(cutoff=2))
    index = TreeIndex(trail.columns, trail.best)
    matrix = trail.header.instance.matrix
    bounded = np.flatnonzero(~is_absent(trail.columns[TREE]))
    for node in bounded[:: max(1, len(bounded) // 25)]:
        got = recheck_module.recompute_node(trail, index, int(node))
        for name in (PARTIAL, TREE, LINK_IN, LINK_OUT):
            assert got[name] == int(trail.columns[name][node]), (node, name)
        assert got["bound"] == sum(
            int(trail.columns[n][node]) for n in (PARTIAL, TREE, LINK_IN, LINK_OUT)
        )
        assert got["decision"] == int(trail.columns[DECISION][node])
        unvisited = sorted(set(range(trail.n)) - set(index.path(int(node))))
        assert got["tree"] == _reference_tree(matrix, np.array(unvisited))
    skipped = int(np.flatnonzero(trail.columns[DECISION] == Decision.SKIP)[0])
    got = recheck_module.recompute_node(trail, index, skipped)
    assert got["tree"] is None and got["bound"] is None
    assert got["partial"] == int(trail.columns[PARTIAL][skipped])
    leaf = int(np.flatnonzero(trail.columns[DECISION] >= Decision.TOUR_BETTER)[0])
    got = recheck_module.recompute_node(trail, index, leaf)
    assert got["unvisited"] == 0
    assert got["length"] == got["partial"] + int(matrix[index.path(leaf)[-1], 0])


def test_ranges_and_chunks_agree(
    load_reference: LoadReference, record: Record, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Small chunks and split ranges find exactly what one pass over the whole trail finds."""
    trail = _copy(record(load_reference("ulysses16"), SearchSettings(cutoff=1, max_nodes=60_000)))
    rng = np.random.default_rng(5)
    spoiled = rng.choice(trail.count, size=200, replace=False)
    trail.columns[PARTIAL][spoiled] += 3
    index = TreeIndex(trail.columns, trail.best)
    whole = recheck(trail, index, first=50)
    assert whole.wrong == 200
    monkeypatch.setattr(recheck_module, "CHUNK_CELLS", 16 * 997)
    chunked = recheck(trail, index, first=50)
    cut = trail.count // 3
    parts = [recheck(trail, index, start=0, stop=cut), recheck(trail, index, start=cut)]
    assert chunked.by_kind == whole.by_kind
    assert chunked.first == whole.first
    assert sum(p.wrong for p in parts) == whole.wrong
    assert parts[1].start == cut
    assert parts[1].nodes_checked == trail.count - cut


def test_foreign_bound(load_reference: LoadReference, record: Record) -> None:
    """A foreign bound is judged only through its recorded bound column and the decisions."""
    clean = record(load_reference("burma14"), SearchSettings(cutoff=0))
    columns = {name: values.copy() for name, values in clean.columns.items()}
    parts = [columns[name].astype(np.int64) for name in (PARTIAL, TREE, LINK_IN, LINK_OUT)]
    opened = columns[DECISION] <= Decision.SKIP
    columns[BOUND] = np.where(opened, sum(parts), np.iinfo(np.int64).min)
    header = TrailHeader(
        instance=clean.header.instance,
        solver=dataclasses.replace(clean.header.solver, bound="other-solver"),
        columns=(*clean.header.columns, Column(BOUND, np.dtype("<i8"))),
    )
    trail = dataclasses.replace(clean, header=header, columns=columns)
    report = recheck(trail)
    _assert_clean(report, trail)
    assert report.kinds_checked == ("structure", "partial", "decision", "tour")

    node = _pruned_leaf(trail, TreeIndex(trail.columns, trail.best))
    trail.columns[TREE][:] = 0
    assert recheck(trail).wrong == 0
    trail.columns[DECISION][node] = Decision.EXPAND
    report = recheck(trail, strict=True)
    assert report.wrong == 1
    assert (report.first[0].id, report.first[0].kind) == (node, "decision")


# -- (d) tree weights against scipy's minimum spanning tree ----------------------------------


def _reference_tree(matrix: np.ndarray, cities: np.ndarray) -> float:
    """Reference: scipy's minimum_spanning_tree over the cities' sub-matrix.

    scipy reads a zero entry as a missing edge, so every off-diagonal length is raised by
    one and the k-1 added back out of the total (every spanning tree has k-1 edges).
    """
    k = len(cities)
    if k < 2:
        return 0.0
    sub = matrix[np.ix_(cities, cities)].astype(np.float64) + 1.0
    np.fill_diagonal(sub, 0.0)
    return float(minimum_spanning_tree(sub).sum()) - (k - 1)


def test_tree_weights_on_random_subsets(load_reference: LoadReference) -> None:
    """Batch Prim matches scipy on random city subsets of gr17 and of random float cities."""
    rng = np.random.default_rng(11)
    for matrix in (load_reference("gr17").matrix, _random_instance(40, seed=2).matrix):
        n = len(matrix)
        for k in range(1, n + 1):
            sets = np.sort(np.argsort(rng.random((25, n)), axis=1)[:, :k], axis=1)
            ours = tree_weights(matrix, sets)
            reference = [_reference_tree(matrix, s) for s in sets]
            np.testing.assert_allclose(ours, reference, rtol=1e-12, atol=1e-9)


def test_tree_weights_on_trail_nodes(load_reference: LoadReference, record: Record) -> None:
    """The recorded trees of a real trail equal scipy's over each node's unvisited cities."""
    trail = record(load_reference("gr17"), SearchSettings(cutoff=2, max_nodes=CAP))
    index = TreeIndex(trail.columns, trail.best)
    have = np.flatnonzero(~is_absent(trail.columns[TREE]))
    sample = np.random.default_rng(3).choice(have, size=300, replace=False)
    matrix = trail.header.instance.matrix
    for node in sample:
        unvisited = np.setdiff1d(np.arange(trail.n), index.path(int(node)))
        assert trail.columns[TREE][node] == _reference_tree(matrix, unvisited)
        assert tree_weights(matrix, unvisited[None, :])[0] == trail.columns[TREE][node]


@st.composite
def _matrices_with_sets(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray]:
    """A symmetric matrix of few distinct lengths (many ties, zeros too) and a few city sets."""
    n = draw(st.integers(1, 10))
    upper = draw(st.lists(st.integers(0, 3), min_size=n * n, max_size=n * n))
    m = np.triu(np.array(upper, dtype=np.int64).reshape(n, n), 1)
    m += m.T
    k = draw(st.integers(1, n))
    rows = draw(st.lists(st.permutations(range(n)), min_size=1, max_size=6))
    sets = np.sort(np.array([r[:k] for r in rows], dtype=np.intp), axis=1)
    if draw(st.booleans()):
        return m / 3.0, sets
    return m, sets


@FAST
@given(_matrices_with_sets())
def test_batch_prim_matches_scipy(case: tuple[np.ndarray, np.ndarray]) -> None:
    """On random matrices with ties, batch Prim gives scipy's minimum spanning tree weight."""
    matrix, sets = case
    ours = tree_weights(matrix, sets)
    reference = [_reference_tree(matrix, s) for s in sets]
    np.testing.assert_allclose(ours, reference, rtol=1e-12, atol=1e-12)


@FAST
@given(st.integers(1, 200), st.data())
def test_masks_round_trip(n: int, data: st.DataObject) -> None:
    """City sets survive masks of any width: members, sizes, distinct rows, cheapest edges."""
    k = data.draw(st.integers(1, n))
    rows = data.draw(st.lists(st.sets(st.integers(0, n - 1), min_size=k, max_size=k), min_size=1))
    word, bit = city_bits(n)
    masks = np.zeros((len(rows), word_count(n)), dtype=np.uint64)
    for i, cities in enumerate(rows):
        for c in cities:
            masks[i, word[c]] |= bit[c]
    assert (masks & ~all_cities(n) == 0).all()
    assert (set_sizes(masks) == k).all()
    listed = members(masks, n, k)
    assert [set(r.tolist()) for r in listed] == [set(r) for r in rows]
    unique, inverse = distinct_sets(masks)
    assert len(unique) == len({frozenset(r) for r in rows})
    assert (unique[inverse] == masks).all()
    matrix = np.add.outer(np.arange(n), np.arange(n)) % 7
    ends = np.zeros(len(rows), dtype=np.intp)
    least = least_edges(matrix, ends, np.ascontiguousarray(listed.T))
    assert least.tolist() == [min(int(matrix[0, c]) for c in r) for r in rows]
