"""The viewer's block-by-block path: every answer equals the in-memory trail's and index's.

Trails of each kind the normal run holds (clean, planted faults, a penalties trail with its
π rows, an imported JSON Lines trace, a best-first trace with a visit order, records whose
depths jump levels, a file cut short) are rewritten in small node blocks so every question
crosses block edges, opened with `open_blocks` through a small cache, and asked the same
questions as `read_trail` and `TreeIndex`; then the viewer's model and the app itself
(`PrunetrailApp(path, memory_mb=1)`) are compared with the in-memory viewer on the same file.
"""

from __future__ import annotations

import functools
import math
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import tui.app
import tui.loading
import tui.model
from tests.foreign_traces import write_jsonl
from tests.live import live_run
from tests.test_blocks import _orphans, _read, rewrite, solve
from tests.test_streaming import _best_first_trace
from tests.test_viewer_panels import _text
from tracer.analysis import (
    FilterError,
    LazyTreeIndex,
    TreeIndex,
    completion_table,
    depth_stats,
    explain,
    kept_ids,
    kept_range,
    lazy_view,
    next_match,
    parse_filter,
    parse_stops,
    recheck,
    recompute_node,
)
from tracer.base import DECISION_NAMES, ORPHAN, Trail
from tracer.trails import BlockFile, LazyColumn, open_blocks
from tracer.trails.jsonl import import_jsonl
from tracer.trails.reader import read_trail
from tui.app import PrunetrailApp
from tui.loading import open_for_viewing
from tui.model import OPEN, ViewerModel

#: Cache of decoded columns for the lazy files here: a few blocks, so blocks are evicted.
CACHE = 1 << 14
SIZE = (150, 44)
KINDS = ["clean", "fault", "penalties", "imported", "visit", "orphans", "cut"]


