"""`stats`: per-depth counts and tightness of engine trails, checked against sums made here.

Trails come from the engine on TSPLIB's burma14 (G. Reinelt, "TSPLIB — A Traveling Salesman
Problem Library", ORSA Journal on Computing 3(4):376-384, 1991; published optimum 3323, in
tests/reference.py) and on seeded random cities.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from tests.reference import TSPLIB_OPTIMUM, instance_path
from tracer.analysis import TreeIndex
from tracer.analysis.oracle import best_completions, completion_table
from tracer.analysis.stats import (
    FINAL_INCUMBENT,
    ORACLE,
    depth_stats,
    effective_branching_factor,
)
from tracer.base import (
    DECISION,
    DEPTH,
    LINK_IN,
    LINK_OUT,
    PARTIAL,
    TREE,
    Decision,
    EndInfo,
    is_absent,
)
from tracer.base.instance import Instance
from tracer.cli import main
from tracer.formats import load_instance
from tracer.search import SearchSettings, make_start, run_search, trail_header
from tracer.trails import TrailWriter, open_trail

Record = Callable[..., Any]


def write_trail(
    path: Path, instance: Instance, settings: SearchSettings, start: str = "nn"
) -> Path:
    """Run the engine into a trail file; `start` "none" begins with no incumbent."""
    begin = make_start(instance, start, "2opt+oropt")
    writer = TrailWriter(path, trail_header(instance, settings, begin, "test"))
    r = run_search(instance, settings, begin, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length, r.tour))
    return path


@pytest.fixture(scope="module")
def burma(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """burma14 trails: full from no incumbent, and decisions-only of the same search."""
    folder = tmp_path_factory.mktemp("stats")
    instance = load_instance(instance_path("burma14"))
    return {
        "full": write_trail(folder / "full.trail", instance, SearchSettings(cutoff=2), "none"),
        "decisions": write_trail(
            folder / "dec.trail", instance, SearchSettings(cutoff=2, record="decisions"), "none"
        ),
    }


def test_counts_are_the_bincount_of_the_columns(burma: dict[str, Path]) -> None:
    """Every depth × decision count equals a bincount made here; depths sum to the trail."""
    trail = open_trail(burma["full"])
    stats = depth_stats(trail)
    depth = trail.columns[DEPTH].astype(np.int64)
    decision = trail.columns[DECISION].astype(np.int64)
    for code in Decision:
        mine = np.bincount(depth[decision == code], minlength=trail.n)
        assert np.array_equal(stats.decisions[:, int(code)], mine)
    assert int(stats.nodes.sum()) == trail.count == stats.total
    assert stats.to_json()["nodes"] == trail.count
    evaluated = ~is_absent(trail.columns[TREE])
    assert np.array_equal(stats.bound_evaluations, np.bincount(depth[evaluated], minlength=14))
    pruned = np.bincount(depth[decision == Decision.PRUNE], minlength=14)
    nodes = np.bincount(depth, minlength=14)
    assert np.allclose(stats.prune_rate[nodes > 0], (pruned / np.maximum(nodes, 1))[nodes > 0])


def test_decisions_only_trail_counts_bounds_by_rule(burma: dict[str, Path]) -> None:
    """A trail without numbers gets its bound evaluations from the cutoff rule, the same count."""
    full, bare = open_trail(burma["full"]), open_trail(burma["decisions"])
    assert TREE not in bare.columns
    a = depth_stats(full)
    b = depth_stats(bare)
    assert np.array_equal(a.bound_evaluations, b.bound_evaluations)
    assert b.bound_evaluations.sum() > 0
    assert np.isnan(b.tightness_mean).all()  # no bound values recorded: no tightness


def test_tightness_against_the_oracle_and_the_final_incumbent(burma: dict[str, Path]) -> None:
    """At the root, tightness is bound ÷ TSPLIB's optimum either way; with the oracle no
    bound of the clean search exceeds its best completion (an admissible bound)."""
    trail = open_trail(burma["full"])
    index = TreeIndex(trail.columns, trail.best)
    root = sum(float(trail.columns[name][0]) for name in (PARTIAL, TREE, LINK_IN, LINK_OUT))
    optimum = TSPLIB_OPTIMUM["burma14"]  # TSPLIB published optimum
    plain = depth_stats(trail)
    assert plain.tightness_source == FINAL_INCUMBENT and plain.reference_length == optimum
    assert plain.tightness_mean[0] == pytest.approx(root / optimum)
    completions = best_completions(trail, index, completion_table(trail.header.instance))
    exact = depth_stats(trail, completions)
    assert exact.tightness_source == ORACLE
    assert exact.tightness_mean[0] == pytest.approx(root / optimum)
    known = ~np.isnan(exact.tightness_mean)
    assert (exact.tightness_worst[known] <= exact.tightness_mean[known] + 1e-12).all()
    assert (exact.tightness_mean[known] <= 1 + 1e-9).all()
    # a branch's best completion is at least the optimum, so its ratio is at most bound ÷ optimum
    assert (exact.tightness_mean[known] <= plain.tightness_mean[known] + 1e-9).all()
    assert (plain.tightness_mean[known] > 1).any()  # against the optimum, deep bounds look > 1


def test_improvements_are_the_tour_better_nodes(burma: dict[str, Path]) -> None:
    """Improvements are the tour_better nodes, lengths falling to TSPLIB's optimum."""
    trail = open_trail(burma["full"])
    stats = depth_stats(trail)
    better = np.flatnonzero(trail.columns[DECISION] == Decision.TOUR_BETTER)
    assert [i.node for i in stats.improvements] == better.tolist()
    lengths = [i.length for i in stats.improvements]
    assert lengths == sorted(lengths, reverse=True) and len(set(lengths)) == len(lengths)
    assert lengths[-1] == TSPLIB_OPTIMUM["burma14"]
    assert {i.depth for i in stats.improvements} == {13}


def test_effective_branching_factor_solves_the_uniform_tree() -> None:
    """1 + b + … + b^d equals the node count at the returned b (and the easy cases)."""
    for nodes, depth in ((43_945, 13), (1_000, 3), (15, 3)):
        b = effective_branching_factor(nodes, depth)
        assert sum(b**i for i in range(depth + 1)) == pytest.approx(nodes, rel=1e-9)
    assert effective_branching_factor(15, 3) == pytest.approx(2.0)
    assert effective_branching_factor(1, 5) == 0.0


def test_stats_cli_json_and_chart(burma: dict[str, Path], capsys: pytest.CaptureFixture[str]):
    """`stats --json` sums to the trail and names its tightness source; text has a chart."""
    assert main(["stats", str(burma["full"]), "--json"]) == 0
    got = json.loads(capsys.readouterr().out)
    assert got["tightness_source"] == "oracle"
    assert sum(d["nodes"] for d in got["depths"]) == got["nodes"] == open_trail(burma["full"]).count
    assert all(math.isfinite(d["tightness_mean"]) for d in got["depths"][:11])  # k > cutoff 2
    assert all(d["tightness_mean"] is None for d in got["depths"][11:])
    assert main(["stats", str(burma["full"]), "--json", "--no-oracle"]) == 0
    assert json.loads(capsys.readouterr().out)["tightness_source"] == "final incumbent"
    assert main(["stats", str(burma["full"])]) == 0
    text = capsys.readouterr().out
    assert "nodes per depth, by decision" in text and "final incumbent" not in text
    assert "incumbent improvements" in text
