"""The streaming re-check and per-depth figures equal the in-memory ones, exactly.

Every kind of trail of the normal test run is checked both ways at several block sizes and
window sizes, so blocks and windows cut the tree everywhere: clean and planted-fault
trails, hand-spoiled records (partials whose errors run down and sideways, structure
errors, bad best frames), imported JSON Lines traces (with a visit order of their own),
truncated files, penalties trails, and random trees drawn by hypothesis.
"""

from __future__ import annotations

import dataclasses
import itertools
import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.foreign_traces import solve_to_trail, write_jsonl
from tracer.analysis import (
    RecheckReport,
    TreeIndex,
    completion_table,
    depth_stats,
    explain,
    recheck,
    stream_explain,
    stream_recheck,
    stream_stats,
    values_at,
    windows,
)
from tracer.base import (
    CITY,
    DECISION,
    DEPTH,
    PARTIAL,
    TREE,
    Decision,
    Instance,
    Trail,
    memory_blocks,
)
from tracer.cli import main
from tracer.cli.check import open_sized
from tracer.search.driver import SearchSettings
from tracer.search.faults import FAULTS
from tracer.trails import BlockFile
from tracer.trails.jsonl import read_jsonl
from tracer.trails.reader import read_trail
from tracer.trails.writer import TrailWriter

LoadReference = Callable[[str], Instance]
#: (block size, window rows): blocks smaller, equal and larger than the windows.
CUTS = [(1, 5), (7, 64), (64, 7), (4096, None), (1000, 333)]


@pytest.fixture(scope="module")
def solved(
    load_reference: LoadReference, tmp_path_factory: pytest.TempPathFactory
) -> Callable[..., Trail]:
    """Solve an instance into a trail file and read it back (cached per module)."""
    cache: dict[tuple[Any, ...], Trail] = {}
    folder = tmp_path_factory.mktemp("streaming")

    def run(name: str, **settings_: Any) -> Trail:
        key = (name, *sorted(settings_.items()))
        if key not in cache:
            path = folder / f"s{len(cache)}.trail"
            cache[key] = solve_to_trail(load_reference(name), path, SearchSettings(**settings_))
        return cache[key]

    return run


def _copy(trail: Trail) -> Trail:
    """A trail whose columns and frames can be changed without touching the original."""
    columns = {name: values.copy() for name, values in trail.columns.items()}
    return dataclasses.replace(trail, columns=columns, best=list(trail.best))


def _same_report(streamed: RecheckReport, whole: RecheckReport) -> None:
    """Two re-check reports are equal in every field, ids and findings in order included."""
    assert json.dumps(streamed.to_json()) == json.dumps(whole.to_json())
    assert streamed.knock_ons == whole.knock_ons
    assert np.array_equal(streamed.wrong_ids, whole.wrong_ids)
    assert np.array_equal(streamed.missed_ids, whole.missed_ids)
    assert streamed.first == whole.first


def _check_both(trail: Trail, cuts: list[tuple[int, int | None]] = CUTS, **kw: Any) -> None:
    """The streaming re-check equals `recheck` at every block and window size given."""
    whole = recheck(trail, **kw)
    for size, rows in cuts:
        _same_report(stream_recheck(memory_blocks(trail, size), rows=rows, **kw), whole)


def _same_stats(trail: Trail, table: Any = None) -> None:
    """The streamed per-depth figures equal `depth_stats`, to the last bit."""
    index = TreeIndex(trail.columns, trail.best)
    from tracer.analysis import best_completions

    completions = best_completions(trail, index, table) if table is not None else None
    whole = depth_stats(trail, completions)
    for size in (1, 7, 4096):
        if size == 1 and trail.count > 20_000:
            continue
        got = stream_stats(memory_blocks(trail, size), table)
        assert json.dumps(got.to_json()) == json.dumps(whole.to_json())
        for name in ("decisions", "bound_evaluations", "tightness_mean", "tightness_worst"):
            assert np.array_equal(getattr(got, name), getattr(whole, name), equal_nan=True)


