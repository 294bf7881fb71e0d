"""The main screen's footer, rebuilt only when the keys it shows change.

Textual's footer recomposes (a widget per key) whenever the screen's bindings are updated,
which happens on every focus move. This one skips the rebuild when the keys shown are the
same, and holds still while a prompt line is open (the prompt names its own keys), so
opening and closing a prompt costs no footer rebuild.
"""

from __future__ import annotations

from typing import Any

from textual.screen import Screen
from textual.widgets import Footer


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
