"""`check` as a diagnosis: root findings apart from knock-ons, decisions with their arithmetic,
hints where a pattern is certain, missed prunes apart from wrong records.

Every trace comes from a small depth-first branch and bound written in this file (its own
Prim, its own links), with one realistic bug switched on at a time, printed as JSON Lines.
Optimal tours come from brute force over permutations.
"""

from __future__ import annotations

import itertools
import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from tracer.analysis import TreeIndex, recheck
from tracer.base import Decision
from tracer.cli import check as check_command
from tracer.cli import main
from tracer.trails import open_trail


def _matrix(n: int, seed: int) -> np.ndarray:
    """Rounded Euclidean distances between n seeded cities (TSPLIB's EUC_2D rule)."""
    xy = np.random.default_rng(seed).uniform(0.0, 100.0, size=(n, 2))
    diff = xy[:, None, :] - xy[None, :, :]
    return np.floor(np.sqrt((diff**2).sum(axis=2)) + 0.5).astype(int)


def _prim(d: np.ndarray, cities: list[int]) -> int:
    """Minimum spanning tree weight over `cities` (plain Prim)."""
    if len(cities) < 2:
        return 0
    inside, total = {cities[0]}, 0
    while len(inside) < len(cities):
        w, c = min((int(d[a, b]), b) for a in inside for b in cities if b not in inside)
        inside.add(c)
        total += w
    return total


def _optimal(d: np.ndarray) -> tuple[list[int], int]:
    n = len(d)
    best = min(
        itertools.permutations(range(1, n)),
        key=lambda p: sum(d[a, b] for a, b in itertools.pairwise((0, *p, 0))),
    )
    tour = [0, *best]
    return tour, int(sum(d[a, b] for a, b in itertools.pairwise((*tour, 0))))


def _solve(
    path: Path,
    d: np.ndarray,
    *,
    keep_length: bool = False,
    cache_too_early: bool = False,
    strictly_greater: bool = False,
    start: str = "declared",
) -> Path:
    """Depth-first tree+links branch and bound (cutoff 0) written as a JSON Lines trace.

    Args:
        keep_length: the running length is not restored after a pruned child.
        cache_too_early: the tree cache is keyed by the parent's visited set, not the
            node's (siblings share the first sibling's tree).
        strictly_greater: prune only when bound > incumbent (not >=).
        start: "declared" (the optimal tour as a `best` line with a null id), "hidden"
            (used as the incumbent but never written), or "none".
    """
    n = len(d)
    tour, optimum = _optimal(d)
    lines: list[dict[str, Any]] = [
        {
            "kind": "header",
            "instance": {"name": "diag", "matrix": d.tolist()},
            "solver": {"bound": "tree+links", "cutoff": 0},
        }
    ]
    incumbent = [float(optimum) if start != "none" else float("inf")]
    if start == "declared":
        lines.append({"kind": "best", "id": None, "length": optimum, "tour": tour})
    ids = itertools.count()
    cache: dict[frozenset[int], int] = {}
    running = [0]

    def visit(path_: list[int], parent: int | None) -> str:
        ident = next(ids)
        node: dict[str, Any] = {"kind": "node", "id": ident, "parent": parent}
        node.update(city=path_[-1], partial=running[0])
        left = sorted(set(range(n)) - set(path_))
        if not left:
            length = running[0] + int(d[path_[-1], 0])
            better = length < incumbent[0]
            lines.append(
                {**node, "decision": "tour_better" if better else "tour", "length": length}
            )
            if better:
                incumbent[0] = length
                lines.append({"kind": "best", "id": ident, "length": length, "tour": path_})
            return "tour"
        key = frozenset(path_[:-1] if cache_too_early else path_)
        if key not in cache:
            cache[key] = _prim(d, left)
        tree = cache[key]
        c_in = min(left, key=lambda c: (d[path_[-1], c], c))
        c_out = min(left, key=lambda c: (d[c, 0], c))
        bound = running[0] + tree + int(d[path_[-1], c_in]) + int(d[c_out, 0])
        node.update(tree=tree, link_in=[c_in, int(d[path_[-1], c_in])])
        node["link_out"] = [c_out, int(d[c_out, 0])]
        cut = bound > incumbent[0] if strictly_greater else bound >= incumbent[0]
        if cut:
            lines.append({**node, "decision": "prune"})
            return "prune"
        lines.append({**node, "decision": "expand"})
        for city in sorted(left, key=lambda c: (d[path_[-1], c], c)):
            step = int(d[path_[-1], city])
            running[0] += step
            outcome = visit([*path_, city], ident)
            if not (keep_length and outcome == "prune"):
                running[0] -= step
        return "expand"

    visit([0], None)
    lines.append({"kind": "end", "status": "complete"})
    path.write_text("".join(json.dumps(line) + "\n" for line in lines), encoding="utf-8")
    return path


def test_clean_solver_checks(tmp_path: Path) -> None:
    """The test's own solver without bugs: every record checks, no roots, no missed prunes."""
    trail = open_trail(_solve(tmp_path / "clean.jsonl", _matrix(8, 1)))
    report = recheck(trail)
    assert report.ok and report.roots == 0 and report.missed_prunes == 0


def test_length_not_restored_is_one_root_per_sibling_chain(tmp_path: Path) -> None:
    """A running length not restored after a prune: few roots, the rest knock-ons of them.

    The first root is a partial off by exactly the edge to the pruned previous sibling
    (hint), and every knock-on names the node of a root finding at or before it.
    """
    trail = open_trail(_solve(tmp_path / "len.jsonl", _matrix(8, 2), keep_length=True))
    report = recheck(trail, first=200)
    assert report.wrong > 0
    assert 0 < report.roots < report.wrong
    assert sum(report.knock_ons.values()) > 0
    first_root = report.first_roots[0]
    assert first_root.kind == "partial" and first_root.root and first_root.root_id is None
    assert first_root.hint == (
        "the partial exceeds the true one by exactly the edge to the previous sibling"
    )
    roots = {f.id for f in report.first_roots}
    assert len(report.first_roots) == report.roots
    for f in report.first:
        if not f.root:
            assert f.root_id is not None and f.root_id <= f.id
            assert f.root_id in roots


