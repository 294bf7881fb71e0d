"""The node list: every kept node as one row, drawn from the numpy columns on demand.

One `ScrollView` whose virtual height is the number of rows; `render_line` draws only the
lines on screen. A line not yet formatted is formatted with the rest of the window below it
(one vectorised read of the columns for at most `BLOCK` rows, none off screen) into an LRU
cache of strips, cleared when the rows, the width, the styles or the re-check's marks
change. Moving the cursor repaints only the two rows it leaves and enters. There is never a
widget or a Python object per node.
"""

from __future__ import annotations

import math
from contextlib import suppress
from typing import ClassVar, Self

import numpy as np
from rich.segment import Segment
from rich.style import Style
from rich.text import Text
from textual.cache import LRUCache
from textual.dom import NoScreen
from textual.events import Blur, Click, DescendantBlur, DescendantFocus, Focus
from textual.geometry import Region, Size
from textual.message import Message
from textual.reactive import reactive
from textual.scroll_view import ScrollView
from textual.strip import Strip
from textual.widgets import Static

from tracer.base import DECISION_NAMES, LINK_IN, LINK_OUT, PARTIAL, TREE, is_absent
from tui.model import ViewerModel

#: Most rows formatted together (one vectorised read of the columns).
BLOCK = 64
#: Widths of the fixed columns (the path takes what is left).
_NUM = 8
_SMALL = 7
_DECISION = 11
_MIN_PATH = 10
_WRONG_MARK = "✗"


def shorten_path(cities: list[int], width: int) -> str:
    """The path as "0 5 2 …", cut from the left with an ellipsis when it is too long."""
    text = " ".join(map(str, cities))
    if len(text) <= width:
        return text
    return "…" + text[len(text) - width + 1 :]


def format_number(value: float, integral: bool) -> str:
    """A length in a table cell: whole numbers plain, others to one decimal; "—", "∞"."""
    if math.isnan(value):
        return "—"
    if math.isinf(value):
        return "∞"
    return f"{value:.0f}" if integral else f"{value:.1f}"


