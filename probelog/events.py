"""The journal's events as typed records: one class per event type, one encoder,
one decoder. No other module parses a journal line (journal.py keeps the
bytes-level hash chain and hands over parsed lines; this module gives them types).
The classes live in :mod:`probelog.event_types`; every name there is importable
from here.

Why msgspec.Struct rather than frozen dataclasses: a Struct decodes straight from
JSON bytes or from the dicts journal.py already parsed (``msgspec.convert``) in
C, about 10x faster than building dataclasses by hand, and it checks types and
(with ``forbid_unknown_fields``) catches a misspelt key at the edge, naming the
field. A 100,000-event session is read in a fraction of a second this way.

The line shape is unchanged (docs/journal-events.md):
``{"seq", "ts", "type", "payload", "prev"}``; the event class is chosen by
``type`` and built from ``payload``. ``session-opened`` carries ``schema``
(:data:`SCHEMA`; journals written before it existed read as schema 1). Events of
our own schema must match their class exactly (an unknown key is an error naming
the line and the field); a journal from a newer probelog may add fields (they
are dropped) and event types (they decode to :class:`UnknownEvent`, kept as
read, never a crash).

Units: frequencies in Hz, power in dBm; ``die`` is ``(column, row)``.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import msgspec

from probelog.event_types import (  # re-exported: callers read every event type as ev.<Name>
    ACCEPT, ACCEPT_DESPITE_FAIL, ACTIONS, AnyPayload, BY_TYPE, CalAccepted, CalAgreement, CalComputed, CalRejected,
    CalStandard, CalVerification, CautionsShown, Check, Checkpoint, Decision, Die, DieSkipped, Drift, EVENT_CLASSES, EventError,
    FileRef, GIVE_UP, Goto, InstrumentError, Landing, LineFigures, Metrics, Note, Payload, Precheck, RecalRequested,
    Recovered, RELAND, SCHEMA, SessionClosed, SessionOpened, SessionResumed, Settings, SKIP, UnknownEvent,
)
from probelog.verdicts import CheckResult, Verdict  # Verdict: read as ev.Verdict too

__all__ = ["ACCEPT", "ACCEPT_DESPITE_FAIL", "ACTIONS", "AnyPayload", "BY_TYPE", "CalAccepted", "CalAgreement",
           "CalComputed", "CalRejected", "CalStandard", "CalVerification", "CautionsShown", "Check", "checks_of",
           "Decision", "decode_events", "decode_lines", "Decoder", "Die", "DieSkipped", "Drift", "encode", "Event",
           "Checkpoint", "EVENT_CLASSES", "EventError", "file_refs", "FileRef", "GIVE_UP", "Goto", "InstrumentError", "Landing",
           "LineFigures", "Metrics", "Note", "Payload", "Precheck", "read_session", "RecalRequested", "Recovered",
           "RELAND", "SCHEMA", "SessionClosed", "SessionOpened", "SessionResumed", "Settings", "SKIP",
           "UnknownEvent", "Verdict"]


@dataclass(frozen=True)
class Event:
    """One decoded journal line: ``seq`` from 1, ``ts`` ISO 8601 UTC, ``hash`` the
    SHA-256 of the line bytes ("" when decoded from bytes without the chain)."""

    seq: int
    ts: str
    data: AnyPayload
    hash: str = ""
    prev: str = ""  # as written in the line (read from bytes only)

    @property
    def type(self) -> str:
        d = self.data
        return d.type if isinstance(d, UnknownEvent) else d.TYPE


# ---------------------------------------------------------------- codec


def encode(data: Payload) -> dict[str, Any]:
    """The payload dict journal.Journal.append writes (``type`` is ``data.TYPE``)."""
    out: dict[str, Any] = msgspec.to_builtins(data)
    return out


class Decoder:
    """Decodes the events of one journal in order. Remembers the schema from
    ``session-opened``: a newer schema drops unknown fields instead of failing."""

    def __init__(self, source: str = "journal.jsonl") -> None:
        self.source = source
        self.schema = 1

    def payload(self, type_: str, payload: Mapping[str, Any], line: int | None = None) -> AnyPayload:
        cls = BY_TYPE.get(type_)
        if cls is None:
            return UnknownEvent(type_, dict(payload))
        if cls is SessionOpened and isinstance(payload.get("schema"), int):
            self.schema = max(1, payload["schema"])  # before decoding: it may hold fields we do not know
        if self.schema > SCHEMA:
            payload = {k: v for k, v in payload.items() if k in cls.__struct_fields__}
        try:
            data: Payload = msgspec.convert(payload, cls, strict=False)  # type: ignore[assignment]
        except msgspec.ValidationError as exc:
            where = f"{self.source}, line {line}" if line is not None else self.source
            raise EventError(f"{where}: {type_!r} event: {exc}") from None
        return data

    def event(self, seq: int, ts: str, type_: str, payload: Mapping[str, Any], hash_: str = "", prev: str = "") -> Event:
        return Event(seq, ts, self.payload(type_, payload, seq), hash_, prev)

    def line(self, raw: bytes) -> Event:
        """One journal line (bytes, without its newline); ``hash`` is its SHA-256."""
        try:
            rec = _LINE.decode(raw)
        except msgspec.DecodeError as exc:
            raise EventError(f"{self.source}: not a journal line: {exc}") from None
        return self.event(rec.seq, rec.ts, rec.type, rec.payload, hashlib.sha256(raw).hexdigest(), rec.prev)


class _Line(msgspec.Struct, frozen=True):
    seq: int
    type: str
    ts: str = ""
    payload: dict[str, Any] = {}
    prev: str = ""


_LINE = msgspec.json.Decoder(_Line)


def decode_events(records: Iterable[Any], source: str = "journal.jsonl") -> Iterator[Event]:
    """Decode journal.Event records (``seq``, ``ts``, ``type``, ``payload``, ``hash``) in order."""
    dec = Decoder(source)
    for r in records:
        yield dec.event(r.seq, r.ts, r.type, r.payload, getattr(r, "hash", ""))


def decode_lines(data: bytes, source: str = "journal.jsonl") -> list[Event]:
    """Every complete line of a journal file's bytes (a torn last line is left out)."""
    dec = Decoder(source)
    return [dec.line(raw) for raw in data.split(b"\n")[:-1] if raw]


def read_session(folder: Any) -> list[Event]:
    """Every event of a session folder, read-only (no lock, no recovery)."""
    from pathlib import Path

    from probelog.journal import JOURNAL_NAME

    path = Path(folder) / JOURNAL_NAME
    return decode_lines(path.read_bytes(), str(path))


def file_refs(data: Any) -> list[tuple[str, FileRef]]:
    """(field name, FileRef) for every file an event names, in field order."""
    out: list[tuple[str, FileRef]] = []
    for name in getattr(data, "__struct_fields__", ()):
        value = getattr(data, name)
        for item in value if isinstance(value, list) else (value,):
            if isinstance(item, FileRef):
                out.append((name, item))
    return out


def checks_of(data: Any) -> list[CheckResult]:
    """The CheckResults of an event that has ``checks``; [] otherwise."""
    checks: Sequence[Check] = getattr(data, "checks", ())
    return [c.result() for c in checks]