def test_tree_cache_keyed_too_early(tmp_path: Path) -> None:
    """A tree cache keyed one city too early: a wrong tree equal to the previous sibling's
    gets the hint, and decisions taken on wrong trees are knock-ons of the same node."""
    trail = open_trail(_solve(tmp_path / "cache.jsonl", _matrix(8, 3), cache_too_early=True))
    report = recheck(trail, first=400)
    trees = [f for f in report.first_roots if f.kind == "tree"]
    hinted = [f for f in trees if f.hint == "this tree weight equals the previous sibling's"]
    assert hinted
    index = TreeIndex(trail.columns, trail.best)
    for f in hinted:
        siblings = index.children(int(index.parent[f.id]))
        before = siblings[siblings.index(f.id) - 1]
        assert trail.columns["tree"][before] == f.recorded
    knocked = [f for f in report.first if f.kind == "decision" and not f.root]
    assert all(f.root_id == f.id for f in knocked)


def test_prune_rule_with_greater_than(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """`>` for `>=`: missed prunes, shown apart with both equal numbers and the hint; exit 0,
    and 1 with --strict."""
    trace = _solve(tmp_path / "gt.jsonl", _matrix(7, 4), strictly_greater=True)
    report = recheck(open_trail(trace))
    assert report.ok and report.missed_prunes > 0
    missed = report.first_missed[0]
    assert missed.numbers is not None
    assert missed.numbers["bound"] == missed.numbers["incumbent"]
    assert missed.numbers["rule"] == "prune when bound >= incumbent"
    assert missed.hint == "the bound equals the incumbent: the prune rule may use > instead of >="
    assert main(["check", str(trace), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["missed_prunes"] == report.missed_prunes and data["wrong"] == 0
    assert main(["check", str(trace), "--json", "--strict"]) == 1
    strict = json.loads(capsys.readouterr().out)
    assert strict["wrong"] == report.missed_prunes and strict["by_kind"]["decision"] > 0
    assert strict["first"][0]["hint"] == missed.hint


def test_undeclared_start_tour(tmp_path: Path) -> None:
    """Prunes against a start tour the trace never declared: wrong decisions with the hint,
    and each shows its arithmetic (no incumbent in force)."""
    trace = _solve(tmp_path / "hidden.jsonl", _matrix(7, 5), start="hidden")
    report = recheck(open_trail(trace))
    decisions = [f for f in report.first if f.kind == "decision"]
    assert decisions and decisions[0].recorded == "prune"
    first = decisions[0]
    assert first.root
    assert first.hint is not None and "lack its start tour" in first.hint
    assert first.numbers is not None and first.numbers["incumbent"] is None
    assert "incumbent none" in first.detail


def test_json_roots_and_fields(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """--json: `roots` beside `wrong`; each finding has `root` and, for a knock-on, `root_id`."""
    trace = _solve(tmp_path / "len.jsonl", _matrix(8, 2), keep_length=True)
    assert main(["check", str(trace), "--json", "--first", "50"]) == 1
    data = json.loads(capsys.readouterr().out)
    assert 0 < data["roots"] < data["wrong"]
    assert all("root" in f and "root_id" in f for f in data["first"])
    assert any(not f["root"] and isinstance(f["root_id"], int) for f in data["first"])
    assert all(f["root"] for f in data["first_roots"])
    assert sum(f["knock_ons"] for f in data["first_roots"]) > 0


def test_human_table_fits_80_columns(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """The text report at 80 columns: no line wider, and every finding one table line."""
    trace = _solve(tmp_path / "cache.jsonl", _matrix(8, 3), cache_too_early=True)
    monkeypatch.setattr(check_command.out, "width", 80)
    assert main(["check", str(trace), "--first", "8"]) == 1
    text = capsys.readouterr().out
    lines = text.splitlines()
    assert max(len(line) for line in lines) <= 80
    assert "root findings" in text and "knock-ons" in text
    ids = [line.split()[0] for line in lines if line[:1].isdigit()]
    assert len(ids) == len(set(ids)) or len(ids) >= 8  # one line a finding, no wrapped tails
    rows = [line for line in lines if line.strip() and line.split()[0].isdigit()]
    assert all(len(row.split()) >= 5 for row in rows)


def test_missed_prunes_on_a_decision_only_case(tmp_path: Path) -> None:
    """An expand at a node whose recomputed bound reached the incumbent is a missed prune,
    not a wrong record; a prune below the incumbent stays wrong."""
    trace = _solve(tmp_path / "clean.jsonl", _matrix(7, 6))
    trail = open_trail(trace)
    pruned = np.flatnonzero(trail.columns["decision"] == Decision.PRUNE)
    leafy = [int(p) for p in pruned if TreeIndex(trail.columns, trail.best).end[p] == p + 1]
    assert leafy
    trail.columns["decision"][leafy[0]] = Decision.EXPAND
    report = recheck(trail)
    assert report.ok and report.missed_prunes == 1
    assert report.missed_ids.tolist() == [leafy[0]]
    expanded = np.flatnonzero(trail.columns["decision"] == Decision.EXPAND)
    trail.columns["decision"][expanded[-1]] = Decision.PRUNE
    assert recheck(trail).wrong >= 1
