"""The recorded exact search: optimality against outside references, node counts, limits,
recording filters and planted faults."""

from __future__ import annotations

import math
import os
from typing import Any

import numpy as np
import pytest
from numpy.typing import NDArray

from tests.oracles import brute_force, held_karp, permutation_tree_size
from tests.reference import TSPLIB_OPTIMUM
from tests.sinks import Collect
from tracer.analysis.tree_index import TreeIndex
from tracer.base.errors import PrunetrailError
from tracer.base.instance import Instance, explicit_instance
from tracer.base.metrics import EUCLIDEAN
from tracer.base.schema import (
    DECISION_COLUMNS,
    FULL_COLUMNS,
    Decision,
    is_absent,
)
from tracer.search.driver import (
    EXACT_CITY_LIMIT,
    SearchSettings,
    make_start,
    run_search,
    trail_columns,
)
from tracer.search.faults import FAULTS


def random_matrix(n: int, seed: int, integral: bool = True) -> Instance:
    """A random symmetric instance (integer matrix, or float Euclidean coordinates)."""
    rng = np.random.default_rng(seed)
    if integral:
        m = rng.integers(1, 100, size=(n, n))
        return explicit_instance(f"random{n}", np.triu(m, 1) + np.triu(m, 1).T)
    coords = rng.uniform(0, 100, size=(n, 2))
    return Instance(name=f"euclid{n}", metric=EUCLIDEAN, coords=coords)


#: ulysses22 needs far longer than a test suite may take (see tests/bench/README.md, "Exact
#: search"); it runs when PRUNETRAIL_LONG_TESTS=1.
LONG = pytest.mark.skipif(
    os.environ.get("PRUNETRAIL_LONG_TESTS") != "1", reason="long: set PRUNETRAIL_LONG_TESTS=1"
)
#: Repeats of a behaviour the default run checks already (tests/conftest.py: opt-in).
THOROUGH = pytest.mark.thorough


@pytest.mark.parametrize(
    "name",
    [
        "burma14",
        "ulysses16",
        "gr17",
        pytest.param("ulysses22", marks=LONG),
        "gr24",
        # 29 cities: the same behaviour as gr24, four times as long; its optimum stays
        # checked by default against its .opt.tour (tests/test_tsplib_reference.py).
        pytest.param("bayg29", marks=THOROUGH),
    ],
)
def test_default_settings_reach_published_optimum(load_reference, name: str) -> None:
    """Default settings return TSPLIB's published optimum (Reinelt 1991, bestSolutions)."""
    instance = load_reference(name)
    result = run_search(instance, SearchSettings(), make_start(instance, "nn", "2opt+oropt"))
    assert result.status == "complete"
    assert result.length == TSPLIB_OPTIMUM[name]  # TSPLIB published optimal tour length
    assert result.tour is not None
    assert sorted(result.tour) == list(range(instance.n)) and result.tour[0] == 0
    d = instance.matrix
    assert sum(d[result.tour[i - 1], result.tour[i]] for i in range(instance.n)) == result.length


def _cutoff_cases() -> list[Any]:
    """burma14 at every cutoff 0..6 and gr17 at 0..2 by default; the rest are repeats.

    ulysses16 at cutoffs 5 and 6 alone took 110 s; its optimum is reached by default at the
    default settings above.
    """
    cases = []
    for name in ("burma14", "ulysses16", "gr17"):
        for cutoff in range(7):
            default = name == "burma14" or (name == "gr17" and cutoff <= 2)
            marks = () if default else (THOROUGH,)
            cases.append(pytest.param(name, cutoff, marks=marks, id=f"{name}-{cutoff}"))
    return cases


@pytest.mark.parametrize(("name", "cutoff"), _cutoff_cases())
def test_every_cutoff_reaches_published_optimum(load_reference, name: str, cutoff: int) -> None:
    """Cutoffs 0..6 all return TSPLIB's published optimum (Reinelt 1991) on <= 17 cities."""
    instance = load_reference(name)
    start = make_start(instance, "nn", "none")
    result = run_search(instance, SearchSettings(cutoff=cutoff), start)
    assert result.status == "complete"
    assert result.length == TSPLIB_OPTIMUM[name]  # TSPLIB published optimal tour length


@pytest.mark.parametrize("seed", range(12))
def test_random_optimum_matches_held_karp(seed: int) -> None:
    """On random instances (n <= 10) the optimum equals an independent Held-Karp DP."""
    rng = np.random.default_rng(1000 + seed)
    n = int(rng.integers(2, 11))
    instance = random_matrix(n, seed, integral=seed % 3 != 0)
    settings = SearchSettings(
        cutoff=int(rng.integers(0, 5)), order="nearest" if seed % 2 else "index"
    )
    start = None if seed % 4 == 0 else make_start(instance, "nn", "none")
    result = run_search(instance, settings, start)
    assert result.length is not None
    assert math.isclose(result.length, held_karp(instance.matrix), rel_tol=1e-9)


