"""The viewer's panels and the analysis helpers behind them: tree, layout, sentences, widgets.

Trails are recorded in memory from tiny fixed instances (the engine's blocks collected by
`tests.sinks.Collect`), so every test is deterministic and fast. Each widget is driven by
Pilot inside a small harness app that holds just that widget.
"""

from __future__ import annotations

import dataclasses
import io
import math
from typing import Any

import numpy as np
import pytest
from rich.console import Console
from scipy.sparse.csgraph import minimum_spanning_tree
from textual.app import App, ComposeResult
from textual.widgets import DataTable, Static

from tests.sinks import Collect
from tracer.analysis import (
    Step,
    TreeIndex,
    WhyReport,
    best_completions,
    city_layout,
    completion_table,
    explain,
    format_length,
    narrate,
    recheck,
    remainder,
    scaled_layout,
    spanning_tree,
)
from tracer.base import (
    PENALTIES,
    PENALTY,
    TREE,
    Column,
    Decision,
    EndInfo,
    Instance,
    Trail,
    explicit_instance,
    is_absent,
)
from tracer.search import SearchSettings, make_start, run_search, trail_header
from tui.bound_panel import BoundPanel, bound_view, difference, verdict
from tui.city_map import CityMap, degrees, map_view, node_penalties, raster, to_dots
from tui.outline import BranchOutline
from tui.stats_screen import StatsScreen
from tui.why_screen import WhyScreen

#: Nine invented cities (EUC_2D): small enough for hundreds of nodes, big enough to prune.
PLANTED_COORDS = np.array(
    [[10, 10], [80, 15], [60, 70], [20, 60], [45, 40], [90, 60], [30, 90], [70, 95], [5, 35]],
    dtype=np.float64,
)


def planted_instance(name: str = "planted") -> Instance:
    """The nine-city instance every viewer test records."""
    return Instance(name=name, metric="EUC_2D", coords=PLANTED_COORDS.copy())


def record_trail(
    instance: Instance, fault: str | None = None, cutoff: int = 1, record: str = "all"
) -> Trail:
    """Run the engine on `instance` (nn start, no improvement) into an in-memory trail."""
    settings = SearchSettings(fault=fault, cutoff=cutoff, record=record)
    start = make_start(instance, "nn", "none")
    sink = Collect()
    result = run_search(instance, settings, start=start, sink=sink)
    end = EndInfo(
        result.status,
        result.nodes,
        result.recorded,
        result.decisions,
        0.0,
        result.length,
        result.tour,
    )
    header = trail_header(instance, settings, start, "prunetrail")
    return Trail("planted.trail", header, sink.columns(), sink.best, end)


@dataclasses.dataclass
class PanelModel:
    """The part of the viewer's model the panels read."""

    trail: Trail
    index: TreeIndex
    wrong_ids: Any = dataclasses.field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    completions: Any = None

    def is_wrong(self, node: int) -> bool:
        """Whether the re-check found `node` wrong."""
        return node in set(self.wrong_ids.tolist())


def model_of(trail: Trail, checked: bool = True, oracle: bool = False) -> PanelModel:
    """A panel model of a trail, with its re-check marks and (optionally) the oracle's values."""
    index = TreeIndex(trail.columns, trail.best)
    wrong = recheck(trail, index).wrong_ids if checked else np.zeros(0, dtype=np.int64)
    completions = None
    if oracle:
        completions = best_completions(trail, index, completion_table(trail.header.instance))
    return PanelModel(trail, index, wrong, completions)


@pytest.fixture(scope="module")
def clean() -> PanelModel:
    """A clean engine trail of the nine-city instance."""
    return model_of(record_trail(planted_instance()), oracle=True)


@pytest.fixture(scope="module")
def planted() -> PanelModel:
    """The same search with the `stale-keys` fault planted."""
    return model_of(record_trail(planted_instance(), fault="stale-keys"), oracle=True)


# -- spanning trees ----------------------------------------------------------------------


