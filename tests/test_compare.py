"""`compare`: refuses different instances, and finds where two searches first part ways.

The expected first difference is computed here two ways that share nothing with
`tracer.analysis.compare`: for searches whose trees agree up to their first changed
number, the first id where any recorded column differs; and in general, a plain recursive
walk of both trees in lockstep, children matched by city. Instances: TSPLIB's burma14
(Reinelt 1991, tests/data) and seeded random cities.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from tests.reference import instance_path
from tests.test_stats import write_trail
from tracer.analysis import InstanceMismatchError, TreeIndex, compare_trails
from tracer.base import (
    CITY,
    DECISION,
    DEPTH,
    FULL_COLUMNS,
    TREE_LINKS,
    Decision,
    Instance,
    Trail,
    bound_values,
)
from tracer.cli import main
from tracer.formats import load_instance
from tracer.search import FAULTS, SearchSettings
from tracer.search.faults import fault_bound
from tracer.trails import open_trail


def _random(n: int, seed: int) -> Instance:
    """n cities drawn uniformly in a 1000 × 1000 square (EUC_2D), seeded."""
    coords = np.random.default_rng(seed).uniform(0.0, 1000.0, size=(n, 2))
    return Instance(name=f"random{n}s{seed}", metric="EUC_2D", coords=coords)


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Where this module's trails go."""
    return tmp_path_factory.mktemp("compare")


@pytest.fixture(scope="module")
def burma(folder: Path) -> Instance:
    """TSPLIB's burma14."""
    return load_instance(instance_path("burma14"))


def _record(folder: Path, instance: Instance, name: str, **settings: object) -> Trail:
    path = folder / f"{instance.name}-{name}.trail"
    if not path.exists():
        write_trail(path, instance, SearchSettings(**settings))  # type: ignore[arg-type]
    return open_trail(path)


def _first_changed_record(a: Trail, b: Trail) -> int:
    """The first id at which any recorded column differs (NaN and absent equal)."""
    common = min(a.count, b.count)
    differs = np.zeros(common, dtype=np.bool_)
    for name in FULL_COLUMNS:
        x = a.columns[name][:common].astype(np.float64)
        y = b.columns[name][:common].astype(np.float64)
        differs |= (x != y) & ~(np.isnan(x) & np.isnan(y))
    hits = np.flatnonzero(differs)
    return int(hits[0]) if hits.size else common


def _lockstep(a: Trail, b: Trail) -> int | None:
    """The first node of A (pre-order) whose decision, bound or child list differs in B."""
    ia, ib = TreeIndex(a.columns, a.best), TreeIndex(b.columns, b.best)
    ba, bb = bound_values(a, slice(None)), bound_values(b, slice(None))
    stack = [(0, 0)]
    while stack:
        x, y = stack.pop()
        same_bound = (math.isnan(ba[x]) and math.isnan(bb[y])) or ba[x] == bb[y]
        kids_a, kids_b = ia.children(x), ib.children(y)
        cities_a = [int(a.columns[CITY][k]) for k in kids_a]
        cities_b = [int(b.columns[CITY][k]) for k in kids_b]
        if a.columns[DECISION][x] != b.columns[DECISION][y] or not same_bound:
            return x
        if cities_a != cities_b:
            return x
        stack.extend(reversed(list(zip(kids_a, kids_b, strict=True))))
    return None


def test_refuses_trails_of_different_instances(
    folder: Path, burma: Instance, capsys: pytest.CaptureFixture[str]
) -> None:
    """Other city count, or same count with other cities: refused, exit 2, saying what."""
    a = _record(folder, burma, "plain")
    other = _record(folder, load_instance(instance_path("ulysses16")), "limit", max_nodes=500)
    with pytest.raises(InstanceMismatchError, match="cities 14 vs 16"):
        compare_trails(a, other)
    x = _record(folder, _random(9, 1), "plain")
    y = _record(folder, _random(9, 2), "plain")
    with pytest.raises(InstanceMismatchError, match="distance matrix"):
        compare_trails(x, y)
    assert main(["compare", str(a.path), str(other.path)]) == 2
    assert "different instances" in capsys.readouterr().err


