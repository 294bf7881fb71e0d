"""The viewer driven through Pilot: every binding, filters, stop lists, live follow, exports.

Trails come from our own `solve` on TSPLIB's burma14 with a planted fault (so the re-check
finds wrong records); expected answers come from the headless functions the viewer calls
(`kept_ids`, `next_match`, the tree index) or straight from the trail's columns.
"""

from __future__ import annotations

import html
import json
import re
from pathlib import Path

import numpy as np
import pytest
from textual.geometry import Region
from textual.widgets import Input

from tests.live import live_run
from tests.reference import instance_path
from tracer.analysis import (
    TreeIndex,
    completion_table,
    explain,
    format_length,
    kept_ids,
    next_match,
    parse_filter,
    parse_stops,
)
from tracer.base import DECISION, DECISION_NAMES, LINK_IN, LINK_OUT, PARTIAL, TREE, InputError
from tracer.cli import main as tracer_main
from tracer.trails import TrailWriter, open_trail
from tui.app import SPEEDS, PlayStop, PrunetrailApp, RecheckProgress
from tui.bookmarks import Bookmark, save_bookmarks, sidecar_path
from tui.cli import main as viewer_main
from tui.dialogs import BookmarksScreen, HelpScreen, StopDialog
from tui.loading import start_loading
from tui.node_list import NodeList
from tui.prompt_bar import FilterBar, GoToBar
from tui.stats_screen import StatsScreen
from tui.steady import SteadyFooter
from tui.why_screen import WhyScreen

SIZE = (150, 44)


def _solve(out: Path, *extra: str, instance: str | Path = "burma14") -> Path:
    source = instance if isinstance(instance, Path) else instance_path(instance)
    status = tracer_main(["solve", str(source), "-o", str(out), *extra])
    assert status in (0, 3)
    return out


@pytest.fixture(scope="module")
def faulty(tmp_path_factory) -> Path:
    """A 3 000-node burma14 trail with the stale-keys fault (wrong trees from node 1 on)."""
    folder = tmp_path_factory.mktemp("viewer")
    return _solve(
        folder / "b14.trail",
        "--fault",
        "stale-keys",
        "--cutoff",
        "3",
        "--start",
        "none",
        "--max-nodes",
        "3000",
    )


def _app(path: Path, **kw) -> PrunetrailApp:
    kw.setdefault("background", False)
    return PrunetrailApp(path, **kw)


def _without_map(app: PrunetrailApp) -> None:
    """Hide the map where a test is not about it (it redraws on every move)."""
    app.query_one("#map").display = False


def _plain_top(app: PrunetrailApp) -> str:
    return str(app.query_one("#top").render())