@pytest.mark.parametrize("seed", range(6))
def test_spanning_tree_weight_matches_scipy(seed: int) -> None:
    """Prim's weight over a random subset equals scipy.sparse.csgraph.minimum_spanning_tree's."""
    rng = np.random.default_rng(seed)
    matrix = rng.integers(1, 500, size=(14, 14)).astype(np.float64)
    matrix = np.triu(matrix, 1) + np.triu(matrix, 1).T
    cities = np.sort(rng.choice(14, size=int(rng.integers(2, 14)), replace=False))
    tree = spanning_tree(matrix, cities)
    expected = minimum_spanning_tree(matrix[np.ix_(cities, cities)]).sum()  # source: scipy
    assert tree.weight == pytest.approx(expected)
    assert len(tree.edges) == len(cities) - 1
    assert set(tree.edges.ravel()) <= set(cities.tolist())


def test_spanning_tree_equals_the_recorded_tree(clean: PanelModel) -> None:
    """For every bounded node of a clean engine trail the map's tree weighs what was recorded."""
    trail, index = clean.trail, clean.index
    recorded = trail.columns[TREE]
    bounded = np.flatnonzero(~is_absent(recorded))
    assert len(bounded) > 20
    matrix = trail.header.instance.matrix
    for node in bounded:
        rest = remainder(matrix, index.path(int(node)))
        assert rest.tree.weight == float(recorded[node])


def test_remainder_links_are_the_cheapest() -> None:
    """The two links are the cheapest edges into the rest and back to the start city."""
    matrix = planted_instance().matrix
    rest = remainder(matrix, [0, 4, 2])
    assert rest.link_in is not None and rest.link_out is not None
    unvisited = [c for c in range(9) if c not in (0, 4, 2)]
    assert rest.link_in_length == min(matrix[2, c] for c in unvisited)
    assert rest.link_out_length == min(matrix[c, 0] for c in unvisited)
    assert remainder(matrix, list(range(9))).link_in is None


@pytest.fixture(scope="module")
def penalised() -> PanelModel:
    """A penalties-bound trail of the nine-city instance, from no start tour."""
    instance = planted_instance()
    settings = SearchSettings(bound=PENALTIES, cutoff=1)
    sink = Collect()
    run_search(instance, settings, start=None, sink=sink)
    header = trail_header(instance, settings, None, "prunetrail")
    return model_of(Trail("p.trail", header, sink.columns(), sink.best), checked=False)


def test_penalised_remainder_equals_the_recorded_parts(penalised: PanelModel) -> None:
    """Under the penalties bound, the tree and links recomputed from the recorded π are the
    engine's recorded penalised parts, node by node."""
    trail, index = penalised.trail, penalised.index
    instance, columns = trail.header.instance, trail.columns
    bounded = np.flatnonzero(~is_absent(columns[TREE]))
    assert len(bounded) > 5
    for node in bounded:
        pi = node_penalties(trail, int(node))
        assert pi is not None
        rest = remainder(instance.matrix, index.path(int(node)), pi)
        recorded = [columns[name][node] for name in (TREE, "link_in", "link_out", PENALTY)]
        mine = [rest.tree.weight, rest.link_in_length, rest.link_out_length]
        assert np.allclose(recorded, [*mine, 2 * pi[rest.unvisited].sum()])


# -- layout ------------------------------------------------------------------------------


def _pairwise(xy: np.ndarray) -> np.ndarray:
    return np.sqrt(((xy[:, None, :] - xy[None, :, :]) ** 2).sum(axis=2))


def test_scaled_layout_preserves_euclidean_distances() -> None:
    """Classical scaling of a Euclidean matrix gives points at the same distances (any rotation)."""
    coords = np.random.default_rng(3).uniform(0, 100, size=(12, 2))
    xy = scaled_layout(_pairwise(coords))
    np.testing.assert_allclose(_pairwise(xy), _pairwise(coords), atol=1e-6)


