"""The viewer: a trail's nodes as a virtual list, with panels that follow the cursor.

The screen is a function of one `ViewerModel`. Keys become actions on it (every binding has
a description and an id, so a key file can remap it, and every action is also a command in
the palette). Work that can take long runs in declared thread workers that reach the UI only
through small messages: the re-check (chunk by chunk, marks appear as results arrive), the
exact-completion oracle, the why search, runs to a stop condition, and following a live
trail. Everything shown from the file (names, notes, notices) goes through `Text`, so it is
never read as markup.
"""

from __future__ import annotations

import contextlib
import threading
import time
from collections.abc import Callable, Iterable, Iterator
from functools import partial
from pathlib import Path
from typing import Any, ClassVar

import numpy as np
from numpy.typing import NDArray
from rich.text import Text
from textual import work
from textual.app import App, ComposeResult, SystemCommand
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.message import Message
from textual.screen import Screen
from textual.timer import Timer
from textual.widgets import ProgressBar, Static
from textual.worker import Worker, WorkerState, get_current_worker

from tracer.analysis import (
    ORACLE_MAX_CITIES,
    DepthStats,
    FilterError,
    StopCondition,
    TreeIndex,
    WhyReport,
    best_completions,
    completion_table,
    explain,
    format_length,
    lazy_view,
    recheck,
    stream_explain,
    stream_recheck,
    stream_stats,
)
from tracer.base import DEFAULT_MEMORY_MB, InputError, PrunetrailError, Trail
from tracer.trails import BlockFile, Follower
from tui.bookmarks import Bookmark, clean_note, load_bookmarks, save_bookmarks, sidecar_path
from tui.bound_panel import BoundPanel
from tui.city_map import CityMap
from tui.dialogs import BookmarksScreen, HelpScreen, NoteDialog, StopDialog
from tui.keys import keymap_path, load_keymap
from tui.loading import Loading, start_loading
from tui.model import RECHECK_STEP, ViewerModel
from tui.node_list import NodeList, NodeListHeader
from tui.outline import BranchOutline
from tui.prompt_bar import FilterBar, GoToBar, PromptBar
from tui.steady import SteadyFooter, SteadyScreen
from tui.walkthrough import walkthrough

#: Play speeds, in steps per second.
SPEEDS = (1, 2, 5, 10, 20, 50, 100)
#: The oracle keeps one float64 per node: above this many nodes it is left out.
ORACLE_MAX_NODES = 1 << 22
#: Seconds between polls of a live trail.
FOLLOW_INTERVAL = 0.5
#: Bytes a trail opened block by block is indexed by per step, and seconds between the
#: snapshots the viewer takes while it is indexed.
INDEX_STEP_BYTES = 16 << 20
INDEX_SNAPSHOT_SECONDS = 0.5


#: Node count assumed for bookmarks while a trail is indexed or followed (ids are int64).
_UNKNOWN_COUNT = 1 << 62


class _CancelledError(Exception):
    """Raised inside a streaming pass to end it when its worker is cancelled."""


# -- messages from workers ---------------------------------------------------------------


class RecheckProgress(Message):
    """The re-check finished the nodes below `checked_to`; `wrong` are the wrong ones."""

    def __init__(self, wrong: NDArray[np.int64], checked_to: int, total: int) -> None:
        super().__init__()
        self.wrong = wrong
        self.checked_to = checked_to
        self.total = total


class TrailGrew(Message):
    """A live trail has more nodes (or its end): the new snapshot and its index."""

    def __init__(self, trail: Trail, index: TreeIndex) -> None:
        super().__init__()
        self.trail = trail
        self.index = index


class IndexProgress(Message):
    """How far a trail opened block by block has been indexed (bytes of the file);
    `following`: the whole file as it is now is read, and it is followed as it grows."""

    def __init__(self, done: int, size: int, nodes: int, following: bool) -> None:
        super().__init__()
        self.done = done
        self.size = size
        self.nodes = nodes
        self.following = following


class Notice(Message):
    """Something a worker wants the user to read (a live trail stopped, say)."""

    def __init__(self, reason: str) -> None:
        super().__init__()
        self.reason = reason


class RunFinished(Message):
    """A run to the stop list ended at `node` (None: no node matches that way)."""

    def __init__(self, node: int | None, direction: int, what: str) -> None:
        super().__init__()
        self.node = node
        self.direction = direction
        self.what = what


class PlayStop(Message):
    """Where the play started as `run` pauses: the next node meeting the stop list (None:
    none among the first `seen` nodes, the count when the search started)."""

    def __init__(self, node: int | None, run: int, seen: int) -> None:
        super().__init__()
        self.node = node
        self.run = run
        self.seen = seen


class OracleReady(Message):
    """The exact completion of every node is known."""

    def __init__(self, table: Any, completions: NDArray[np.float64]) -> None:
        super().__init__()
        self.table = table
        self.completions = completions


class WhyReady(Message):
    """The why report for the optimal tour is ready."""

    def __init__(self, report: WhyReport, show: bool) -> None:
        super().__init__()
        self.report = report
        self.show = show


# -- the app -----------------------------------------------------------------------------


