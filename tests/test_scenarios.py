"""The scenarios say what they hold: each stated optimum, node count and bug is re-measured.

The optimum column of scenarios/README.md is checked three ways: the engine's proof, the
Held-Karp oracle of tests/oracles.py (written apart from the engine), and, where Held-Karp
in pure Python is slow, the Held-Karp completion table of tracer.analysis (also independent
of the search, by the import contract). The broken solver's trace is regenerated from its
script, so the shipped file is what the script really prints.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

from tests.oracles import held_karp
from tracer.analysis import TreeIndex, completion_table, explain, recheck
from tracer.base import Instance
from tracer.formats import load_instance
from tracer.search import SearchSettings, make_start, run_search
from tracer.trails import open_trail

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
BROKEN_TRACE = SCENARIOS / "boiler_round_broken.jsonl"
BROKEN_SOLVER = SCENARIOS / "broken_solver.py"
#: Above this many cities tests/oracles.py's Held-Karp takes seconds: thorough runs only.
QUICK_HELD_KARP = 15
#: Above this, minutes (relay_survey, 19 cities): the completion table alone confirms it.
MOST_HELD_KARP = 17


def stated_optima() -> dict[str, float]:
    """File name -> the optimum column of the scenarios README table (numbers only)."""
    text = (SCENARIOS / "README.md").read_text()
    optima = {}
    for name, value in re.findall(r"^\| `([^`]+)` \|[^|]*\|[^|]*\| ([0-9.]+) \|", text, re.M):
        optima[name] = float(value)
    return optima


OPTIMA = stated_optima()


def _engine(instance: Instance, **settings: object) -> tuple[float, int]:
    """The proved length and node count of one search (start: nn + local search by default)."""
    start, improve = settings.pop("start", "nn"), settings.pop("improve", "2opt+oropt")
    result = run_search(
        instance,
        SearchSettings(**settings),  # type: ignore[arg-type]
        make_start(instance, str(start), str(improve)),
    )
    assert result.status == "complete" and result.length is not None
    return result.length, result.nodes


def test_readme_states_an_optimum_for_every_instance() -> None:
    """Every instance file in scenarios/ has its optimum in the README table."""
    files = {p.name for p in SCENARIOS.iterdir() if p.suffix in (".tsp", ".csv")}
    assert len(files) >= 7
    assert files <= set(OPTIMA)


@pytest.mark.parametrize("name", sorted(OPTIMA))
def test_stated_optimum_is_what_the_engine_proves(name: str) -> None:
    """The engine's proved optimum equals the README's (rounded as stated)."""
    length, _ = _engine(load_instance(SCENARIOS / name))
    assert round(length, 3) == OPTIMA[name]


def _independent_case(name: str) -> object:
    n = load_instance(SCENARIOS / name).n
    marks = [pytest.mark.thorough] if n > QUICK_HELD_KARP else []
    return pytest.param(name, marks=marks)


@pytest.mark.parametrize(
    "name",
    [
        _independent_case(name)
        for name in sorted(OPTIMA)
        if load_instance(SCENARIOS / name).n <= MOST_HELD_KARP
    ],
)
def test_stated_optimum_is_held_karps(name: str) -> None:
    """tests/oracles.py's Held-Karp (independent of the engine) gives the stated optimum."""
    instance = load_instance(SCENARIOS / name)
    assert round(held_karp(instance.matrix), 3) == OPTIMA[name]


@pytest.mark.parametrize("name", sorted(OPTIMA))
def test_stated_optimum_is_the_completion_tables(name: str) -> None:
    """tracer.analysis's Held-Karp table (it never imports the search) gives the optimum."""
    table = completion_table(load_instance(SCENARIOS / name))
    assert round(table.optimum, 3) == OPTIMA[name]


def test_meter_lane_fits_on_a_few_screens() -> None:
    """meter_lane with a plain nearest-neighbour start: 704 proved in the stated 143 nodes."""
    instance = load_instance(SCENARIOS / "meter_lane.tsp")
    assert _engine(instance, improve="none") == (704, 143)


def test_home_visits_cutoff_changes_the_node_count_as_stated() -> None:
    """The README's node counts for cutoffs 0..5 on home_visits, re-measured."""
    instance = load_instance(SCENARIOS / "home_visits.tsp")
    nodes = [_engine(instance, cutoff=k)[1] for k in range(6)]
    assert nodes == [253_432, 253_540, 254_439, 262_570, 317_196, 908_174]


def test_library_van_child_order_matters_without_a_start_tour() -> None:
    """Without a start tour nearest-first needs 5,467 nodes, city-number order 33,631."""
    instance = load_instance(SCENARIOS / "library_van.tsp")
    nearest = _engine(instance, start="none", order="nearest")
    by_number = _engine(instance, start="none", order="index")
    assert nearest == (2616, 5467)
    assert by_number == (2616, 33631)


def _run_solver(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-B", str(BROKEN_SOLVER), str(SCENARIOS / "boiler_round.tsp"), *args],
        capture_output=True,
        text=True,
        check=True,
    )


def test_shipped_broken_trace_is_what_the_solver_prints() -> None:
    """Re-running broken_solver.py reproduces boiler_round_broken.jsonl byte for byte."""
    assert _run_solver().stdout == BROKEN_TRACE.read_text()


def test_broken_solver_claims_a_tour_longer_than_the_optimum() -> None:
    """The trace's last incumbent is 1564 while the optimum is 1495; --fixed proves 1495."""
    lines = [json.loads(line) for line in BROKEN_TRACE.read_text().splitlines()]
    claimed = [line["length"] for line in lines if line["kind"] == "best"][-1]
    assert claimed == 1564 > OPTIMA["boiler_round.tsp"]
    fixed = [json.loads(line) for line in _run_solver("--fixed").stdout.splitlines()]
    assert [line["length"] for line in fixed if line["kind"] == "best"][-1] == 1495


def test_recheck_finds_the_running_length_bug() -> None:
    """The re-check flags 54 of 64 records, every one a wrong partial length."""
    trail = open_trail(BROKEN_TRACE)
    index = TreeIndex(trail.columns, trail.best)
    report = recheck(trail, index)
    assert report.nodes_checked == 64
    assert report.wrong == 54
    assert report.by_kind["partial"] == 54
    assert report.first[0].kind == "partial"


def test_fixed_solver_trace_checks_clean(tmp_path: Path) -> None:
    """With the bug fixed, the same solver's trace passes the independent re-check."""
    trace = tmp_path / "fixed.jsonl"
    trace.write_text(_run_solver("--fixed").stdout)
    trail = open_trail(trace)
    report = recheck(trail, TreeIndex(trail.columns, trail.best))
    assert report.ok and report.nodes_checked == 540


def test_why_names_the_running_length_as_the_culprit() -> None:
    """`why` finds the optimal branch cut at node 20 on a wrong partial (the solver's bug)."""
    trail = open_trail(BROKEN_TRACE)
    index = TreeIndex(trail.columns, trail.best)
    report = explain(trail, index, tour=None, table=completion_table(trail.header.instance))
    assert report.cut_node == 20
    assert report.culprit == "partial"
    assert [int(c) for c in report.path] == [0, 3, 11, 6, 2, 7, 9]
