"""Shown while the engine factory opens instruments and the journal (in a worker)."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.containers import Vertical
from textual.screen import Screen
from textual.widgets import Header, LoadingIndicator, Static

from probelog.tui.widgets.bench_footer import BenchFooter


class Opening(Screen):
    """A quiet screen: what is being opened, and a spinner."""

    CSS_PATH = "opening.tcss"

    def __init__(self, what: str = "Opening the bench and the journal…") -> None:
        super().__init__()
        self.what = what

    def compose(self) -> ComposeResult:
        yield Header()
        with Vertical(id="opening-box"):
            yield Static(self.what, id="opening-what")
            yield LoadingIndicator()
        yield BenchFooter()