# -- clean and planted-fault trails ------------------------------------------------------


def test_clean_trail_and_stats(solved: Callable[..., Trail]) -> None:
    """A clean trail checks clean both ways, and its figures are the same both ways."""
    trail = solved("burma14", cutoff=2, max_nodes=6_000)
    assert recheck(trail).ok
    _check_both(trail)
    _same_stats(trail)
    _same_stats(trail, completion_table(trail.header.instance))


@pytest.mark.parametrize("fault", sorted(FAULTS))
def test_planted_faults(solved: Callable[..., Trail], fault: str) -> None:
    """Every planted fault gives the same findings, roots, knock-ons and missed prunes."""
    bound = "penalties" if fault == "penalty-once" else "tree+links"
    trail = solved("burma14", cutoff=3, max_nodes=8_000, fault=fault, bound=bound)
    report = recheck(trail)
    assert not report.ok  # the fault is found, so the comparison covers findings
    _check_both(trail, [(1, 5), (64, 7), (4096, None)])
    _check_both(trail, [(333, None)], strict=True, first=3)
    _same_stats(trail)


def test_penalties_trail(solved: Callable[..., Trail]) -> None:
    """A clean penalties trail (π rows, penalty term) checks the same both ways."""
    trail = solved("burma14", cutoff=3, max_nodes=5_000, bound="penalties")
    _check_both(trail, [(1, 5), (64, 7), (4096, None)])
    _same_stats(trail)


def test_decisions_only_trail(solved: Callable[..., Trail]) -> None:
    """A trail of decisions alone checks and counts the same both ways."""
    trail = solved("ulysses16", cutoff=1, max_nodes=8_000, record="decisions")
    _check_both(trail, [(7, 64), (4096, None)])
    _same_stats(trail)


# -- hand-spoiled records ------------------------------------------------------------------


def test_partial_errors_down_and_sideways(solved: Callable[..., Trail]) -> None:
    """Spoiled partials (knock-ons below and beside them), trees and decisions: the same
    root findings, knock-on counts and findings, whatever cuts the tree."""
    trail = _copy(solved("ulysses16", cutoff=1, max_nodes=8_000))
    rng = np.random.default_rng(4)
    index = TreeIndex(trail.columns, trail.best)
    for node in rng.choice(np.arange(1, trail.count), size=40, replace=False):
        # the node, its later siblings and all their subtrees: errors down and sideways
        trail.columns[PARTIAL][node : index.end[index.parent[node]]] += 3
    trail.columns[TREE][rng.choice(trail.count, size=40, replace=False)] += 1
    flip = rng.choice(trail.count, size=30, replace=False)
    trail.columns[DECISION][flip] = Decision.PRUNE
    report = recheck(trail, first=50)
    assert report.knock_on_count > 0 and report.roots > 0
    _check_both(trail, first=50)
    _check_both(trail, [(7, 64)], first=0)


def test_structure_errors(solved: Callable[..., Trail]) -> None:
    """Depth jumps (orphans), a second root, a wrong first record and repeated cities."""
    trail = _copy(solved("burma14", cutoff=2, max_nodes=6_000))
    depth, city = trail.columns[DEPTH], trail.columns[CITY]
    rng = np.random.default_rng(8)
    for node in rng.choice(np.arange(1, trail.count), size=25, replace=False):
        depth[node] = min(int(depth[node]) + 2, trail.n - 1)
    depth[rng.choice(np.arange(1, trail.count), size=3, replace=False)] = 0
    for node in rng.choice(np.arange(2, trail.count), size=25, replace=False):
        city[node] = city[node - 1]
    report = recheck(trail)
    assert report.by_kind["structure"] > 0
    _check_both(trail)
    _same_stats(trail)
    first_off = _copy(trail)
    first_off.columns[DEPTH][0] = 3
    first_off.columns[CITY][0] = 4
    _check_both(first_off, [(1, 5), (64, 7)])