@pytest.mark.asyncio
async def test_every_move_binding(faulty):
    """Each move key (and the go-to prompt) puts the cursor where the tree index says."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        _without_map(app)
        idx = app.model.index
        assert app.cursor == 0
        await pilot.press("down")
        assert app.cursor == 1
        await pilot.press("j", "j")
        assert app.cursor == 3
        await pilot.press("up")
        assert app.cursor == 2
        await pilot.press("k")
        assert app.cursor == 1
        await pilot.press("right")
        assert app.cursor == 2 and int(idx.parent[2]) == 1
        await pilot.press("left")
        assert app.cursor == 1
        await pilot.press("h")
        assert app.cursor == 0
        await pilot.press("l")
        assert app.cursor == 1
        x = next(i for i in range(idx.count) if int(idx.end[i]) < idx.count and idx.parent[i] >= 0)
        app.goto(x)
        await pilot.press("s")
        assert app.cursor == int(idx.end[x]) and idx.parent[app.cursor] == idx.parent[x]
        await pilot.press("S")
        assert app.cursor == x
        await pilot.press("home")
        await pilot.press("pagedown")
        page = app.cursor
        assert page > 10
        await pilot.press("pageup")
        assert app.cursor == 0
        await pilot.press("end")
        assert app.cursor == idx.count - 1
        await pilot.press("home")
        assert app.cursor == 0
        await pilot.press("G")
        assert app.cursor == idx.count - 1
        await pilot.press("g")
        assert app.cursor == 0
        nodes = app.query_one("#nodes", NodeList)
        assert nodes.cursor_row == 0
        bar = app.query_one(GoToBar)
        await pilot.press("i")
        assert bar.is_open and bar.display and app.focused is app.query_one("#goto-id")
        assert not app.query_one("#work").display
        await pilot.press(*"99999", "enter")
        assert bar.is_open
        assert "expected a node id" in str(app.query_one("#goto-id-error").render())
        app.query_one("#goto-id", Input).value = ""
        await pilot.press(*"1234", "enter")
        assert not bar.is_open and not bar.display
        assert app.query_one("#work").display and app.focused is nodes
        assert app.cursor == 1234
        await pilot.press("i", *"77", "escape")
        assert not bar.is_open
        assert app.cursor == 1234


@pytest.mark.asyncio
async def test_panel_toggles_help_speed_and_play(faulty):
    """1/2/3 toggle panels, ? help, t stats, +/- speed, space plays and pauses."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        bound, city_map, outline = (app.query_one(s) for s in ("#bound", "#map", "#outline"))
        assert bound.display and city_map.display and not outline.display
        await pilot.press("1", "2")
        assert not bound.display and not city_map.display
        assert not app.query_one("#side").display
        await pilot.press("3")
        assert outline.display and app.query_one("#side").display
        await pilot.press("1", "2", "3")
        assert bound.display and city_map.display and not outline.display
        await pilot.press("question_mark")
        assert isinstance(app.screen, HelpScreen)
        help_text = " ".join(str(w.render()) for w in app.screen.query("Static"))
        for binding in app.BINDINGS:
            assert binding.id in help_text
        assert "ratio 0.98..1" in help_text
        await pilot.press("escape")
        assert not isinstance(app.screen, HelpScreen)
        await pilot.press("t")
        assert isinstance(app.screen, StatsScreen)
        await pilot.press("escape")
        assert not isinstance(app.screen, StatsScreen)
        speed = app._speed
        await pilot.press("plus")
        assert app._speed == speed + 1
        await pilot.press("minus", "minus")
        assert app._speed == speed - 1
        app.stops = parse_stops("depth 99")
        await pilot.press("space")
        assert app._play_timer is not None
        await pilot.pause(0.8)
        await pilot.press("space")
        assert app._play_timer is None
        assert app.cursor > 0


FILTER_FORMS = [
    "0 7",
    "under 0 7 10",
    "depth 4",
    "depth 2..5",
    "depth ..3",
    "depth 9..",
    "depth >= 9",
    "decision prune",
    "is prune,tour_better",
    "ratio 0.9..1.2",
    "0 7 and depth 3..8 and is prune",
]


async def _check_filters(app: PrunetrailApp, pilot, forms: list[str], prompt: bool) -> None:
    model = app.model
    for text in forms:
        if prompt:
            await pilot.press("f")
            assert app.query_one(FilterBar).is_open
            app.query_one("#filter", Input).value = text
            await pilot.press("enter")
            assert not app.query_one(FilterBar).is_open
        else:
            app.apply_filter(text)
        expected = kept_ids(parse_filter(text), model.trail, model.index)
        rows = model.rows.ids(0, len(model.rows))
        assert np.array_equal(rows, expected), text
        assert len(expected) == 0 or model.rows.holds(app.cursor)
        assert f"keeps {len(expected):,}" in _plain_top(app)


