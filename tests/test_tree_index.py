"""The tree index against a plain-Python walk of random pre-order trees and a real trail."""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.sinks import Collect
from tracer.analysis.tree_index import ORPHAN, ROOT, TreeIndex
from tracer.base.frames import BestUpdate
from tracer.base.schema import DECISION_NAMES
from tracer.search.driver import SearchSettings, make_start, run_search


@st.composite
def preorder_trees(draw: st.DrawFn) -> tuple[list[int], list[int], list[int]]:
    """Random trees as pre-order depth lists, with a city and a decision per node."""
    count = draw(st.integers(1, 300))
    depths = [0]
    for _ in range(count - 1):
        depths.append(draw(st.integers(1, depths[-1] + 1)))
    cities = [0] + [draw(st.integers(1, 30)) for _ in range(count - 1)]
    decisions = [draw(st.integers(0, len(DECISION_NAMES) - 1)) for _ in range(count)]
    return depths, cities, decisions


def reference_parents(depths: list[int]) -> list[int]:
    """Parent of each node: the last earlier node one level up (a plain scan)."""
    parents = []
    for i, d in enumerate(depths):
        parents.append(
            next((j for j in range(i - 1, -1, -1) if depths[j] == d - 1), ROOT) if d > 0 else ROOT
        )
    return parents


def index_of(depths: list[int], cities: list[int], decisions: list[int]) -> TreeIndex:
    columns = {
        "depth": np.array(depths, dtype=np.uint8),
        "city": np.array(cities, dtype=np.uint8),
        "decision": np.array(decisions, dtype=np.uint8),
    }
    return TreeIndex(columns, [])


@settings(max_examples=60, deadline=None)
@given(preorder_trees(), st.data())
def test_index_matches_a_plain_walk(
    tree: tuple[list[int], list[int], list[int]], data: st.DataObject
) -> None:
    """Parents, subtree ranges, children, paths, repeated cities and range counts match a
    naive reference."""
    depths, cities, decisions = tree
    index = index_of(depths, cities, decisions)
    parents = reference_parents(depths)
    assert index.parent.tolist() == parents
    count = len(depths)
    kids: list[list[int]] = [[] for _ in range(count)]
    for j, up in enumerate(parents):
        if up != ROOT:
            kids[up].append(j)
    for node in range(count):
        stop = next((j for j in range(node + 1, count) if depths[j] <= depths[node]), count)
        assert index.subtree(node) == (node, stop)
        assert index.children(node) == kids[node]
        chain = [node]
        while parents[chain[-1]] != ROOT:
            chain.append(parents[chain[-1]])
        assert index.ancestors(node) == chain[::-1]
        assert index.path(node) == [cities[j] for j in chain[::-1]]
        assert index.repeated[node] == (cities[node] in [cities[j] for j in chain[1:]])
    lo = data.draw(st.integers(0, count))
    hi = data.draw(st.integers(lo, count))
    expected = {name: decisions[lo:hi].count(code) for code, name in enumerate(DECISION_NAMES)}
    assert index.decision_counts(lo, hi) == expected


def test_depth_jump_is_an_orphan() -> None:
    """A node more than one level below its predecessor has no parent (ORPHAN)."""
    index = index_of([0, 1, 3, 1], [0, 1, 2, 3], [0, 0, 0, 1])
    assert index.parent.tolist() == [ROOT, 0, ORPHAN, 0]


def test_prefix_lookup_and_incumbents_on_a_real_trail(load_reference) -> None:
    """node_for_prefix inverts path(); incumbent_at follows the best frames' `at`."""
    instance = load_reference("burma14")
    sink = Collect()
    run_search(instance, SearchSettings(cutoff=0), make_start(instance, "nn", "none"), sink=sink)
    index = TreeIndex(sink.columns(), sink.best)
    rng = np.random.default_rng(3)
    for node in rng.integers(0, index.count, 200).tolist():
        assert index.node_for_prefix(index.path(node)) == node
    assert index.node_for_prefix([0, 0]) is None and index.node_for_prefix([5]) is None
    for start in rng.integers(0, index.count - 50, 5).tolist():  # a screen of rows, a sample
        for nodes in (range(start, start + 50), sorted(rng.integers(0, index.count, 30))):
            assert index.paths(nodes) == [index.path(int(n)) for n in nodes]
    ats = [b.at for b in sink.best]
    probe = np.array(sorted({0, *ats, *(a - 1 for a in ats if a > 0), index.count - 1}))
    got = index.incumbent_at(probe)
    for node, value in zip(probe.tolist(), got.tolist(), strict=True):
        seen = [b.length for b in sink.best if b.at <= node]
        assert value == (seen[-1] if seen else math.inf)


def test_incumbent_uses_visit_order_when_present() -> None:
    """With a visit column, a node sees the updates made before its visit, not its id."""
    columns = {
        "depth": np.array([0, 1, 1], dtype=np.uint8),
        "city": np.array([0, 1, 2], dtype=np.uint8),
        "decision": np.array([0, 1, 1], dtype=np.uint8),
        "visit": np.array([0, 2, 1], dtype=np.uint64),
    }
    index = TreeIndex(columns, [BestUpdate(at=2, node=-1, length=7.0, tour=(0, 1, 2))])
    assert index.incumbent_at(np.arange(3)).tolist() == [math.inf, 7.0, math.inf]


@settings(max_examples=60, deadline=None)
@given(
    preorder_trees(),
    st.frozensets(st.integers(0, len(DECISION_NAMES) - 1), min_size=1),
    st.integers(1, 5),
)
def test_decision_ranks_match_a_plain_scan(tree, codes, repeat):
    """rank, select, keeps and between agree with a Python list of the kept ids.

    The tree is repeated so the counts cross several 64-node blocks.
    """
    depths, cities, decisions = tree
    depths, cities, decisions = depths * repeat, cities * repeat, decisions * repeat
    ranks = index_of(depths, cities, decisions).decision_ranks(codes)
    kept = [i for i, d in enumerate(decisions) if d in codes]
    for node in range(len(decisions) + 1):
        assert ranks.rank(node) == sum(1 for i in kept if i < node)
    for k, node in enumerate(kept):
        assert ranks.select(k) == node
        assert ranks.keeps(node)
    assert [n for n in range(len(decisions)) if ranks.keeps(n)] == kept
    if kept:
        first, last = kept[0], kept[-1]
        assert ranks.between(first, last).tolist() == kept
        assert ranks.between(last, last).tolist() == [last]
