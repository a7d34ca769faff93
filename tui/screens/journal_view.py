"""The journal, full-screen (``j``): every event of the session as it was
written, scrollable, filtered by die, site and event type; where the session
was reopened (after a quit or a crash) a line says so.

Filter words (all must match): ``3,4`` or ``die:3,4`` a die, ``site:l500`` a
part of a site name, ``type:decision`` a part of an event type; a bare word
matches a die, a site or a type.
"""

from __future__ import annotations

from rich.text import Text

from probelog import events as ev
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import DataTable, Input, Static

from probelog.tui.journal_read import as_dict, event_matches, is_resume
from probelog.tui.widgets.bench_footer import BenchFooter
from probelog.tui.widgets.logbook import VERDICT_MARK, VERDICT_STYLE, describe


def rows_of(events: list[ev.Event], words: list[str]) -> list[tuple]:
    """(seq, time, mark, what) rows of the events that match, with a line where
    the session was reopened."""
    rows: list[tuple] = []
    reopened_next = False
    for original in events:
        ev = as_dict(original)
        if reopened_next and ev.get("type") != "session-closed":
            rows.append(("", "", "", Text("──── session reopened here (resumed) ────", style="bold cyan")))
            reopened_next = False
        if ev.get("type") == "session-closed" and not (ev.get("payload") or {}).get("completed"):
            reopened_next = True
        if is_resume(ev):
            rows.append(("", "", "", Text("──── session reopened after an interruption ────", style="bold cyan")))
        if not event_matches(ev, words):
            continue
        p = ev.get("payload") or {}
        verdict = str(p.get("verdict"))
        mark = Text(VERDICT_MARK.get(verdict, ""), style=VERDICT_STYLE.get(verdict, ""))
        line = describe(original)
        gist = line[13:]  # describe() starts with "seq  hh:mm " and a mark: columns of their own here
        rows.append((str(ev.get("seq", "?")), str(ev.get("ts", ""))[11:19], mark, gist))
    return rows


class JournalView(ModalScreen[None]):
    """The session's journal, scrollable and filterable."""

    DEFAULT_CSS = """
    JournalView { background: $background; }
    JournalView #journal-filter { height: 3; }
    JournalView #journal-table { height: 1fr; }
    JournalView #journal-title { height: 1; background: $panel; padding: 0 1; }
    """
    BINDINGS = [
        Binding("slash", "filter", "filter", tooltip="Type a filter: a die (3,4), a site, an event type"),
        Binding("escape,j", "back", "back", tooltip="Back to the bench screen"),
        Binding("end", "bottom", "newest", tooltip="Jump to the newest event"),
    ]

    def __init__(self, events: list[ev.Event], words: str = "") -> None:
        super().__init__()
        self.events = events
        self.words = words

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(id="journal-title")
            yield Input(value=self.words, id="journal-filter",
                        placeholder="filter: a die (3,4), a site, an event type (landing, decision, note…)")
            yield DataTable(id="journal-table", cursor_type="row", zebra_stripes=True)
        yield BenchFooter()

    def on_mount(self) -> None:
        table = self.query_one(DataTable)
        table.add_columns("seq", "time", "", "event")
        self._fill()
        table.focus()

    def _fill(self) -> None:
        table = self.query_one(DataTable)
        table.clear()
        words = self.words.split()
        rows = rows_of(self.events, words)
        for row in rows:
            table.add_row(*row)
        shown = sum(1 for r in rows if r[0])
        self.query_one("#journal-title", Static).update(
            f"[b]JOURNAL[/b]  {shown} of {len(self.events)} events"
            + (f" matching “{self.words}”" if words else "") + "   ·   / filter   esc back")
        table.move_cursor(row=max(0, table.row_count - 1))

    def on_input_changed(self, event: Input.Changed) -> None:
        self.words = event.value
        self._fill()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.query_one(DataTable).focus()

    def action_filter(self) -> None:
        self.query_one(Input).focus()

    def action_bottom(self) -> None:
        table = self.query_one(DataTable)
        table.move_cursor(row=max(0, table.row_count - 1))

    def action_back(self) -> None:
        box = self.query_one(Input)
        if box.has_focus:
            self.query_one(DataTable).focus()
            return
        self.dismiss(None)