@pytest.mark.asyncio
async def test_filter_prompt_forms_and_errors(faulty):
    """The filter prompt applies a prefix, a depth range and a combined filter; errors stay."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        _without_map(app)
        await _check_filters(app, pilot, ["0 7", "depth 2..5", FILTER_FORMS[-1]], prompt=True)
        await pilot.press("f")
        assert app.query_one("#filter", Input).value == FILTER_FORMS[-1]
        app.query_one("#filter", Input).value = "depth 5..2"
        await pilot.press("enter")
        assert app.query_one(FilterBar).is_open
        assert "empty" in str(app.query_one("#filter-error").render())
        await pilot.press("escape")
        await pilot.press("F")
        assert len(app.model.rows) == app.model.count


@pytest.mark.thorough
@pytest.mark.asyncio
async def test_every_filter_form(faulty):
    """Every filter form, applied in the running viewer, keeps exactly `kept_ids`."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        _without_map(app)
        await _check_filters(app, pilot, FILTER_FORMS, prompt=False)


@pytest.mark.asyncio
async def test_wrong_filter_and_marks_after_recheck(faulty):
    """After the background re-check the `wrong` filter keeps exactly the wrong records."""
    app = PrunetrailApp(faulty)
    async with app.run_test(size=SIZE) as pilot:
        await app.workers.wait_for_complete()
        await pilot.pause()
        model = app.model
        assert model.checked == model.count
        assert len(model.wrong_ids) > 0
        app.apply_filter("wrong")
        assert np.array_equal(model.rows.ids(0, len(model.rows)), model.wrong_ids)
        assert "wrong" in _plain_top(app)
        assert "re-check done" in str(app.query_one("#work-label").render())


STOPS = [
    "prune",
    "incumbent",
    "wrong",
    "under 0 7 10 8",
    "depth 5",
    "near 2%",
    "incumbent, depth 6",
]


async def _check_stops(app: PrunetrailApp, pilot, stops: list[str]) -> None:
    model = app.model
    for text in stops:
        cond = parse_stops(text)
        app.stops = cond
        app.goto(500)
        expected = next_match(cond, model.trail, model.index, 500, 1, wrong_ids=model.wrong_ids)
        await pilot.press("r")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert app.cursor == (500 if expected is None else expected), text
        start = app.cursor
        back = next_match(cond, model.trail, model.index, start, -1, wrong_ids=model.wrong_ids)
        await pilot.press("R")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert app.cursor == (start if back is None else back), text


@pytest.mark.asyncio
async def test_stop_dialog_and_runs(faulty):
    """`u` builds the stop list; `r` and `R` land where `next_match` says."""
    app = PrunetrailApp(faulty)
    async with app.run_test(size=SIZE) as pilot:
        _without_map(app)
        await app.workers.wait_for_complete()
        await pilot.press("u")
        assert isinstance(app.screen, StopDialog)
        app.screen.query_one("#stop-prefix").value = "0 7 10"
        app.screen.query_one("#stop-depth").value = "4"
        await pilot.click("#stop-wrong")
        await pilot.click("#stop-use")
        assert app.stops == parse_stops("prune, wrong, under 0 7 10, depth 4")
        await _check_stops(app, pilot, ["wrong", "incumbent, depth 6"])


