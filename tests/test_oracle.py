"""The exact-completion oracle against outside truth.

Optima: TSPLIB's published values (G. Reinelt, "TSPLIB — A Traveling Salesman Problem
Library", ORSA Journal on Computing 3(4):376-384, 1991; tests/reference.py) and the
independent Held-Karp and brute force of tests/oracles.py. Completions of trail nodes are
held against brute force over the orderings of each node's unvisited cities.
"""

from __future__ import annotations

import dataclasses
import itertools
from pathlib import Path

import numpy as np
import pytest

from tests.oracles import brute_force, held_karp
from tests.reference import TSPLIB_OPTIMUM, instance_path
from tracer.analysis import (
    ORACLE_MAX_CITIES,
    OracleSizeError,
    TreeIndex,
    best_completions,
    completion_table,
)
from tracer.analysis.oracle import table_bytes
from tracer.base import CITY, DECISION, DEPTH, Decision, InputError, Instance, Trail, bound_values
from tracer.cli import main
from tracer.trails import open_trail


def _random(n: int, seed: int, metric: str = "EUC_2D") -> Instance:
    """n seeded cities in a 1000 × 1000 square."""
    coords = np.random.default_rng(seed).uniform(0.0, 1000.0, size=(n, 2))
    return Instance(name=f"random{n}", metric=metric, coords=coords)


def _solve(tmp_path: Path, name: str, *options: str) -> Trail:
    """Run `prunetrail solve` on a TSPLIB reference instance and read the trail back."""
    out = tmp_path / f"{name}.trail"
    main(["solve", str(instance_path(name)), "-o", str(out), *options])
    return open_trail(out)


def _tour_length(matrix: np.ndarray, tour: list[int]) -> float:
    return float(sum(matrix[tour[i], tour[(i + 1) % len(tour)]] for i in range(len(tour))))


@pytest.mark.parametrize("name", ["burma14", "ulysses16", "gr17"])
def test_optimum_matches_tsplib(load_reference, name: str) -> None:
    """The table's optimum and its optimal tour have TSPLIB's published length."""
    instance = load_reference(name)
    table = completion_table(instance)
    assert table.optimum == TSPLIB_OPTIMUM[name]
    tour = table.optimal_tour()
    assert sorted(tour) == list(range(instance.n)) and tour[0] == 0
    assert _tour_length(instance.matrix, tour) == TSPLIB_OPTIMUM[name]
    assert table.cost.dtype == np.int32


@pytest.mark.parametrize(("n", "metric"), [(1, "EUC_2D"), (2, "EUC_2D"), (3, "euclidean")])
def test_tiny_instances(n: int, metric: str) -> None:
    """One, two and three cities: optimum equals brute force, tour covers every city."""
    instance = _random(n, n, metric)
    table = completion_table(instance)
    assert table.optimum == pytest.approx(brute_force(instance.matrix))
    assert sorted(table.optimal_tour()) == list(range(n))


@pytest.mark.parametrize("metric", ["EUC_2D", "euclidean"])
@pytest.mark.parametrize("seed", range(3))
def test_optimum_matches_held_karp_and_brute_force(metric: str, seed: int) -> None:
    """Random cities, integer and float metric: the optimum of both independent oracles."""
    instance = _random(8, seed, metric)
    table = completion_table(instance)
    assert table.optimum == pytest.approx(held_karp(instance.matrix), rel=1e-12)
    assert table.optimum == pytest.approx(brute_force(instance.matrix), rel=1e-12)
    assert table.cost.dtype == (np.float64 if metric == "euclidean" else np.int32)


def test_finish_matches_brute_force() -> None:
    """finish(last, unvisited) is the cheapest ordering of the unvisited cities, by brute force."""
    instance = _random(9, 11, "euclidean")
    d = instance.matrix
    table = completion_table(instance)
    rng = np.random.default_rng(3)
    for _ in range(40):
        last = int(rng.integers(1, 9))
        others = [c for c in range(1, 9) if c != last]
        unvisited = [c for c in others if rng.random() < 0.6]
        mask = sum(1 << c for c in unvisited)
        best = min(
            sum(d[a, b] for a, b in itertools.pairwise((last, *order, 0)))
            for order in itertools.permutations(unvisited)
        )
        assert table.finish(last, mask) == pytest.approx(best, rel=1e-12)
    with pytest.raises(ValueError, match="both"):
        table.finish(3, 1 << 3)