def test_bad_best_frames(solved: Callable[..., Trail]) -> None:
    """Frames that do not improve, name a wrong node or a wrong tour, or lack a node."""
    trail = _copy(solved("burma14", cutoff=2, max_nodes=6_000))
    last = trail.best[-1]
    trail.best.append(dataclasses.replace(last, node=-1, at=last.at + 5))
    trail.best.append(dataclasses.replace(last, node=3, at=3, length=last.length - 1))
    trail.best.append(dataclasses.replace(last, tour=last.tour[::-1], at=trail.count + 9))
    better = np.flatnonzero(trail.columns[DECISION] == Decision.TOUR_BETTER)
    trail.best[:] = [b for b in trail.best if b.node != int(better[0])]
    assert not recheck(trail).ok
    _check_both(trail)
    _same_stats(trail)


def test_id_ranges(solved: Callable[..., Trail]) -> None:
    """A range check streams the same report as the in-memory range check."""
    trail = _copy(solved("burma14", cutoff=2, max_nodes=6_000))
    trail.columns[PARTIAL][::97] += 1
    for start, stop in ((0, 1), (500, 4321), (5000, None), (trail.count, None)):
        _check_both(trail, [(64, 7), (1000, 333)], start=start, stop=stop)


# -- imported and truncated trails ---------------------------------------------------------


def test_imported_jsonl_trace(solved: Callable[..., Trail], tmp_path: Path) -> None:
    """A JSON Lines trace from a foreign solver (own ids, source lines) streams the same."""
    trail = solved("burma14", cutoff=2, max_nodes=6_000)
    write_jsonl(trail, tmp_path / "t.jsonl")
    imported = _copy(read_jsonl(tmp_path / "t.jsonl"))
    imported.columns[PARTIAL][100::500] += 2
    _check_both(imported)
    _same_stats(imported)


def test_visit_order_trace(tmp_path: Path) -> None:
    """A best-first trace (a visit column, frames placed by visit position) streams the same."""
    trail = _best_first_trace(tmp_path)
    assert trail.header.solver.visit_order
    _check_both(trail)
    _same_stats(trail)


def _best_first_trace(tmp_path: Path) -> Trail:
    """A JSON Lines trace of a search that expands open paths in random order."""
    rng = np.random.default_rng(2)
    n = 6
    d = rng.integers(1, 50, size=(n, n))
    d = (d + d.T) // 2
    np.fill_diagonal(d, 0)
    lines: list[dict[str, Any]] = [
        {"kind": "header", "instance": {"matrix": d.tolist()}, "solver": {"bound": "own"}},
        {"kind": "best", "id": None, "length": 10_000, "tour": list(range(n))},
    ]
    paths: list[list[int]] = [[0]]
    waiting = [[0]]
    ids = itertools.count()
    id_of = {(0,): next(ids)}
    lines.append({"kind": "node", "id": 0, "parent": None, "city": 0, "partial": 0})
    lines[-1]["decision"] = "expand"
    best = 10_000
    while waiting and len(paths) < 400:
        parent = waiting.pop(int(rng.integers(len(waiting))))
        for c in sorted(set(range(n)) - set(parent)):
            path = [*parent, c]
            ident = next(ids)
            id_of[tuple(path)] = ident
            partial = int(sum(d[a, b] for a, b in itertools.pairwise(path)))
            line: dict[str, Any] = {
                "kind": "node",
                "id": ident,
                "parent": id_of[tuple(parent)],
                "city": c,
                "partial": partial,
            }
            if len(path) == n:
                length = partial + int(d[c, 0])
                line["length"] = length
                line["decision"] = "tour_better" if length < best else "tour"
                lines.append(line)
                if length < best:
                    best = length
                    lines.append({"kind": "best", "id": ident, "length": length, "tour": path})
            else:
                line["decision"] = "skip" if rng.random() < 0.8 else "expand"
                lines.append(line)
                waiting.append(path)
            paths.append(path)
    lines.append({"kind": "end", "status": "limit"})
    (tmp_path / "bf.jsonl").write_text("".join(json.dumps(x) + "\n" for x in lines))
    return read_jsonl(tmp_path / "bf.jsonl")