@pytest.mark.asyncio
async def test_play_pauses_where_the_stop_list_holds(faulty):
    """Space plays on to the next node meeting the stop list (found off the UI thread) and
    pauses there; a stop found only after play went past it brings the cursor back."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        _without_map(app)
        model = app.model
        app.goto(40)
        for depth in range(1, 14):  # a depth first met again some steps ahead
            cond = parse_stops(f"depth {depth}")
            expected = next_match(cond, model.trail, model.index, 40, 1, wrong_ids=None)
            if expected is not None and 5 < expected - 40 < 300:
                break
        assert expected is not None and 5 < expected - 40 < 300, "a stop some steps ahead"
        app.stops = cond
        app._set_speed(len(SPEEDS) - 1)
        await pilot.press("space")
        for _ in range(100):
            await pilot.pause(0.05)
            if app._play_timer is None:
                break
        assert app._play_timer is None and app.cursor == expected
        await pilot.press("space")  # plays on from the stop, to the next one
        await app.workers.wait_for_complete()
        await pilot.pause()
        after = app._play_target
        assert after is not None, "a second stop ahead"
        assert after == next_match(cond, model.trail, model.index, expected, 1, wrong_ids=None)
        app._pause()
        app.goto(after + 5)  # as if play went past the stop before the search ended
        app._play_timer = app.set_interval(60, app._tick)
        app.post_message(PlayStop(after, app._play_run - 1, model.count))  # out of date: ignored
        await pilot.pause()
        assert app.cursor == after + 5 and app._play_timer is not None
        app.post_message(PlayStop(after, app._play_run, model.count))
        await pilot.pause()
        assert app.cursor == after and app._play_timer is None


@pytest.mark.thorough
@pytest.mark.asyncio
async def test_every_stop_condition(faulty):
    """Each stop kind alone, run forward and back in the viewer, matches `next_match`."""
    app = PrunetrailApp(faulty)
    async with app.run_test(size=SIZE) as pilot:
        _without_map(app)
        await app.workers.wait_for_complete()
        await _check_stops(app, pilot, STOPS)


@pytest.mark.asyncio
async def test_bookmarks_round_trip(faulty, tmp_path):
    """A bookmark's note is saved beside the trail, read back by a new viewer, and listed."""
    trail = tmp_path / "bm.trail"
    trail.write_bytes(faulty.read_bytes())
    app = _app(trail)
    note = "[bold]first wrong tree[/] <here>"
    async with app.run_test(size=SIZE) as pilot:
        app.goto(42)
        await pilot.press("a")
        app.screen.query_one("#note").value = note
        await pilot.press("enter")
    saved = json.loads(sidecar_path(trail).read_text())
    assert saved["bookmarks"] == [{"node": 42, "note": note}]
    again = _app(trail)
    async with again.run_test(size=SIZE) as pilot:
        assert [(b.node, b.note) for b in again.bookmarks] == [(42, note)]
        await pilot.press("b")
        assert isinstance(again.screen, BookmarksScreen)
        listed = again.screen.query_one("#bookmark-list")
        assert note in str(listed.get_option_at_index(0).prompt)
        await pilot.press("enter")
        assert again.cursor == 42


@pytest.mark.asyncio
async def test_both_exports(faulty, tmp_path, monkeypatch):
    """`e` writes an SVG of the screen, `E` a Markdown walkthrough of the root→cursor path."""
    monkeypatch.chdir(tmp_path)
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        app.goto(5)
        await pilot.press("e", "E")
        await pilot.pause()
    svg = tmp_path / f"{faulty.stem}-node5.svg"
    md = tmp_path / f"{faulty.stem}-node5.md"
    assert svg.read_text().startswith("<svg")
    text = md.read_text()
    trail = open_trail(faulty)
    index = TreeIndex(trail.columns, trail.best)
    assert text.count("## Step ") == len(index.ancestors(5))
    for node in index.ancestors(5):
        assert f"node {node}, depth" in text
        assert f"**{DECISION_NAMES[int(trail.columns[DECISION][node])]}**" in text
    assert f"partial {format_length(float(trail.columns[PARTIAL][5]))}" in text


def _svg_text(path: Path) -> str:
    raw = path.read_text()
    return html.unescape(re.sub(r"<[^>]+>", "", raw)).replace("\xa0", " ")


