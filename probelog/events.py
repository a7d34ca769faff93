"""The journal's events as typed records: one class per event type, one encoder,
one decoder. No other module parses a journal line (journal.py keeps the
bytes-level hash chain and hands over parsed lines; this module gives them types).

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
from typing import Any, ClassVar, Union

import msgspec

from probelog.verdicts import CheckResult, Verdict

SCHEMA = 3  # 1: before typed events (no ``schema`` key); 2: typed events, session-resumed, die-skipped;
# 3: precheck

Die = tuple[int, int]


class EventError(ValueError):
    """A journal line that is not a valid event of its type (names line and field)."""


# gc=False: payloads never form reference cycles; not tracking them keeps long folds cheap.
class _Record(msgspec.Struct, frozen=True, forbid_unknown_fields=True, omit_defaults=False, gc=False):
    """Base of every payload class: ``TYPE`` is the journal ``type`` string."""

    TYPE: ClassVar[str] = ""


# ---------------------------------------------------------------- pieces


class FileRef(msgspec.Struct, frozen=True, forbid_unknown_fields=True, gc=False):
    """A data file: ``path`` relative to the session folder (POSIX), SHA-256 hex."""

    path: str
    sha256: str


class Check(msgspec.Struct, frozen=True, forbid_unknown_fields=True, gc=False):
    """One check result as journaled; value / limit in ``unit``, ``at_hz`` in Hz."""

    name: str
    verdict: Verdict
    value: float | None = None
    limit: float | None = None
    at_hz: float | None = None
    message: str = ""
    unit: str = ""

    def result(self) -> CheckResult:
        return CheckResult(self.name, self.verdict, self.value, self.limit, self.at_hz, self.message, self.unit)

    @classmethod
    def of(cls, c: CheckResult) -> "Check":
        return cls(c.name, c.verdict, c.value, c.limit, c.at_hz, c.message, c.unit)


class Settings(msgspec.Struct, frozen=True, forbid_unknown_fields=True):
    """Sweep settings: Hz, points, Hz (IF bandwidth), dBm."""

    start_hz: float | None = None
    stop_hz: float | None = None
    points: int | None = None
    ifbw_hz: float | None = None
    power_dbm: float | None = None


# Line metrics at a few frequencies: {"f_hz": [...], "<metric>": [...]} (lines.JSON_KEYS).
Metrics = dict[str, list[float | None]]

# ---------------------------------------------------------------- events


class SessionOpened(_Record, frozen=True):
    """First event. ``plan_text`` is the whole plan file (resume rebuilds the plan from it)."""

    TYPE: ClassVar[str] = "session-opened"
    schema: int = 1
    session_id: str = ""
    probelog_version: str = ""
    plan_name: str = ""
    plan_file: str = ""
    plan_sha256: str = ""
    plan_text: str = ""
    operator: str = ""
    wafer: str = ""
    lot: str = ""
    chip: str = ""
    probes: list[str] = []
    bench: dict[str, str] = {}  # kind, description, vna_idn, prober_idn
    settings: Settings = Settings()
    golden_sha256: dict[str, str] = {}  # site name -> SHA-256 of its golden Touchstone file (resume re-checks)


class SessionResumed(_Record, frozen=True):
    """A session reopened: who (operator as given, login name of the OS user), which version."""

    TYPE: ClassVar[str] = "session-resumed"
    operator: str = ""
    login: str = ""
    probelog_version: str = ""
    checked_files: int = 0  # data files whose SHA-256 was checked before resuming


class CautionsShown(_Record, frozen=True):
    TYPE: ClassVar[str] = "cautions-shown"
    text: str = ""


class CalStandard(_Record, frozen=True):
    """A cal standard measured (raw). ``switch_terms`` [gamma_f, gamma_r] files after a thru/line."""

    TYPE: ClassVar[str] = "cal-standard"
    cal_id: str
    standard: str
    die: Die
    site: str
    kind: str = ""
    landing: int = 1
    raw: FileRef | None = None
    checks: list[Check] = []
    verdict: Verdict = Verdict.PASS
    touchdowns: dict[str, int] = {}
    switch_terms: list[FileRef] | None = None


class CalComputed(_Record, frozen=True):
    """A cal solved (or not: ``ok`` false). ``file`` is calset.json, ``files`` the whole saved set.
    ``kit_text`` / ``kit_sha256``: the cal kit file as read (schema 2)."""

    TYPE: ClassVar[str] = "cal-computed"
    cal_id: str
    method: str = ""
    standards: list[str] = []
    file: FileRef | None = None
    files: list[FileRef] = []
    ok: bool = False
    message: str = ""
    summary: dict[str, Any] | None = None
    kit_name: str | None = None
    kit_text: str | None = None
    kit_sha256: str | None = None


class CalVerification(_Record, frozen=True):
    TYPE: ClassVar[str] = "cal-verification"
    cal_id: str
    site: str
    die: Die
    landing: int = 1
    raw: FileRef | None = None
    corrected: FileRef | None = None
    checks: list[Check] = []
    verdict: Verdict = Verdict.PASS
    touchdowns: dict[str, int] = {}


class CalAgreement(_Record, frozen=True):
    """Two algorithms on the same standards: ``worst`` linear |dS| bound at ``at_hz`` (Hz)."""

    TYPE: ClassVar[str] = "cal-agreement"
    cal_id: str
    method: str = ""
    other_method: str = ""
    worst: float | None = None
    at_hz: float | None = None
    file: FileRef | None = None
    verdict: Verdict = Verdict.PASS


class CalAccepted(_Record, frozen=True):
    TYPE: ClassVar[str] = "cal-accepted"
    cal_id: str
    reason: str = ""


class CalRejected(_Record, frozen=True):
    TYPE: ClassVar[str] = "cal-rejected"
    cal_id: str | None = None
    reason: str = ""


class RecalRequested(_Record, frozen=True):
    """By the operator (``cal_id`` = the new cal, calibration starts) or advised by
    drift (``advised_by`` "drift", no ``cal_id``: nothing changes until the operator acts)."""

    TYPE: ClassVar[str] = "recal-requested"
    reason: str = ""
    cal_id: str | None = None
    advised_by: str | None = None
    drift_seq: int | None = None


class Landing(_Record, frozen=True):
    """A site landing: ``landing`` counts landings on (die, site) from 1."""

    TYPE: ClassVar[str] = "landing"
    die: Die
    site: str
    landing: int
    kind: str = ""
    cal_id: str | None = None
    raw: FileRef | None = None
    corrected: FileRef | None = None
    checks: list[Check] = []
    verdict: Verdict = Verdict.PASS
    metrics: Metrics | None = None
    touchdowns: dict[str, int] = {}


class Precheck(_Record, frozen=True):
    """A contact pre-check that failed: the short fast sweep right after touchdown
    (``settings``: a few points over the plan's band at a wide IF bandwidth),
    judged only for gross contact against the active cal's raw open and short.
    A FAIL landing of its own kind: it takes landing number ``landing`` on (die,
    site), waits for a decision like any FAIL, and no full sweep was taken. Only
    failed pre-checks are journaled; a passed one goes on to the full sweep."""

    TYPE: ClassVar[str] = "precheck"
    die: Die
    site: str
    landing: int
    kind: str = ""
    cal_id: str | None = None
    raw: FileRef | None = None
    settings: Settings = Settings()
    checks: list[Check] = []
    verdict: Verdict = Verdict.FAIL
    touchdowns: dict[str, int] = {}


class Drift(_Record, frozen=True):
    """A drift re-measure; ``reference_seq`` None means this landing is the new reference."""

    TYPE: ClassVar[str] = "drift"
    die: Die
    site: str
    landing: int
    cal_id: str | None = None
    reference_seq: int | None = None
    raw: FileRef | None = None
    corrected: FileRef | None = None
    checks: list[Check] = []
    verdict: Verdict = Verdict.PASS
    touchdowns: dict[str, int] = {}


# Decision actions. "accept-despite-fail" (schema 2) is an accept of a FAIL
# landing; it always carries the operator's reason.
ACCEPT, ACCEPT_DESPITE_FAIL, RELAND, SKIP, GIVE_UP = "accept", "accept-despite-fail", "reland", "skip", "give-up"
ACTIONS = (ACCEPT, ACCEPT_DESPITE_FAIL, RELAND, SKIP, GIVE_UP)


class Decision(_Record, frozen=True):
    """What the operator decided on (die, site) after ``landing`` (0: before landing at all).
    With ``standard`` set it is a re-land of a cal standard of ``cal_id``."""

    TYPE: ClassVar[str] = "decision"
    die: Die
    site: str
    action: str
    landing: int = 0
    reason: str = ""
    standard: str | None = None
    cal_id: str | None = None


class DieSkipped(_Record, frozen=True):
    """Every site of ``die`` not decided yet (``sites``) skipped with one reason."""

    TYPE: ClassVar[str] = "die-skipped"
    die: Die
    sites: list[str]
    reason: str


class LineFigures(_Record, frozen=True):
    """Pad-free figures of one line family (type, metal, width, gap) on ``die``,
    from its two lengths (probelog.line_pairs); written after the die's last
    decision. ``metrics`` as in ``landing``; Z0 and RLGC null without a plan reference."""

    TYPE: ClassVar[str] = "line-figures"
    die: Die
    family: str
    site_a: str
    site_b: str
    length_a_um: float
    length_b_um: float
    z0_from: str = ""  # "", "c-ref" or "z0-ref"
    metrics: Metrics = {}


class Note(_Record, frozen=True):
    TYPE: ClassVar[str] = "note"
    text: str = ""
    die: Die | None = None
    site: str | None = None


class Goto(_Record, frozen=True, omit_defaults=True):
    TYPE: ClassVar[str] = "goto"
    die: Die
    reason: str = ""


class InstrumentError(_Record, frozen=True):
    TYPE: ClassVar[str] = "instrument-error"
    where: str = ""
    error: str = ""
    message: str = ""
    touchdowns: dict[str, int] = {}


class Recovered(_Record, frozen=True):
    """Written by journal.py when reopening found a torn tail or files no event named."""

    TYPE: ClassVar[str] = "recovered"
    torn_line: str | None = None
    torn_bytes: int = 0
    adopted: list[FileRef] = []
    leftover_temp: list[str] = []
    message: str = ""


class SessionClosed(_Record, frozen=True):
    TYPE: ClassVar[str] = "session-closed"
    completed: bool = False
    summary: dict[str, Any] | str | None = None  # the engine writes a dict of counts
    cause: str | None = None  # why a run stopped early: a signal name or "broken pipe"


@dataclass(frozen=True)
class UnknownEvent:
    """An event type this probelog does not know (a newer version wrote it): kept as read."""

    type: str
    payload: Mapping[str, Any]
    TYPE: ClassVar[str] = ""


Payload = Union[
    SessionOpened, SessionResumed, CautionsShown, CalStandard, CalComputed, CalVerification,
    CalAgreement, CalAccepted, CalRejected, RecalRequested, Landing, Drift, Decision, DieSkipped,
    Note, Goto, InstrumentError, Recovered, SessionClosed, LineFigures, Precheck,
]
EVENT_CLASSES: tuple[type[_Record], ...] = (
    SessionOpened, SessionResumed, CautionsShown, CalStandard, CalComputed, CalVerification,
    CalAgreement, CalAccepted, CalRejected, RecalRequested, Landing, Drift, Decision, DieSkipped,
    Note, Goto, InstrumentError, Recovered, SessionClosed, LineFigures, Precheck,
)
BY_TYPE: dict[str, type[_Record]] = {c.TYPE: c for c in EVENT_CLASSES}
AnyPayload = Union[Payload, UnknownEvent]


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