def test_layout_is_marked_approximate_only_without_coordinates() -> None:
    """Coordinates are used as given; a matrix-only instance gets an approximate layout."""
    with_coords = city_layout(planted_instance())
    assert not with_coords.approximate
    np.testing.assert_array_equal(with_coords.xy, PLANTED_COORDS)
    matrix_only = explicit_instance("m", planted_instance().matrix)
    layout = city_layout(matrix_only)
    assert layout.approximate and layout.xy.shape == (9, 2)


# -- sentences ---------------------------------------------------------------------------


def _step(decision: Decision, **values: Any) -> Step:
    base: dict[str, Any] = {
        "bound": 2914.0,
        "partial": 1200.0,
        "incumbent": 2900.0,
        "unvisited": 5,
        "cutoff": 1,
    }
    base.update(values)
    return Step(decision=int(decision), **base)


@pytest.mark.parametrize(
    ("step", "words"),
    [
        (_step(Decision.PRUNE), "Pruned: the bound 2 914 reaches the best tour so far, 2 900."),
        (_step(Decision.PRUNE, bound=2800.0), "the rule expands"),
        (_step(Decision.PRUNE, bound=None, partial=2950.0), "the path alone, 2 950, already"),
        (_step(Decision.EXPAND, bound=2800.0), "Expanded: the bound 2 800 stays below"),
        (_step(Decision.EXPAND), "the rule prunes"),
        (_step(Decision.EXPAND, incumbent=math.inf), "no tour is known yet"),
        (_step(Decision.SKIP, bound=None, unvisited=1), "1 city remains, within the cutoff of 1"),
        (_step(Decision.SKIP, bound=None, unvisited=4), "the rule computes one"),
        (_step(Decision.TOUR_BETTER, unvisited=0, length=2880.0), "shorter than 2 900"),
        (_step(Decision.TOUR_BETTER, unvisited=0, length=2950.0), "does not beat 2 900"),
        (_step(Decision.TOUR, unvisited=0, length=2950.0), "Complete tour of 2 950: no shorter"),
        (_step(Decision.TOUR, unvisited=0, length=2800.0), "though it beats 2 900"),
        (_step(Decision.PRUNE, completion=2880.0), "Harmful: this branch holds a tour of 2 880"),
        (_step(Decision.PRUNE, completion=2990.0), "Safe: the best tour through this branch"),
        (_step(Decision.PRUNE, bound=1.5, incumbent=2.25, integral=False), "1.50 stays below"),
    ],
)
def test_narration_per_decision(step: Step, words: str) -> None:
    """Each decision, right or contradicted by its numbers, gets its own plain sentence."""
    assert words in narrate(step)


def test_format_length() -> None:
    """Lengths are grouped by threes with spaces; absent and infinite have their own marks."""
    assert format_length(2914) == "2 914"
    assert format_length(1234567.891, integral=False) == "1 234 567.89"
    assert format_length(math.inf) == "∞"
    assert format_length(None) == "—"


# -- the bound panel ---------------------------------------------------------------------


class PanelApp(App[None]):
    """A harness holding one panel."""

    def __init__(self, widget: Any) -> None:
        super().__init__()
        self.widget = widget
        self.picked: list[int] = []

    def compose(self) -> ComposeResult:
        yield self.widget

    def on_branch_outline_picked(self, message: BranchOutline.Picked) -> None:
        self.picked.append(message.node)


def _plain(renderable: Any) -> str:
    """A Rich renderable as plain text."""
    console = Console(width=100, record=True, file=io.StringIO())
    console.print(renderable)
    return console.export_text()


def _text(widget: Any, lines: int) -> str:
    """A widget's first lines as plain text (unbreakable spaces read as spaces)."""
    text = "\n".join(widget.render_line(y).text for y in range(lines))
    return text.replace("\u00a0", " ")


