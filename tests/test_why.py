"""`why`: the node where a tour's branch was cut, and the right culprit.

Optimal lengths come from the Held-Karp of tests/oracles.py and TSPLIB's published optima
(G. Reinelt, ORSA Journal on Computing 3(4):376-384, 1991; tests/reference.py), optimal
tours from brute force over permutations (written here). Faulty trails come from the
engine's planted faults; the foreign trace comes from a small depth-first solver written in
this file, with its own bound that is not a lower bound.
"""

from __future__ import annotations

import itertools
import json
from pathlib import Path

import numpy as np
import pytest

from tests.oracles import held_karp
from tests.reference import TSPLIB_OPTIMUM, instance_path
from tracer.analysis import (
    CULPRITS,
    TreeIndex,
    completion_table,
    explain,
    recompute_node,
    remainder_instance,
)
from tracer.base import DECISION, Decision, EndInfo, Instance, Trail
from tracer.cli import main
from tracer.formats import format_tour, load_instance
from tracer.search import FAULTS, SearchSettings, run_search, trail_header
from tracer.search.faults import fault_bound
from tracer.trails import TrailWriter, open_trail

#: The part each planted fault gets wrong, as `why` should name it.
FAULT_CULPRIT = {
    "tree-positions": "tree",
    "stale-keys": "tree",
    "squared-lengths": "tree",
    "tree-spans-ends": "tree",
    "penalty-once": "penalty",
}


def _cities(n: int, seed: int) -> Instance:
    """n seeded cities in a 1000 × 1000 square, TSPLIB's rounded Euclidean metric."""
    coords = np.random.default_rng(seed).uniform(0.0, 1000.0, size=(n, 2))
    return Instance(name=f"cities{n}", metric="EUC_2D", coords=coords)


def _record(path: Path, instance: Instance, settings: SearchSettings) -> Trail:
    """Run the engine from an infinite incumbent into a trail and read it back."""
    writer = TrailWriter(path, trail_header(instance, settings, None, "test"))
    r = run_search(instance, settings, None, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length, r.tour))
    return open_trail(path)


def _final_length(trail: Trail) -> float:
    return min(b.length for b in trail.best)


def test_every_fault_has_a_named_culprit() -> None:
    """Each planted fault maps to a culprit `why` can give."""
    assert set(FAULT_CULPRIT) == set(FAULTS)
    assert set(FAULT_CULPRIT.values()) <= set(CULPRITS)


@pytest.mark.parametrize("fault", sorted(FAULTS))
def test_planted_fault_gets_its_culprit(tmp_path: Path, fault: str) -> None:
    """A fault that loses the optimum is named at a pruned node of the optimal branch.

    The cut node's named part really is recorded wrong (recomputed independently), and
    pruning it lost the optimum: the best tour through it beats the incumbent in force.
    A fault that keeps the optimum gets `none` and the node where the tour was completed.
    """
    instance = _cities(12, 3)
    optimum = held_karp(instance.matrix)
    settings = SearchSettings(cutoff=0, fault=fault, bound=fault_bound(fault))
    trail = _record(tmp_path / "f.trail", instance, settings)
    index = TreeIndex(trail.columns, trail.best)
    report = explain(trail, index, tour=None, table=completion_table(instance))
    if _final_length(trail) == optimum:
        assert report.culprit == "none" and report.found_at is not None
        return
    assert report.culprit == FAULT_CULPRIT[fault], report.explanation
    node = report.cut_node
    assert node is not None and trail.columns[DECISION][node] == Decision.PRUNE
    recomputed = recompute_node(trail, index, node)[report.culprit]
    assert report.parts[report.culprit]["recorded"] != recomputed
    assert report.completion == optimum < report.incumbent
    assert index.path(node) == report.tour[: len(report.path)]
    assert report.harmful_count and report.cut_node in [p["id"] for p in report.harmful_prunes]


def test_clean_trail_answers_none_where_the_tour_was_found(tmp_path: Path) -> None:
    """A clean search: culprit none, and the node named is a tour of optimal length."""
    instance = load_instance(instance_path("burma14"))
    trail = _record(tmp_path / "c.trail", instance, SearchSettings(cutoff=2))
    index = TreeIndex(trail.columns, trail.best)
    report = explain(trail, index, tour=None, table=completion_table(instance))
    assert report.culprit == "none" and report.cut_node is None
    assert report.found_at is not None
    assert trail.columns[DECISION][report.found_at] == Decision.TOUR_BETTER
    assert report.completion == TSPLIB_OPTIMUM["burma14"]
    assert report.harmful_count == 0 and report.first_inadmissible is None
    assert sorted(index.path(report.found_at)) == list(range(14))


