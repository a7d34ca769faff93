"""Small modal questions: yes/no, a reason (with one-key presets), a failure."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Label, Static


class Confirm(ModalScreen[bool]):
    """y / enter answers yes, n / escape answers no."""

    CSS_PATH = "dialogs.tcss"
    BINDINGS = [
        Binding("y,enter", "answer(True)", "yes", tooltip="Yes, go ahead"),
        Binding("n,escape", "answer(False)", "no", tooltip="No, go back"),
    ]

    def __init__(self, question: str) -> None:
        super().__init__()
        self.question = question

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(self.question, classes="question")
            yield Label("[b]y[/b] yes    [b]n[/b] no", classes="keys")

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)


class AskReason(ModalScreen[str | None]):
    """A line of text (a reason or a note); digits pick a preset in one key.

    Returns the text, or None when the operator backs out with escape.
    """

    CSS_PATH = "dialogs.tcss"
    BINDINGS = [Binding("escape", "cancel", "back", tooltip="Back out without recording anything")]

    def __init__(self, question: str, presets: tuple[str, ...] = ()) -> None:
        super().__init__()
        self.question = question
        self.presets = presets[:9]

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(self.question, classes="question")
            for i, p in enumerate(self.presets, 1):
                yield Label(f"[b]{i}[/b]  {p}", classes="preset")
            yield Input(placeholder="type, then enter" + (" — or a digit for a preset" if self.presets else ""))
            yield Label("[b]enter[/b] record    [b]escape[/b] back", classes="keys")

    def on_input_changed(self, event: Input.Changed) -> None:
        # A lone digit on an empty line picks a preset: one key for the usual reasons.
        v = event.value
        if len(v) == 1 and v.isdigit() and 1 <= int(v) <= len(self.presets):
            self.dismiss(self.presets[int(v) - 1])

    def on_input_submitted(self, event: Input.Submitted) -> None:
        text = event.value.strip()
        if text:
            self.dismiss(text)
        else:
            self.notify("A reason is needed (or escape to back out).", severity="warning")

    def action_cancel(self) -> None:
        self.dismiss(None)


class Failure(ModalScreen[None]):
    """Says what went wrong and where; any of enter / escape / space closes it."""

    CSS_PATH = "dialogs.tcss"
    BINDINGS = [Binding("enter,escape,space", "close", "close", tooltip="Close this message")]

    def __init__(self, title: str, message: str) -> None:
        super().__init__()
        self.title_text = title
        self.message = message

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog failure"):
            yield Static(f"✖ {self.title_text}", classes="question")
            yield Static(self.message, classes="message")
            yield Label("[b]enter[/b] close — the session state is unchanged; try again or re-land",
                        classes="keys")

    def action_close(self) -> None:
        self.dismiss(None)