def test_screenshot_shows_the_nodes_recorded_numbers(faulty, tmp_path):
    """`view --at ID --screenshot` holds the node's partial, tree, links, bound and decision."""
    trail = open_trail(faulty)
    node = 2
    out = tmp_path / "shot.svg"
    status = viewer_main(
        ["view", str(faulty), "--at", str(node), "--screenshot", str(out), "--size", "150x44"]
    )
    assert status == 0
    text = _svg_text(out)
    cols = trail.columns
    numbers = [int(cols[name][node]) for name in (PARTIAL, TREE, LINK_IN, LINK_OUT)]
    bound = sum(numbers)
    row = re.search(rf"\b{node}\s+\d+\s+0 7 10\s+(.*?)\n", text)
    assert row is not None
    assert [int(v) for v in row.group(1).split()[:5]] == [*numbers, bound]
    assert DECISION_NAMES[int(cols[DECISION][node])] in row.group(1)
    assert "✗" in text  # the planted fault is marked


def test_view_reports_bad_input_in_one_line(faulty, tmp_path, capsys):
    """Bad --at, --filter and a non-trail file exit 2 with a one-line message."""
    assert viewer_main(["view", str(faulty), "--at", "999999", "--screenshot", "x.svg"]) == 2
    assert "--at 999999" in capsys.readouterr().err
    assert viewer_main(["view", str(faulty), "--filter", "depth 3..1"]) == 2
    assert "bad filter" in capsys.readouterr().err
    assert viewer_main(["view", str(faulty), "--prefix", "0 0 0"]) == 2
    assert "no node has this path" in capsys.readouterr().err
    junk = tmp_path / "junk.trail"
    junk.write_bytes(b"\x00\x01 not msgpack")
    assert viewer_main(["view", str(junk)]) == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 1


@pytest.mark.asyncio
async def test_truncated_trail_opens_with_a_notice(faulty, tmp_path):
    """A trail cut mid-frame opens with its readable nodes and a notice, not a traceback."""
    cut = tmp_path / "cut.trail"
    data = faulty.read_bytes()
    cut.write_bytes(data[:-7])
    app = PrunetrailApp(cut, follow=False, background=False)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        assert app.model.count == 3000
        assert any("stops" in n or "no end" in n for n in app._notices)
        assert "no end" in _plain_top(app)
        await pilot.press("end")
        assert app.cursor == app.model.count - 1


@pytest.mark.asyncio
async def test_live_follow_while_a_writer_appends(faulty, tmp_path):
    """A trail being written is followed: new nodes appear, the end frame ends `live`."""
    source = open_trail(faulty)
    path = tmp_path / "live.trail"
    with live_run(path, source, 500, 500, 0.05, block=500) as go:
        app = PrunetrailApp(path, background=False)
        async with app.run_test(size=SIZE) as pilot:
            assert app.model.live and app.model.count == 500
            assert "live" in _plain_top(app)
            go.set()
            await _run_ended(app, pilot)
            assert app.model.count == source.count
            assert app.model.status == source.end.status
            assert "live" not in _plain_top(app).split("  ")[2]


@pytest.mark.asyncio
async def test_play_finds_its_stop_among_nodes_written_while_it_plays(faulty, tmp_path):
    """Playing on a live trail toward a stop that is not yet written: once the run writes it,
    play pauses there (the stop is looked for again as the trail grows)."""
    source = open_trail(faulty)
    index = TreeIndex(source.columns, source.best)
    # A node past the first 500 records whose own path is met first at that node.
    stop = next(n for n in range(700, source.count) if int(index.parent[n]) < 500)
    cond = parse_stops("under " + " ".join(map(str, index.path(stop))))
    assert next_match(cond, source, index, 100, 1, wrong_ids=None) == stop
    path = tmp_path / "live.trail"
    with live_run(path, source, 500, 500, 0.05, block=500) as go:
        app = _app(path)
        async with app.run_test(size=SIZE) as pilot:
            _without_map(app)
            starts: list[int] = []
            run_until = app.model.run_until

            def recorded(condition, node, direction):
                starts.append(node)
                return run_until(condition, node, direction)

            app.model.run_until = recorded
            app.stops = cond
            app.goto(100)
            await pilot.press("space")
            assert app._play_timer is not None
            app._play_timer.stop()  # playing, with ticks driven by the test
            app._play_timer = app.set_interval(60, app._tick)
            await _play_search_ended(app, pilot)
            assert app._play_target is None  # not among the 500 nodes written so far
            go.set()
            await _run_ended(app, pilot)
            assert app.model.count == source.count
            await _play_search_ended(app, pilot)
            assert app._play_target == stop
            # the first search covered the first 500 nodes; the next ones start past them
            assert starts[0] == 100 and min(starts[1:]) >= 499, starts
            while app._play_timer is not None and app.cursor < source.count - 1:
                app._tick()
            assert app.cursor == stop


