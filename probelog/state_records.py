"""The records a SessionState is made of: landings, decisions, sites, cal
standards, cals, notes, instrument errors, resumes (msgspec frozen Structs, so
states compare by value and snapshot to msgpack). Units: Hz; die = (column, row).
"""

from __future__ import annotations

from collections.abc import Callable

import msgspec

from probelog import events as ev
from probelog.events import Die, FileRef
from probelog.verdicts import Verdict

# gc=False: records hold only strings, numbers, tuples and other records (no cycles);
# untracked, a 100,000-event state costs the cyclic collector nothing. array_like:
# a snapshot stores each record as an array, not a map of its field names (about
# half the bytes to read back).
class _S(msgspec.Struct, frozen=True, kw_only=True, gc=False, array_like=True):
    pass


Measured = ev.Landing | ev.Drift | ev.CalVerification | ev.Precheck  # the events a LandingRec is folded from


class Bulk:
    """The event a :class:`LandingRec` was folded from (its checks, metrics,
    files and time: most of a long session's bytes), held as decoded, or read
    back from the journal line ``seq`` by ``load`` when first asked for (a state
    restored from a snapshot keeps only the line number; the snapshot's hash of
    the journal prefix vouches for those lines, probelog.engine.checkpoint).
    Equal when the events are."""

    __slots__ = ("seq", "_ts", "_data", "_load")

    def __init__(self, seq: int, ts: str = "", data: Measured | None = None,
                 load: Callable[[int], tuple[str, Measured]] | None = None) -> None:
        if (data is None) == (load is None):
            raise ValueError("a Bulk needs either its event's data or a way to load it")
        self.seq = seq
        self._ts, self._data, self._load = ts, data, load

    def _event(self) -> tuple[str, Measured]:
        if self._data is None:
            assert self._load is not None
            self._ts, self._data = self._load(self.seq)
            self._load = None  # read once; the journal line is immutable
        return self._ts, self._data

    @property
    def ts(self) -> str:
        return self._event()[0]

    @property
    def data(self) -> Measured:
        return self._event()[1]

    @property
    def loaded(self) -> bool:
        return self._data is not None

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Bulk) and self._event() == other._event()

    __hash__ = None  # type: ignore[assignment]  # equal by content, which holds dicts

    def __repr__(self) -> str:
        return f"Bulk(seq={self.seq}, {'loaded' if self.loaded else 'in the journal'})"


class LandingRec(_S, frozen=True):
    """One measurement on (die, site): a site landing, a drift re-measure or a
    cal verification. ``metrics`` as journaled ({"f_hz": [...], name: [...]}).
    The fields are what the walk decides on; the rest is read from the event
    (``bulk``) when asked for."""

    seq: int
    landing: int
    what: str  # "landing", "drift", "verification", "precheck" (a failed contact pre-check)
    verdict: Verdict
    bulk: Bulk

    @property
    def ts(self) -> str:
        return self.bulk.ts

    @property
    def cal_id(self) -> str | None:
        return self.bulk.data.cal_id

    @property
    def kind(self) -> str:
        d = self.bulk.data
        return d.kind if isinstance(d, (ev.Landing, ev.Precheck)) else ""

    @property
    def checks(self) -> tuple[ev.Check, ...]:
        return tuple(self.bulk.data.checks)

    @property
    def metrics(self) -> ev.Metrics | None:
        d = self.bulk.data
        return d.metrics if isinstance(d, ev.Landing) else None

    @property
    def raw(self) -> FileRef | None:
        return self.bulk.data.raw

    @property
    def corrected(self) -> FileRef | None:
        d = self.bulk.data
        return None if isinstance(d, ev.Precheck) else d.corrected


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
    kit_text: str | None = None  # the kit file as journaled with the cal (schema 2)
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