def test_truncated_file(solved: Callable[..., Trail], tmp_path: Path) -> None:
    """A trail file cut short (no end frame, a notice) streams the same report."""
    whole = solved("burma14", cutoff=2, max_nodes=6_000)
    source = tmp_path / "blocks.trail"
    with TrailWriter(source, whole.header) as writer:  # many small nodes frames
        frames = sorted(whole.best, key=lambda b: b.at)
        for lo in range(0, whole.count, 500):
            while frames and frames[0].at < lo + 500:
                writer.write_best(frames.pop(0))
            writer.write_nodes({k: v[lo : lo + 500] for k, v in whole.columns.items()})
    data = source.read_bytes()
    cut = tmp_path / "cut.trail"
    for keep in (len(data) * 2 // 3, len(data) - 3):  # inside a nodes frame, at the end
        cut.write_bytes(data[:keep])
        trail = _copy(read_trail(cut))
        assert trail.notice is not None and trail.end is None and trail.count > 0
        trail.columns[PARTIAL][::1999] += 1
        _check_both(trail, [(4096, None), (7000, 333)])
        _same_stats(trail)


def test_empty_trail(solved: Callable[..., Trail]) -> None:
    """A trail without records gives the same (empty) report and figures both ways."""
    trail = solved("burma14", cutoff=2, max_nodes=6_000)
    empty = dataclasses.replace(trail, columns={k: v[:0] for k, v in trail.columns.items()})
    _check_both(empty, [(7, 64)])
    _same_stats(empty)


# -- why -------------------------------------------------------------------------------------


def _same_why(trail: Trail, tour: list[int] | None, table: Any) -> None:
    """`stream_explain` gives the report `explain` gives, at several block and window sizes."""
    whole = explain(trail, TreeIndex(trail.columns, trail.best), tour=tour, table=table)
    for size, rows in ((1, 5), (777, 300), (4096, None)):
        if size == 1 and trail.count > 20_000:
            continue
        got = stream_explain(memory_blocks(trail, size), tour=tour, table=table, rows=rows)
        assert got.to_json() == whole.to_json()


@pytest.mark.parametrize("fault", [None, "tree-spans-ends", "squared-lengths", "penalty-once"])
def test_why(solved: Callable[..., Trail], fault: str | None) -> None:
    """Where the optimal tour's branch was cut, and why: the same with and without the
    oracle, for either direction of the tour, clean or faulty."""
    bound = "penalties" if fault == "penalty-once" else "tree+links"
    trail = solved("burma14", cutoff=1, fault=fault, bound=bound, max_nodes=400_000)
    table = completion_table(trail.header.instance)
    tour = list(trail.best[-1].tour)
    _same_why(trail, None, table)
    _same_why(trail, tour[::-1], None)


def test_why_on_a_cut_trail(solved: Callable[..., Trail]) -> None:
    """A trail that stops inside the branch's subtree says so, streamed or not."""
    whole = solved("burma14", cutoff=1, max_nodes=400_000)
    cut = dataclasses.replace(
        whole, columns={k: v[: whole.count // 3] for k, v in whole.columns.items()}, end=None
    )
    table = completion_table(whole.header.instance)
    report = explain(cut, TreeIndex(cut.columns, cut.best), tour=None, table=table)
    assert "stops" in report.explanation
    _same_why(cut, None, table)


def test_why_on_a_visit_order_trace(tmp_path: Path) -> None:
    """A best-first trace's branch and verdict are the same streamed (visit positions)."""
    trail = _best_first_trace(tmp_path)
    table = completion_table(trail.header.instance)
    _same_why(trail, None, table)


# -- the commands --------------------------------------------------------------------------


@pytest.mark.parametrize("command", ["check", "stats", "why"])
def test_commands_print_the_same_streamed(
    solved: Callable[..., Trail], capsys: pytest.CaptureFixture[str], command: str
) -> None:
    """check, stats and why print the same text and JSON whether the trail is read whole
    or, under a 1 MB --memory-mb, block by block."""
    path = solved("ulysses16", cutoff=2, fault="tree-spans-ends", max_nodes=60_000).path
    streamed = open_sized(path, 1)
    assert isinstance(streamed, BlockFile)  # 1 MB is too little: the blocks are streamed
    streamed.close()
    assert isinstance(open_sized(path, 4096), Trail)
    for extra in ([], ["--json"]):
        printed = []
        for memory in ("4096", "1"):
            status = main([command, path, *extra, "--memory-mb", memory])
            printed.append((status, capsys.readouterr().out))
        assert printed[0] == printed[1]
        assert printed[0][1]


# -- the windows themselves ----------------------------------------------------------------


def test_windows_carry_the_path(solved: Callable[..., Trail]) -> None:
    """Each window carries exactly the path of the record before it (which holds its
    first record's parent), windows tile the trail, and a window holds its rows, that
    path and one record of lookahead."""
    trail = solved("burma14", cutoff=2, max_nodes=6_000)
    index = TreeIndex(trail.columns, trail.best)
    seen = 0
    for window in windows(memory_blocks(trail, 333), 100):
        assert window.first == seen
        carried = window.ids[: window.seeded].tolist()
        assert carried == (index.ancestors(seen - 1) if seen else [])
        assert index.parent[seen] < 0 or int(index.parent[seen]) in carried
        assert window.trail.count <= window.count + trail.n + 1
        seen += window.count
    assert seen == trail.count


def test_values_at(solved: Callable[..., Trail]) -> None:
    """values_at reads the named columns at the ids asked for, from the blocks."""
    trail = solved("burma14", cutoff=2, max_nodes=6_000)
    ids = [0, 5, 4095, 4096, trail.count - 1]
    got = values_at(memory_blocks(trail, 4096), ids, [CITY, DEPTH])
    assert got == {
        i: {CITY: int(trail.columns[CITY][i]), DEPTH: int(trail.columns[DEPTH][i])} for i in ids
    }


# -- random trees ---------------------------------------------------------------------------


@st.composite
def _random_trails(draw: st.DrawFn, base: Trail) -> Trail:
    """A random sequence of records over the base trail's header: depths that step down
    anywhere and up by one (sometimes two: an orphan), cities, decisions and partials."""
    count = draw(st.integers(1, 120))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    n = base.n
    depth = np.zeros(count, dtype=np.int64)
    for i in range(1, count):
        step = rng.choice([-3, -1, 0, 1, 1, 1, 2])
        depth[i] = int(np.clip(depth[i - 1] + step, 0, n - 1))
    columns = {}
    for name, values in base.columns.items():
        pick = rng.integers(0, base.count, size=count)
        columns[name] = values[pick].copy()
    columns[DEPTH] = depth.astype(base.columns[DEPTH].dtype)
    columns[CITY] = rng.integers(0, n, size=count).astype(base.columns[CITY].dtype)
    columns[DECISION] = rng.integers(0, 5, size=count).astype(base.columns[DECISION].dtype)
    return dataclasses.replace(base, columns=columns, best=list(base.best))


@settings(max_examples=40, deadline=None)
@given(data=st.data(), size=st.integers(1, 40), rows=st.integers(1, 50))
def test_random_trees(
    load_reference: LoadReference,
    tmp_path_factory: pytest.TempPathFactory,
    data: Any,
    size: int,
    rows: int,
) -> None:
    """On random record sequences the streamed report and figures equal the in-memory ones."""
    base = _BASE.get("trail")
    if base is None:
        path = tmp_path_factory.mktemp("random") / "base.trail"
        base = solve_to_trail(
            load_reference("burma14"), path, SearchSettings(cutoff=2, max_nodes=3000)
        )
        _BASE["trail"] = base
    trail = data.draw(_random_trails(base))
    whole = recheck(trail, first=7)
    _same_report(stream_recheck(memory_blocks(trail, size), rows=rows, first=7), whole)
    figures = depth_stats(trail)
    assert stream_stats(memory_blocks(trail, size)).to_json() == figures.to_json()


_BASE: dict[str, Trail] = {}
