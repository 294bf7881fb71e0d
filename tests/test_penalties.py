"""The penalties bound: published optima, validity against exact completions, agreement
with tree+links at zero penalties, its trail columns, and its independent re-check."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from numpy.typing import NDArray

from tests.oracles import brute_force, held_karp
from tests.reference import TSPLIB_OPTIMUM, instance_path
from tests.sinks import Collect
from tracer.analysis.rechecking import recheck
from tracer.base.errors import PrunetrailError
from tracer.base.frames import EndInfo
from tracer.base.header import PENALTIES, HeaderError, PenaltySettings, from_wire, to_wire
from tracer.base.instance import Instance, explicit_instance
from tracer.base.metrics import EUCLIDEAN
from tracer.base.schema import DECISION_COLUMNS, ENGINE_COLUMNS, PENALTY_COLUMNS, Decision
from tracer.base.trail import Trail
from tracer.cli import main
from tracer.search import engine
from tracer.search.driver import (
    PENALTIES_CITY_LIMIT,
    SearchSettings,
    make_start,
    run_search,
    trail_header,
)
from tracer.trails.reader import read_trail
from tracer.trails.writer import TrailWriter

#: The penalties bound at its default settings.
PEN = SearchSettings(bound=PENALTIES)


def random_instance(n: int, seed: int, integral: bool = True) -> Instance:
    """A random symmetric instance: an integer matrix, or float Euclidean coordinates."""
    rng = np.random.default_rng(seed)
    if integral:
        m = rng.integers(1, 100, size=(n, n))
        return explicit_instance(f"random{n}", np.triu(m, 1) + np.triu(m, 1).T)
    coords = rng.uniform(0, 100, size=(n, 2))
    return Instance(name=f"euclid{n}", metric=EUCLIDEAN, coords=coords)


def completions(d: NDArray[Any]) -> NDArray[np.float64]:
    """Held-Karp table: g[S, j] = shortest path from city 0 through exactly the cities of S
    (bits of cities 1..n-1) ending at j in S; written here, apart from the engine."""
    n = d.shape[0]
    d = np.asarray(d, dtype=np.float64)
    g = np.full((1 << (n - 1), n), np.inf)
    for j in range(1, n):
        g[1 << (j - 1), j] = d[0, j]
    for subset in range(1, 1 << (n - 1)):
        inside = [j for j in range(1, n) if subset >> (j - 1) & 1]
        if len(inside) < 2:
            continue
        for j in inside:
            before = subset & ~(1 << (j - 1))
            g[subset, j] = min(g[before, i] + d[i, j] for i in inside if i != j)
    return g


def record(instance: Instance, settings: SearchSettings, path: Path, start: bool = True) -> Trail:
    """Run a search into a trail file and read it back."""
    tour = make_start(instance, "nn", "none") if start else None
    writer = TrailWriter(path, trail_header(instance, settings, tour, "test"))
    r = run_search(instance, settings, tour, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length, r.tour))
    return read_trail(path)


def bounds(cols: dict[str, NDArray[Any]]) -> NDArray[np.float64]:
    """The recorded penalties bound of every node (NaN where none was evaluated)."""
    parts = ("partial", "tree", "link_in", "link_out")
    return sum(cols[p].astype(np.float64) for p in parts) - cols["penalty"]


@pytest.mark.parametrize(
    "name",
    [
        "ulysses22",
        "bays29",
        "dantzig42",
        "att48",
        "eil51",
        "berlin52",
        "eil76",
        pytest.param("gr48", marks=pytest.mark.thorough),
        pytest.param("st70", marks=pytest.mark.thorough),
    ],
)
def test_penalties_reach_published_optimum(load_reference, name: str) -> None:
    """The penalties bound proves TSPLIB's published optimum (Reinelt 1991, bestSolutions)."""
    instance = load_reference(name)
    result = run_search(instance, PEN, make_start(instance, "nn", "2opt+oropt"))
    assert result.status == "complete"
    assert result.length == TSPLIB_OPTIMUM[name]  # TSPLIB published optimal tour length
    assert result.tour is not None and sorted(result.tour) == list(range(instance.n))
    d = instance.matrix
    assert sum(d[result.tour[i - 1], result.tour[i]] for i in range(instance.n)) == result.length


def test_completion_table_matches_the_oracles() -> None:
    """The test's completion table closes to the Held-Karp and brute-force optima."""
    for n in range(3, 9):
        d = random_instance(n, 40 + n).matrix
        g = completions(d)
        full = (1 << (n - 1)) - 1
        best = min(g[full, j] + d[j, 0] for j in range(1, n))
        assert best == held_karp(d) == brute_force(d)


