"""The logbook panel: the session journal (journal.jsonl) as it grows, one line an
event, read from the file itself so the panel shows exactly what was written."""

from __future__ import annotations

import json
import threading
from pathlib import Path
from typing import Any

from rich.text import Text
from textual.widgets import RichLog

VERDICT_MARK = {"pass": "✔", "warn": "▲", "fail": "✖", "n/a": "·"}
VERDICT_STYLE = {"pass": "green", "warn": "yellow", "fail": "bold red", "n/a": "dim"}


class JournalTail:
    """Reads complete new lines appended to a journal file since the last read."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self.offset = 0
        self._lock = threading.Lock()  # two reader workers must not both advance the offset

    def read_new(self) -> list[dict[str, Any]]:
        """Events appended since the last call; a torn last line waits for its end."""
        with self._lock:
            return self._read_new()

    def _read_new(self) -> list[dict[str, Any]]:
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
                events.append(json.loads(raw))
            except ValueError:
                events.append({"seq": None, "type": "unreadable line", "payload": {}})
        return events


def _die(p: dict) -> str:
    d = p.get("die")
    return f"{d[0]},{d[1]}" if isinstance(d, (list, tuple)) and len(d) == 2 else "-"


def describe(event: dict[str, Any]) -> Text:
    """One logbook line for a journal event: seq, time, type, the gist."""
    p = event.get("payload") or {}
    kind = event.get("type", "?")
    ts = str(event.get("ts", ""))[11:19]
    seq = event.get("seq")
    verdict = p.get("verdict")
    line = Text(f"{'?' if seq is None else seq:>4} {ts[:5]} ", style="dim")
    if verdict in VERDICT_MARK:
        line.append(VERDICT_MARK[verdict] + " ", style=VERDICT_STYLE[verdict])
    else:
        line.append("  ")
    line.append(kind, style="bold")
    if kind == "landing":
        line.append(f" die {_die(p)} {p.get('site')} L{p.get('landing')} ")
    elif kind in ("cal-standard", "cal-verification"):
        line.append(f" {p.get('standard') or p.get('site')} ")
    elif kind == "cal-agreement":
        worst = p.get("worst")
        line.append(f" {p.get('method')}~{p.get('other_method')} worst {worst:.3g} " if isinstance(worst, (int, float)) else " ")
    elif kind == "decision":
        line.append(f" {p.get('action')} die {_die(p)} {p.get('site')} L{p.get('landing')}")
        if p.get("reason"):
            line.append(f" — {p['reason']}", style="italic")
    elif kind == "note":
        line.append(f" “{p.get('text', '')}”", style="italic")
    elif kind in ("cal-computed",):
        line.append(f" {p.get('method')} {'ok' if p.get('ok') else 'NOT OK'} {p.get('message', '')}")
    elif kind in ("cal-accepted", "cal-rejected", "recal-requested"):
        line.append(f" {p.get('cal_id', '')} {p.get('reason', '')}")
    elif kind == "instrument-error":
        line.append(f" {p.get('where')}: {p.get('message')}", style="bold red")
    elif kind == "session-closed":
        line.append(" completed" if p.get("completed") else " stopped before the end")
    elif kind == "session-opened":
        line.append(f" {p.get('operator', '')} {p.get('wafer', '')} {p.get('plan_name', '')}")
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
        self.events: list[dict[str, Any]] = []

    def on_mount(self) -> None:
        self.border_title = "logbook"

    def sync(self, journal_events: list[dict[str, Any]]) -> None:
        """Show the events of the whole journal list not shown yet."""
        self.add_events(journal_events[len(self.events):])

    def add_events(self, events: list[dict[str, Any]]) -> None:
        for ev in events:
            self.events.append(ev)
            self.write(describe(ev))
        if self.events:
            self.border_title = f"logbook · {len(self.events)} events"