@pytest.mark.asyncio
async def test_bound_panel_shows_the_difference_on_a_wrong_record(planted: PanelModel) -> None:
    """On a record with a too-light tree the panel shows both trees and their difference."""
    node = int(planted.wrong_ids[0])
    view = bound_view(planted.trail, planted.index, node)
    tree = next(p for p in view.parts if p.name == TREE)
    assert tree.recorded is not None and tree.recomputed is not None
    assert tree.recorded < tree.recomputed
    panel = BoundPanel()
    async with PanelApp(panel).run_test(size=(70, 24)) as pilot:
        panel.show(planted, node)
        await pilot.pause()
        text = _text(panel, 16)
    gap = format_length(tree.recomputed - tree.recorded)
    assert f"−{gap}" in text
    assert format_length(tree.recorded) in text and format_length(tree.recomputed) in text
    assert "marked wrong" in text
    assert difference(tree, True) == f"−{gap}"
    assert f"Re-check: the tree is {gap} too low, so the bound is {gap} too low" in " ".join(
        line.strip() for line in text.splitlines()
    )


@pytest.mark.asyncio
async def test_bound_panel_agrees_on_a_clean_record(clean: PanelModel) -> None:
    """On a clean record every part is ticked and the oracle judges the prune."""
    trail = clean.trail
    pruned = np.flatnonzero(trail.columns["decision"] == Decision.PRUNE)
    node = int(pruned[0])
    panel = BoundPanel()
    async with PanelApp(panel).run_test(size=(70, 24)) as pilot:
        panel.show(clean, node)
        await pilot.pause()
        text = _text(panel, 16)
    view = panel.view
    assert view is not None and all(difference(p, True) == "✓" for p in view.parts)
    assert "safe prune" in text and "Safe:" in text.replace("\n", " ")
    assert "Pruned: the bound" in text


@pytest.mark.asyncio
async def test_bound_panel_shows_names_literally(clean: PanelModel) -> None:
    """A bound name holding Rich markup appears exactly as written."""
    solver = dataclasses.replace(clean.trail.header.solver, bound="[bold red]x[/]")
    header = dataclasses.replace(clean.trail.header, solver=solver)
    trail = dataclasses.replace(clean.trail, header=header)
    panel = BoundPanel()
    async with PanelApp(panel).run_test(size=(70, 24)) as pilot:
        panel.show_values(bound_view(trail, clean.index, 1, recheck=False))
        await pilot.pause()
        assert "[bold red]x[/]" in _text(panel, 3)


@pytest.mark.asyncio
async def test_bound_panel_shows_the_parts_the_bound_kind_names(clean: PanelModel) -> None:
    """A penalties trail's panel adds its penalty term, subtracted, and sums to its bound."""
    trail = clean.trail
    solver = dataclasses.replace(trail.header.solver, bound=PENALTIES)
    columns = (*trail.header.columns, Column(PENALTY, np.dtype("<f8")))
    header = dataclasses.replace(trail.header, solver=solver, columns=columns)
    penalised = dataclasses.replace(
        trail, header=header, columns={**trail.columns, PENALTY: np.full(trail.count, 4.5)}
    )
    view = bound_view(penalised, clean.index, 1, recheck=False)
    assert [p.name for p in view.parts] == ["partial", "tree", "link_in", "link_out", "penalty"]
    plain = [float(trail.columns[name][1]) for name in ("partial", "tree", "link_in", "link_out")]
    assert view.total.recorded == math.ceil(sum(plain) - 4.5)
    panel = BoundPanel()
    async with PanelApp(panel).run_test(size=(70, 24)) as pilot:
        panel.show_values(view)
        await pilot.pause()
        text = _text(panel, 12)
    assert "− penalty" in text and "4.50" in text


def test_bound_panel_reads_the_recheck_on_a_decisions_only_trail(clean: PanelModel) -> None:
    """Without recorded numbers the sum comes from the re-check, and nothing reads as missing."""
    trail = record_trail(planted_instance(), record="decisions")
    index = TreeIndex(trail.columns, trail.best)
    node = int(np.flatnonzero(trail.columns["decision"] == Decision.PRUNE)[0])
    view = bound_view(trail, index, node)
    same = bound_view(clean.trail, clean.index, node)
    assert view.total.recorded is None and view.total.recomputed == same.total.recorded
    assert view.sentence == same.sentence
    assert all(difference(p, True) == "" for p in (*view.parts, view.total))