def test_tour_is_followed_in_either_direction(tmp_path: Path) -> None:
    """The found tour given reversed and rotated leads to the same node."""
    instance = load_instance(instance_path("burma14"))
    trail = _record(tmp_path / "c.trail", instance, SearchSettings(cutoff=2))
    index = TreeIndex(trail.columns, trail.best)
    found = list(trail.best[-1].tour)
    turned = list(reversed(found))
    turned = turned[3:] + turned[:3]
    report = explain(trail, index, tour=turned, table=None)
    assert report.found_at == trail.best[-1].node
    assert report.tour == found
    assert report.harmful_count is None


def _optimal_tour(d: np.ndarray) -> list[int]:
    """Brute force: the shortest tour from city 0 (the first in permutation order)."""
    n = len(d)
    best = min(
        itertools.permutations(range(1, n)),
        key=lambda p: sum(d[a, b] for a, b in itertools.pairwise((0, *p, 0))),
    )
    return [0, *best]


def _guessing_solver(path: Path, instance: Instance) -> tuple[int, list[int]]:
    """A depth-first search whose bound is partial + a nearest-neighbour finish (too high).

    Writes a JSON Lines trace with the solver's own `bound`; ids are given in visit order,
    which for a depth-first search is pre-order. Returns the id of the node where the
    optimal tour's branch was pruned (the deeper of its two directions), and the tour.
    """
    d = instance.matrix.astype(int)
    n = instance.n
    optimal = _optimal_tour(d)
    lines = [
        {
            "kind": "header",
            "instance": {"name": "guess", "matrix": d.tolist()},
            "solver": {"bound": "nearest-finish", "cutoff": 0},
        }
    ]
    incumbent = [float("inf")]
    directions = (optimal, [0, *reversed(optimal[1:])])
    cuts: dict[int, tuple[int, int]] = {}
    count = itertools.count()

    def guess(path_: list[int]) -> int:
        here, left, total = path_[-1], set(range(n)) - set(path_), 0
        while left:
            nxt = min(left, key=lambda c: (d[here, c], c))
            total, here = total + d[here, nxt], nxt
            left.discard(nxt)
        return total + d[here, 0]

    def visit(path_: list[int], parent: int | None, partial: int) -> None:
        ident = next(count)
        node = {"kind": "node", "id": ident, "parent": parent, "city": path_[-1]}
        node["partial"] = partial
        if len(path_) == n:
            length = partial + d[path_[-1], 0]
            better = length < incumbent[0]
            lines.append(
                {**node, "decision": "tour_better" if better else "tour", "length": int(length)}
            )
            if better:
                incumbent[0] = length
                lines.append({"kind": "best", "id": ident, "length": int(length), "tour": path_})
            return
        bound = partial + guess(path_)
        if bound >= incumbent[0]:
            lines.append({**node, "bound": int(bound), "decision": "prune"})
            for way, tour in enumerate(directions):
                if path_ == tour[: len(path_)] and way not in cuts:
                    cuts[way] = (len(path_), ident)
            return
        lines.append({**node, "bound": int(bound), "decision": "expand"})
        for city in sorted(set(range(n)) - set(path_), key=lambda c: (d[path_[-1], c], c)):
            visit([*path_, city], ident, partial + int(d[path_[-1], city]))

    visit([0], None, 0)
    lines.append({"kind": "end", "status": "complete"})
    path.write_text("".join(json.dumps(line) + "\n" for line in lines), encoding="utf-8")
    # The branch is cut where the deeper of the tour's two directions was pruned.
    deepest = max(cuts.values(), key=lambda c: c[0], default=(0, -1))
    return deepest[1], optimal


def test_foreign_bound_that_is_not_a_lower_bound(tmp_path: Path) -> None:
    """An independent solver's too-high bound: inadmissible_bound at the node it cut."""
    instance = _cities(8, 4)
    trace = tmp_path / "guess.jsonl"
    cut, optimal = _guessing_solver(trace, instance)
    assert cut >= 0, "the seeded instance must make the guessing solver lose the optimum"
    trail = open_trail(trace)
    index = TreeIndex(trail.columns, trail.best)
    table = completion_table(trail.header.instance)
    report = explain(trail, index, tour=optimal, table=table)
    assert report.culprit == "inadmissible_bound", report.explanation
    assert report.cut_node == cut
    assert report.path == report.tour[: len(report.path)]
    assert report.tour in (optimal, [0, *reversed(optimal[1:])])
    assert report.first_inadmissible is not None and report.first_inadmissible <= cut
    # Without the oracle the reference tour still proves the bound too high on its branch.
    alone = explain(trail, index, tour=optimal, table=None)
    assert (alone.culprit, alone.cut_node) == ("inadmissible_bound", cut)