async def _run_ended(app: PrunetrailApp, pilot) -> None:
    """Wait (up to 10 s) for the followed run's end frame to reach the viewer."""
    for _ in range(100):
        await pilot.pause(0.1)
        if app.model.trail.end is not None:
            return


async def _play_search_ended(app: PrunetrailApp, pilot) -> None:
    """Wait for the search for play's stop (not the follower, which runs to the trail's end)."""
    for _ in range(100):
        await pilot.pause(0.05)
        if not app._play_looking:
            return
    raise AssertionError("the search for play's stop did not end")


@pytest.mark.asyncio
async def test_bookmarks_past_a_live_trails_end_are_kept(faulty, tmp_path):
    """A bookmark on a node the live run has not written yet survives opening and saving."""
    source = open_trail(faulty)
    path = tmp_path / "live.trail"
    save_bookmarks(sidecar_path(path), [Bookmark(2500, "written later")])
    with live_run(path, source, 500, 500, 0.05, block=500):
        app = _app(path)
        async with app.run_test(size=SIZE) as pilot:
            assert app.model.live and app.model.count == 500
            assert [b.node for b in app.bookmarks] == [2500]
            app.goto(42)
            await pilot.press("a")
            app.screen.query_one("#note").value = "here"
            await pilot.press("enter")
    saved = json.loads(sidecar_path(path).read_text())["bookmarks"]
    assert saved == [{"node": 42, "note": "here"}, {"node": 2500, "note": "written later"}]