def test_completions_of_a_trail(tmp_path: Path) -> None:
    """Every node's completion equals brute force over its unvisited cities' orderings.

    Also: the root's is the optimum, no node's is below it, a tour's is its length, and the
    engine's (admissible) bound never exceeds a node's completion.
    """
    trail = _solve(tmp_path, "burma14", "--cutoff", "3", "--start", "none")
    index = TreeIndex(trail.columns, trail.best)
    table = completion_table(trail.header.instance)
    got = best_completions(trail, index, table)
    d = trail.header.instance.matrix
    assert got.shape == (trail.count,)
    assert got[0] == TSPLIB_OPTIMUM["burma14"]
    assert np.nanmin(got) == TSPLIB_OPTIMUM["burma14"] and not np.isnan(got).any()
    bound = bound_values(trail, slice(None))
    assert not (bound > got).any()
    deep = np.flatnonzero(trail.columns[DEPTH] >= trail.n - 7)
    for node in np.random.default_rng(0).choice(deep, size=30, replace=False):
        path = index.path(int(node))
        rest = sorted(set(range(trail.n)) - set(path))
        walked = sum(d[a, b] for a, b in itertools.pairwise(path))
        best = min(
            sum(d[a, b] for a, b in itertools.pairwise((path[-1], *order, 0)))
            for order in itertools.permutations(rest)
        )
        assert got[node] == walked + best
    tours = trail.columns[DECISION] >= Decision.TOUR_BETTER
    for node in np.flatnonzero(tours)[:20]:
        assert got[node] == _tour_length(d, index.path(int(node)))


def test_unknowable_nodes_are_nan(tmp_path: Path) -> None:
    """A repeated city, a city outside the instance and an orphan give NaN, with their subtrees."""
    trail = _solve(tmp_path, "burma14", "--cutoff", "2", "--max-nodes", "400")
    table = completion_table(trail.header.instance)

    def spoil(name: str, node: int, value: int) -> tuple[np.ndarray, TreeIndex]:
        columns = {key: values.copy() for key, values in trail.columns.items()}
        columns[name][node] = value
        spoiled = dataclasses.replace(trail, columns=columns)
        index = TreeIndex(spoiled.columns, spoiled.best)
        return best_completions(spoiled, index, table), index

    got, index = spoil(CITY, 1, 0)  # the start city again
    assert np.isnan(got[1 : index.end[1]]).all()
    assert not np.isnan(got[index.end[1] :]).any()
    depth = trail.columns[DEPTH]
    deep = int(np.flatnonzero(depth >= 4)[-1])
    got, _ = spoil(CITY, deep, 200)
    assert np.isnan(got[deep]) and np.isnan(got).sum() == index.end[deep] - deep
    sibling = int(np.flatnonzero(depth[1:] == depth[:-1])[-1]) + 1
    got, index = spoil(DEPTH, sibling, int(depth[sibling]) + 2)
    assert index.parent[sibling] < -1 and np.isnan(got[sibling])
    assert np.isnan(got).sum() == 1


def test_refuses_politely() -> None:
    """Too many cities, or a table over the memory limit: our input error, saying why."""
    with pytest.raises(
        OracleSizeError, match=f"more than the exact-completion oracle takes .{ORACLE_MAX_CITIES}"
    ):
        completion_table(_random(ORACLE_MAX_CITIES + 1, 0))
    with pytest.raises(InputError, match="memory limit"):
        completion_table(_random(16, 0), memory_limit_bytes=table_bytes(16) - 1)
    assert completion_table(_random(10, 0), memory_limit_bytes=table_bytes(10)).n == 10


def test_table_is_compact() -> None:
    """The n = 20 table holds (n-1)·2^(n-2) entries of int32 for an integer metric (20 MB)."""
    assert table_bytes(20) == 19 * (1 << 18) * 4
    assert table_bytes(20, integral=False) == 19 * (1 << 18) * 8
    assert table_bytes(20, longest=2**28) == 19 * (1 << 18) * 8