@pytest.mark.parametrize("n", range(1, 8))
def test_oracles_agree(n: int) -> None:
    """The test's own Held-Karp and brute force agree (so either can be trusted)."""
    instance = random_matrix(n, 77 + n)
    assert held_karp(instance.matrix) == brute_force(instance.matrix)


@pytest.mark.parametrize("n", range(1, 9))
def test_full_enumeration_visits_whole_permutation_tree(n: int) -> None:
    """With no bound the node count is sum_m (n-1)!/(n-1-m)! and every tour is seen."""
    instance = random_matrix(n, 5 + n)
    sink = Collect()
    result = run_search(instance, SearchSettings(bound="none", cutoff=0), None, sink=sink)
    assert result.nodes == permutation_tree_size(n)
    assert result.decisions["prune"] == result.decisions["expand"] == 0
    leaves = result.decisions["tour"] + result.decisions["tour_better"]
    assert leaves == math.factorial(n - 1)
    assert result.length == brute_force(instance.matrix)
    assert sum(len(b["city"]) for b in sink.blocks) == result.nodes


def test_partial_length_prunes_below_cutoff(load_reference) -> None:
    """Below the cutoff a node is cut only when its path alone reaches the incumbent."""
    instance = load_reference("burma14")
    sink = Collect()
    run_search(instance, SearchSettings(cutoff=5), make_start(instance, "nn", "none"), sink=sink)
    cols = sink.columns()
    index = TreeIndex(cols, sink.best)
    k = instance.n - 1 - cols["depth"].astype(int)
    inner = (k > 0) & (k <= 5)
    incumbent = index.incumbent_at(np.arange(len(k)))
    pruned = cols["decision"] == Decision.PRUNE
    assert np.array_equal(pruned[inner], (cols["partial"] >= incumbent)[inner])
    assert is_absent(cols["tree"][inner]).all()
    assert set(np.unique(cols["decision"][inner])) == {Decision.PRUNE, Decision.SKIP}


def test_bound_components_are_recorded_above_cutoff(load_reference) -> None:
    """Above the cutoff every inner node carries a tree and both links with their cities."""
    instance = load_reference("burma14")
    sink = Collect()
    run_search(instance, SearchSettings(cutoff=3), make_start(instance, "nn", "none"), sink=sink)
    cols = sink.columns()
    k = instance.n - 1 - cols["depth"].astype(int)
    above = k > 3
    for name in ("tree", "link_in", "link_out", "link_in_city", "link_out_city"):
        assert not is_absent(cols[name][above]).any(), name
    leaves = k == 0
    assert (cols["link_out_city"][leaves] == 0).all()
    d = instance.matrix
    assert np.array_equal(cols["link_out"][leaves], d[cols["city"][leaves], 0])


def test_node_limit_stops_with_status_limit(load_reference) -> None:
    """--max-nodes stops at exactly that many nodes with status `limit`."""
    instance = load_reference("gr24")
    sink = Collect()
    result = run_search(instance, SearchSettings(max_nodes=12345), None, sink=sink)
    assert result.status == "limit"
    assert result.nodes == 12345
    assert sum(len(b["city"]) for b in sink.blocks) == 12345


def test_time_limit_stops_with_status_limit(load_reference) -> None:
    """--time-limit stops a search that would run for many minutes, with status `limit`."""
    instance = load_reference("ulysses22")
    result = run_search(instance, SearchSettings(cutoff=6, time_limit=0.3), None)
    assert result.status == "limit"
    assert result.nodes > 0


def test_stop_request_interrupts(load_reference) -> None:
    """A stop request (Ctrl-C) ends the search with status `interrupted`."""
    instance = load_reference("ulysses22")
    calls = []
    result = run_search(
        instance,
        SearchSettings(cutoff=6),
        None,
        should_stop=lambda: calls.append(1) or len(calls) > 2,
    )
    assert result.status == "interrupted"
    assert result.nodes > 0


def test_record_decisions_keeps_shape_only(load_reference) -> None:
    """--record decisions keeps city, depth and decision, identical to a full recording."""
    instance = load_reference("burma14")
    start = make_start(instance, "nn", "none")
    full, slim = Collect(), Collect()
    run_search(instance, SearchSettings(), start, sink=full)
    run_search(instance, SearchSettings(record="decisions"), start, sink=slim)
    assert tuple(slim.blocks[0]) == DECISION_COLUMNS
    for name in DECISION_COLUMNS:
        assert np.array_equal(slim.columns()[name], full.columns()[name])


def test_record_none_writes_no_nodes(load_reference) -> None:
    """--record none hands no node blocks to the sink, only incumbent updates."""
    instance = load_reference("burma14")
    sink = Collect()
    result = run_search(instance, SearchSettings(record="none"), None, sink=sink)
    assert sink.blocks == [] and result.recorded == 0
    assert sink.best and sink.best[-1].length == TSPLIB_OPTIMUM["burma14"]  # TSPLIB optimum


