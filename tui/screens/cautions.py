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
            yield Static(reflow(self.text), id="cautions-text")
            yield Label("[b]y[/b] / [b]enter[/b] understood     [b]q[/b] stop here", id="cautions-keys")

    def action_answer(self, ok: bool) -> None:
        self.dismiss(ok)


def reflow(text: str) -> str:
    """Join the text's hard-wrapped continuation lines (indented) onto their bullet,
    so the screen wraps each bullet to its own width: at 80 columns the journaled
    line breaks left orphaned half-lines."""
    out: list[str] = []
    for line in text.splitlines():
        if line.startswith("  ") and out:
            out[-1] = f"{out[-1]} {line.strip()}"
        else:
            out.append(line)
    return "\n".join(out)