def _size(count: int) -> str:
    """Bytes as MB below a gigabyte, else GB."""
    return f"{count / 1e6:.0f} MB" if count < 10**9 else f"{count / 1e9:.2f} GB"


def _binding(keys: str, action: str, description: str, *, show: bool = False) -> Binding:
    return Binding(keys, action, description, show=show, id=action)


class PrunetrailApp(App[None]):
    """The trail viewer.

    Args:
        path_or_trail: a trail or JSON Lines file, a `Trail` already read, or one being
            opened (`tui.loading.start_loading`, started before the viewer's imports).
        at: node id to start on.
        prefix: path prefix (e.g. "0 5 2") to filter to and start at.
        filter: filter text to apply at start.
        follow: follow a trail without an end frame as it grows.
        background: run the re-check and the oracle in the background.
    """

    CSS_PATH = Path(__file__).with_name("viewer.tcss")
    TITLE = "prunetrail"

    BINDINGS: ClassVar[list[BindingType]] = [
        _binding("q,ctrl+q", "quit", "Quit", show=True),
        _binding("down,j", "next", "Next node"),
        _binding("up,k", "previous", "Previous node"),
        _binding("pagedown", "page_down", "Page down"),
        _binding("pageup", "page_up", "Page up"),
        _binding("home,g", "first", "First row"),
        _binding("end,G", "last", "Last row"),
        _binding("left,h", "parent", "Parent", show=True),
        _binding("right,l", "first_child", "First child", show=True),
        _binding("s", "next_sibling", "Next sibling", show=True),
        _binding("S", "previous_sibling", "Previous sibling"),
        _binding("i", "goto", "Go to id", show=True),
        _binding("r", "run_forward", "Run to stop", show=True),
        _binding("R", "run_backward", "Run back to stop"),
        _binding("u", "stops", "Stop list", show=True),
        _binding("space", "play", "Play/pause", show=True),
        _binding("plus,equals_sign", "faster", "Faster"),
        _binding("minus", "slower", "Slower"),
        _binding("f", "filter", "Filter", show=True),
        _binding("F", "clear_filter", "Clear filter"),
        _binding("c", "why_cut", "Go to the cut", show=True),
        _binding("w", "why", "Why screen"),
        _binding("t", "stats", "Stats screen"),
        _binding("a", "bookmark", "Bookmark"),
        _binding("b", "bookmarks", "Bookmarks"),
        _binding("e", "export_svg", "Export SVG"),
        _binding("E", "export_walkthrough", "Export walkthrough"),
        _binding("1", "toggle_bound", "Bound panel"),
        _binding("2", "toggle_map", "Map"),
        _binding("3", "toggle_outline", "Outline"),
        _binding("question_mark", "help", "Help", show=True),
    ]

    def __init__(
        self,
        path_or_trail: str | Path | Trail | Loading,
        at: int | None = None,
        prefix: str | None = None,
        filter: str | None = None,
        *,
        follow: bool = True,
        background: bool = True,
        memory_mb: int = DEFAULT_MEMORY_MB,
    ) -> None:
        super().__init__()
        self._follower: Follower | None = None
        self._notice: str | None = None
        index: TreeIndex | None = None
        blocks: BlockFile | None = None
        if isinstance(path_or_trail, Trail):
            trail = path_or_trail
            self._notice = trail.notice
        else:
            loading = (
                path_or_trail
                if isinstance(path_or_trail, Loading)
                else start_loading(path_or_trail, follow=follow, memory_mb=memory_mb)
            )
            opened = loading.result()
            trail, self._notice, self._follower = opened.trail, opened.notice, opened.follower
            index, blocks = opened.index, opened.blocks
        live = self._follower is not None or (blocks is not None and blocks.indexing and follow)
        self.model = ViewerModel(trail, index, live=live, blocks=blocks)
        self._follow_blocks = follow
        self._opened_size = blocks.progress[2] if blocks is not None else 0
        self._background = background
        self._stop_follow = threading.Event()
        self.stops = StopCondition(prune=True)
        self._speed = 3
        self._play_timer: Timer | None = None
        self._play_target: int | None = None
        self._play_run = 0  # bumped whenever a stop being looked for goes out of date
        self._play_looking = False  # a search for the play's stop is running
        self._play_look_again = False  # ... and the trail grew meanwhile
        self._play_seen = 0  # nodes a search found no stop among (the next starts there)
        self._why_report: WhyReport | None = None
        self._rechecking = False  # a block-read trail's re-check pass is running
        self._stats: DepthStats | None = None  # a block-read trail's, once streamed
        self._passes: dict[str, tuple[int, int]] = {}  # streaming passes running: how far
        self._table: Any = None
        self._pending_at: int | None = None
        self._start = self._starting_view(at, prefix, filter)
        self._bookmark_file = sidecar_path(trail.path)
        # While a trail is still indexed or followed, its count is not yet known: keep every
        # bookmark (saving drops none that the rest of the file, or of the run, holds).
        growing = self._follower is not None or (blocks is not None and blocks.indexing)
        known = _UNKNOWN_COUNT if growing else trail.count
        self.bookmarks, bookmark_notice = load_bookmarks(self._bookmark_file, known)
        self._notices = [n for n in (self._notice, bookmark_notice) if n]
        self._keymap_file = keymap_path()
        keymap, problems = load_keymap(self._keymap_file, self._binding_ids())
        self._notices += problems
        self._user_keys = keymap
        if keymap:
            self.set_keymap(keymap)

    def _starting_view(self, at: int | None, prefix: str | None, text: str | None) -> int:
        """Apply --prefix and --filter; the node to start on.

        Raises:
            InputError: a bad filter, prefix or node id (one line, for the CLI).
        """
        model = self.model
        clauses = [f"under {prefix}"] if prefix else []
        clauses += [text] if text else []
        try:
            model.apply_filter(" and ".join(clauses))
        except FilterError as exc:
            raise InputError(model.trail.path, f"bad filter: {exc}") from None
        indexing = model.indexing  # what is not indexed yet may still hold the node
        if (
            prefix
            and not indexing
            and model.index.node_for_prefix(list(model.filter.prefixes[0])) is None
        ):
            raise InputError(model.trail.path, f"--prefix {prefix}: no node has this path")
        if at is not None and at >= model.count and indexing:
            self._pending_at = at  # gone to once indexed that far
        elif at is not None and not 0 <= at < model.count:
            raise InputError(
                model.trail.path, f"--at {at}: the trail has nodes 0..{model.count - 1}"
            )
        elif at is not None:
            return at
        return model.rows.id_at(0) if len(model.rows) else 0

    # -- layout --------------------------------------------------------------------------

    def get_default_screen(self) -> Screen[Any]:
        return SteadyScreen(id="_default")

    def compose(self) -> ComposeResult:
        # The main screen's widgets are kept by reference: `query_one` on the app searches
        # the active screen, which is a dialog while one is open.
        self._top = Static(id="top")
        header = NodeListHeader(id="list-header")
        self._node_list = NodeList(self.model, header, id="nodes")
        self._side = Vertical(id="side")
        self._panels: dict[str, BoundPanel | CityMap | BranchOutline] = {
            "#bound": BoundPanel(id="bound"),
            "#map": CityMap(id="map"),
            "#outline": BranchOutline(id="outline", classes="hidden"),
        }
        self._work_label = Static(id="work-label")
        self._work_bar = ProgressBar(id="work-bar", show_eta=False)
        self._work = Horizontal(id="work")
        self._filter_bar = FilterBar(id="filter-bar")
        self._goto_bar = GoToBar(id="goto-bar")
        yield self._top
        with Horizontal(id="body"):
            with Vertical(id="list-pane"):
                yield header
                yield self._node_list
            with self._side:
                yield from self._panels.values()
        with self._work:
            yield self._work_label
            yield self._work_bar
        yield self._filter_bar
        yield self._goto_bar
        self._footer = SteadyFooter()
        yield self._footer

    def on_mount(self) -> None:
        self._node_list.focus()
        for notice in self._notices:
            self.notify(notice, title="Notice", severity="warning", timeout=12, markup=False)
        self.goto(self._start)
        self._update_top()
        if self.model.count == 0:
            self.notify("the trail holds no nodes yet", markup=False)
        if not self._background:
            self._hide_work()
        self.call_after_refresh(self._start_background)

    def _start_background(self) -> None:
        """Start the re-check, the oracle and the follower once the first screen is drawn."""
        blocks = self.model.blocks
        if self._background:
            self._recheck()
            if self._oracle_fits():
                self._oracle()
        if self._follower is not None:
            self._follow(self._follower)
        if blocks is not None and blocks.indexing and (self._follow_blocks or self._background):
            self._index_blocks(blocks)

    # -- the cursor and what follows it --------------------------------------------------

    @property
    def cursor(self) -> int:
        """The node under the cursor."""
        return self.model.cursor

    def goto(self, node: int | None) -> None:
        """Put the cursor on `node` (no-op for None or an id outside the trail)."""
        model = self.model
        if node is None or not 0 <= node < model.count:
            return
        model.cursor = node
        nodes = self._node_list
        nodes.cursor_row = model.rows.row_of(node)
        self._show_panels()
        self._update_top()

    def _show_panels(self) -> None:
        node = self.model.cursor
        if not self.model.count:
            return
        if not self._side.display:
            return
        for panel in self._panels.values():
            if panel.display:
                panel.show(self.model, node)

    def _update_top(self) -> None:
        model = self.model
        trail = model.trail
        counts = model.counts()
        d = counts.decisions
        integral = trail.header.instance.integral
        top = Text(no_wrap=True, overflow="ellipsis")
        top.append(trail.header.instance.name, style="bold")
        top.append(f"  n={trail.n}  ")
        status = model.status
        top.append(status, style="bold green" if model.complete else "bold yellow")
        top.append(
            f"  {counts.nodes:,} nodes (expand {d['expand']:,}, prune {d['prune']:,}, "
            f"skip {d['skip']:,}, tours {d['tour'] + d['tour_better']:,})"
        )
        top.append(f"  incumbent {format_length(model.incumbent(), integral)}")
        if model.wrong_ids.size:
            top.append(f"  ✗ {model.wrong_ids.size:,} wrong", style="bold red")
        top.append("\n")
        top.append(f"node {model.cursor}  ", style="bold")
        if model.filter.empty:
            top.append("filter: none", style="dim")
        else:
            top.append("filter: ")
            top.append(model.filter.describe(), style="italic")
            top.append(f"  keeps {len(model.rows):,}")
        top.append(f"   stop at: {self.stops.describe() or 'nothing'}", style="dim")
        if self._play_timer is not None:
            top.append(f"   ▶ {SPEEDS[self._speed]}/s", style="bold cyan")
        else:
            top.append(f"   speed {SPEEDS[self._speed]}/s", style="dim")
        self._top.update(top, layout=False)

    def on_node_list_picked(self, message: NodeList.Picked) -> None:
        self.goto(message.node)

    def on_branch_outline_picked(self, message: BranchOutline.Picked) -> None:
        self.goto(message.node)

    # -- moves ---------------------------------------------------------------------------

    def action_next(self) -> None:
        """Next node in visit order (among the rows kept)."""
        self.goto(self.model.step(self.cursor, 1))

    def action_previous(self) -> None:
        """Previous node in visit order."""
        self.goto(self.model.step(self.cursor, -1))

    def _page(self) -> int:
        return max(1, self._node_list.size.height - 1)

    def action_page_down(self) -> None:
        """A page of rows down."""
        self.goto(self.model.step(self.cursor, self._page()))

    def action_page_up(self) -> None:
        """A page of rows up."""
        self.goto(self.model.step(self.cursor, -self._page()))

    def action_first(self) -> None:
        """The first row."""
        if len(self.model.rows):
            self.goto(self.model.rows.id_at(0))

    def action_last(self) -> None:
        """The last row."""
        rows = self.model.rows
        if len(rows):
            self.goto(rows.id_at(len(rows) - 1))

    def _move(self, node: int | None, what: str) -> None:
        if node is None:
            self.notify(f"node {self.cursor} has no {what}", timeout=3)
        self.goto(node)

    def action_parent(self) -> None:
        """The cursor node's parent."""
        self._move(self.model.parent(self.cursor), "parent")

    def action_first_child(self) -> None:
        """The cursor node's first child."""
        self._move(self.model.first_child(self.cursor), "child")

    def action_next_sibling(self) -> None:
        """The next child of the same parent."""
        self._move(self.model.next_sibling(self.cursor), "next sibling")

    def action_previous_sibling(self) -> None:
        """The previous child of the same parent."""
        self._move(self.model.previous_sibling(self.cursor), "previous sibling")

    def action_goto(self) -> None:
        """Ask for a node id and go there."""
        if self.model.count:
            self._prompt(
                self._goto_bar,
                lambda done: self._goto_bar.open_for(self.model.count, done),
                self.goto,
            )

    def _prompt(
        self,
        bar: PromptBar,
        opening: Callable[[Callable[[Any], None]], None],
        then: Callable[[Any], None],
    ) -> None:
        """Open a prompt line in the work line's place; `then` gets its value (None: closed)."""
        for other in (self._filter_bar, self._goto_bar):
            if other is not bar and other.is_open:
                other.action_cancel()

        footer = self._footer

        def done(value: Any) -> None:
            with self.batch_update():
                self._work.display = True
                if not bar.focus_left():  # a click that closed it keeps the focus it gave
                    self._node_list.focus()
                footer.held = False
                then(value)

        footer.held = True
        self._work.display = False
        opening(done)

    # -- runs and play -------------------------------------------------------------------

    def action_stops(self) -> None:
        """Edit the stop list."""

        def chosen(condition: StopCondition | None) -> None:
            if condition is not None:
                self.stops = condition
                self._forget_play_stop()
                self._update_top()

        self.push_screen(StopDialog(self.stops), chosen)

    def action_run_forward(self) -> None:
        """Run forward to the next node where the stop list holds."""
        self._run(1)

    def action_run_backward(self) -> None:
        """Run backward to the previous node where the stop list holds."""
        self._run(-1)

    def _run(self, direction: int) -> None:
        if self.stops.empty:
            self.action_stops()
            return
        self._search(self.stops, self.cursor, direction)

    @work(thread=True, exclusive=True, group="run", exit_on_error=False)
    def _search(self, condition: StopCondition, start: int, direction: int) -> None:
        found = self.model.run_until(condition, start, direction)
        if not get_current_worker().is_cancelled:
            self.post_message(RunFinished(found, direction, condition.describe()))

    def on_run_finished(self, message: RunFinished) -> None:
        if message.node is None:
            way = "ahead" if message.direction > 0 else "behind"
            self.notify(f"no node {way} where: {message.what}", timeout=4, markup=False)
            return
        self.goto(message.node)

    def action_play(self) -> None:
        """Play forward at the chosen speed, pausing where the stop list holds."""
        if self._play_timer is not None:
            self._pause()
            return
        self._play_timer = self.set_interval(1 / SPEEDS[self._speed], self._tick)
        self._forget_play_stop()
        self._update_top()

    def _forget_play_stop(self) -> None:
        """The stop list or the rows changed: the stop found (or being looked for) is out of
        date; while playing, look again from the cursor."""
        self._play_target = None
        self._play_run += 1
        self._play_seen = 0
        self._look_for_play_stop()

    def _look_for_play_stop(self) -> None:
        """While playing with a stop list and no stop found yet, look for it; one search at a
        time (one asked for meanwhile is made once the running one ends)."""
        if self._play_timer is None or self.stops.empty or self._play_target is not None:
            return
        if self._play_looking:
            self._play_look_again = True
            return
        self._play_looking = True
        start = max(self.cursor, self._play_seen - 1)  # not again over what was searched
        self._find_play_stop(self.stops, start, self._play_run, self.model.count)

    @work(thread=True, group="play", exit_on_error=False)
    def _find_play_stop(self, condition: StopCondition, start: int, run: int, seen: int) -> None:
        """Where play pauses, looked for off the UI thread (on a trail read block by block, a
        rare stop can take seconds to reach); the play goes on meanwhile."""
        found: int | None = None
        searched = 0  # a search that fails has searched nothing
        try:
            found, searched = self.model.run_until(condition, start, 1), seen
        finally:  # every search's end is heard of, so the next one can start
            self.post_message(PlayStop(found, run, searched))

    def on_play_stop(self, message: PlayStop) -> None:
        self._play_looking = False
        again = self._play_look_again or message.run != self._play_run
        self._play_look_again = False
        node = message.node
        if message.run == self._play_run and node is None:
            self._play_seen = message.seen
        if message.run == self._play_run and node is not None and self._play_timer is not None:
            self._play_target = node
            if self.cursor >= node:  # played past it before it was found
                self._pause_at(node)
        elif again:
            self._look_for_play_stop()

    def _pause_at(self, node: int) -> None:
        self.goto(node)
        self._pause()
        self.notify(f"paused: node {node} meets the stop list", timeout=3)

    def _pause(self) -> None:
        if self._play_timer is not None:
            self._play_timer.stop()
            self._play_timer = None
        self._update_top()

    def _tick(self) -> None:
        node = self.model.step(self.cursor, 1)
        if node is None:
            self._pause()
            return
        target = self._play_target
        if target is not None and node >= target:
            self._pause_at(target)
        else:
            self.goto(node)

    def _set_speed(self, index: int) -> None:
        self._speed = max(0, min(index, len(SPEEDS) - 1))
        if self._play_timer is not None:
            self._play_timer.stop()
            self._play_timer = self.set_interval(1 / SPEEDS[self._speed], self._tick)
        self._update_top()

    def action_faster(self) -> None:
        """Play faster."""
        self._set_speed(self._speed + 1)

    def action_slower(self) -> None:
        """Play slower."""
        self._set_speed(self._speed - 1)

    # -- filter --------------------------------------------------------------------------

    def action_filter(self) -> None:
        """Edit the filter."""
        bar = self._filter_bar
        self._prompt(bar, lambda done: bar.open(self.model.filter.text, done), self.apply_filter)

    def action_clear_filter(self) -> None:
        """Show every node again."""
        self.apply_filter("")

    def apply_filter(self, text: str | None) -> None:
        """Filter the rows by `text` (None: leave them as they are)."""
        if text is None:
            return
        try:
            self.model.apply_filter(text)
        except FilterError as exc:
            self.notify(str(exc), title="Filter", severity="error", markup=False)
            return
        self._node_list.reload()
        if len(self.model.rows) and not self.model.rows.holds(self.cursor):
            row = min(self.model.rows.row_of(self.cursor), len(self.model.rows) - 1)
            self.goto(self.model.rows.id_at(row))
        else:
            self.goto(self.cursor)
        self._forget_play_stop()  # after the cursor moved into the rows

    # -- background work -----------------------------------------------------------------

    def _recheck(self) -> None:
        blocks = self.model.blocks
        if blocks is None:
            self._recheck_in_memory()
        elif not self.model.settled:
            self._work_label.update(
                Text("re-check starts once the trail is indexed", style="dim"), layout=False
            )
        elif self._rechecking or self.model.count != blocks.count:
            return  # a pass is running, or a newer snapshot is on its way
        elif self.model.checked == 0 or (
            self.model.trail.end is not None and self.model.checked < self.model.count
        ):
            # One pass once indexed, and once more over what a live run added by its end
            # (each pass reads the file from its start, so not at every growth).
            self._rechecking = True
            self._recheck_blocks(blocks, self.model.checked, self._recheck_stop())

    def _recheck_stop(self) -> int:
        """Where a block-read trail's re-check stops: a live trail's last node waits (it may
        still get its first child, which changes whether its decision was followed)."""
        model = self.model
        return model.count - 1 if model.live and model.trail.end is None else model.count

    @work(thread=True, exclusive=True, group="recheck", exit_on_error=False)
    def _recheck_blocks(self, blocks: BlockFile, start: int, stop: int) -> None:
        """The re-check of a trail opened block by block: one streaming pass, marks as found."""
        worker = get_current_worker()
        total = self.model.count

        def found(wrong: NDArray[np.int64], checked_to: int) -> None:
            if worker.is_cancelled:
                raise _CancelledError
            self.post_message(RecheckProgress(wrong, checked_to, total))

        try:
            # Windows of RECHECK_STEP rows, as the in-memory re-check's steps: each numpy
            # pass of the check then holds the interpreter only briefly, so keys stay quick.
            with contextlib.suppress(_CancelledError):
                stream_recheck(
                    blocks, start=start, stop=stop, first=0, rows=RECHECK_STEP, on_wrong=found
                )
        finally:
            self.call_from_thread(self._rechecked)

    def _rechecked(self) -> None:
        """A block-read trail's re-check pass ended: start the next one if the run has."""
        self._rechecking = False
        if self._background and self.model.blocks is not None:
            self._recheck()

    @work(thread=True, exclusive=True, group="index", exit_on_error=False)
    def _index_blocks(self, blocks: BlockFile) -> None:
        """Index the rest of a trail opened block by block (then follow it if it is live),
        handing the viewer a new snapshot every `INDEX_SNAPSHOT_SECONDS`."""
        worker = get_current_worker()
        shown = time.monotonic()
        while not worker.is_cancelled:
            added = blocks.refresh(INDEX_STEP_BYTES)
            _, done, size = blocks.progress
            now = time.monotonic()
            resting = not blocks.indexing or blocks.at_end
            if added and (resting or now - shown >= INDEX_SNAPSHOT_SECONDS):
                shown = now
                self.post_message(TrailGrew(*lazy_view(blocks)))
            following = resting and blocks.indexing and self._follow_blocks
            if added or not resting:
                self.post_message(IndexProgress(done, size, blocks.count, following))
            if not blocks.indexing or (resting and not self._follow_blocks):
                if not added:  # the model learns that the trail is settled
                    self.post_message(TrailGrew(*lazy_view(blocks)))
                if blocks.notice:  # where a cut or damaged file stops, now that it is known
                    self.post_message(Notice(blocks.notice))
                return
            if resting and self._stop_follow.wait(FOLLOW_INTERVAL):
                return

    def on_index_progress(self, message: IndexProgress) -> None:
        if self.model.checked:
            return
        self._work_bar.update(total=max(message.size, 1), progress=message.done)
        if message.following:
            text = f"indexed {message.nodes:,} nodes; following the file as it grows"
        elif message.done >= message.size:
            text = f"indexed {message.nodes:,} nodes"
        else:
            text = (
                f"indexing: {_size(message.done)} of {_size(message.size)}, "
                f"{message.nodes:,} nodes so far"
            )
        self._work_label.update(Text(text, style="yellow"), layout=False)

    @work(thread=True, exclusive=True, group="recheck", exit_on_error=False)
    def _recheck_in_memory(self) -> None:
        worker = get_current_worker()
        model = self.model
        trail, index = model.trail, model.index
        total = index.count
        for lo, hi in model.recheck_ranges(model.checked):
            if worker.is_cancelled:
                return
            report = recheck(trail, index, start=lo, stop=hi, first=0)
            self.post_message(RecheckProgress(report.wrong_ids, hi, total))

    def on_recheck_progress(self, message: RecheckProgress) -> None:
        model = self.model
        filtered_on_wrong = model.filter.wrong
        model.add_wrong(message.wrong, message.checked_to)
        nodes = self._node_list
        if filtered_on_wrong and len(message.wrong):
            nodes.reload()
            nodes.cursor_row = model.rows.row_of(model.cursor)
        elif len(message.wrong):
            nodes.marks_changed()
            self._show_panels()
        bar = self._work_bar
        bar.update(total=max(message.total, 1), progress=message.checked_to)
        label = self._work_label
        wrong = model.wrong_ids.size
        done = message.checked_to >= message.total
        label.update(
            Text(
                f"re-check {'done' if done else 'running'}: {message.checked_to:,} of "
                f"{message.total:,} nodes, {wrong:,} wrong",
                style="red" if wrong else "green" if done else "",
            ),
            layout=False,
        )
        if len(message.wrong):
            self._update_top()

    def _hide_work(self) -> None:
        # A bar without a total is indeterminate and animates (a timer) even when hidden.
        self._work_bar.display = False
        self._work_bar.update(total=1, progress=0)

    def _oracle_fits(self) -> bool:
        return (
            self.model.trail.n <= ORACLE_MAX_CITIES
            and self.model.count <= ORACLE_MAX_NODES
            and not self.model.live
            and self.model.blocks is None
        )

    @work(thread=True, exclusive=True, group="oracle", exit_on_error=False)
    def _oracle(self) -> None:
        model = self.model
        try:
            table = completion_table(model.trail.header.instance)
        except PrunetrailError as exc:
            self.post_message(Notice(f"no exact completions: {exc}"))
            return
        completions = best_completions(model.trail, model.index, table)
        self.post_message(OracleReady(table, completions))

    def on_oracle_ready(self, message: OracleReady) -> None:
        self._table = message.table
        self.model.completions = message.completions
        self._show_panels()

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.state == WorkerState.ERROR and event.worker.error is not None:
            what = event.worker.group
            self.notify(
                f"{what} stopped: {event.worker.error}", severity="error", timeout=8, markup=False
            )

    # -- live follow ---------------------------------------------------------------------

    @work(thread=True, exclusive=True, group="follow", exit_on_error=False)
    def _follow(self, follower: Follower) -> None:
        try:
            while not self._stop_follow.wait(FOLLOW_INTERVAL):
                if get_current_worker().is_cancelled:
                    return
                try:
                    _, added, best = follower.poll()
                except InputError as exc:
                    self.post_message(Notice(str(exc)))
                    return
                trail = follower.trail
                if trail is None or not (added or best or trail.end is not None):
                    continue
                self.post_message(TrailGrew(trail, TreeIndex(trail.columns, trail.best)))
                if trail.end is not None:
                    return
        finally:
            follower.close()

    def on_trail_grew(self, message: TrailGrew) -> None:
        model = self.model
        at_end = model.count == 0 or model.cursor >= model.count - 1
        before = model.count
        dropped = model.replace_trail(message.trail, message.index)
        if dropped is not None:
            self.notify(dropped, severity="warning", timeout=8, markup=False)
        if model.count != before:  # what was worked out for fewer nodes is out of date
            self._stats = self._why_report = None
        self._node_list.reload()
        self._look_for_play_stop()  # a stop found stays (ids keep), one not found may be new
        pending = self._pending_at
        if pending is not None and (pending < model.count or model.settled):
            self._pending_at = None
            at_end = False
            model.cursor = min(pending, max(model.count - 1, 0))
        self.goto(model.count - 1 if at_end else model.cursor)
        if model.trail.end is not None and self._grew_while_open(message.trail):
            self.notify(f"the run ended: {model.status}", timeout=5, markup=False)
        if self._background:
            self._recheck()

    def _grew_while_open(self, trail: Trail) -> bool:
        """Whether the file grew while the viewer had it open (not merely indexed late)."""
        if self.model.blocks is None:
            return True  # only a followed trail in memory grows
        return self.model.blocks.progress[2] > self._opened_size

    def on_notice(self, message: Notice) -> None:
        self.notify(message.reason, severity="warning", timeout=10, markup=False)
        if self.model.live and self._follower is not None:
            self.model.live = False
            self._update_top()

    def on_unmount(self) -> None:
        self._stop_follow.set()
        self.workers.cancel_all()

    # -- why, stats ----------------------------------------------------------------------

    def action_why_cut(self) -> None:
        """Go to the node where the optimal tour's branch was cut."""
        self._why(show=False)

    def action_why(self) -> None:
        """Show the why report for the optimal tour."""
        self._why(show=True)

    def _why(self, show: bool) -> None:
        if self._why_report is not None:
            self.post_message(WhyReady(self._why_report, show))
            return
        if self.model.trail.n > ORACLE_MAX_CITIES:
            self.notify(
                f"why needs the optimal tour: only for up to {ORACLE_MAX_CITIES} cities",
                timeout=5,
            )
            return
        if not self.model.settled:
            self.notify("why once the trail is indexed", timeout=4, markup=False)
            return
        if self._told_progress("why"):
            return
        if self.model.blocks is not None:
            self.notify(
                f"following the optimal tour through all {self.model.count:,} nodes "
                "(one pass over the file)…",
                timeout=5,
            )
        else:
            self.notify("looking for where the optimal tour's branch was cut…", timeout=3)
        if self.model.blocks is not None:
            self._passes["why"] = (0, self.model.count)
        self._explain(show)

    @work(thread=True, exclusive=True, group="why", exit_on_error=False)
    def _explain(self, show: bool) -> None:
        model = self.model
        table = self._table
        if table is None:
            table = completion_table(model.trail.header.instance)
            self._table = table
        if model.blocks is not None:
            try:
                with self._pass("why") as progress:
                    report = stream_explain(
                        model.blocks, tour=None, table=table, on_progress=progress
                    )
            except _CancelledError:
                return
        else:
            report = explain(
                model.trail, model.index, tour=None, table=table, completions=model.completions
            )
        self.post_message(WhyReady(report, show))

    def on_why_ready(self, message: WhyReady) -> None:
        from tui.why_screen import WhyScreen  # plotting loads only when a chart is shown

        self._why_report = message.report
        cut = message.report.cut_node
        if message.show:
            title = self.model.trail.header.instance.name
            screen = WhyScreen(message.report, self.model.trail, self.model.index, title=title)
            self.push_screen(screen, self.goto)
        elif cut is None:
            self.notify(Text(message.report.explanation).plain, timeout=6, markup=False)
        else:
            self.goto(int(cut))

    def action_stats(self) -> None:
        """The per-depth statistics screen."""
        from tui.stats_screen import StatsScreen  # plotting loads only when a chart is shown

        blocks = self.model.blocks
        if blocks is None:
            self.push_screen(StatsScreen.from_model(self.model))
        elif self._stats is not None:
            self.push_screen(StatsScreen(self._stats, title=self.model.trail.header.instance.name))
        elif not self.model.settled:
            self.notify("statistics once the trail is indexed", timeout=4, markup=False)
        elif not self._told_progress("stats"):
            self.notify(f"reading all {self.model.count:,} nodes for the statistics…", timeout=4)
            self._passes["stats"] = (0, self.model.count)
            self._stream_stats(blocks)

    @work(thread=True, exclusive=True, group="stats", exit_on_error=False)
    def _stream_stats(self, blocks: BlockFile) -> None:
        try:
            with self._pass("stats") as progress:
                self._stats = stream_stats(blocks, on_progress=progress)
        except _CancelledError:
            return
        self.call_from_thread(self.action_stats)

    @contextlib.contextmanager
    def _pass(self, name: str) -> Iterator[Callable[[int, int], None]]:
        """Run one streaming pass of a worker: its progress is kept under `name` (for
        `_told_progress`), and it stops at the next window once the worker is cancelled."""
        worker = get_current_worker()

        def progress(done: int, total: int) -> None:
            if worker.is_cancelled:
                raise _CancelledError
            self._passes[name] = (done, total)

        try:
            yield progress
        finally:
            self._passes.pop(name, None)

    def _told_progress(self, name: str) -> bool:
        """Whether a streaming pass `name` is running (then the user is told how far)."""
        running = self._passes.get(name)
        if running is not None:
            done, total = running
            self.notify(f"{name}: {done:,} of {total:,} nodes read", timeout=3, markup=False)
        return running is not None

    # -- bookmarks -----------------------------------------------------------------------

    def action_bookmark(self) -> None:
        """Bookmark the cursor node with a note (editing the note if it is bookmarked)."""
        node = self.cursor
        if not self.model.count:
            self.notify("nothing to bookmark: the trail holds no nodes yet", timeout=3)
            return
        current = next((b.note for b in self.bookmarks if b.node == node), "")

        def noted(note: str | None) -> None:
            if note is None:
                return
            kept = [b for b in self.bookmarks if b.node != node]
            self.bookmarks = sorted([*kept, Bookmark(node, clean_note(note))], key=lambda b: b.node)
            try:
                save_bookmarks(self._bookmark_file, self.bookmarks)
            except OSError as exc:
                self.notify(f"cannot save bookmarks: {exc}", severity="error", markup=False)
                return
            self.notify(f"bookmarked node {node}", timeout=2)

        self.push_screen(NoteDialog(node, current), noted)

    def action_bookmarks(self) -> None:
        """The bookmarks screen (enter goes to the node)."""
        self.push_screen(BookmarksScreen(self.bookmarks, str(self._bookmark_file)), self.goto)

    # -- exports -------------------------------------------------------------------------

    def _export_name(self, suffix: str) -> Path:
        stem = Path(self.model.trail.path).stem or "trail"
        return Path.cwd() / f"{stem}-node{self.cursor}{suffix}"

    def action_export_svg(self) -> None:
        """Save the screen as an SVG file in the working folder."""
        target = self._export_name(".svg")
        try:
            self.save_screenshot(target.name, str(target.parent))
        except OSError as exc:
            self.notify(f"cannot write {target}: {exc}", severity="error", markup=False)
            return
        self.notify(f"saved {target}", timeout=4, markup=False)

    def action_export_walkthrough(self) -> None:
        """Save the path from the root to the cursor as a Markdown walkthrough."""
        target = self._export_name(".md")
        model = self.model
        if not model.count:
            self.notify("nothing to walk through: the trail holds no nodes yet", timeout=3)
            return
        text = walkthrough(
            model.trail, model.index, self.cursor, model.completions, model.wrong_ids
        )
        try:
            target.write_text(text, encoding="utf-8")
        except OSError as exc:
            self.notify(f"cannot write {target}: {exc}", severity="error", markup=False)
            return
        self.notify(f"saved {target}", timeout=4, markup=False)

    # -- panels, help, palette -----------------------------------------------------------

    def _toggle(self, selector: str) -> None:
        panel = self._panels[selector]
        panel.display = not panel.display
        side = self._side
        side.display = any(child.display for child in side.children)
        self._show_panels()

    def action_toggle_bound(self) -> None:
        """Show or hide the bound panel."""
        self._toggle("#bound")

    def action_toggle_map(self) -> None:
        """Show or hide the map."""
        self._toggle("#map")

    def action_toggle_outline(self) -> None:
        """Show or hide the branch outline."""
        self._toggle("#outline")

    def _binding_ids(self) -> list[str]:
        return [b.id for b in self.BINDINGS if isinstance(b, Binding) and b.id]

    def key_table(self) -> list[tuple[str, str, str]]:
        """(keys, description, binding id) of every binding, with the keymap applied."""
        keymap = self._user_keys
        rows: list[tuple[str, str, str]] = []
        for b in self.BINDINGS:
            if isinstance(b, Binding) and b.id:
                rows.append((keymap.get(b.id, b.key), b.description, b.id))
        return rows

    def action_help(self) -> None:
        """Every key, the filter language and the stop list."""
        self.push_screen(HelpScreen(self.key_table(), str(self._keymap_file)))

    def get_system_commands(self, screen: Screen[Any]) -> Iterable[SystemCommand]:
        yield from super().get_system_commands(screen)
        for keys, description, binding_id in self.key_table():
            if binding_id in ("quit", "help"):
                continue
            yield SystemCommand(
                description, f"key: {keys}", partial(self.run_action, binding_id), discover=True
            )
