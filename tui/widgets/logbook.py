"""The logbook panel: the session journal (journal.jsonl) as it grows, one line an
event, read from the file itself so the panel shows exactly what was written."""

from __future__ import annotations

import threading
from pathlib import Path
from typing import Any

from rich.text import Text
from textual.widgets import RichLog

from probelog import events as ev

VERDICT_MARK = {"pass": "✔", "warn": "▲", "fail": "✖", "n/a": "·"}
VERDICT_STYLE = {"pass": "green", "warn": "yellow", "fail": "bold red", "n/a": "dim"}


class JournalTail:
    """Reads complete new lines appended to a journal file since the last read,
    decoded by probelog.events (the one place that parses journal lines)."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self.offset = 0
        self._decoder = ev.Decoder(str(path))
        self._lock = threading.Lock()  # two reader workers must not both advance the offset

    def read_new(self) -> list[ev.Event]:
        """Events appended since the last call; a torn last line waits for its end."""
        with self._lock:
            return self._read_new()

    def _read_new(self) -> list[ev.Event]:
        try:
            with self.path.open("rb") as fh:
                fh.seek(self.offset)
                chunk = fh.read()
        except FileNotFoundError:
            return []
        end = chunk.rfind(b"\n")
        if end < 0:
            return []
        self.offset += end + 1
        events = []
        for raw in chunk[: end + 1].splitlines():
            try:
                events.append(self._decoder.line(raw))
            except ev.EventError as exc:  # shown, never fatal: verify names the damage
                events.append(ev.Event(0, "", ev.UnknownEvent("unreadable line", {"message": str(exc)})))
        return events


def _die(die: Any) -> str:
    return f"{die[0]},{die[1]}" if isinstance(die, (list, tuple)) and len(die) == 2 else "-"


def describe(event: ev.Event) -> Text:
    """One logbook line for a journal event: seq, time, type, the gist."""
    d = event.data
    kind = event.type
    ts = event.ts[11:19]
    verdict = getattr(d, "verdict", None)
    verdict = verdict.value if verdict is not None else None
    line = Text(f"{event.seq or '?':>4} {ts[:5]} ", style="dim")
    if verdict in VERDICT_MARK:
        line.append(VERDICT_MARK[verdict] + " ", style=VERDICT_STYLE[verdict])
    else:
        line.append("  ")
    line.append(kind, style="bold")
    if isinstance(d, ev.Landing):
        line.append(f" die {_die(d.die)} {d.site} L{d.landing} ")
    elif isinstance(d, ev.CalStandard):
        line.append(f" {d.standard} ")
    elif isinstance(d, ev.CalVerification):
        line.append(f" {d.site} ")
    elif isinstance(d, ev.CalAgreement):
        line.append(f" {d.method}~{d.other_method} worst {d.worst:.3g} " if d.worst is not None else " ")
    elif isinstance(d, ev.Decision):
        style = "bold yellow" if d.action == ev.ACCEPT_DESPITE_FAIL else ""
        line.append(f" {d.action} die {_die(d.die)} {d.site} L{d.landing}", style=style)
        if d.reason:
            line.append(f" — {d.reason}", style="italic")
    elif isinstance(d, ev.DieSkipped):
        line.append(f" die {_die(d.die)}: {', '.join(d.sites)}")
        line.append(f" — {d.reason}", style="italic")
    elif isinstance(d, ev.Note):
        line.append(f" “{d.text}”", style="italic")
    elif isinstance(d, ev.CalComputed):
        line.append(f" {d.method} {'ok' if d.ok else 'NOT OK'} {d.message}")
    elif isinstance(d, (ev.CalAccepted, ev.CalRejected, ev.RecalRequested)):
        line.append(f" {d.cal_id or ''} {d.reason}")
    elif isinstance(d, ev.InstrumentError):
        line.append(f" {d.where}: {d.message}", style="bold red")
    elif isinstance(d, ev.SessionClosed):
        line.append(" completed" if d.completed else " stopped before the end")
    elif isinstance(d, ev.SessionOpened):
        line.append(f" {d.operator} {d.wafer} {d.plan_name}")
    elif isinstance(d, ev.SessionResumed):
        line.append(f" by {d.operator or d.login} (probelog {d.probelog_version})")
    elif isinstance(d, ev.UnknownEvent) and d.payload.get("message"):
        line.append(f" {d.payload['message']}", style="red")
    return line


class Logbook(RichLog):
    """The journal, newest line at the bottom."""

    DEFAULT_CSS = """
    Logbook { border: round $secondary; min-height: 4; scrollbar-size-vertical: 1; }
    """

    def __init__(self, *args, **kwargs) -> None:
        kwargs.setdefault("max_lines", 2000)
        kwargs.setdefault("wrap", False)
        super().__init__(*args, **kwargs)
        self.events: list[ev.Event] = []

    def on_mount(self) -> None:
        self.border_title = "logbook"

    def sync(self, journal_events: list[ev.Event]) -> None:
        """Show the events of the whole journal list not shown yet."""
        self.add_events(journal_events[len(self.events):])

    def add_events(self, events: list[ev.Event]) -> None:
        for e in events:
            self.events.append(e)
            self.write(describe(e))
        if self.events:
            self.border_title = f"logbook · {len(self.events)} events"