def test_identical_searches_have_no_difference(
    folder: Path, burma: Instance, capsys: pytest.CaptureFixture[str]
) -> None:
    """A trail against a second run of the same search: same, ratios 1, exit 0."""
    a = _record(folder, burma, "plain")
    b = _record(folder, burma, "again")
    assert main(["compare", str(a.path), str(b.path), "--json"]) == 0
    got = json.loads(capsys.readouterr().out)
    assert got["same"] and got["first_difference"] is None
    assert got["ratio"] == 1.0 and got["nodes_a"] == a.count
    assert all(d["ratio"] == 1.0 for d in got["depths"])


@pytest.mark.parametrize("fault", sorted(f for f in FAULTS if fault_bound(f) == TREE_LINKS))
def test_planted_fault_differs_first_where_it_changes_a_number(
    folder: Path, burma: Instance, fault: str
) -> None:
    """Clean vs a planted fault: the first difference is the first record whose numbers
    change, and it is reported as a bound difference."""
    clean = _record(folder, burma, "plain")
    faulty = _record(folder, burma, fault, fault=fault, max_nodes=300_000)
    expected = _first_changed_record(clean, faulty)
    got = compare_trails(clean, faulty)
    assert got.first is not None
    assert got.first.node_a == expected == got.first.node_b
    assert "bound" in got.first.kinds
    assert got.first.bound_a != got.first.bound_b
    assert got.first.path == TreeIndex(clean.columns, clean.best).path(expected)


def test_cutoff_change_differs_at_the_first_bound_it_skips(folder: Path, burma: Instance) -> None:
    """Cutoff 1 vs 4: first difference is A's first bounded node with k <= 4 (decision, bound)."""
    a = _record(folder, burma, "plain", cutoff=1)
    b = _record(folder, burma, "c4", cutoff=4)
    unvisited = a.n - 1 - a.columns[DEPTH].astype(np.int64)
    decision = a.columns[DECISION]
    judged = (decision == Decision.EXPAND) | (decision == Decision.PRUNE)
    expected = int(np.flatnonzero(judged & (unvisited <= 4) & (unvisited > 1))[0])
    got = compare_trails(a, b)
    assert got.first is not None and got.first.node_a == expected
    assert {"decision", "bound"} <= set(got.first.kinds) or got.first.kinds == ["bound"]
    assert got.first.bound_b is None
    assert got.first_of_kind["bound"] == expected


def test_child_order_difference_at_the_root(folder: Path, burma: Instance) -> None:
    """Nearest-first vs by-index order: the root's children differ in order, not in set;
    matched by path, no node of either search is missing from the other."""
    a = _record(folder, burma, "plain")
    b = _record(folder, burma, "index", order="index")
    got = compare_trails(a, b)
    assert got.first is not None and got.first.node_a == 0
    assert got.first.kinds == ["child_order"]
    row = burma.matrix[0]
    nearest = [int(c) for c in np.argsort(row, kind="stable") if c != 0]
    assert got.first.children_a == nearest
    assert got.first.children_b == list(range(1, 14))
    assert got.only_a == got.only_b == 0  # the bound prunes the same paths in either order
    assert got.differing["decision"] == 0


@pytest.mark.parametrize("seed", [3, 4])
def test_first_difference_matches_a_lockstep_walk(folder: Path, seed: int) -> None:
    """On small random instances, for changed cutoffs, orders and faults, the first
    difference is the node a plain lockstep walk of both trees stops at."""
    instance = _random(8, seed)
    base = _record(folder, instance, f"s{seed}")
    others = [
        _record(folder, instance, f"s{seed}c3", cutoff=3),
        _record(folder, instance, f"s{seed}ix", order="index"),
        _record(folder, instance, f"s{seed}st", fault="stale-keys"),
        _record(folder, instance, f"s{seed}te", fault="tree-spans-ends"),
    ]
    for other in others:
        got = compare_trails(base, other)
        expected = _lockstep(base, other)
        assert (got.first.node_a if got.first else None) == expected, other.path


def test_compare_cli_text(folder: Path, burma: Instance, capsys: pytest.CaptureFixture[str]):
    """The text report names the first difference and exits 1 when the searches differ."""
    a = _record(folder, burma, "plain", cutoff=1)
    b = _record(folder, burma, "c4", cutoff=4)
    assert main(["compare", str(a.path), str(b.path)]) == 1
    text = capsys.readouterr().out
    assert "first difference" in text and "B ÷ A" in text and "A expand, B skip" in text