@pytest.mark.parametrize("seed", range(8))
def test_bound_never_exceeds_the_exact_completion(seed: int) -> None:
    """At every bounded node, partial + relaxation <= partial + the best completion (Held-Karp)."""
    rng = np.random.default_rng(300 + seed)
    n = int(rng.integers(5, 13))
    instance = random_instance(n, seed, integral=seed % 2 == 0)
    settings = SearchSettings(bound=PENALTIES, cutoff=0, penalty_steps=int(rng.integers(0, 40)))
    start = None if seed % 3 == 0 else make_start(instance, "nn", "none")
    sink = Collect()
    result = run_search(instance, settings, start, sink=sink)
    assert result.length is not None
    assert np.isclose(result.length, held_karp(instance.matrix), rtol=1e-12)  # oracle optimum
    cols = sink.columns()
    d = instance.matrix.astype(np.float64)
    g = completions(d)
    bound = bounds(cols)
    paths: list[int] = []
    checked = 0
    for i in range(len(cols["city"])):
        depth = int(cols["depth"][i])
        del paths[depth:]
        paths.append(int(cols["city"][i]))
        if np.isnan(bound[i]):
            continue
        last, rest = paths[-1], set(range(1, n)) - set(paths)
        mask = sum(1 << (c - 1) for c in rest)
        if last == 0:
            best = min(g[mask, j] + d[j, 0] for j in rest)
        else:
            best = g[mask | 1 << (last - 1), last]
        assert bound[i] <= cols["partial"][i] + best + 1e-9 * max(1.0, best), (i, paths)
        checked += 1
    assert checked > 0


def test_zero_penalties_equal_tree_links(load_reference) -> None:
    """With no steps every π stays 0 and each node records exactly tree+links' numbers."""
    instance = load_reference("burma14")
    start = make_start(instance, "nn", "none")
    plain, pen = Collect(), Collect()
    run_search(instance, SearchSettings(cutoff=0), start, sink=plain)
    zero = SearchSettings(bound=PENALTIES, cutoff=0, penalty_steps=0, root_steps=0)
    run_search(instance, zero, start, sink=pen)
    a, b = plain.columns(), pen.columns()
    assert len(a["city"]) == len(b["city"])
    for name in ("city", "depth", "partial", "link_in_city", "link_out_city", "decision"):
        assert np.array_equal(a[name], b[name]), name
    for name in ("tree", "link_in", "link_out"):
        same = np.isnan(b[name]) == (a[name] == np.iinfo(a[name].dtype).min)
        assert same.all() and np.array_equal(
            a[name][~np.isnan(b[name])], b[name][~np.isnan(b[name])]
        )
    bounded = ~np.isnan(b["penalty"])
    assert bounded.any() and (b["penalty"][bounded] == 0).all() and not b["pi"].any()


def test_trail_columns_and_header(load_reference, tmp_path: Path) -> None:
    """A penalties trail carries the penalty term and a π row per node, and its header the
    step settings; both survive the wire."""
    instance = load_reference("gr17")
    trail = record(instance, PEN, tmp_path / "p.trail")
    assert tuple(trail.columns) == PENALTY_COLUMNS
    assert trail.columns["pi"].shape == (trail.count, instance.n)
    solver = trail.header.solver
    assert solver.bound == PENALTIES
    assert solver.penalties == PenaltySettings(30, 300, "gap", 2.0**-10)
    assert from_wire(to_wire(trail.header)).solver == solver
    assert engine.Record._fields == ENGINE_COLUMNS
    # pruned or expanded above the cutoff: pi is recorded for unvisited cities only
    cols = trail.columns
    bounded = np.isin(cols["decision"], (Decision.EXPAND, Decision.PRUNE)) & (
        instance.n - 1 - cols["depth"].astype(int) > PEN.cutoff
    )
    assert (~np.isnan(cols["penalty"]) == bounded).all()
    assert cols["pi"][0, 0] == 0 and cols["pi"][0, 1:].any()


@pytest.mark.parametrize("integral", [True, False])
def test_recheck_accepts_a_clean_penalties_trail(
    load_reference, tmp_path: Path, integral: bool
) -> None:
    """The independent re-check recomputes every penalised number and finds nothing wrong."""
    instance = load_reference("ulysses16") if integral else random_instance(13, 5, integral=False)
    trail = record(instance, PEN, tmp_path / "p.trail")
    report = recheck(trail)
    assert report.ok, report.first[:3]
    assert {"tree", "link_in", "link_out", "bound", "decision"} <= set(report.kinds_checked)