@pytest.fixture(scope="module")
def trails(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """One trail file of each kind, in node blocks of a few hundred or thousand records."""
    root = tmp_path_factory.mktemp("lazy")
    made = root / "made"
    made.mkdir()
    clean = read_trail(solve(made / "clean.trail", "burma14", cutoff=2, max_nodes=40_000))
    fault = solve(
        made / "fault.trail", "burma14", cutoff=3, max_nodes=40_000, fault="tree-positions"
    )
    penalties = solve(
        made / "pen.trail", "burma14", cutoff=3, bound="penalties", fault="penalty-once"
    )
    write_jsonl(clean, made / "clean.jsonl")
    imported = import_jsonl(made / "clean.jsonl", made / "imported.trail")
    _best_first_trace(made)  # writes made/bf.jsonl
    visit = import_jsonl(made / "bf.jsonl", made / "visit.trail")
    out = {
        "clean": rewrite(clean, root / "clean.trail", 997),
        "fault": rewrite(read_trail(fault), root / "fault.trail", 1000),
        "penalties": rewrite(read_trail(penalties), root / "penalties.trail", 37),
        "imported": rewrite(imported, root / "imported.trail", 1009),
        "visit": rewrite(visit, root / "visit.trail", 13),
        "orphans": _orphans(root / "orphans.trail", clean),
    }
    data = out["fault"].read_bytes()
    out["cut"] = root / "cut.trail"
    out["cut"].write_bytes(data[: len(data) * 2 // 3])
    return out


@pytest.fixture(scope="module")
def memory(trails: dict[str, Path]) -> dict[str, tuple[Trail, TreeIndex]]:
    """Each trail read whole, with its in-memory tree index."""
    out = {}
    for kind, path in trails.items():
        trail = _read(path)
        out[kind] = (trail, TreeIndex(trail.columns, trail.best))
    return out


@pytest.fixture
def lazy(trails: dict[str, Path]) -> Iterator[Any]:
    """Open a trail block by block (small cache) as (file, trail, index); closed after."""
    opened: list[BlockFile] = []

    def open_(kind: str) -> tuple[BlockFile, Trail, LazyTreeIndex]:
        file = open_blocks(trails[kind], cache_bytes=CACHE)
        opened.append(file)
        trail, index = lazy_view(file)
        return file, trail, index

    yield open_
    for file in opened:
        assert file.cache_peak <= file.cache_limit
        file.close()


def _edges(file: BlockFile) -> list[int]:
    """Every block's first id, and the id before it."""
    first = file.index.values("first").tolist()
    return sorted({i for f in first for i in (f - 1, f) if 0 <= i < file.count})


def _sample(file: BlockFile, index: TreeIndex, size: int, seed: int = 1) -> list[int]:
    """First and last ids, some block edges, some orphans and random ids."""
    rng = np.random.default_rng(seed)
    count = index.count
    edges = _edges(file)
    orphans = np.flatnonzero(np.asarray(index.parent) == ORPHAN).tolist()
    picked = [0, count - 1, *edges[:: max(1, len(edges) // 12)], *orphans[:12]]
    picked += rng.integers(0, count, size).tolist()
    return sorted(set(picked))


def _same_array(name: str, got: Any, want: Any, what: object) -> None:
    """A lazy read equals the array's: the same dtype, shape and values (NaN equal)."""
    got, want = np.asarray(got), np.asarray(want)
    assert got.dtype == want.dtype and got.shape == want.shape, (name, what)
    assert np.array_equal(got, want, equal_nan=want.dtype.kind == "f"), (name, what)


def _same_values(a: dict[str, Any], b: dict[str, Any]) -> bool:
    """Two dicts of numbers (or None) are equal, NaN equal to NaN."""

    def same(x: Any, y: Any) -> bool:
        if isinstance(x, float) and isinstance(y, float) and math.isnan(x) and math.isnan(y):
            return True
        return bool(x == y)

    return a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)


# -- 1. lazy columns -----------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
def test_lazy_column_equals_the_array(
    kind: str, memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any
) -> None:
    """A LazyColumn reads as the array by int, negative int, slice and id arrays (sorted,
    unsorted, repeated, shaped, empty); out-of-range ids raise IndexError, np.asarray
    raises TypeError."""
    whole, _ = memory[kind]
    file, trail, _ = lazy(kind)
    count = whole.count
    assert trail.count == count > 0 and trail.columns.keys() == whole.columns.keys()
    rng = np.random.default_rng(3)
    edges = _edges(file)
    assert len(file.index.values("first")) > 3, "the trail spans several blocks"
    if kind == "penalties":
        assert any(values.ndim == 2 for values in whole.columns.values())
    ids_sorted = np.sort(rng.integers(0, count, 50))
    ids_unsorted = rng.permutation(np.concatenate((rng.integers(0, count, 40), edges[:20])))
    for name, array in whole.columns.items():
        col = trail.columns[name]
        assert (len(col), col.dtype, col.shape, col.ndim) == (
            len(array),
            array.dtype,
            array.shape,
            array.ndim,
        ), name
        same = functools.partial(_same_array, name)
        for i in [0, 1, count - 1, -1, -count, *edges[:10], *rng.integers(0, count, 5).tolist()]:
            same(col[i], array[i], i)
            same(col[np.int64(i)], array[np.int64(i)], i)
        for lo, hi in [(0, count), (None, None), (-5, None), (10, 3), (count + 5, None)]:
            same(col[lo:hi], array[lo:hi], (lo, hi))
        for edge in edges[1:8]:
            same(col[edge - 2 : edge + 3], array[edge - 2 : edge + 3], edge)
        for ids in (
            ids_sorted,
            ids_unsorted,
            -ids_sorted - 1,
            ids_unsorted[:12].reshape(3, 4),
            np.array([], dtype=np.int64),
            np.array([count - 1] * 3, dtype=np.int32),
        ):
            same(col[ids], array[ids], ids.tolist())
        for bad in (count, -count - 1, np.array([0, count]), np.array([-count - 1])):
            with pytest.raises(IndexError):
                col[bad]
        with pytest.raises(IndexError):
            col[0:10:2]
        with pytest.raises(IndexError):
            col[0, 1]
        with pytest.raises(TypeError):
            np.asarray(col)
        _refuses_whole_column_use(col)


def _refuses_whole_column_use(col: LazyColumn) -> None:
    """Comparisons, iteration and hashing would read a huge column whole: each raises."""
    for whole_column in (
        lambda: col == 3,
        lambda: col != 3,
        lambda: col < 3,
        lambda: col >= 3,
        lambda: np.uint8(3) == col,
        lambda: list(col),
        lambda: hash(col),
    ):
        with pytest.raises(TypeError):
            whole_column()


# -- 2. the lazy tree index ------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
def test_lazy_tree_index_equals_tree_index(
    kind: str, memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any
) -> None:
    """parent, end, path, ancestors, children, subtree, node_for_prefix, decision counts and
    ranks and incumbents are TreeIndex's, at block edges, orphans and random nodes."""
    whole, index = memory[kind]
    file, _, lazy_index = lazy(kind)
    assert lazy_index.count == index.count
    nodes = _sample(file, index, 40)
    ids = np.array(nodes, dtype=np.int64)
    assert np.array_equal(lazy_index.parent[ids], index.parent[ids])
    assert np.array_equal(lazy_index.end[ids], index.end[ids])
    if kind == "orphans":
        assert (index.parent[ids] == ORPHAN).any(), "the sample holds orphans"
    for node in nodes:
        assert int(lazy_index.parent[node]) == int(index.parent[node]), node
        assert int(lazy_index.end[node]) == int(index.end[node]), node
        assert lazy_index.path(node) == index.path(node), node
        assert lazy_index.ancestors(node) == index.ancestors(node), node
        assert lazy_index.subtree(node) == index.subtree(node), node
        prefix = index.path(node)
        assert lazy_index.node_for_prefix(prefix) == index.node_for_prefix(prefix), node
        absent = [*prefix, prefix[-1]]  # a city twice on one path: never recorded
        assert lazy_index.node_for_prefix(absent) is index.node_for_prefix(absent) is None
    for node in nodes[:15]:
        assert lazy_index.children(node) == index.children(node), node
    assert lazy_index.paths(nodes) == [index.path(node) for node in nodes]
    run = range(max(nodes[len(nodes) // 2] - 20, 0), min(nodes[len(nodes) // 2] + 20, index.count))
    assert lazy_index.paths(run) == [index.path(node) for node in run]
    for prefix in ([], [1], [0, 99], [0, whole.n + 3]):
        assert lazy_index.node_for_prefix(prefix) == index.node_for_prefix(prefix), prefix
    _same_counts_and_ranks(file, index, lazy_index)
    assert np.array_equal(lazy_index.incumbent_at(ids), index.incumbent_at(ids))


def _same_counts_and_ranks(file: BlockFile, index: TreeIndex, lazy_index: LazyTreeIndex) -> None:
    """decision_counts over many ranges, and rank/select/between/keeps for several sets."""
    rng = np.random.default_rng(11)
    count = index.count
    first = file.index.values("first").tolist()
    ranges = [(0, None), (0, count), (5, 5), (10, 3), (-4, 7), (count - 3, count + 9)]
    ranges += [(first[b], first[b + 1]) for b in range(min(len(first) - 1, 6))]
    ranges += [(first[b] + 1, first[b + 2] - 1) for b in range(min(len(first) - 2, 6))]
    ranges += [tuple(sorted(r)) for r in rng.integers(0, count, (20, 2)).tolist()]
    for lo, hi in ranges:
        assert lazy_index.decision_counts(lo, hi) == index.decision_counts(lo, hi), (lo, hi)
    nodes = [0, count, *_edges(file)[:20], *rng.integers(0, count, 30).tolist()]
    for codes in ({1}, {0, 2}, {3, 4}, set(range(len(DECISION_NAMES)))):
        kept = frozenset(codes)
        mine, theirs = lazy_index.decision_ranks(kept), index.decision_ranks(kept)
        for node in nodes:
            assert mine.rank(node) == theirs.rank(node), (codes, node)
            if node < count:
                assert mine.keeps(node) == theirs.keeps(node), (codes, node)
        total = theirs.rank(count)
        for k in sorted({0, total - 1, *rng.integers(0, max(total, 1), 20).tolist()}):
            if 0 <= k < total:
                assert mine.select(k) == theirs.select(k), (codes, k)
        for a, b in [(0, count - 1), *(sorted(p) for p in rng.integers(0, count, (8, 2)))]:
            assert np.array_equal(mine.between(int(a), int(b)), theirs.between(int(a), int(b)))


# -- 3. recomputing one node -------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
def test_recompute_node_equals_in_memory(
    kind: str, memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any
) -> None:
    """recompute_node in a small window equals the whole trail's, at the first and last
    nodes, block edges, orphans, wrong records and random nodes."""
    whole, index = memory[kind]
    file, trail, lazy_index = lazy(kind)
    wrong = recheck(whole, index).wrong_ids
    if kind in ("fault", "penalties", "cut"):
        assert len(wrong), "the planted fault is found"
    rng = np.random.default_rng(5)
    picks = rng.choice(wrong, min(len(wrong), 25), replace=False).tolist() if len(wrong) else []
    nodes = sorted({*_sample(file, index, 25), *picks})
    for node in nodes:
        got = recompute_node(trail, lazy_index, node)
        want = recompute_node(whole, index, node)
        assert _same_values(got, want), (node, got, want)
    with pytest.raises(IndexError):
        recompute_node(trail, lazy_index, whole.count)


# -- 4. filters and stops over the lazy view ----------------------------------------------------


def _prefix_of(index: TreeIndex, depth: int, most: int | None = None) -> str:
    """The path of the first node at `depth`, or with `most`: at `depth` or deeper, whose
    subtree holds more than 10 and at most `most` nodes."""
    for node in range(index.count):
        start, stop = index.subtree(node)
        at = int(index.depth[node])
        if (at == depth and most is None) or (
            most is not None and at >= depth and 10 < stop - start <= most
        ):
            return " ".join(map(str, index.path(node)))
    raise AssertionError(f"no node at depth {depth} (subtree of at most {most})")


def _filter_forms(index: TreeIndex) -> list[str]:
    """Every filter form of the grammar, with real and absent prefixes, alone and joined."""
    prefix = _prefix_of(index, 2)
    return [
        "",
        prefix,
        f"under {prefix}",
        "0 0",
        "depth 4",
        "depth 2..5",
        "depth ..3",
        "depth 9..",
        "depth >= 9",
        "depth < 3",
        "decision prune",
        "is prune,tour_better",
        "is expand and is expand,skip",
        f"{prefix} and is prune",
        "wrong",
        "wrong and depth 3..",
        "ratio 0.9..1.2",
        "ratio ..1",
        f"{prefix} and depth 3..8 and is prune",
        f"{prefix} and ratio 0.95.. and wrong",
    ]


STOPS = [
    "prune",
    "incumbent",
    "wrong",
    "depth 5",
    "near 2%",
    "incumbent, depth 6",
    "wrong, depth 3",
]


@pytest.mark.parametrize("kind", ["fault", "penalties", "visit", "orphans", "cut"])
def test_filters_and_stops_on_the_lazy_view(
    kind: str, memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any
) -> None:
    """kept_range, kept_ids and next_match give the same answers on the lazy view for every
    filter form and stop condition, with and without kept ids, both directions."""
    whole, index = memory[kind]
    _, trail, lazy_index = lazy(kind)
    wrong = recheck(whole, index).wrong_ids
    kept_sets = []
    for text in _filter_forms(index):
        node_filter = parse_filter(text)
        assert kept_range(node_filter, lazy_index) == kept_range(node_filter, index), text
        got = kept_ids(node_filter, trail, lazy_index, wrong)
        want = kept_ids(node_filter, whole, index, wrong)
        assert np.array_equal(got, want), text
        if 0 < len(want) < whole.count:
            kept_sets.append(want)
    stops = [*STOPS, f"under {_prefix_of(index, 3)}", f"prune, under {_prefix_of(index, 2)}"]
    rng = np.random.default_rng(9)
    starts = [0, whole.count - 1, *rng.integers(0, whole.count, 4).tolist()]
    for text in stops:
        cond = parse_stops(text)
        for start in starts:
            for direction in (1, -1):
                for kept in (None, kept_sets[start % len(kept_sets)]):
                    found = next_match(
                        cond, trail, lazy_index, start, direction, wrong_ids=wrong, kept=kept
                    )
                    expected = next_match(
                        cond, whole, index, start, direction, wrong_ids=wrong, kept=kept
                    )
                    assert found == expected, (text, start, direction, kept is None)


# -- 5. the viewer's model -------------------------------------------------------------------


def _models(
    kind: str, memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any
) -> tuple[ViewerModel, ViewerModel]:
    """The in-memory model and the block-read one of a trail, both told its wrong records."""
    whole, index = memory[kind]
    file, trail, lazy_index = lazy(kind)
    wrong = recheck(whole, index).wrong_ids
    in_memory = ViewerModel(whole, index)
    blocks = ViewerModel(trail, lazy_index, blocks=file)
    for model in (in_memory, blocks):
        model.add_wrong(wrong, whole.count)
    return in_memory, blocks


def _same_rows(a: ViewerModel, b: ViewerModel, what: str) -> None:
    """Two models show the same rows, and answer row questions alike."""
    assert len(a.rows) == len(b.rows), what
    assert np.array_equal(a.rows.ids(0, len(a.rows)), b.rows.ids(0, len(b.rows))), what
    for node in (0, 17, a.count // 2, a.count - 1):
        assert a.rows.row_of(node) == b.rows.row_of(node), (what, node)
        assert a.rows.holds(node) == b.rows.holds(node), (what, node)
        for delta in (1, -1, 40):
            assert a.step(node, delta) == b.step(node, delta), (what, node, delta)
    for row in range(0, len(a.rows), max(1, len(a.rows) // 9)):
        assert a.rows.id_at(row) == b.rows.id_at(row), (what, row)


@pytest.mark.parametrize("kind", ["fault", "visit"])
def test_model_filters_equal_in_memory(
    kind: str, memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any
) -> None:
    """A block-read model keeps the rows the in-memory model keeps for every filter form,
    counts and moves alike."""
    in_memory, blocks = _models(kind, memory, lazy)
    assert blocks.counts() == in_memory.counts()
    assert blocks.incumbent() == in_memory.incumbent()
    for node in (0, 5, in_memory.count - 1):
        for move in ("parent", "first_child", "next_sibling", "previous_sibling"):
            assert getattr(blocks, move)(node) == getattr(in_memory, move)(node), (move, node)
    for text in _filter_forms(in_memory.index):
        in_memory.apply_filter(text)
        blocks.apply_filter(text)
        _same_rows(in_memory, blocks, text)


def test_block_scan_limit_refuses_wide_depth_filters(
    memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Over the scan limit a depth or ratio filter is refused on a block-read trail (not in
    memory), is accepted under a prefix, and a grown snapshot drops a filter it no longer
    allows, saying so; decision and wrong filters need no scan and pass."""
    in_memory, blocks = _models("fault", memory, lazy)
    monkeypatch.setattr(tui.model, "BLOCK_SCAN_LIMIT", 1000)
    for text in ("depth 4", "ratio ..1", "is prune and depth 2..5"):
        with pytest.raises(FilterError, match="narrow it with 'under'"):
            blocks.apply_filter(text)
        in_memory.apply_filter(text)  # in memory every filter is allowed
    assert blocks.filter.empty and len(blocks.rows) == blocks.count  # the rows stayed
    prefix = _prefix_of(in_memory.index, 3, most=1000)
    for text in (f"{prefix} and depth 4..", "is prune", "wrong", "is prune,skip and wrong"):
        in_memory.apply_filter(text)
        blocks.apply_filter(text)
        _same_rows(in_memory, blocks, text)
    monkeypatch.setattr(tui.model, "BLOCK_SCAN_LIMIT", 10**9)
    blocks.apply_filter("depth 4")
    monkeypatch.setattr(tui.model, "BLOCK_SCAN_LIMIT", 1000)
    assert blocks.blocks is not None
    dropped = blocks.replace_trail(*lazy_view(blocks.blocks))
    assert dropped is not None and "filter dropped" in dropped
    assert blocks.filter.empty and len(blocks.rows) == blocks.count


@pytest.mark.parametrize("text", ["is prune", "is tour,tour_better,expand"])
def test_runs_over_decision_rows_equal_in_memory(
    text: str, memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any
) -> None:
    """run_until over decision-filtered rows (ranks, no id array) stops where it does in
    memory, for each stop kind, both ways, with and without a prefix."""
    in_memory, blocks = _models("fault", memory, lazy)
    prefix = _prefix_of(in_memory.index, 2)
    stops = [*STOPS, f"under {_prefix_of(in_memory.index, 3)}"]
    rng = np.random.default_rng(2)
    for filter_text in (text, f"{prefix} and {text}"):
        in_memory.apply_filter(filter_text)
        blocks.apply_filter(filter_text)
        assert blocks.rows.ranks is not None and blocks.rows.ids_array is None
        lo, hi = kept_range(blocks.filter, blocks.index)
        starts = [lo, hi - 1, *rng.integers(lo, hi, 4).tolist()]
        for stop_text in stops:
            if stop_text == "prune" and filter_text == text != "is prune":
                continue  # prunes never kept, over the whole trail: the next test's case
            cond = parse_stops(stop_text)
            for start in starts:
                for direction in (1, -1):
                    got = blocks.run_until(cond, start, direction)
                    want = in_memory.run_until(cond, start, direction)
                    assert got == want, (filter_text, stop_text, start, direction)


def test_a_run_over_decision_rows_reads_each_node_a_few_times(
    memory: dict[str, tuple[Trail, TreeIndex]], lazy: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A run to a stop that no kept row matches (prunes, over rows keeping no prune) reads
    each node of a block-read trail a few times at most, not a chunk per match, and ends
    where the in-memory model ends."""
    in_memory, blocks = _models("fault", memory, lazy)
    budget = 8 * blocks.count  # rows read from the lazy columns
    read = [0]

    def counted(real: Any, size: Any) -> Any:
        def reading(*args: Any, **kw: Any) -> Any:
            read[0] += size(*args)
            assert read[0] <= budget, f"more than {budget:,} rows read in one run"
            return real(*args, **kw)

        return reading

    cond = parse_stops("prune")
    for model in (in_memory, blocks):
        model.apply_filter("is tour,tour_better,expand")
    prunes = int(np.count_nonzero(memory["fault"][0].columns["decision"] == 1))
    assert prunes > 100, "many matches, none of them kept"
    monkeypatch.setattr(
        BlockFile,
        "column",
        counted(BlockFile.column, lambda f, n, lo=0, hi=None: (hi or f.count) - lo),
    )
    monkeypatch.setattr(LazyColumn, "_take", counted(LazyColumn._take, lambda c, ids: ids.size))
    for start, direction in ((0, 1), (blocks.count - 1, -1)):
        read[0] = 0
        got = blocks.run_until(cond, start, direction)
        assert got == in_memory.run_until(cond, start, direction) is None


# -- 6-9. the app on a trail read block by block --------------------------------------------


@pytest.fixture
def small_cache(monkeypatch: pytest.MonkeyPatch) -> None:
    """The viewer opens block files with the small cache, and runs no oracle (in memory
    either), so both viewers show the same panels."""
    monkeypatch.setattr(
        tui.loading, "open_blocks", functools.partial(open_blocks, cache_bytes=CACHE)
    )
    monkeypatch.setattr(tui.app, "ORACLE_MAX_NODES", 0)


#: Move keys pressed in both viewers (with a decision filter for the last ones).
MOVES = ["down", "j", "j", "right", "left", "h", "l", "s", "S", "pagedown", "pagedown"]
MOVES += ["pageup", "end", "k", "home", "G", "g", "up"]


async def _walk(app: PrunetrailApp, pilot: Any) -> list[int]:
    """Where the cursor is after each move key, from the start, a middle node, and over
    decision-filtered rows."""
    seen = []
    for start, text in ((0, ""), (app.model.count // 2, ""), (0, "is prune")):
        app.apply_filter(text)
        app.goto(start)
        for key in MOVES:
            await pilot.press(key)
            seen.append(app.cursor)
    app.apply_filter("")
    return seen


def _work_label(app: PrunetrailApp) -> str:
    """The work line's text (indexing, re-check progress)."""
    return str(app.query_one("#work-label").render())


async def _viewer_run(path: Path, **kw: Any) -> dict[str, Any]:
    """Run a viewer on `path` until its re-check is done; what it showed."""
    app = PrunetrailApp(path, **kw)
    async with app.run_test(size=SIZE) as pilot:
        for _ in range(200):
            await pilot.pause(0.05)
            if app.model.checked == app.model.count:
                break
        await app.workers.wait_for_complete()
        await pilot.pause()
        wrong = app.model.wrong_ids.copy()
        walk = await _walk(app, pilot)
        panels = {}
        for node in (int(wrong[0]), int(wrong[len(wrong) // 2]), int(wrong[-1])):
            app.goto(node)
            await pilot.pause()
            panels[node] = _text(app.query_one("#bound"), 40)
        return {
            "blocks": app.model.blocks,
            "wrong": wrong,
            "checked": app.model.checked,
            "walk": walk,
            "panels": panels,
            "label": _work_label(app),
        }


@pytest.mark.asyncio
async def test_app_reads_blocks_as_it_reads_memory(
    trails: dict[str, Path], memory: dict[str, tuple[Trail, TreeIndex]], small_cache: None
) -> None:
    """memory_mb=1 opens the planted-fault trail block by block; the keys move the cursor,
    the background re-check finds the wrong records and the bound panel reads as in memory."""
    whole, index = memory["fault"]
    blocked = await _viewer_run(trails["fault"], memory_mb=1)
    in_memory = await _viewer_run(trails["fault"])
    assert isinstance(blocked["blocks"], BlockFile) and in_memory["blocks"] is None
    assert blocked["checked"] == in_memory["checked"] == whole.count
    expected = recheck(whole, index).wrong_ids
    assert len(expected) and np.array_equal(blocked["wrong"], expected)
    assert np.array_equal(in_memory["wrong"], expected)
    assert blocked["walk"] == in_memory["walk"]
    assert len(set(blocked["walk"])) > 10
    assert blocked["panels"] == in_memory["panels"]
    assert all("Re-check" in text for text in blocked["panels"].values())
    assert "re-check done" in blocked["label"]


@pytest.mark.asyncio
async def test_stats_and_why_stream_in_the_block_viewer(
    trails: dict[str, Path], memory: dict[str, tuple[Trail, TreeIndex]], small_cache: None
) -> None:
    """On a block-read trail the stats screen and the why report come from one streaming
    pass each (in workers), equal to the in-memory analyses; the stats are kept after."""
    whole, index = memory["fault"]
    app = PrunetrailApp(trails["fault"], memory_mb=1)
    async with app.run_test(size=(160, 48)) as pilot:
        await pilot.pause()
        assert app.model.blocks is not None
        await pilot.press("t")
        for _ in range(400):
            if type(app.screen).__name__ == "StatsScreen":
                break
            await pilot.pause(0.05)
        assert type(app.screen).__name__ == "StatsScreen"
        assert app._stats is not None
        assert app._stats.to_json() == depth_stats(whole).to_json()
        assert not app._passes  # the pass is over
        await pilot.press("escape")
        app.action_why_cut()
        for _ in range(400):
            if app._why_report is not None:
                break
            await pilot.pause(0.05)
        assert app._why_report is not None
        table = completion_table(whole.header.instance)
        expected = explain(whole, index, tour=None, table=table)
        assert app._why_report.to_json() == expected.to_json()


def _without_index(source: Trail, path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """The trail written with its end frame but no block index (as for too many blocks)."""
    import tracer.trails.writer

    with monkeypatch.context() as patch:
        patch.setattr(tracer.trails.writer, "MAX_INDEX_BLOCKS", 0)
        rewrite(source, path, 1000)
    with open_blocks(path) as file:
        assert not file.index.from_index and file.end is not None
    return path


@pytest.mark.asyncio
async def test_first_screen_before_the_index_is_complete(
    memory: dict[str, tuple[Trail, TreeIndex]],
    small_cache: None,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """A trail without a written index shows its first bytes' nodes, says it is indexing,
    indexes the rest, then re-checks the whole trail."""
    whole, index = memory["fault"]
    path = _without_index(whole, tmp_path / "no-index.trail", monkeypatch)
    monkeypatch.setattr(tui.loading, "FIRST_BYTES", 20_000)
    monkeypatch.setattr(tui.app, "INDEX_STEP_BYTES", 10_000)
    monkeypatch.setattr(tui.app, "INDEX_SNAPSHOT_SECONDS", 0.1)
    refresh = BlockFile.refresh

    def slow_refresh(self: BlockFile, max_bytes: int | None = None) -> int:
        time.sleep(0.1)  # so the test sees the indexing under way
        return refresh(self, max_bytes)

    monkeypatch.setattr(BlockFile, "refresh", slow_refresh)
    opened = open_for_viewing(path, memory_mb=1)
    assert opened.blocks is not None and opened.blocks.indexing
    assert 0 < opened.trail.count < whole.count
    opened.blocks.close()
    app = PrunetrailApp(path, memory_mb=1)
    first = app.model.count
    assert 0 < first < whole.count
    seen: list[tuple[int, str]] = [(first, "")]
    async with app.run_test(size=SIZE) as pilot:
        for _ in range(300):
            await pilot.pause(0.05)
            seen.append((app.model.count, _work_label(app)))
            if app.model.checked == whole.count:
                break
        await app.workers.wait_for_complete()
        counts = [count for count, _ in seen]
        assert counts == sorted(counts) and counts[-1] == whole.count
        assert len(set(counts)) > 2, "the viewer took snapshots while indexing"
        assert any("indexing" in label and count < whole.count for count, label in seen)
        assert app.model.checked == whole.count
        assert np.array_equal(app.model.wrong_ids, recheck(whole, index).wrong_ids)
        assert "re-check done" in _work_label(app)
        assert app.model.trail.end == whole.end and not app.model.live


@pytest.mark.asyncio
async def test_start_options_wait_for_the_index(
    memory: dict[str, tuple[Trail, TreeIndex]],
    small_cache: None,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """`--at` a node and `--prefix` a path that are not indexed yet are not refused: the
    cursor goes to the node once it is indexed, and the prefix keeps its subtree; the
    first scan's stopping point is no notice."""
    whole, index = memory["fault"]
    path = _without_index(whole, tmp_path / "no-index.trail", monkeypatch)
    monkeypatch.setattr(tui.loading, "FIRST_BYTES", 20_000)
    monkeypatch.setattr(tui.app, "INDEX_STEP_BYTES", 10_000)
    monkeypatch.setattr(tui.app, "INDEX_SNAPSHOT_SECONDS", 0.1)
    last = whole.count - 1
    late = next(a for a in index.ancestors(last) if a > 10_000)  # well past the first scan
    prefix = " ".join(map(str, index.path(late)))
    lo, hi = index.subtree(late)
    app = PrunetrailApp(path, memory_mb=1, at=last - 1, prefix=prefix, background=False)
    assert app.model.count <= lo  # neither is indexed yet
    assert not app._notices
    async with app.run_test(size=SIZE) as pilot:
        for _ in range(300):
            await pilot.pause(0.05)
            if app.model.trail.end is not None and app.cursor == last - 1:
                break
        assert app.cursor == last - 1
        assert (app.model.rows.lo, app.model.rows.hi) == (lo, hi)


@pytest.mark.asyncio
async def test_live_trail_grows_in_the_block_viewer(
    memory: dict[str, tuple[Trail, TreeIndex]],
    small_cache: None,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """A writer appends to a trail while the block viewer (memory_mb=1) shows it: the
    model's count grows to the whole trail and the run's end arrives."""
    whole, _ = memory["fault"]
    monkeypatch.setattr(tui.app, "FOLLOW_INTERVAL", 0.1)
    monkeypatch.setattr(tui.app, "INDEX_SNAPSHOT_SECONDS", 0.1)
    path = tmp_path / "live.trail"
    with live_run(path, whole, 30_000, 1000, 0.1) as go:
        app = PrunetrailApp(path, memory_mb=1, background=False)
        counts = []
        async with app.run_test(size=SIZE) as pilot:
            assert app.model.blocks is not None and app.model.live
            assert app.model.count == 30_000
            go.set()
            for _ in range(150):
                await pilot.pause(0.1)
                counts.append(app.model.count)
                if app.model.trail.end is not None:
                    break
            assert app.model.trail.end == whole.end and not app.model.live
    assert counts == sorted(counts) and counts[-1] == whole.count
    assert len(set(counts)) > 2, "the count grew step by step"


@pytest.mark.asyncio
async def test_live_block_trail_is_rechecked_to_its_end(
    memory: dict[str, tuple[Trail, TreeIndex]],
    small_cache: None,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """The re-check of a live block-read trail covers what the run adds after its first
    pass once the run ends (not only the first snapshot), and finds every wrong record."""
    whole, index = memory["fault"]
    monkeypatch.setattr(tui.app, "FOLLOW_INTERVAL", 0.1)
    monkeypatch.setattr(tui.app, "INDEX_SNAPSHOT_SECONDS", 0.1)
    path = tmp_path / "live.trail"
    with live_run(path, whole, 20_000, 5000, 0.2) as go:
        app = PrunetrailApp(path, memory_mb=1)
        async with app.run_test(size=SIZE) as pilot:
            for _ in range(50):  # the first pass, over the first snapshot
                await pilot.pause(0.05)
                if app.model.checked:
                    break
            first = app.model.checked
            assert 0 < first < 20_000  # the live trail's last node waits
            go.set()
            for _ in range(400):
                await pilot.pause(0.05)
                if app.model.trail.end is not None and app.model.checked >= whole.count:
                    break
            label = str(app._work_label.render())
            checked, wrong = app.model.checked, app.model.wrong_ids
    assert checked == whole.count
    assert np.array_equal(wrong, recheck(whole, index).wrong_ids)
    assert "re-check done" in label


@pytest.mark.asyncio
async def test_truncated_trail_read_by_blocks(
    trails: dict[str, Path], memory: dict[str, tuple[Trail, TreeIndex]], small_cache: None
) -> None:
    """A trail cut mid-frame opens block by block with every readable node and a notice,
    and is re-checked as the readable part is in memory."""
    whole, index = memory["cut"]
    app = PrunetrailApp(trails["cut"], memory_mb=1, follow=False)
    async with app.run_test(size=SIZE) as pilot:
        model = app.model
        assert model.blocks is not None and model.count == whole.count > 0
        assert any("stops" in notice for notice in app._notices)
        await pilot.press("end")
        assert app.cursor == whole.count - 1
        assert model.status == OPEN and "no end" in str(app.query_one("#top").render())
        for _ in range(100):
            await pilot.pause(0.05)
            if model.checked == model.count:
                break
        assert model.checked == whole.count, _work_label(app)
        assert np.array_equal(model.wrong_ids, recheck(whole, index).wrong_ids)
