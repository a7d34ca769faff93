"""The cautions, shown once when a session starts (the engine journals that)."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Label, Static


class Cautions(ModalScreen[bool]):
    """Returns True once the operator has read the cautions, False to stop here."""

    CSS_PATH = "cautions.tcss"
    BINDINGS = [
        Binding("y,enter", "answer(True)", "understood", tooltip="I have read the cautions"),
        Binding("q,escape", "answer(False)", "stop", tooltip="Stop before touching down"),
    ]

    def __init__(self, text: str) -> None:
        super().__init__()
        self.text = text

    def compose(self) -> ComposeResult:
        with Vertical(id="cautions-box"):
            yield Static("▲ BEFORE YOU TOUCH DOWN", id="cautions-title")
            yield Static(self.text, id="cautions-text")
            yield Label("[b]y[/b] / [b]enter[/b] understood     [b]q[/b] stop here", id="cautions-keys")

    def action_answer(self, ok: bool) -> None:
        self.dismiss(ok)
