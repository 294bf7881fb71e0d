"""The main screen and its footer, made to repaint only what changed.

Textual repaints the whole screen when focus moves, and its footer recomposes (a widget per
key) whenever the screen's bindings are updated, which is also on every focus move. Moving
focus into and out of a prompt line should cost neither: `SteadyScreen` repaints only the
widgets whose focus styles change, and `SteadyFooter` skips the rebuild when the keys shown
are the same, and holds still while a prompt line is open (the prompt names its own keys).

Python's cycle collector also stops a key now and then: a full pass walks every object the
process holds (about 170 000 once a trail is open: libraries, the screen, cached rows) and
took 40–80 ms, every few keys. What exists once the first screen is drawn lives as long as
the viewer, so `SteadyScreen` moves it out of the collector's passes (`gc.freeze`) until the
screen goes away; later passes see only what was made since.
"""

from __future__ import annotations

import gc
from typing import Any

from textual.reactive import Reactive
from textual.screen import Screen
from textual.widget import Widget
from textual.widgets import Footer


class SteadyScreen(Screen[None]):
    """A screen that does not repaint everything when focus moves.

    The widgets losing and gaining focus restyle (and so repaint) themselves.
    """

    focused: Reactive[Widget | None] = Reactive(None, repaint=False)

    def on_mount(self) -> None:
        """Once the first screen is drawn, leave what opening made out of collector passes."""
        self.call_after_refresh(gc.freeze)

    def on_unmount(self) -> None:
        """Hand the objects back to the collector (another viewer may run in this process)."""
        gc.unfreeze()


def shown_keys(screen: Screen[Any]) -> tuple[tuple[str, str, str, bool], ...]:
    """(key, action, description, enabled) of each binding the footer would show."""
    return tuple(
        (binding.key, binding.action, binding.description, enabled)
        for _, binding, enabled, _ in screen.active_bindings.values()
        if binding.show
    )


class SteadyFooter(Footer):
    """A footer that keeps its key widgets while the keys shown stay the same."""

    def __init__(self) -> None:
        super().__init__()
        self._composed_for: tuple[tuple[str, str, str, bool], ...] | None = None
        self.held = False

    def bindings_changed(self, screen: Screen[Any]) -> None:
        if self.held:
            return
        ready = screen.app.app_focus and self.is_attached and screen is self.screen
        keys = shown_keys(screen) if ready else None
        if keys is not None and keys == self._composed_for:
            return
        if keys is not None:
            self._composed_for = keys
        super().bindings_changed(screen)