def test_verdict_names_a_wrong_decision(planted: PanelModel) -> None:
    """On a record whose decision the rule contradicts, the verdict says which it calls for."""
    trail, index = planted.trail, planted.index
    views = (bound_view(trail, index, int(node)) for node in planted.wrong_ids[:200])
    view = next(v for v in views if v.expected is not None and v.expected != v.decision)
    words = verdict(view)
    assert words is not None
    assert f"the rule calls for {view.expected}, not {view.decision}" in words


@pytest.mark.asyncio
async def test_bound_panel_never_breaks_a_number(clean: PanelModel) -> None:
    """Wrapping the sentence keeps each grouped number ("12 345 678") on one line."""
    words = "Pruned: the bound 12 345 678 reaches the best tour so far, 12 345 600."
    view = dataclasses.replace(bound_view(clean.trail, clean.index, 1), sentence=words)
    panel = BoundPanel()
    async with PanelApp(panel).run_test(size=(26, 30)) as pilot:
        panel.show_values(view)
        await pilot.pause()
        lines = _text(panel, 30).splitlines()
    assert any("12 345 678" in line for line in lines)
    assert any("12 345 600" in line for line in lines)


@pytest.mark.asyncio
async def test_bound_panel_keeps_its_height_between_nodes(planted: PanelModel) -> None:
    """A shorter node after a taller one leaves the panel's height (and the layout) alone."""
    tall = int(planted.wrong_ids[0])
    short = int(np.flatnonzero(planted.trail.columns["decision"] == Decision.TOUR)[0])
    panel = BoundPanel()
    async with PanelApp(panel).run_test(size=(70, 30)) as pilot:
        panel.show(planted, tall)
        await pilot.pause()
        height = panel.size.height
        panel.show(planted, short)
        await pilot.pause()
        assert panel.size.height == height
        assert panel.view is not None and panel.view.node == short


@pytest.mark.asyncio
async def test_bound_panel_reuses_a_view_only_for_the_same_node_and_facts(
    planted: PanelModel, clean: PanelModel
) -> None:
    """Going back to a node shows the view made for it; a new mark or trail makes a new one."""
    node = int(planted.wrong_ids[0])
    panel = BoundPanel()
    async with PanelApp(panel).run_test(size=(70, 30)) as pilot:
        panel.show(planted, node)
        first = panel.view
        panel.show(planted, node + 1)
        panel.show(planted, node)
        await pilot.pause()
        assert panel.view is first, "the same node, trail and marks: the view made before"
        unmarked = dataclasses.replace(planted, wrong_ids=np.zeros(0, dtype=np.int64))
        panel.show(unmarked, node)
        assert panel.view is not None and panel.view is not first and not panel.view.wrong
        panel.show(clean, node)  # another trail: its own record, not the cached one
        assert panel.view == bound_view(
            clean.trail, clean.index, node, completion=panel.view.completion
        )
        assert panel.view.parts != first.parts


# -- the map -----------------------------------------------------------------------------


def test_raster_draws_a_horizontal_line() -> None:
    """A horizontal edge across a 3×1 cell grid lights the same dot row in every cell."""
    dots = np.array([[0.0, 0.0], [0.0, 5.0]])
    cells = raster(dots, np.array([[0, 1]]), rows=1, cols=3)
    assert cells.tolist() == [[0x09, 0x09, 0x09]]


def test_to_dots_keeps_the_aspect_ratio() -> None:
    """A square of cities stays square in dots (braille dots are square)."""
    xy = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0], [10.0, 10.0]])
    dots = to_dots(xy, rows=10, cols=40)
    height = dots[:, 0].max() - dots[:, 0].min()
    width = dots[:, 1].max() - dots[:, 1].min()
    assert height == pytest.approx(width)