def test_record_under_keeps_subtree_and_its_path(load_reference) -> None:
    """--record-under keeps exactly the prefix's subtree and its ancestors, in order."""
    instance = load_reference("burma14")
    start = make_start(instance, "nn", "none")
    full = Collect()
    run_search(instance, SearchSettings(), start, sink=full)
    cols = full.columns()
    index = TreeIndex(cols, full.best)
    target = index.children(index.children(0)[1])[0]
    prefix = tuple(index.path(target))
    lo, hi = index.subtree(target)
    expected = index.ancestors(target)[:-1] + list(range(lo, hi))
    part = Collect()
    run_search(instance, SearchSettings(record_under=prefix), start, sink=part)
    got = part.columns()
    for name in FULL_COLUMNS:
        assert np.array_equal(got[name], cols[name][expected]), name
    # every incumbent update still refers to a position in the filtered numbering
    assert all(0 <= b.at <= len(got["city"]) for b in part.best)


@pytest.mark.parametrize(
    ("prefix", "message"), [((5, 0), "starts at city 0"), ((0, 3, 3), "distinct")]
)
def test_bad_prefix_is_refused(load_reference, prefix: tuple[int, ...], message: str) -> None:
    """A path prefix must start at 0 and hold distinct cities."""
    with pytest.raises(PrunetrailError, match=message):
        run_search(load_reference("burma14"), SearchSettings(record_under=prefix))


def test_refuses_asymmetric_and_oversized(load_reference) -> None:
    """Asymmetric instances and unlimited searches over too many cities are refused."""
    with pytest.raises(PrunetrailError, match="asymmetric"):
        run_search(load_reference("br17"), SearchSettings())
    big = load_reference("att48")
    assert big.n > EXACT_CITY_LIMIT
    with pytest.raises(PrunetrailError, match="--max-nodes or --time-limit"):
        run_search(big, SearchSettings())
    assert run_search(big, SearchSettings(max_nodes=1000)).status == "limit"


def test_columns_are_narrow(load_reference) -> None:
    """A 17-city integer trail uses uint8 cities and depth and int32 lengths."""
    instance = load_reference("gr17")
    layout = {c.name: c.dtype.str for c in trail_columns(instance, SearchSettings())}
    assert layout["city"] == layout["depth"] == layout["link_in_city"] == "|u1"
    assert layout["partial"] == layout["tree"] == "<i4"
    assert "parent" not in layout


def _same(x: NDArray[Any], y: NDArray[Any]) -> NDArray[np.bool_]:
    """Elementwise equality where two absent values count as equal."""
    return (x == y) | (is_absent(x) & is_absent(y))


def first_difference(
    a: dict[str, NDArray[Any]], b: dict[str, NDArray[Any]]
) -> tuple[int, set[str]]:
    """First node id where two recordings differ, and the columns that differ there."""
    count = min(len(a["city"]), len(b["city"]))
    diff = np.zeros(count, dtype=bool)
    for name in FULL_COLUMNS:
        diff |= ~_same(a[name][:count], b[name][:count])
    if not diff.any():
        return count, set()
    i = int(np.argmax(diff))
    return i, {n for n in FULL_COLUMNS if not _same(a[n][i : i + 1], b[n][i : i + 1])[0]}


@pytest.mark.parametrize(
    ("fault", "changed"),
    [
        ("tree-positions", {"tree"}),
        ("stale-keys", {"tree"}),
        ("squared-lengths", {"tree", "link_in", "link_out"}),
        ("tree-spans-ends", {"tree"}),
    ],
)
def test_fault_changes_the_numbers_it_should(load_reference, fault: str, changed: set[str]) -> None:
    """Each planted fault first shows up in exactly the components it corrupts."""
    assert fault in FAULTS
    instance = load_reference("burma14")
    start = make_start(instance, "nn", "none")
    clean, faulty = Collect(), Collect()
    run_search(instance, SearchSettings(cutoff=0), start, sink=clean)
    run_search(instance, SearchSettings(cutoff=0, fault=fault), start, sink=faulty)
    _, columns = first_difference(clean.columns(), faulty.columns())
    assert columns, "the fault changed nothing"
    assert columns <= changed | {"decision"}
    assert columns & changed


def test_spanning_the_end_cities_cuts_the_optimal_branch(load_reference) -> None:
    """The overestimating fault returns a tour longer than TSPLIB's optimum (Reinelt 1991)."""
    instance = load_reference("burma14")
    result = run_search(instance, SearchSettings(fault="tree-spans-ends"), None)
    assert result.status == "complete"
    assert result.length is not None and result.length > TSPLIB_OPTIMUM["burma14"]