class NodeList(ScrollView, can_focus=True, inherit_bindings=False):
    """The kept nodes as a virtual list with a cursor row; every other panel follows it."""

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "node-list--cursor",
        "node-list--wrong",
        "node-list--prune",
        "node-list--tour",
        "node-list--tour-better",
        "node-list--skip",
        "node-list--muted",
    }

    DEFAULT_CSS = """
    NodeList { background: $surface; }
    NodeList > .node-list--cursor { background: $primary 70%; text-style: bold; }
    NodeList > .node-list--wrong { color: $error; text-style: bold; }
    NodeList > .node-list--prune { color: $warning; }
    NodeList > .node-list--tour { color: $text-muted; }
    NodeList > .node-list--tour-better { color: $success; text-style: bold; }
    NodeList > .node-list--skip { color: $secondary; }
    NodeList > .node-list--muted { color: $text-muted; }
    """

    # No repaint of the whole list when the cursor moves: `watch_cursor_row` repaints the
    # two rows concerned, and a scroll repaints the window itself.
    cursor_row: reactive[int] = reactive(0, always_update=True, repaint=False)

    class Picked(Message):
        """A row was clicked: move the cursor to `node`."""

        def __init__(self, node: int) -> None:
            super().__init__()
            self.node = node

    def __init__(
        self,
        model: ViewerModel,
        header: Static | None = None,
        *,
        id: str | None = None,
        classes: str | None = None,
    ) -> None:
        super().__init__(id=id, classes=classes)
        self.model = model
        self.header = header
        self._cache: LRUCache[int, Strip] = LRUCache(1024)
        self._styles: dict[str, Style] | None = None
        self._styles_stale = False
        self._row_width = 0
        self.reload()

    # -- data ----------------------------------------------------------------------------

    def reload(self) -> None:
        """The rows or marks changed: recount, forget cached lines, redraw."""
        self._cache.clear()
        self._set_virtual_size(Size(self._row_width, len(self.model.rows)))
        self.set_reactive(NodeList.cursor_row, self.validate_cursor_row(self.cursor_row))
        self.refresh()

    # A scroll view's scrollbars are brought up to date on every layout pass of the screen
    # (`_size_updated` compares the compositor's virtual size, which for a scroll view is only
    # its window, with the real one, so they always differ). The repaint that asks for comes
    # after that pass's frame, so any layout change elsewhere (a prompt line closing) cost a
    # second frame. Here the scrollbars are updated when the rows change, before the frame,
    # and a layout pass that leaves this widget's size alone leaves them alone too.
    def _set_virtual_size(self, size: Size) -> None:
        self.virtual_size = size
        if self.is_mounted and self.container_size:
            self._scroll_update(size)

    def _size_updated(
        self, size: Size, virtual_size: Size, container_size: Size, layout: bool = True
    ) -> bool:
        if size == self._size and container_size == self.container_size:
            return False
        return super()._size_updated(size, virtual_size, container_size, layout)

    def marks_changed(self) -> None:
        """New re-check results: redraw (lines are cached with their marks)."""
        self._cache.clear()
        self.refresh()

    # Focus moving in or out changes nothing drawn here (the cursor row looks the same and no
    # style names :focus), so the whole-list repaints Textual makes on focus and blur are
    # skipped.
    def focus(self, scroll_visible: bool = True) -> Self:
        """Take the focus (without repainting the list)."""

        def take() -> None:
            with suppress(NoScreen):
                self.screen.set_focus(self, scroll_visible=scroll_visible)

        self.app.call_later(take)
        return self

    def watch_has_focus(self, has_focus: bool) -> None:
        """No style here depends on focus: skip the restyle (it repaints the scrollbars, and
        with them every line of the list)."""

    def _on_focus(self, event: Focus) -> None:
        event.prevent_default()
        self.has_focus = True
        if self.parent is not None:
            self.parent.post_message(DescendantFocus(self))

    def _on_blur(self, event: Blur) -> None:
        event.prevent_default()
        self.has_focus = False
        if self.parent is not None:
            self.parent.post_message(DescendantBlur(self))

    def validate_cursor_row(self, row: int) -> int:
        return max(0, min(row, len(self.model.rows) - 1))

    def watch_cursor_row(self, old: int, new: int) -> None:
        self.refresh_line(old)
        self.refresh_line(new)
        far = abs(new - old) > self.size.height
        self.scroll_to_region(
            Region(0, new, 1, 1), animate=False, force=True, immediate=True, center=far
        )

    def notify_style_update(self) -> None:
        """Styles may have changed: check at the next line drawn (cached lines hold colours).

        Focus moving in or out restyles the widget without changing its colours, so the
        cached lines are kept unless the colours really differ.
        """
        super().notify_style_update()
        self._styles_stale = True

    def on_resize(self) -> None:
        self._cache.clear()
        self._row_width = self.scrollable_content_region.width
        self._set_virtual_size(Size(self._row_width, len(self.model.rows)))
        if self.header is not None:
            self.header.update(self.header_text(), layout=False)

    def header_text(self) -> Text:
        """The column titles, aligned with the rows at the current width."""
        id_w, path_w = self._column_widths(self._width() or 120)
        cells = [
            " ",
            f"{'id':>{id_w}}",
            f"{'dep':>3}",
            f"{'path':<{path_w}}",
            f"{'partial':>{_NUM}}",
            f"{'tree':>{_NUM}}",
            f"{'in':>{_SMALL}}",
            f"{'out':>{_SMALL}}",
            f"{'bound':>{_NUM}}",
            f"{'best':>{_NUM}}",
            f" {'decision':<{_DECISION}}",
        ]
        return Text(" ".join(cells), no_wrap=True, overflow="crop")

    # -- drawing -------------------------------------------------------------------------

    def _column_widths(self, width: int) -> tuple[int, int]:
        id_w = max(2, len(str(max(self.model.count - 1, 0))))
        numbers = 4 * _NUM + 2 * _SMALL + 5
        fixed = 1 + 1 + id_w + 1 + 3 + 1 + 1 + numbers + 2 + _DECISION
        return id_w, max(_MIN_PATH, width - fixed)

    def _width(self) -> int:
        """Cells available for a row (the scrollbar excluded; measured on resize)."""
        return self._row_width or self.size.width

    def _style_table(self) -> dict[str, Style]:
        if self._styles is None or self._styles_stale:
            styles = {
                name: self.get_component_rich_style(f"node-list--{name}", partial=True)
                for name in ("cursor", "wrong", "prune", "tour", "tour-better", "skip", "muted")
            }
            styles["base"] = self.rich_style
            if styles != self._styles:
                self._cache.clear()
            self._styles, self._styles_stale = styles, False
        return self._styles

    def render_line(self, y: int) -> Strip:
        row = self.scroll_offset.y + y
        width = self._width()
        styles = self._style_table()
        if row >= len(self.model.rows) or row < 0:
            return Strip.blank(width, styles["base"])
        strip = self._cache.get(row)
        if strip is None or strip.cell_length != width:
            bottom = self.scroll_offset.y + self.size.height
            self._format_rows(row, min(max(bottom, row + 1), row + BLOCK), width)
            strip = self._cache.get(row)
            assert strip is not None
        if row == self.cursor_row:
            # Over the row's own colours (`Strip.apply_style` puts a style beneath them, where
            # the row's background hides the cursor's).
            return Strip(Segment.apply_style(strip, post_style=styles["cursor"]), width)
        return strip

    def _format_rows(self, start: int, stop: int, width: int) -> None:
        """Format rows [start, stop) into the cache (the rows on screen, read at once)."""
        model = self.model
        ids = model.rows.ids(start, stop)
        trail = model.trail
        integral = trail.header.instance.integral
        cols = trail.columns
        values = {}
        for name in (PARTIAL, TREE, LINK_IN, LINK_OUT):
            column = cols.get(name)
            if column is None:
                values[name] = np.full(len(ids), math.nan)
            else:
                raw = column[ids]
                as_float = raw.astype(np.float64)
                as_float[is_absent(raw)] = math.nan
                values[name] = as_float
        bound = model.bound_of(ids)
        incumbent = model.incumbent_of(ids)
        wrong = model.wrong_mask(ids)
        depth = model.index.depth[ids]
        decision = model.index.decision[ids]
        paths = model.index.paths(ids.tolist())
        id_w, path_w = self._column_widths(width)
        styles = self._style_table()
        base = styles["base"]
        muted = base + styles["muted"]
        marked = base + styles["wrong"]
        by_decision = [base + styles.get(w.replace("_", "-"), Style()) for w in DECISION_NAMES]
        for i, node in enumerate(ids.tolist()):
            code = int(decision[i])
            word = DECISION_NAMES[code]
            numbers = [
                format_number(values[PARTIAL][i], integral).rjust(_NUM),
                format_number(values[TREE][i], integral).rjust(_NUM),
                format_number(values[LINK_IN][i], integral).rjust(_SMALL),
                format_number(values[LINK_OUT][i], integral).rjust(_SMALL),
                format_number(bound[i], integral).rjust(_NUM),
                format_number(incumbent[i], integral).rjust(_NUM),
            ]
            path = shorten_path(paths[i], path_w).ljust(path_w)
            lead = f" {node:>{id_w}} {int(depth[i]):>3} "
            middle = " " + " ".join(numbers) + "  "
            # Every character in a row is one cell wide, so the row is cut to the width
            # here, in the decision's cell, rather than by a crop (each `Strip` made costs).
            room = width - (1 + len(lead) + len(path) + len(middle))
            last = f"{word:<{_DECISION}}"
            segments = [
                Segment(_WRONG_MARK, marked) if wrong[i] else Segment(" ", base),
                Segment(lead, base),
                Segment(path, muted),
                Segment(middle, base),
                Segment(last[: max(room, 0)], by_decision[code]),
            ]
            if 0 <= room <= len(last):
                strip = Strip(segments, width)
            else:
                strip = Strip(segments).crop_extend(0, width, base)
            self._cache.set(start + i, strip)

    def on_click(self, event: Click) -> None:
        row = self.scroll_offset.y + event.y
        if 0 <= row < len(self.model.rows):
            self.post_message(self.Picked(self.model.rows.id_at(row)))


class NodeListHeader(Static):
    """The node list's column titles (kept in step with the list's width)."""

    DEFAULT_CSS = """
    NodeListHeader { height: 1; background: $panel; color: $text-muted; text-style: bold; }
    """
