"""What the journal view reads out of the journal's events (dicts as written in
journal.jsonl, docs/journal-events.md, or typed events): the line's dict, the
event's type, the view's filter and the resume marks. (The map and the die
history read the session state instead: probelog.tui.wafer_read.)

Pure functions of the event list, so the screens stay thin and the tests can
feed them a journal written by the real engine.
"""

from __future__ import annotations

from typing import Any

Die = tuple[int, int]


def as_dict(event: Any) -> dict:
    """A journal event as the line's dict (seq, ts, type, payload), whether it came
    as that dict or as a typed probelog.events.Event."""
    if isinstance(event, dict):
        return event
    import msgspec

    payload = msgspec.to_builtins(event.data)
    return {"seq": event.seq, "ts": event.ts, "type": event.type,
            "payload": payload if isinstance(payload, dict) else {}}


def type_of(event: Any) -> str:
    """The event's type, without converting a typed event's payload."""
    return str(event.get("type", "")) if isinstance(event, dict) else str(event.type)


def _die(p: dict) -> Die | None:
    d = p.get("die")
    return (int(d[0]), int(d[1])) if isinstance(d, (list, tuple)) and len(d) == 2 else None


def event_matches(ev: dict, words: list[str]) -> bool:
    """The journal view's filter: every word must match the event's die ("3,4"),
    its site (a part of the name) or its type (a part of it)."""
    ev = as_dict(ev)
    p = ev.get("payload") or {}
    die = _die(p)
    die_txt = f"{die[0]},{die[1]}" if die else ""
    site = str(p.get("site") or p.get("standard") or "").lower()
    kind = str(ev.get("type", "")).lower()
    for w in words:
        w = w.lower().strip()
        if not w:
            continue
        if w.startswith("die:"):
            if w[4:] != die_txt:
                return False
        elif w.startswith("site:"):
            if w[5:] not in site:
                return False
        elif w.startswith("type:"):
            if w[5:] not in kind:
                return False
        elif not (w == die_txt or w in site or w in kind):
            return False
    return True


def is_resume(ev: dict) -> bool:
    """The journal's mark of a session reopened after a quit or a crash."""
    ev = as_dict(ev)
    return ev.get("type") in ("recovered", "session-resumed")