@pytest.mark.asyncio
async def test_city_map_draws_the_path_and_toggles_labels(clean: PanelModel) -> None:
    """The map marks the start and the path's cities, and `n` writes the city numbers."""
    city_map = CityMap()
    node = next(n for n in range(clean.trail.count) if len(clean.index.path(n)) == 4)
    async with PanelApp(city_map).run_test(size=(60, 20)) as pilot:
        city_map.show(clean, node)
        await pilot.pause()
        plain = _text(city_map, 20)
        city_map.focus()
        await pilot.press("n")
        await pilot.pause()
        labelled = _text(city_map, 20)
    assert plain.count("◆") == 1 and plain.count("●") == 3 and plain.count("○") == 5
    assert "8" not in plain.replace("⣿", "") or "8" in labelled
    assert all(str(c) in labelled for c in range(9))
    assert "approximate" not in plain
    tree = format_length(float(clean.trail.columns[TREE][node]))
    assert plain.splitlines()[0].startswith(f"map · 5 left · tree {tree}")


@pytest.mark.asyncio
async def test_city_map_redraws_only_for_another_node_or_snapshot(clean: PanelModel) -> None:
    """The same node of the same trail and index again keeps the drawing; any change redraws."""
    city_map = CityMap()
    node = next(n for n in range(clean.trail.count) if len(clean.index.path(n)) == 4)
    async with PanelApp(city_map).run_test(size=(60, 20)) as pilot:
        city_map.show(clean, node)
        await pilot.pause()
        drawn = city_map.view
        city_map.show(clean, node)
        assert city_map.view is drawn
        city_map.show(clean, node + 1)
        moved = city_map.view
        assert moved is not None and moved.path == tuple(clean.index.path(node + 1))
        grown = dataclasses.replace(clean, index=TreeIndex(clean.trail.columns, clean.trail.best))
        city_map.show(grown, node + 1)  # a new snapshot (a live trail grew): drawn again
        assert city_map.view is not moved and city_map.view.path == moved.path
        before = city_map.view
        city_map.show(grown, node + 1)
        assert city_map.view is before
        await pilot.pause()
        assert "◆" in _text(city_map, 20)


def test_degrees_count_tree_and_link_ends(clean: PanelModel) -> None:
    """Each unvisited city's degree is its tree edges plus the links that end at it."""
    layout = city_layout(clean.trail.header.instance)
    view = map_view(clean.trail, clean.index, 1, layout)
    degree = degrees(view, clean.trail.n)
    rest = [c for c in range(clean.trail.n) if c not in view.path]
    assert degree[rest].sum() == 2 * len(view.tree) + len(view.links)
    assert all(degree[c] >= 1 for c in rest)


@pytest.mark.asyncio
async def test_city_map_colours_cities_by_degree(clean: PanelModel) -> None:
    """`d` colours the leaves of the bound's structure apart from the cities of degree 2."""
    city_map = CityMap()
    async with PanelApp(city_map).run_test(size=(60, 20)) as pilot:
        city_map.show(clean, 1)
        await pilot.pause()
        city_map.focus()
        await pilot.press("d")
        await pilot.pause()
        assert city_map.colouring == "degree"
        assert "degree 1" in city_map.render_line(19).text
        await pilot.press("d")
        await pilot.pause()
        assert city_map.colouring == "plain", "no penalties: the key skips that colouring"


@pytest.mark.asyncio
async def test_city_map_colours_cities_by_penalty(penalised: PanelModel) -> None:
    """On a penalties trail `d` reaches the penalty colouring, with its legend."""
    node = int(np.flatnonzero(~is_absent(penalised.trail.columns[TREE]))[-1])
    city_map = CityMap()
    async with PanelApp(city_map).run_test(size=(70, 20)) as pilot:
        city_map.show(penalised, node)
        await pilot.pause()
        city_map.focus()
        await pilot.press("d", "d")
        await pilot.pause()
        assert city_map.colouring == "penalty"
        legend = city_map.render_line(19).text
    assert "π > 0" in legend and "tree (π)" in legend