def test_recheck_finds_a_planted_wrong_penalty_term(tmp_path: Path) -> None:
    """The penalty-once fault (each π taken once) is found at the first bounded node, the root."""
    instance = random_instance(12, 3)
    settings = dataclasses.replace(PEN, fault="penalty-once", max_nodes=3000)
    trail = record(instance, settings, tmp_path / "f.trail")
    report = recheck(trail)
    assert not report.ok
    first = report.first[0]
    assert (first.id, first.kind, first.field) == (0, "bound", "penalty")
    assert first.recomputed == pytest.approx(2 * first.recorded)


def test_recheck_finds_an_edited_penalty_and_pi(load_reference, tmp_path: Path) -> None:
    """One recorded penalty term, or one city's π, changed by hand is found at that node."""
    trail = record(load_reference("gr17"), PEN, tmp_path / "p.trail")
    node = int(np.flatnonzero(~np.isnan(trail.columns["penalty"]))[3])
    trail.columns["penalty"][node] += 1.0
    report = recheck(trail)
    assert [(f.id, f.field) for f in report.first] == [(node, "penalty")]
    trail.columns["penalty"][node] -= 1.0
    city = int(np.flatnonzero(trail.columns["pi"][node])[0])
    trail.columns["pi"][node, city] += 512
    wrong = recheck(trail)
    assert wrong.first[0].id == node and "penalty" in {f.field for f in wrong.first}


def test_record_decisions_drops_pi(load_reference) -> None:
    """--record decisions keeps only the tree's shape: no π rows in large runs."""
    instance = load_reference("ulysses22")
    sink = Collect()
    start = make_start(instance, "nn", "none")
    run_search(instance, dataclasses.replace(PEN, record="decisions"), start, sink=sink)
    assert tuple(sink.blocks[0]) == DECISION_COLUMNS


def test_limits_and_fault_bounds(load_reference) -> None:
    """Unlimited penalties searches are refused above their limit; a fault needs its bound."""
    big = load_reference("kroA100")
    assert big.n > PENALTIES_CITY_LIMIT
    with pytest.raises(PrunetrailError, match="--max-nodes or --time-limit"):
        run_search(big, PEN)
    assert run_search(big, dataclasses.replace(PEN, max_nodes=50)).status == "limit"
    with pytest.raises(PrunetrailError, match="needs the penalties bound"):
        run_search(big, SearchSettings(fault="penalty-once", max_nodes=5))
    with pytest.raises(PrunetrailError, match="needs the tree\\+links bound"):
        run_search(big, dataclasses.replace(PEN, fault="stale-keys", max_nodes=5))


def test_solve_and_check_commands(capsys, tmp_path: Path) -> None:
    """`solve --bound penalties` proves att48's TSPLIB optimum (Reinelt 1991) with its
    settings reported, and `check` finds its trail right."""
    trail = tmp_path / "a.trail"
    argv = ["solve", str(instance_path("att48")), "--bound", "penalties", "-o", str(trail)]
    assert main([*argv, "--penalty-steps", "20", "--json"]) == 0
    got = json.loads(capsys.readouterr().out)
    assert got["length"] == TSPLIB_OPTIMUM["att48"]  # TSPLIB published optimum
    assert got["settings"]["bound"] == PENALTIES and got["settings"]["penalty_steps"] == 20
    assert read_trail(trail).header.solver.penalties.steps == 20
    assert main(["check", str(trail), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["wrong"] == 0


@pytest.mark.parametrize(
    ("column", "message"),
    [
        (["pi", "<i4", 5], "must hold n = 17 values"),
        (["pi", "<i4"], "must be given as \\[name, dtype, n\\]"),
        (["tree", "<f8", 17], "must be given as \\[name, dtype\\]"),
    ],
)
def test_header_refuses_bad_row_columns(load_reference, column: list[Any], message: str) -> None:
    """A row column must say it holds n values; no other column may claim a width."""
    header = trail_header(load_reference("gr17"), PEN, None, "test")
    wire = to_wire(header)
    wire["columns"] = [c for c in wire["columns"] if c[0] not in ("pi", column[0])] + [column]
    with pytest.raises(HeaderError, match=message):
        from_wire(wire)