def test_cli_json_and_remainder(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """`why --json` carries the documented keys; the exported remainder is the right sub-problem."""
    instance = _cities(10, 0)
    trail_path = tmp_path / "sq.trail"
    _record(trail_path, instance, SearchSettings(cutoff=0, fault="squared-lengths"))
    left = tmp_path / "left.tsp"
    status = main(["why", str(trail_path), "--json", "--export-remainder", str(left)])
    data = json.loads(capsys.readouterr().out)
    assert status == 1
    for key in ("cut_node", "path", "decision", "bound", "parts", "incumbent", "completion"):
        assert key in data
    assert data["culprit"] in CULPRITS and data["culprit"] != "none"
    assert isinstance(data["explanation"], str) and data["explanation"].endswith(".")
    assert all({"id", "path"} <= set(p) for p in data["harmful_prunes"])
    sub = load_instance(left)
    trail = open_trail(trail_path)
    index = TreeIndex(trail.columns, trail.best)
    _, cities = remainder_instance(trail, index, data["cut_node"])
    assert sub.n == len(cities) == instance.n - len(data["path"]) + 2
    assert np.array_equal(sub.matrix, instance.matrix[np.ix_(cities, cities)])
    table = completion_table(instance)
    mask = sum(1 << c for c in cities[2:])
    assert data["completion"] == pytest.approx(
        sum(instance.matrix[a, b] for a, b in itertools.pairwise(data["path"]))
        + table.finish(cities[1], mask)
    )


def test_cli_tour_file_and_text(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """`why --tour` reads a TSPLIB tour; the text names the culprit and exits 0 on a clean run."""
    instance = load_instance(instance_path("burma14"))
    trail_path = tmp_path / "c.trail"
    trail = _record(trail_path, instance, SearchSettings(cutoff=2))
    tour = tmp_path / "best.tour"
    tour.write_text(format_tour("best", trail.best[-1].tour), encoding="utf-8")
    assert main(["why", str(trail_path), "--tour", str(tour), "--oracle-memory", "0"]) == 0
    text = capsys.readouterr().out
    assert "culprit: none" in text and f"node {trail.best[-1].node}" in text


def test_optimal_without_the_oracle_runs_a_clean_search(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """With the oracle off, --optimal takes the engine's clean search's tour: a clean trail
    answers none at the node where that tour was completed (TSPLIB burma14, 3323)."""
    instance = load_instance(instance_path("burma14"))
    trail_path = tmp_path / "c.trail"
    trail = _record(trail_path, instance, SearchSettings(cutoff=2))
    status = main(["why", str(trail_path), "--optimal", "--oracle-memory", "0", "--json"])
    data = json.loads(capsys.readouterr().out)
    assert status == 0 and data["culprit"] == "none" and data["oracle"] is False
    assert data["tour_length"] == TSPLIB_OPTIMUM["burma14"]
    assert data["found_at"] is not None
    assert trail.columns[DECISION][data["found_at"]] >= Decision.TOUR_BETTER
    assert data["harmful_count"] is None


@pytest.mark.parametrize("fault", ["squared-lengths", "tree-spans-ends"])
def test_tsplib_fault_loses_the_published_optimum(tmp_path: Path, fault: str) -> None:
    """burma14 from an infinite incumbent: these faults end above TSPLIB's 3323, and why
    names the wrong tree at a pruned node of the optimal branch."""
    instance = load_instance(instance_path("burma14"))
    trail = _record(tmp_path / "t.trail", instance, SearchSettings(cutoff=1, fault=fault))
    assert _final_length(trail) > TSPLIB_OPTIMUM["burma14"]
    index = TreeIndex(trail.columns, trail.best)
    report = explain(trail, index, tour=None, table=completion_table(instance))
    assert report.culprit == "tree" and report.cut_node is not None
    assert report.completion == TSPLIB_OPTIMUM["burma14"] < (report.incumbent or 0)
    assert report.harmful_count
