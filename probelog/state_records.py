"""The records a SessionState is made of: landings, decisions, sites, cal
standards, cals, notes, instrument errors, resumes (msgspec frozen Structs, so
states compare by value and snapshot to msgpack). Units: Hz; die = (column, row).
"""

from __future__ import annotations

import msgspec

from probelog import events as ev
from probelog.events import Die, FileRef
from probelog.verdicts import Verdict

# gc=False: records hold only strings, numbers, tuples and other records (no cycles);
# untracked, a 100,000-event state costs the cyclic collector nothing.
class _S(msgspec.Struct, frozen=True, kw_only=True, gc=False):
    pass


class LandingRec(_S, frozen=True):
    """One measurement on (die, site): a site landing, a drift re-measure or a
    cal verification. ``metrics`` as journaled ({"f_hz": [...], name: [...]})."""

    seq: int
    ts: str
    landing: int
    what: str  # "landing", "drift", "verification", "precheck" (a failed contact pre-check)
    verdict: Verdict
    cal_id: str | None = None
    kind: str = ""
    checks: tuple[ev.Check, ...] = ()
    metrics: ev.Metrics | None = None
    raw: FileRef | None = None
    corrected: FileRef | None = None


class DecisionRec(_S, frozen=True):
    seq: int
    ts: str
    action: str  # ev.ACTIONS; an accept of a FAIL landing is always ACCEPT_DESPITE_FAIL here
    landing: int
    reason: str = ""


class SiteRec(_S, frozen=True):
    """Everything on one (die, site). ``decision`` is the final one (accept /
    accept-despite-fail / skip / give-up), None while undecided; ``previous`` the
    last non-FAIL landing since the last decision or cal (repeatability reference)."""

    landings: tuple[LandingRec, ...] = ()
    decisions: tuple[DecisionRec, ...] = ()
    decision: DecisionRec | None = None
    count: int = 0  # highest landing number used on this (die, site)
    previous: FileRef | None = None

    @property
    def accepted_landing(self) -> LandingRec | None:
        """The landing the final accept (despite fail or not) kept, else None."""
        d = self.decision
        if d is None or d.action not in (ev.ACCEPT, ev.ACCEPT_DESPITE_FAIL):
            return None
        return next((x for x in reversed(self.landings) if x.landing == d.landing and x.what == "landing"), None)

    @property
    def last_landing(self) -> LandingRec | None:
        return next((x for x in reversed(self.landings) if x.what == "landing"), None)


class StandardRec(_S, frozen=True):
    seq: int
    site: str
    landing: int
    verdict: Verdict
    raw: FileRef | None


class CalRec(_S, frozen=True):
    """A computed cal; ``verdicts`` gathers solve, verification and agreement verdicts."""

    cal_id: str
    method: str
    ok: bool
    message: str
    seq: int
    file: FileRef | None = None
    files: tuple[FileRef, ...] = ()
    verdicts: tuple[Verdict, ...] = ()
    agreement: ev.CalAgreement | None = None
    kit_sha256: str | None = None
    accepted_seq: int | None = None
    reason: str = ""

    @property
    def verdict(self) -> Verdict:
        return max(self.verdicts, key=lambda v: v.rank, default=Verdict.PASS)


class NoteRec(_S, frozen=True):
    seq: int
    ts: str
    text: str
    die: Die | None = None
    site: str | None = None


class ErrorRec(_S, frozen=True):
    seq: int
    ts: str
    where: str
    error: str
    message: str


class ResumeRec(_S, frozen=True):
    seq: int
    ts: str
    operator: str
    login: str
    probelog_version: str



_EMPTY_SITE = SiteRec()


def metric_at(metrics: ev.Metrics | None, name: str, f_hz: float) -> float | None:
    """``metrics[name]`` at the entry of ``metrics["f_hz"]`` nearest ``f_hz`` (Hz)."""
    if not metrics or name not in metrics or not metrics.get("f_hz"):
        return None
    freqs = metrics["f_hz"]
    best = min((i for i, f in enumerate(freqs) if f is not None), key=lambda i: abs(float(freqs[i]) - f_hz),  # type: ignore[arg-type]
               default=None)
    values = metrics[name]
    if best is None or best >= len(values):
        return None
    v = values[best]
    return None if v is None else float(v)