@pytest.mark.asyncio
async def test_markup_in_names_is_shown_literally(tmp_path):
    """An instance named with Rich markup and a link tag appears as typed; `q` quits."""
    name = "[bold red]x[/][link=https://example.invalid]y[/link]"
    tsp = tmp_path / "odd.tsp"
    lines = [f"NAME : {name}", "TYPE : TSP", "DIMENSION : 5", "EDGE_WEIGHT_TYPE : EUC_2D"]
    lines += ["NODE_COORD_SECTION", "1 0 0", "2 3 0", "3 3 4", "4 0 4", "5 1 2", "EOF"]
    tsp.write_text("\n".join(lines) + "\n")
    path = _solve(tmp_path / "odd.trail", instance=tsp)
    app = _app(path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        assert name in _plain_top(app)
        await pilot.press("q")
        await pilot.pause()
    assert app.return_code == 0
    assert not app.is_running


@pytest.mark.asyncio
async def test_keys_remap_from_a_file_and_palette_lists_actions(faulty, tmp_path, monkeypatch):
    """A key file remaps a binding by id; every action is a command-palette entry."""
    keys = tmp_path / "keys.toml"
    keys.write_text('[keys]\nnext = "n"\nnot_an_action = "z"\n')
    monkeypatch.setenv("PRUNETRAIL_KEYS", str(keys))
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("n", "n")
        assert app.cursor == 2
        assert any("not_an_action" in n for n in app._notices)
        titles = {c.title for c in app.get_system_commands(app.screen)}
        for binding in app.BINDINGS:
            if binding.id not in ("quit", "help"):
                assert binding.description in titles


@pytest.mark.slow
@pytest.mark.asyncio
async def test_a_million_node_trail_opens_and_scrolls(tmp_path):
    """A 1 M-node gr17 trail opens, pages, jumps to its end and filters by prefix."""
    path = _solve(
        tmp_path / "big.trail", "--cutoff", "3", "--max-nodes", "1000000", instance="gr17"
    )
    app = _app(path)
    async with app.run_test(size=SIZE) as pilot:
        model = app.model
        assert model.count == 1_000_000
        for _ in range(5):
            await pilot.press("pagedown")
        assert app.cursor > 100
        await pilot.press("end")
        assert app.cursor == model.count - 1
        nodes = app.query_one("#nodes", NodeList)
        line = nodes.render_line(nodes.size.height - 1).text
        assert f"{model.count - 1}" in line
        prefix = " ".join(map(str, model.index.path(int(model.index.parent[model.count - 1]))))
        app.apply_filter(prefix)
        assert model.rows.holds(model.count - 1)
        await pilot.press("home")
        assert model.index.path(app.cursor) == [int(c) for c in prefix.split()]


@pytest.mark.asyncio
async def test_why_jumps_to_the_cut_and_shows_the_report(tmp_path):
    """`c` goes to the node where the optimal branch was cut; `w` shows why, whose `c` goes."""
    path = _solve(
        tmp_path / "cut.trail",
        "--fault",
        "tree-spans-ends",
        "--start",
        "none",
        instance=Path(__file__).parent.parent / "scenarios" / "orchard_rounds.tsp",
    )
    trail = open_trail(path)
    index = TreeIndex(trail.columns, trail.best)
    expected = explain(trail, index, tour=None, table=completion_table(trail.header.instance))
    assert expected.cut_node is not None
    app = _app(path)
    async with app.run_test(size=SIZE) as pilot:
        _without_map(app)
        await pilot.press("c")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert app.cursor == expected.cut_node
        app.goto(0)
        await pilot.press("w")
        await pilot.pause()
        assert isinstance(app.screen, WhyScreen)
        await pilot.press("c")
        await pilot.pause()
        assert not isinstance(app.screen, WhyScreen)
        assert app.cursor == expected.cut_node


@pytest.mark.asyncio
async def test_a_trail_with_no_nodes_yet_takes_every_key(faulty, tmp_path):
    """A header-only trail (a run that has just started) opens and ignores moves calmly."""
    source = open_trail(faulty)
    path = tmp_path / "empty.trail"
    writer = TrailWriter(path, source.header, threaded=False)
    app = PrunetrailApp(path, background=False, follow=False)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press(*"jkhlsSgG", "pagedown", "r", "R", "a", "E", "space", "space")
        await pilot.press("c")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert app.model.count == 0
        assert "0 nodes" in _plain_top(app)
    writer.close(source.end)


@pytest.mark.asyncio
async def test_results_arriving_under_a_dialog_update_the_main_screen(faulty):
    """Re-check results that arrive while a dialog or a prompt is open reach the main screen."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f")
        assert app.query_one(FilterBar).is_open
        app.post_message(RecheckProgress(np.array([4, 9], dtype=np.int64), 100, 3000))
        await pilot.pause()
        assert app.model.wrong_ids.tolist() == [4, 9]
        assert app.query_one(FilterBar).is_open
        await pilot.press("escape", "u")
        assert isinstance(app.screen, StopDialog)
        app.post_message(RecheckProgress(np.array([12], dtype=np.int64), 200, 3000))
        await pilot.pause()
        assert app.model.wrong_ids.tolist() == [4, 9, 12]
        assert isinstance(app.screen, StopDialog)
        await pilot.press("escape")
        assert "3 wrong" in _plain_top(app)


@pytest.mark.asyncio
async def test_prompt_lines_keep_the_footer_and_focus(faulty):
    """Opening and closing a prompt line rebuilds no footer key and gives focus back."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        footer = app.query_one(SteadyFooter)
        keys_before = list(footer.children)
        assert keys_before, "the footer shows keys"
        for key in ("f", "i"):
            await pilot.press(key)
            assert isinstance(app.focused, Input)
            await pilot.press("escape")
            await pilot.pause()
            assert app.focused is app.query_one(NodeList)
            assert list(footer.children) == keys_before
        await pilot.press("f")
        app.query_one("#filter", Input).value = "is prune"
        await pilot.press("enter")
        await pilot.pause()
        assert app.model.filter.describe() == "decision prune"
        assert app.model.rows.ranks is not None and app.model.rows.ids_array is None
        assert list(footer.children) == keys_before


def _cursor_lines(nodes: NodeList) -> list[int]:
    """The lines of the list, as drawn from its line cache, that carry the cursor's colour."""
    cursor = nodes.get_component_rich_style("node-list--cursor", partial=True).bgcolor
    lines = nodes.render_lines(Region(0, 0, nodes.size.width, nodes.size.height))
    marked = [any(s.style and s.style.bgcolor == cursor for s in strip) for strip in lines]
    return [y for y, on in enumerate(marked) if on]


@pytest.mark.asyncio
async def test_the_cursor_row_is_redrawn_where_it_leaves_and_enters(faulty):
    """Steps, pages and jumps leave the cursor's colour on exactly the cursor's line."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        nodes = app.query_one(NodeList)
        for key in ("down", "down", "up", "pagedown", "down", "pageup", "end", "home"):
            await pilot.press(key)
            await pilot.pause()
            assert _cursor_lines(nodes) == [nodes.cursor_row - nodes.scroll_offset.y], key
        app.goto(app.model.count // 2)
        await pilot.pause()
        assert _cursor_lines(nodes) == [nodes.cursor_row - nodes.scroll_offset.y]


@pytest.mark.asyncio
async def test_a_click_outside_an_open_prompt_closes_it(faulty):
    """A click on the list or the map closes an open prompt as escape would; the click acts."""
    app = _app(faulty)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        footer = app.query_one(SteadyFooter)
        nodes = app.query_one(NodeList)
        await pilot.press("f")
        app.query_one("#filter", Input).value = "is prune"
        await pilot.pause()
        assert await pilot.click(NodeList, offset=(4, 5))
        await pilot.pause()
        assert not app.query_one(FilterBar).is_open
        assert not app.query_one(FilterBar).display
        assert app.model.filter.empty, "a click is not enter: the typed filter is not applied"
        assert app.cursor == app.model.rows.id_at(5)
        assert app.focused is nodes
        assert not footer.held
        assert app.query_one("#work").display
        await pilot.press("down")  # keys reach the list again
        assert app.cursor == app.model.rows.id_at(6)
        await pilot.press("i")
        app.query_one("#goto-id", Input).value = "7"
        assert await pilot.click("#map", offset=(10, 5))
        await pilot.pause()
        assert not app.query_one(GoToBar).is_open
        assert app.cursor == app.model.rows.id_at(6), "the go-to was dropped, not applied"
        assert app.focused is app.query_one("#map"), "the focus stays where the click put it"
        assert not footer.held
        await pilot.press("f")  # and the prompt opens again as usual
        assert app.query_one(FilterBar).is_open and isinstance(app.focused, Input)


def test_loading_in_the_background_opens_the_same_trail(faulty, tmp_path):
    """`start_loading` hands back the trail and index a plain read gives; a bad file raises."""
    opened = start_loading(faulty).result()
    plain = open_trail(faulty)
    assert opened.trail.count == plain.count
    for name, column in plain.columns.items():
        assert np.array_equal(opened.trail.columns[name], column), name
    assert opened.index is not None and opened.index.count == plain.count
    assert opened.index.parent.tolist() == TreeIndex(plain.columns, plain.best).parent.tolist()
    missing = start_loading(tmp_path / "none.trail")
    with pytest.raises(InputError):
        missing.result()
