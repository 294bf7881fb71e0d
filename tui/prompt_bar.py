"""One-line prompts in the main screen: the filter and the node to go to.

A modal screen repaints the whole main screen when it closes and moves the bindings to
another screen; a prompt line takes the work line's place while it is open, so opening and
closing it repaints only that line (and whatever the typed value changes). Input is checked
here (a filter parses, an id is in the trail) before the app is handed the value, and the
error is shown beside the input. Moving the focus elsewhere in the screen (a click on the
node list or the map) closes an open prompt as escape does; the app losing the terminal's
focus does not (nothing in the screen takes it).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal
from textual.events import DescendantBlur
from textual.widget import Widget
from textual.widgets import Input, Label, Static

from tracer.analysis import FilterError, parse_filter


class PromptInput(Input):
    """The prompt's input: losing focus as its prompt closes does not restyle it.

    The prompt is hidden by then, and it is only shown again by taking the focus back,
    which restyles it; the restyle skipped is a millisecond of the key that closes it.
    """

    def watch_has_focus(self, has_focus: bool) -> None:
        parent = self.parent
        if has_focus or not isinstance(parent, Widget) or parent.display:
            super().watch_has_focus(has_focus)


class PromptBar(Horizontal):
    """A prompt line: a label, an input and its error; `open` it, enter hands back a value.

    Args:
        label: the words before the input.
        input_id: the input's id (the error line's is `<input_id>-error`).
        placeholder: what the empty input suggests.
        integer: accept digits only.
    """

    DEFAULT_CSS = """
    PromptBar { height: 1; background: $panel; padding: 0 1; display: none; }
    PromptBar > Label { width: auto; color: $accent; text-style: bold; padding-right: 1; }
    PromptBar > Input, PromptBar > Input:focus {
        width: 1fr; height: 1; border: none; padding: 0 1; background: $boost;
    }
    PromptBar > Static { width: auto; max-width: 70; color: $error; padding-left: 1; }
    PromptBar > .prompt-keys { color: $text-muted; padding-left: 2; }
    """

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "cancel", "Close", show=False, id="prompt_cancel"),
    ]

    def __init__(
        self,
        label: str,
        input_id: str,
        placeholder: str,
        *,
        integer: bool = False,
        id: str | None = None,
    ) -> None:
        super().__init__(id=id)
        self._label = Label(Text(label))
        self._input = PromptInput(
            placeholder=placeholder, id=input_id, type="integer" if integer else "text"
        )
        self._error = Static("", id=f"{input_id}-error")
        self._keys = Static(Text("enter applies · esc closes"), classes="prompt-keys")
        self._done: Callable[[Any], None] | None = None

    def compose(self) -> ComposeResult:
        yield self._label
        yield self._input
        yield self._error
        yield self._keys

    @property
    def is_open(self) -> bool:
        """Whether the prompt is showing."""
        return self._done is not None

    def open(self, value: str, done: Callable[[Any], None]) -> None:
        """Show the prompt with `value` typed; `done` gets the checked value, or None."""
        self._done = done
        self._error.update("")
        self._input.value = value
        self._input.cursor_position = len(value)
        self.display = True
        self._input.focus()

    def check(self, text: str) -> Any:
        """The value `text` stands for.

        Raises:
            ValueError: the text is not acceptable (the message is shown).
        """
        return text

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        try:
            value = self.check(event.value)
        except FilterError as exc:
            self._error.update(Text(exc.message))
            return
        except ValueError as exc:
            self._error.update(Text(str(exc)))
            return
        self._close(value)

    def action_cancel(self) -> None:
        self._close(None)

    def focus_left(self) -> bool:
        """Whether a widget outside this prompt has the screen's focus."""
        focused = self.screen.focused
        return focused is not None and self not in focused.ancestors_with_self

    def on_descendant_blur(self, event: DescendantBlur) -> None:
        """The input lost the focus: close as escape does if it went elsewhere in the screen."""
        if self.is_open and self.focus_left():
            self.action_cancel()

    def _close(self, value: Any) -> None:
        done, self._done = self._done, None
        self.display = False
        if done is not None:
            done(value)


class FilterBar(PromptBar):
    """The filter prompt; hands back text that parses ("" clears the filter)."""

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(
            "filter",
            "filter",
            "e.g. 0 5 2 and depth 3..6 and is prune   (? lists the language)",
            id=id,
        )

    def check(self, text: str) -> str:
        parse_filter(text)
        return text.strip()


class GoToBar(PromptBar):
    """The go-to prompt; hands back a node id inside the trail."""

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__("go to node", "goto-id", "node id", integer=True, id=id)
        self.count = 0

    def open_for(self, count: int, done: Callable[[Any], None]) -> None:
        """Open the prompt for a trail of `count` nodes."""
        self.count = count
        self._input.placeholder = f"node id, 0..{count - 1}"
        self.open("", done)

    def check(self, text: str) -> int:
        text = text.strip()
        if text.isdigit() and int(text) < self.count:
            return int(text)
        raise ValueError(f"expected a node id from 0 to {self.count - 1}")