@pytest.mark.asyncio
async def test_city_map_says_a_layout_is_approximate() -> None:
    """A matrix-only trail is drawn from scaled distances and the map says so."""
    trail = record_trail(explicit_instance("m", planted_instance().matrix))
    model = model_of(trail, checked=False)
    city_map = CityMap()
    async with PanelApp(city_map).run_test(size=(60, 20)) as pilot:
        city_map.show(model, 3)
        await pilot.pause()
        assert "approximate layout" in city_map.render_line(0).text
    view = map_view(trail, model.index, 3, city_layout(trail.header.instance))
    assert len(view.tree) == trail.n - len(view.path) - 1 and len(view.links) == 2


# -- the outline -------------------------------------------------------------------------


@pytest.mark.asyncio
async def test_outline_loads_children_on_expand_with_a_more_row(clean: PanelModel) -> None:
    """Rows appear only under expanded nodes, a page at a time, and "more…" loads the next."""
    outline = BranchOutline(page=3)
    index = clean.index
    root_children = index.children(0)
    assert len(root_children) > 3
    async with PanelApp(outline).run_test(size=(60, 30)) as pilot:
        outline.show(clean, 0)
        await pilot.pause()
        outline.root.expand()
        await pilot.pause()
        labels = [str(child.label) for child in outline.root.children]
        assert len(labels) == 4 and labels[-1].startswith("more…")
        assert all(not child.children for child in outline.root.children)
        more = outline.root.children[-1]
        outline.move_cursor(more)
        await pilot.press("enter")
        await pilot.pause()
        shown = [c.data.node for c in outline.root.children if c.data and c.data.more_from is None]
        assert shown == root_children[: min(6, len(root_children))]
        assert app_picked(outline) == []


def app_picked(widget: Any) -> list[int]:
    """The nodes the harness app received Picked messages for."""
    return list(widget.app.picked)


@pytest.mark.asyncio
async def test_outline_reveals_a_deep_node_and_picks_on_enter(clean: PanelModel) -> None:
    """`show` opens just the path to a node; choosing its row posts Picked(node)."""
    index = clean.index
    deep = int(np.flatnonzero(clean.trail.columns["depth"] == 5)[-1])
    outline = BranchOutline(page=2)
    async with PanelApp(outline).run_test(size=(60, 30)) as pilot:
        outline.show(clean, deep)
        await pilot.pause()
        assert outline.cursor_node is not None and outline.cursor_node.data is not None
        assert outline.cursor_node.data.node == deep
        await pilot.press("enter")
        await pilot.pause()
        assert app_picked(outline) == [deep]
    assert index.ancestors(deep)[0] == 0


@pytest.mark.asyncio
async def test_outline_grows_with_a_live_trail(clean: PanelModel) -> None:
    """A grown snapshot of the same trail keeps the open rows and adds the new children."""
    full = clean.trail
    half = full.count // 3
    early = dataclasses.replace(full, columns={k: v[:half] for k, v in full.columns.items()})
    early_index = TreeIndex(early.columns, early.best)
    assert len(early_index.children(0)) < len(clean.index.children(0))
    outline = BranchOutline()
    async with PanelApp(outline).run_test(size=(60, 30)) as pilot:
        outline.show_trail(early, early_index, 1)
        await pilot.pause()
        assert len(outline.root.children) == len(early_index.children(0))
        outline.show_trail(full, clean.index, 1)
        await pilot.pause()
        shown = [child.data.node for child in outline.root.children if child.data]
        assert shown == clean.index.children(0)


# -- the screens -------------------------------------------------------------------------


class ScreenHarness(App[None]):
    """A harness that opens one screen over an empty one and keeps what it hands back."""

    def __init__(self, screen: Any) -> None:
        super().__init__()
        self.opened = screen
        self.results: list[Any] = []

    def on_mount(self) -> None:
        self.push_screen(self.opened, callback=self.results.append)


