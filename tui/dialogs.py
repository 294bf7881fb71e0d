"""The viewer's small modal screens; each hands back its typed result with `dismiss`.

Build a stop list, write a bookmark note, pick a bookmark, read the help. Input is validated
here (a stop text is parsed before the dialog closes, and its error shown beside it), so the
app only ever receives good values. The filter and go-to prompts are lines in the main
screen (`tui.prompt_bar`).
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Button, Checkbox, Input, Label, OptionList, Static
from textual.widgets.option_list import Option

from tracer.analysis import FilterError, StopCondition, parse_stops
from tui.bookmarks import MAX_NOTE, Bookmark

_CLOSE: list[BindingType] = [
    Binding("escape", "cancel", "Close", id="dialog_cancel"),
]


class StopDialog(ModalScreen[StopCondition | None]):
    """Build the stop list: tick events, fill in a prefix, depth or percentage."""

    BINDINGS: ClassVar[list[BindingType]] = _CLOSE

    def __init__(self, current: StopCondition) -> None:
        super().__init__()
        self.current = current

    def compose(self) -> ComposeResult:
        c = self.current
        with Vertical(classes="dialog"):
            yield Label("Run until any of these holds", classes="dialog-title")
            with Horizontal(classes="dialog-row"):
                yield Checkbox("a prune", c.prune, id="stop-prune")
                yield Checkbox("incumbent changes", c.incumbent_change, id="stop-incumbent")
                yield Checkbox("a wrong record", c.wrong, id="stop-wrong")
            yield Input(
                value=" ".join(map(str, c.prefix)) if c.prefix is not None else "",
                placeholder="under path prefix, e.g. 0 5 2",
                id="stop-prefix",
            )
            with Horizontal(classes="dialog-row"):
                yield Input(
                    value="" if c.depth is None else str(c.depth),
                    placeholder="at depth",
                    id="stop-depth",
                )
                yield Input(
                    value="" if c.within_pct is None else f"{c.within_pct:g}",
                    placeholder="bound within % of incumbent",
                    id="stop-near",
                )
            yield Static("", classes="dialog-error", id="stop-error")
            with Horizontal(classes="dialog-row"):
                yield Button("Use", variant="primary", id="stop-use")
                yield Button("Cancel", id="stop-cancel")

    def condition(self) -> StopCondition:
        """The stop list as ticked and typed.

        Raises:
            FilterError: a field does not parse.
        """
        items = [
            word
            for word, box in (
                ("prune", "#stop-prune"),
                ("incumbent", "#stop-incumbent"),
                ("wrong", "#stop-wrong"),
            )
            if self.query_one(box, Checkbox).value
        ]
        prefix = self.query_one("#stop-prefix", Input).value.strip()
        depth = self.query_one("#stop-depth", Input).value.strip()
        near = self.query_one("#stop-near", Input).value.strip().rstrip("%")
        if prefix:
            items.append(f"under {prefix}")
        if depth:
            items.append(f"depth {depth}")
        if near:
            items.append(f"near {near}%")
        return parse_stops(", ".join(items))

    def _use(self) -> None:
        try:
            self.dismiss(self.condition())
        except FilterError as exc:
            self.query_one("#stop-error", Static).update(Text(exc.message))

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self._use()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        if event.button.id == "stop-use":
            self._use()
        else:
            self.dismiss(None)

    def action_cancel(self) -> None:
        self.dismiss(None)


class NoteDialog(ModalScreen[str | None]):
    """Write a bookmark's note; hands back the note (possibly empty) or None."""

    BINDINGS: ClassVar[list[BindingType]] = _CLOSE

    def __init__(self, node: int, note: str = "") -> None:
        super().__init__()
        self.node = node
        self.note = note

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(f"Bookmark node {self.node}", classes="dialog-title")
            yield Input(value=self.note, placeholder="a short note", max_length=MAX_NOTE, id="note")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.dismiss(event.value)

    def action_cancel(self) -> None:
        self.dismiss(None)


class BookmarksScreen(ModalScreen[int | None]):
    """The bookmarks, one a line; enter hands back the node, escape nothing."""

    BINDINGS: ClassVar[list[BindingType]] = _CLOSE

    def __init__(self, bookmarks: list[Bookmark], where: str) -> None:
        super().__init__()
        self.bookmarks = bookmarks
        self.where = where

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label("Bookmarks", classes="dialog-title")
            if self.bookmarks:
                yield OptionList(
                    *[
                        Option(Text(f"{b.node:>10}  {b.note}"), id=str(i))
                        for i, b in enumerate(self.bookmarks)
                    ],
                    id="bookmark-list",
                )
            else:
                yield Static(Text("No bookmarks yet: press the bookmark key on a node."))
            yield Static(Text(f"saved in {self.where}"), classes="dialog-hint")

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        self.dismiss(self.bookmarks[event.option_index].node)

    def action_cancel(self) -> None:
        self.dismiss(None)


FILTER_HELP = """\
Clauses, joined by "and":
  0 5 2  or  under 0 5 2     the subtree whose path starts 0 5 2
  depth 4 | depth 2..6 | depth ..3 | depth 5.. | depth >= 5
  decision prune  or  is prune,tour_better    (expand prune skip tour_better tour)
  wrong                      records the re-check found wrong (so far)
  ratio 0.98..1              bound / incumbent in force within the range
Example: 0 5 and depth 4..8 and is prune and ratio ..1.02"""


class HelpScreen(ModalScreen[None]):
    """Every key with what it does, the filter language and the stop list."""

    BINDINGS: ClassVar[list[BindingType]] = [
        *_CLOSE,
        Binding("question_mark,q", "cancel", "Close", show=False, id="help_close"),
    ]

    def __init__(self, keys: list[tuple[str, str, str]], keymap_file: str) -> None:
        super().__init__()
        self.keys = keys
        self.keymap_file = keymap_file

    def compose(self) -> ComposeResult:
        table = Text()
        for key, description, binding_id in self.keys:
            table.append(f"{key:>16}  ", style="bold")
            table.append(f"{description:<34}")
            table.append(f"{binding_id}\n", style="dim")
        with Vertical(classes="dialog"):
            yield Label("prunetrail viewer: keys", classes="dialog-title")
            with VerticalScroll():
                yield Static(Text("             key  what it does                      id\n"))
                yield Static(table)
                yield Static(
                    Text(
                        "\nRemap keys in "
                        + self.keymap_file
                        + ' (or the file named by $PRUNETRAIL_KEYS):\n  [keys]\n  next = "j,down"\n'
                    )
                )
                yield Static(Text("Filter language\n" + FILTER_HELP + "\n"))
                yield Static(Text(STOP_HELP))

    def action_cancel(self) -> None:
        self.dismiss(None)


STOP_HELP = """\
Stop list (run forward or backward until any holds):
  a prune · the incumbent changes · a wrong record · a node under a path prefix ·
  a node at a depth · a node whose bound is within X% of the incumbent in force.
Play steps forward at the chosen speed and pauses where the stop list holds."""
