"""The viewer's headless parts: rows, moves, wrong marks, bookmarks, key files, walkthrough."""

from __future__ import annotations

import json

import numpy as np
import pytest

from tests.reference import instance_path
from tracer.analysis import FilterError, TreeIndex
from tracer.cli import main as tracer_main
from tracer.trails import open_trail
from tui.bookmarks import (
    MAX_BOOKMARKS,
    MAX_NOTE,
    Bookmark,
    load_bookmarks,
    save_bookmarks,
    sidecar_path,
)
from tui.keys import load_keymap
from tui.model import RowView, ViewerModel
from tui.walkthrough import escape_markdown, walkthrough


@pytest.fixture(scope="module")
def model(tmp_path_factory) -> ViewerModel:
    """A 2 000-node burma14 trail in a model."""
    out = tmp_path_factory.mktemp("model") / "b14.trail"
    args = ["solve", str(instance_path("burma14")), "--max-nodes", "2000", "-o", str(out)]
    assert tracer_main(args) in (0, 3)
    return ViewerModel(open_trail(out))


def test_row_views_agree_on_ranges_and_arrays():
    """A range view and the same ids as an array answer every question alike."""
    as_range = RowView(10, 20)
    as_array = RowView(0, 0, np.arange(10, 20, dtype=np.int64))
    for view in (as_range, as_array):
        assert len(view) == 10
        assert view.id_at(3) == 13
        assert view.ids(8, 50).tolist() == [18, 19]
        assert view.row_of(15) == 5 and view.row_of(3) == 0
        assert view.holds(19) and not view.holds(20)


def test_decision_rows_agree_with_the_kept_id_array(model):
    """A decision filter's rows (block counts, no array) answer like an array of its ids."""
    decision = model.index.decision
    for lo, hi, codes in ((0, model.count, {1}), (37, 1500, {1, 2}), (200, 260, {0, 3, 4})):
        ranked = RowView(lo, hi, ranks=model.index.decision_ranks(frozenset(codes)))
        kept = [i for i in range(lo, hi) if int(decision[i]) in codes]
        as_array = RowView(0, 0, np.array(kept, dtype=np.int64))
        assert len(ranked) == len(kept)
        assert ranked.ids(0, len(ranked)).tolist() == kept
        assert ranked.kept() is not None and ranked.kept().tolist() == kept
        for row in range(0, len(kept), 7):
            assert ranked.id_at(row) == kept[row]
            assert ranked.ids(row, row + 64).tolist() == kept[row : row + 64]
        for node in range(max(0, lo - 3), min(model.count, hi + 3)):
            assert ranked.row_of(node) == as_array.row_of(node), node
            assert ranked.holds(node) == as_array.holds(node), node


def test_moves_follow_the_tree(model):
    """Parent, first child and siblings agree with the tree index's own answers."""
    index = model.index
    for node in range(1, 400, 37):
        parent = model.parent(node)
        assert parent == int(index.parent[node])
        siblings = index.children(parent)
        at = siblings.index(node)
        assert model.next_sibling(node) == (siblings[at + 1] if at + 1 < len(siblings) else None)
        assert model.previous_sibling(node) == (siblings[at - 1] if at else None)
        kids = index.children(node)
        assert model.first_child(node) == (kids[0] if kids else None)
    assert model.parent(0) is None


def test_steps_stay_inside_a_filter(model):
    """Stepping under a filter moves between kept rows; a bad filter keeps the old rows."""
    model.apply_filter("depth 3")
    first = model.rows.id_at(0)
    second = model.step(first, 1)
    assert second == model.rows.id_at(1)
    assert int(model.index.depth[second]) == 3
    with pytest.raises(FilterError):
        model.apply_filter("depth 3..1")
    assert model.filter.describe() == "depth 3"
    model.apply_filter("")
    assert len(model.rows) == model.count


def test_wrong_marks_merge_and_refilter(model):
    """Wrong ids arriving in pieces merge sorted; a `wrong` filter follows them."""
    model.apply_filter("wrong")
    assert len(model.rows) == 0
    model.add_wrong(np.array([7, 3], dtype=np.int64), 100)
    model.add_wrong(np.array([5], dtype=np.int64), 200)
    assert model.wrong_ids.tolist() == [3, 5, 7]
    assert model.rows.ids(0, 10).tolist() == [3, 5, 7]
    assert model.wrong_mask(np.array([3, 4, 5])).tolist() == [True, False, True]
    assert model.checked == 200
    model.wrong_ids = np.zeros(0, dtype=np.int64)
    model.apply_filter("")


def test_bookmarks_bounded_and_escaped(tmp_path):
    """Hostile sidecars are bounded: bad entries and ids outside the trail are dropped."""
    path = sidecar_path(tmp_path / "run.trail")
    assert path.name == "run.trail.bookmarks.json"
    save_bookmarks(path, [Bookmark(3, "x" * 500 + "\nnext"), Bookmark(9, "[b]ok[/b]")])
    loaded, notice = load_bookmarks(path, 10)
    assert notice is None
    assert loaded[0].note == "x" * MAX_NOTE and loaded[1].note == "[b]ok[/b]"
    items = [{"node": i % 20, "note": "n"} for i in range(MAX_BOOKMARKS + 5)]
    items.append({"node": True, "note": "bool is not an id"})
    path.write_text(json.dumps({"format": "prunetrail-bookmarks", "bookmarks": items}))
    loaded, notice = load_bookmarks(path, 10)
    assert all(0 <= b.node < 10 for b in loaded) and len(loaded) < MAX_BOOKMARKS
    assert notice is not None and "dropped" in notice
    path.write_text("{not json")
    assert load_bookmarks(path, 10)[0] == []
    path.write_bytes(b" " * (300 * 1024))
    assert "larger" in (load_bookmarks(path, 10)[1] or "")


def test_key_file_problems_are_named(tmp_path):
    """A key file maps known ids; unknown ids and bad values are named, not applied."""
    keys = tmp_path / "keys.toml"
    keys.write_text('[keys]\nnext = "n, down"\nnope = "x"\nprevious = 5\n')
    keymap, problems = load_keymap(keys, ["next", "previous"])
    assert keymap == {"next": "n,down"}
    assert len(problems) == 2
    assert load_keymap(tmp_path / "missing.toml", ["next"]) == ({}, [])
    keys.write_text("[keys\n")
    assert "not a key file" in load_keymap(keys, ["next"])[1][0]


def test_walkthrough_escapes_and_counts_steps(model):
    """One step per node on the path; Markdown characters in names are escaped."""
    assert escape_markdown("[bold]*x*_") == r"\[bold\]\*x\*\_"
    index: TreeIndex = model.index
    node = 300
    text = walkthrough(model.trail, index, node)
    assert text.count("## Step ") == len(index.ancestors(node))
    assert "= bound" in text
