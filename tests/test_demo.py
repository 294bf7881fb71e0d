"""`prunetrail demo`: every scenario solves, re-checks and explains itself without a screen.

Each test points the cache at its own folder ($PRUNETRAIL_CACHE), so runs never share or
reuse a trail they did not make.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

import tui.app
from tests.oracles import held_karp
from tracer.analysis import TreeIndex
from tracer.base import DECISION, DECISION_BY_NAME
from tracer.trails import open_trail
from tui import demo
from tui.cli import main

ROOT = Path(__file__).resolve().parents[1]
#: Scenarios whose demo takes seconds (hundreds of thousands of nodes, or n = 19).
HEAVY = {"visits", "relay"}


@pytest.fixture(autouse=True)
def own_cache(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """A fresh cache folder for each test."""
    monkeypatch.setenv(demo.CACHE_ENV, str(tmp_path / "cache"))
    return tmp_path / "cache"


def test_every_scenario_file_has_a_demo() -> None:
    """Each instance or trace in scenarios/ is some demo's source, and every source exists."""
    shipped = {
        p.name for p in (ROOT / "scenarios").iterdir() if p.suffix in (".tsp", ".csv", ".jsonl")
    }
    sources = {s.source for s in demo.SCENARIOS}
    assert sources == shipped - {"boiler_round.tsp"}  # its demo is the broken solver's trace


def test_demo_titles_quote_the_measured_numbers() -> None:
    """Every number a demo's one-line title quotes is one scenarios/README.md states."""
    stories = (ROOT / "scenarios" / "README.md").read_text()
    quoted = [n for s in demo.SCENARIOS for n in re.findall(r"\d[\d,]*\d|\d", s.title)]
    assert len(quoted) >= 8
    assert [n for n in quoted if n not in stories] == []


def test_list_names_every_scenario(capsys: pytest.CaptureFixture[str]) -> None:
    """`demo --list` prints every scenario's name and file."""
    assert main(["demo", "--list"]) == 0
    shown = capsys.readouterr().out
    for scenario in demo.SCENARIOS:
        assert scenario.name in shown and scenario.source in shown


def test_unknown_scenario_is_one_line_and_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    """An unknown name exits 2 with one line naming the choices."""
    assert main(["demo", "nowhere"]) == 2
    message = capsys.readouterr().err.strip()
    assert "nowhere" in message and "boiler" in message and "\n" not in message


def _case(name: str) -> Any:
    return pytest.param(name, marks=[pytest.mark.thorough] if name in HEAVY else [])


@pytest.mark.parametrize("name", [_case(s.name) for s in demo.SCENARIOS])
def test_headless_demo_succeeds(
    name: str, own_cache: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """`demo NAME --headless` makes, checks and explains the trail, then reuses the cache."""
    assert main(["demo", name, "--headless"]) == 0
    first = capsys.readouterr().out
    assert "$ prunetrail check" in first and "$ prunetrail why" in first
    assert "trail cached at" in first
    cached = list((own_cache / "demo").glob(f"{name}-*.trail"))
    assert len(cached) == 1
    assert open_trail(cached[0]).end is not None
    assert main(["demo", name, "--headless"]) == 0
    assert f"cached trail: {cached[0]}" in capsys.readouterr().out


def test_broken_demo_says_the_check_failed_and_why(capsys: pytest.CaptureFixture[str]) -> None:
    """The default demo's summaries show wrong partial lengths and the cut optimal branch."""
    assert main(["demo", "--headless"]) == 0
    shown = capsys.readouterr().out
    assert "54 of 64 records are wrong" in shown
    assert "culprit: partial" in shown
    assert re.search(r"to look at it: prunetrail view \S+boiler-\w+\.trail --at 20\n", shown)


def test_demo_without_a_terminal_is_headless(own_cache: Path) -> None:
    """With stdin and stdout not a terminal, `prunetrail demo` prints and exits by itself."""
    done = subprocess.run(
        [sys.executable, "-c", "import sys; from tui.cli import main; sys.exit(main())", "demo"],
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=300,  # a hang guard, not a timing assertion
        env={**os.environ, demo.CACHE_ENV: str(own_cache)},
        check=False,
    )
    assert done.returncode == 0, done.stderr
    assert "$ prunetrail why" in done.stdout


def test_viewer_opens_at_the_cut_node_of_the_optimal_branch(
    monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    """With a terminal, the default demo opens the viewer at a pruned node on the optimal tour."""
    opened: dict[str, Any] = {}

    class Viewer:
        def __init__(self, path: Path, at: int | None = None, **_: Any) -> None:
            opened.update(path=path, at=at)

        def run(self) -> None:
            opened["ran"] = True

    monkeypatch.setattr(tui.app, "PrunetrailApp", Viewer)
    monkeypatch.setattr(sys.stdin, "isatty", lambda: True, raising=False)
    monkeypatch.setattr(sys.stdout, "isatty", lambda: True, raising=False)
    assert main(["demo"]) == 0
    assert opened.get("ran")
    trail = open_trail(opened["path"])
    index = TreeIndex(trail.columns, trail.best)
    node = opened["at"]
    assert trail.columns[DECISION][node] == DECISION_BY_NAME["prune"]
    path = [int(c) for c in index.path(node)]
    # The cut node's path is the start of a tour as short as the optimum (Held-Karp).
    matrix = trail.header.instance.matrix
    optimum = held_karp(matrix)
    assert len(path) < trail.header.instance.n and optimum == 1495
    tour = [0, 3, 11, 6, 2, 7, 9, 8, 5, 4, 1, 10]  # the fixed solver's optimal tour
    assert sum(matrix[a, b] for a, b in zip(tour, tour[1:] + tour[:1], strict=True)) == optimum
    assert tour[: len(path)] == path or tour[:1] + tour[:0:-1][: len(path) - 1] == path