@pytest.mark.asyncio
async def test_stats_screen_table_title_and_close() -> None:
    """One table row per depth, the instance name shown literally, escape goes back."""
    trail = record_trail(planted_instance("[bold red]x[/] [link=file:///]y"))
    model = model_of(trail, checked=False, oracle=True)
    screen = StatsScreen.from_model(model)
    app = ScreenHarness(screen)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        title = screen.query_one("#stats-title", Static)
        assert "[bold red]x[/] [link=file:///]y" in str(title.render())
        table = screen.query_one(DataTable)
        assert table.row_count == screen.stats.max_depth + 1 == trail.n
        assert "oracle" in str(title.render())
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen is not screen and app.results == [None]


@pytest.fixture(scope="module")
def overestimated() -> PanelModel:
    """The search with `tree-spans-ends` planted: an overestimate cuts the optimal branch."""
    return model_of(record_trail(planted_instance(), fault="tree-spans-ends"), oracle=True)


def why_report(model: PanelModel) -> WhyReport:
    """B1's why report for the optimal tour of a model's trail."""
    table = completion_table(model.trail.header.instance)
    return explain(model.trail, model.index, tour=None, table=table)


@pytest.mark.asyncio
async def test_why_screen_shows_the_cut_and_hands_it_back(overestimated: PanelModel) -> None:
    """The screen names the cut node and the wrong part, and `c` hands the cut node back."""
    report = why_report(overestimated)
    assert report.cut_node is not None and report.culprit == "tree"
    screen = WhyScreen(report, overestimated.trail, overestimated.index, title="[b]x[/b]")
    app = ScreenHarness(screen)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        assert "[b]x[/b]" in str(screen.query_one("#why-title", Static).render())
        facts = _plain(screen.query_one("#why-parts", Static).content)
        tree = report.parts["tree"]
        assert format_length(tree["recorded"]) in facts
        assert format_length(tree["recomputed"]) in facts
        assert screen.query_one("#why-prunes", DataTable).row_count == len(report.harmful_prunes)
        await pilot.press("c")
        await pilot.pause()
    assert app.results == [report.cut_node]


@pytest.mark.asyncio
async def test_why_screen_without_a_cut(clean: PanelModel) -> None:
    """On a clean trail the tour is found, nothing is cut, and escape hands back nothing."""
    report = why_report(clean)
    assert report.cut_node is None and report.found_at is not None
    screen = WhyScreen(report, clean.trail, clean.index, title="planted")
    app = ScreenHarness(screen)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        table = screen.query_one("#why-prunes", DataTable)
        assert table.row_count == 1
        await pilot.press("escape")
        await pilot.pause()
    assert app.results == [None]


def _rows_under(node: Any) -> int:
    """How many rows a tree node holds below it."""
    return sum(1 + _rows_under(child) for child in node.children)


@pytest.mark.asyncio
async def test_outline_folds_back_when_it_grows(clean: PanelModel) -> None:
    """Revealing node after node never keeps more than the row cap plus one path's pages."""
    outline = BranchOutline(page=4, max_rows=30)
    depth = int(clean.trail.columns["depth"].max())
    async with PanelApp(outline).run_test(size=(60, 30)) as pilot:
        for node in range(0, clean.trail.count, 3):
            outline.show(clean, node)
        await pilot.pause()
        assert _rows_under(outline.root) <= 30 + depth * 5
        assert outline.cursor_node is not None and outline.cursor_node.data is not None


@pytest.mark.asyncio
async def test_outline_marks_wrong_records(planted: PanelModel) -> None:
    """Rows of records the re-check found wrong carry a mark, also once it finds them later."""
    node = int(planted.wrong_ids[0])
    unchecked = dataclasses.replace(planted, wrong_ids=np.zeros(0, dtype=np.int64))
    outline = BranchOutline()
    async with PanelApp(outline).run_test(size=(60, 30)) as pilot:
        outline.show(unchecked, node)
        await pilot.pause()
        assert outline.cursor_node is not None
        assert not str(outline.cursor_node.label).startswith("✗")
        outline.show(planted, node)
        await pilot.pause()
        assert str(outline.cursor_node.label).startswith("✗")
