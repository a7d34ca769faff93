"""The journal's event types: one msgspec Struct per event type (``TYPE`` is the
journal ``type`` string) and the pieces they are made of. Read and written
through :mod:`probelog.events` (the one encoder and decoder), which re-exports
every name here; docs/journal-events.md is generated from these classes.

Units: frequencies in Hz, power in dBm; ``die`` is ``(column, row)``.
"""

from __future__ import annotations

from collections.abc import Mapping
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


class Checkpoint(_Record, frozen=True):
    """A state snapshot (``state.snapshot``) was written, folded through event
    ``seq``; ``sha256`` is the SHA-256 of the snapshot file's bytes. Resume takes
    a snapshot only when an event after the lines it covers vouches for it like
    this, so the snapshot is as trustworthy as the hash-chained journal: a
    snapshot rewritten afterwards, its own hashes recomputed, is ignored."""

    TYPE: ClassVar[str] = "checkpoint"
    seq: int
    sha256: str


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
    Note, Goto, InstrumentError, Recovered, SessionClosed, LineFigures, Precheck, Checkpoint,
]
EVENT_CLASSES: tuple[type[_Record], ...] = (
    SessionOpened, SessionResumed, CautionsShown, CalStandard, CalComputed, CalVerification,
    CalAgreement, CalAccepted, CalRejected, RecalRequested, Landing, Drift, Decision, DieSkipped,
    Note, Goto, InstrumentError, Recovered, SessionClosed, LineFigures, Precheck, Checkpoint,
)
BY_TYPE: dict[str, type[_Record]] = {c.TYPE: c for c in EVENT_CLASSES}
AnyPayload = Union[Payload, UnknownEvent]
