"""The running app as the screens see it: the bench app that pushed them.

Screens reach the app's engine, journal and failure report through
``self.app``, which Textual types as a plain ``App``; :func:`host` names the
real type once, without importing the app module at run time (it imports the
screens).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, cast

from textual.app import App

if TYPE_CHECKING:
    from probelog.tui.app import ProbelogApp


def host(app: App[Any]) -> ProbelogApp:
    """``app`` as the bench app (every bench screen is pushed by it)."""
    return cast("ProbelogApp", app)
