"""Small modal questions: yes/no, a reason (with one-key presets), a failure, the
keys of a screen.

Every dialog ignores keys for ``GUARD_S`` after it opens: an operator who is
pressing enter to land the next site must not answer a question they have not
read yet (the keys were meant for the screen underneath).
"""

from __future__ import annotations

import time

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Input, Label, Static

# Keys pressed this soon after a dialog opens (s) do not answer it: about the
# time a person needs to notice something new on the screen (common practice,
# no source). Tests set it to 0, or open the guard themselves.
GUARD_S = 0.3


class GuardedModal(ModalScreen):
    """A modal whose keys (and input) start working GUARD_S after it opened."""

    def __init__(self) -> None:
        super().__init__()
        self._opened_at = time.monotonic()
        self._guard_s = GUARD_S

    @property
    def guarded(self) -> bool:
        """True while keys are still ignored."""
        return time.monotonic() - self._opened_at < self._guard_s

    def open_guard(self) -> None:
        """Let keys through now (the guard timer, or a test that checks the guard)."""
        self._guard_s = 0.0
        for box in self.query(Input):
            box.disabled = False
            box.focus()
        self.refresh_bindings()

    def on_mount(self) -> None:
        self._opened_at = time.monotonic()
        if self._guard_s > 0:
            for box in self.query(Input):
                box.disabled = True  # typed keys go nowhere until the guard opens
            self.set_timer(self._guard_s, self.open_guard)

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        return None if self.guarded else True


class Confirm(GuardedModal, ModalScreen[bool]):
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


class AskReason(GuardedModal, ModalScreen[str | None]):
    """A line of text (a reason or a note); digits pick a preset in one key.

    Returns the text, or None when the operator backs out with escape.
    """

    CSS_PATH = "dialogs.tcss"
    BINDINGS = [Binding("escape", "cancel", "back", tooltip="Back out without recording anything")]

    def __init__(self, question: str, presets: tuple[str, ...] = (), title: str = "") -> None:
        super().__init__()
        self.question = question
        self.presets = presets[:9]
        self.title_text = title

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog" + (" warning" if self.title_text else "")):
            if self.title_text:
                yield Static(self.title_text, classes="title")
            yield Static(self.question, classes="question")
            for i, p in enumerate(self.presets, 1):
                yield Label(f"[b]{i}[/b]  {p}", classes="preset")
            yield Input(placeholder="type, then enter" + (" — or a digit for a preset" if self.presets else ""))
            yield Label("[b]enter[/b] record    [b]escape[/b] back", classes="keys")

    def on_input_changed(self, event: Input.Changed) -> None:
        # A lone digit on an empty line picks a preset: one key for the usual reasons.
        v = event.value
        if not self.guarded and len(v) == 1 and v.isdigit() and 1 <= int(v) <= len(self.presets):
            self.dismiss(self.presets[int(v) - 1])

    def on_input_submitted(self, event: Input.Submitted) -> None:
        if self.guarded:
            return
        text = event.value.strip()
        if text:
            self.dismiss(text)
        else:
            self.notify("A reason is needed (or escape to back out).", severity="warning")

    def action_cancel(self) -> None:
        self.dismiss(None)


class Failure(GuardedModal, ModalScreen[None]):
    """What failed (the title), what to do now in plain words, and below them the
    instrument's or the library's own message. enter / escape closes it."""

    CSS_PATH = "dialogs.tcss"
    BINDINGS = [Binding("enter,escape", "close", "understood", tooltip="Close this message")]

    def __init__(self, title: str, message: str, todo: str = "") -> None:
        super().__init__()
        self.title_text = title
        self.message = message
        self.todo = todo or "The session is unchanged: nothing was recorded for this step."

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog failure"):
            yield Static(f"✖ {self.title_text}", classes="title")
            yield Static(self.todo, classes="question")
            yield Static("what it said:", classes="keys")
            yield Static(self.message, classes="message detail", markup=False)
            yield Label("[b]enter[/b] understood", classes="keys")

    def action_close(self) -> None:
        self.dismiss(None)


class KeysHelp(GuardedModal, ModalScreen[None]):
    """Every key of the screen underneath with what it does, those that apply
    now first; any of ? / escape / enter / q closes it."""

    CSS_PATH = "dialogs.tcss"
    BINDINGS = [Binding("question_mark,escape,enter,q", "close", "close", tooltip="Close the list of keys")]

    def __init__(self, title: str, rows: list[tuple[str, str, bool]]) -> None:
        super().__init__()
        self.title_text = title
        self.rows = rows

    def compose(self) -> ComposeResult:
        from rich.table import Table

        table = Table(box=None, show_header=False, expand=True, pad_edge=False)
        table.add_column(no_wrap=True, style="bold")
        table.add_column(ratio=1)
        now = [r for r in self.rows if r[2]]
        later = [r for r in self.rows if not r[2]]
        for key, text, _ in now:
            table.add_row(key, text)
        if later:
            table.add_row("", "")
            table.add_row("", "[dim]not now (they apply in another state):[/dim]")
            for key, text, _ in later:
                table.add_row(f"[dim]{key}[/dim]", f"[dim]{text}[/dim]")
        with VerticalScroll(classes="dialog help"):
            yield Static(self.title_text, classes="title")
            yield Static(table)
            yield Label("[b]?[/b] / [b]escape[/b] close", classes="keys")

    def action_close(self) -> None:
        self.dismiss(None)


def key_label(key: str) -> str:
    """How a Textual key name is written for a person."""
    names = {"space": "space", "enter": "enter", "escape": "esc", "question_mark": "?",
             "exclamation_mark": "!", "ctrl+q": "ctrl+q"}
    return names.get(key, key)


def help_rows(screen) -> list[tuple[str, str, bool]]:
    """(keys, what they do, applies now) for every binding of ``screen`` with a
    description, keys of the same action joined, in the screen's own order."""
    rows: dict[str, list] = {}
    for binding in getattr(screen, "BINDINGS", []):
        if not isinstance(binding, Binding) or not binding.description:
            continue
        action = binding.action
        name = action.split("(")[0]
        now = screen.check_action(name, ()) is True if not name.startswith("app.") else True
        keys = " ".join(key_label(k.strip()) for k in binding.key.split(","))
        text = binding.tooltip or binding.description
        row = rows.setdefault(f"{action}|{text}", [keys, text, now])
        if keys not in row[0]:
            row[0] += " " + keys
    out = [(str(r[0]), str(r[1]), bool(r[2])) for r in rows.values()]
    out.append(("ctrl+p", "The command palette: every key's action by name", True))
    return out
