"""The key bar at the bottom of every screen, rebuilt only when its keys change.

Textual's Footer rebuilds all its key widgets (unmount, compose, mount, restyle:
15-130 ms here) every time any binding might have changed, and the bench screens
grey keys out and back on every landing. Here a change that only greys or
ungreys keys restyles those keys in place; the widgets are rebuilt only when the
set of keys shown changes (another screen, a focused widget with its own keys).
"""

from __future__ import annotations

from typing import Any

from textual.widgets import Footer
from textual.widgets._footer import FooterKey


def shown_keys(active_bindings: Any) -> tuple[tuple[str, str, str, bool], ...]:
    """(key, action, description, enabled) of every active binding, in order, from
    ``Screen.active_bindings`` (key -> (node, binding, enabled, tooltip)). The
    palette key is among them whether or not it is marked ``show``."""
    return tuple((binding.key, binding.action, binding.description, bool(enabled))
                 for _, binding, enabled, _ in active_bindings.values())


class BenchFooter(Footer):
    """A Footer that greys keys in place instead of rebuilding itself."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        # the palette key (ctrl+p) is listed by ? instead: at 80 columns the bench keys need the room
        kwargs.setdefault("show_command_palette", False)
        kwargs.setdefault("compact", True)  # one space between keys: the whole set fits in 80 columns
        super().__init__(*args, **kwargs)
        self._shown: tuple | None = None

    def bindings_changed(self, screen: Any) -> None:
        self._bindings_ready = True
        if not screen.app.app_focus or not self.is_attached or screen is not self.screen:
            return
        self.call_after_refresh(self._sync)

    async def _sync(self) -> None:
        """Bring the keys up to date with the least work (runs after a repaint)."""
        if not self.is_attached:
            return
        shown = shown_keys(self.screen.active_bindings)
        if shown == self._shown:
            return
        previous, self._shown = self._shown, shown
        if previous is None or [s[:3] for s in shown] != [p[:3] for p in previous]:
            await self.recompose()
            return
        enabled = {(key, action): on for key, action, _, on in shown}
        changed = []
        for widget in self.query(FooterKey):
            on = enabled.get((widget.key, widget.action))
            if on is None:  # a key we cannot place: rebuild rather than guess
                await self.recompose()
                return
            if widget._disabled == on:
                widget._disabled = not on
                widget.set_class(not on, "-disabled", update=False)
                changed.append(widget)
        if changed:  # one restyle for all the keys that changed
            self.app.stylesheet.update_nodes(changed, animate=False)
