"""What a session is, folded from its events: ``state = apply(state, event)``.

One pure reducer gives every event its meaning. The engine applies each event it
writes (live) and folds the journal on resume; the headless summary, the
manifest, the report, ``verify`` and the UI read the same state, never the raw
lines (docs/engine.md).

Copy-on-write: a state is never changed after it is made (msgspec frozen
Structs holding dicts and tuples nobody mutates); ``apply`` copies only what the
event touches: the state record, the die's site map and the site's record.
So any earlier state stays valid (the property tests fold prefixes and compare).

Phases here follow the events: ``opened`` (nothing measured or decided yet),
``calibrating``, ``verifying``, ``probing``, ``deciding``, ``closed``. "done"
needs the plan (every planned site decided): :func:`planned_done`.
Units: frequencies in Hz; ``die`` is ``(column, row)``.
"""

from __future__ import annotations

from collections.abc import Iterable
from functools import reduce
from typing import Any

import msgspec

from probelog import events as ev
from probelog.events import Die, FileRef
from probelog.state_records import (_EMPTY_SITE, Bulk, CalRec, DecisionRec, ErrorRec, LandingRec, NoteRec, ResumeRec,
                                    SiteRec, StandardRec, _S, metric_at)
from probelog.verdicts import Verdict

__all__ = ["CalRec", "DecisionRec", "ErrorRec", "LandingRec", "NoteRec", "ResumeRec", "SessionState", "SiteRec",
           "StandardRec", "apply", "fold", "metric_at", "planned_done"]

OPENED, CALIBRATING, VERIFYING, PROBING, DECIDING, CLOSED = (
    "opened", "calibrating", "verifying", "probing", "deciding", "closed")

# Die status values (die map, summaries): one per distinct outcome.
NOT_STARTED, PARTIAL, DONE, SKIPPED, FAILED, ACCEPTED_DESPITE_FAIL = (
    "todo", "partial", "done", "skipped", "failed", "accepted-despite-fail")
# Every planned site of the die decided: nothing left to land on or skip.
FINISHED = frozenset((DONE, SKIPPED, FAILED, ACCEPTED_DESPITE_FAIL))


class SessionState(_S, frozen=True):
    """The whole session after ``seq`` events (``hash`` = that line's SHA-256)."""

    seq: int = 0
    hash: str = ""
    opened: ev.SessionOpened | None = None
    opened_ts: str = ""
    phase: str = OPENED
    closed: ev.SessionClosed | None = None
    # calibration
    cal_count: int = 0  # cal ids are cal1, cal2, ...
    cal_id: str | None = None  # the cal being measured / verified
    standards: dict[str, StandardRec] = {}  # role -> standard of cal_id that counts
    std_landings: dict[str, int] = {}  # "<cal_id>/<site>" -> landings so far
    last_standard: str | None = None
    switch_terms: tuple[FileRef, ...] | None = None
    pending: CalRec | None = None
    active: CalRec | None = None
    cals: dict[str, CalRec] = {}
    # probing
    sites: dict[Die, dict[str, SiteRec]] = {}
    awaiting: tuple[Die, str, int] | None = None  # the landing waiting for a decision
    walk_die: Die | None = None  # set by goto
    touchdowns: dict[str, int] = {}
    drift_ref: tuple[FileRef, int] | None = None  # (file, seq)
    since_drift: int = 0  # site landings since the last drift re-measure (or cal)
    ref_wanted: bool = False  # a drift reference is taken right after a cal is accepted
    recal_advised: str | None = None  # reason of an unanswered drift advice
    line_figures: dict[Die, dict[str, ev.LineFigures]] = {}  # die -> line family -> its pad-free figures
    # counts (for summaries; kept as the events come, no walk over sites)
    n_landings: int = 0
    n_finished: int = 0
    n_accepted: int = 0
    n_accepted_despite_fail: int = 0
    n_skipped: int = 0
    n_given_up: int = 0
    # the logbook
    notes: tuple[NoteRec, ...] = ()
    errors: tuple[ErrorRec, ...] = ()
    resumes: tuple[ResumeRec, ...] = ()
    recovered: tuple[ev.Recovered, ...] = ()
    unknown: int = 0  # events of a newer schema this version does not know

    # ------------------------------------------------------------ queries

    def site(self, die: Die, site: str) -> SiteRec:
        return self.sites.get(die, {}).get(site) or _EMPTY_SITE

    def landing_count(self, die: Die, site: str) -> int:
        return self.site(die, site).count

    def is_finished(self, die: Die, site: str) -> bool:
        return self.site(die, site).decision is not None

    def last_accepted(self, die: Die, site: str) -> LandingRec | None:
        """The landing kept for (die, site), accepted despite FAIL included."""
        return self.site(die, site).accepted_landing

    def accepted_across_dies(self, site: str) -> list[tuple[Die, LandingRec]]:
        """Every die's kept landing of ``site`` (population checks), in die order of first landing."""
        out = []
        for die, by_site in self.sites.items():
            rec = by_site.get(site)
            kept = rec.accepted_landing if rec is not None else None
            if kept is not None:
                out.append((die, kept))
        return out

    def decisions(self) -> dict[tuple[Die, str], str]:
        """Final action per decided (die, site)."""
        return {(die, name): rec.decision.action for die, by_site in self.sites.items()
                for name, rec in by_site.items() if rec.decision is not None}

    def summary(self, planned_sites: int | None = None) -> dict[str, Any]:
        """Counts for summaries: ``accepted`` counts plain accepts, ``accepted_despite_fail``
        the FAIL landings kept with a reason, ``failed`` the give-ups."""
        out: dict[str, Any] = {
            "accepted": self.n_accepted,
            "accepted_despite_fail": self.n_accepted_despite_fail,
            "skipped": self.n_skipped,
            "failed": self.n_given_up,
            "landings": self.n_landings,
            "touchdowns": dict(self.touchdowns),
            "cal_id": self.active.cal_id if self.active else None,
            "notes": len(self.notes),
            "instrument_errors": len(self.errors),
            "resumes": len(self.resumes),
        }
        if planned_sites is not None:
            out = {"sites": planned_sites, **out}
        return out


def planned_done(state: SessionState, planned: int) -> bool:
    """Every one of ``planned`` (die, site) pairs decided."""
    return state.n_finished >= planned


# ---------------------------------------------------------------- the reducer

_replace = msgspec.structs.replace


def _with_site(s: SessionState, die: Die, site: str, rec: SiteRec, **changes: Any) -> SessionState:
    by_site = dict(s.sites.get(die, {}))
    by_site[site] = rec
    sites = dict(s.sites)
    sites[die] = by_site
    return _replace(s, sites=sites, **changes)


def _start_cal(cal_id: str | None, s: SessionState) -> dict[str, Any]:
    """Changes that begin calibration ``cal_id`` (the next id when None)."""
    cal_id = cal_id or f"cal{s.cal_count + 1}"
    number = cal_id.removeprefix("cal")
    count = max(s.cal_count, int(number) if number.isdigit() else 0)
    return {"cal_id": cal_id, "cal_count": count, "standards": {}, "last_standard": None,
            "switch_terms": None, "phase": CALIBRATING}


def _touch(s: SessionState, touchdowns: dict[str, int]) -> dict[str, int]:
    if not touchdowns:
        return s.touchdowns
    out = dict(s.touchdowns)
    out.update(touchdowns)
    return out


def apply(s: SessionState, e: ev.Event) -> SessionState:
    """The state after event ``e`` (pure: ``s`` is left as it was)."""
    d = e.data
    fn = _HANDLERS.get(type(d))
    s2 = fn(s, e, d) if fn is not None else _replace(s, unknown=s.unknown + 1)
    return _replace(s2, seq=e.seq, hash=e.hash)


def fold(events: Iterable[ev.Event], state: SessionState | None = None) -> SessionState:
    """``reduce(apply, events, state)``: the state after every event."""
    return reduce(apply, events, state if state is not None else SessionState())


def _opened(s: SessionState, e: ev.Event, d: ev.SessionOpened) -> SessionState:
    return _replace(s, opened=d, opened_ts=e.ts, touchdowns=dict.fromkeys(d.probes, 0))


def _resumed(s: SessionState, e: ev.Event, d: ev.SessionResumed) -> SessionState:
    # An undecided landing is measured again: after a crash the tips may have
    # moved, so its data stays on record but is not decided upon.
    phase = PROBING if s.phase in (DECIDING, CLOSED) else s.phase
    if s.phase == CLOSED:
        phase = _phase_before_close(s)
    rec = ResumeRec(seq=e.seq, ts=e.ts, operator=d.operator, login=d.login, probelog_version=d.probelog_version)
    return _replace(s, phase=phase, awaiting=None, closed=None, resumes=(*s.resumes, rec))


def _phase_before_close(s: SessionState) -> str:
    if s.pending is not None:
        return VERIFYING
    if s.cal_id is not None and (s.active is None or s.cal_id != s.active.cal_id):
        return CALIBRATING
    return PROBING if s.active is not None or s.n_landings or s.n_finished else OPENED


def _cal_standard(s: SessionState, e: ev.Event, d: ev.CalStandard) -> SessionState:
    changes: dict[str, Any] = {} if d.cal_id == s.cal_id else _start_cal(d.cal_id, s)
    standards = dict(changes.get("standards", s.standards))
    standards[d.standard] = StandardRec(seq=e.seq, site=d.site, landing=d.landing, verdict=d.verdict, raw=d.raw)
    std_landings = dict(s.std_landings)
    std_landings[f"{d.cal_id}/{d.site}"] = d.landing
    changes.update(standards=standards, std_landings=std_landings, last_standard=d.standard,
                   touchdowns=_touch(s, d.touchdowns), phase=CALIBRATING)
    if d.switch_terms:
        changes["switch_terms"] = tuple(d.switch_terms)
    return _replace(s, **changes)


def _cal_computed(s: SessionState, e: ev.Event, d: ev.CalComputed) -> SessionState:
    changes: dict[str, Any] = {} if d.cal_id == s.cal_id else _start_cal(d.cal_id, s)
    rec = CalRec(cal_id=d.cal_id, method=d.method, ok=d.ok, message=d.message, seq=e.seq, file=d.file,
                 files=tuple(d.files), verdicts=(Verdict.PASS if d.ok else Verdict.FAIL,),
                 kit_sha256=d.kit_sha256, kit_text=d.kit_text)
    return _replace(s, **changes, pending=rec, cals={**s.cals, d.cal_id: rec}, phase=VERIFYING)


def _landing_rec(e: ev.Event, d: ev.Landing | ev.Drift | ev.CalVerification | ev.Precheck,
                 what: str) -> LandingRec:
    return LandingRec(seq=e.seq, landing=d.landing, what=what, verdict=d.verdict, bulk=Bulk(e.seq, e.ts, d))


def _cal_verification(s: SessionState, e: ev.Event, d: ev.CalVerification) -> SessionState:
    old = s.site(d.die, d.site)
    rec = _replace(old, landings=(*old.landings, _landing_rec(e, d, "verification")), count=d.landing)
    changes: dict[str, Any] = {"touchdowns": _touch(s, d.touchdowns)}
    if s.pending is not None:
        pending = _replace(s.pending, verdicts=(*s.pending.verdicts, d.verdict))
        changes.update(pending=pending, cals={**s.cals, pending.cal_id: pending})
    return _with_site(s, d.die, d.site, rec, **changes)


def _cal_agreement(s: SessionState, e: ev.Event, d: ev.CalAgreement) -> SessionState:
    if s.pending is None:
        return s
    pending = _replace(s.pending, agreement=d, verdicts=(*s.pending.verdicts, d.verdict))
    return _replace(s, pending=pending, cals={**s.cals, pending.cal_id: pending})


def _cal_accepted(s: SessionState, e: ev.Event, d: ev.CalAccepted) -> SessionState:
    active = s.pending
    if active is not None:
        active = _replace(active, accepted_seq=e.seq, reason=d.reason)
    sites = {die: {name: _replace(rec, previous=None) if rec.previous is not None else rec
                   for name, rec in by_site.items()} for die, by_site in s.sites.items()}
    # repeatability across cals compares apples and pears: no previous landing survives
    return _replace(s, active=active, pending=None, drift_ref=None, ref_wanted=active is not None,
                    since_drift=0, phase=PROBING, sites=sites, recal_advised=None,
                    cals={**s.cals, active.cal_id: active} if active else s.cals)


def _cal_rejected(s: SessionState, e: ev.Event, d: ev.CalRejected) -> SessionState:
    return _replace(s, pending=None, **_start_cal(None, s))


def _recal_requested(s: SessionState, e: ev.Event, d: ev.RecalRequested) -> SessionState:
    if not d.cal_id:  # advice (drift): nothing changes until the operator acts
        return _replace(s, recal_advised=d.reason)
    return _replace(s, pending=None, recal_advised=None, **_start_cal(d.cal_id, s))


def _landing(s: SessionState, e: ev.Event, d: ev.Landing) -> SessionState:
    old = s.site(d.die, d.site)
    rec = _replace(old, landings=(*old.landings, _landing_rec(e, d, "landing")), count=d.landing,
                   previous=(d.corrected or d.raw) if d.verdict is not Verdict.FAIL else old.previous)
    return _with_site(s, d.die, d.site, rec, touchdowns=_touch(s, d.touchdowns), phase=DECIDING,
                      awaiting=(d.die, d.site, d.landing), n_landings=s.n_landings + 1,
                      since_drift=s.since_drift + 1)


def _precheck(s: SessionState, e: ev.Event, d: ev.Precheck) -> SessionState:
    # a FAIL landing without a full sweep: it waits for a decision, never becomes
    # the repeatability reference
    old = s.site(d.die, d.site)
    rec = _replace(old, landings=(*old.landings, _landing_rec(e, d, "precheck")), count=d.landing)
    return _with_site(s, d.die, d.site, rec, touchdowns=_touch(s, d.touchdowns), phase=DECIDING,
                      awaiting=(d.die, d.site, d.landing), n_landings=s.n_landings + 1,
                      since_drift=s.since_drift + 1)


def _drift(s: SessionState, e: ev.Event, d: ev.Drift) -> SessionState:
    old = s.site(d.die, d.site)
    rec = _replace(old, landings=(*old.landings, _landing_rec(e, d, "drift")), count=d.landing)
    ref = s.drift_ref
    # never take a bad landing as the reference; one try right after the cal
    if d.reference_seq is None and d.verdict is not Verdict.FAIL:
        f = d.corrected or d.raw
        ref = (f, e.seq) if f is not None else ref
    return _with_site(s, d.die, d.site, rec, touchdowns=_touch(s, d.touchdowns), drift_ref=ref,
                      since_drift=0, ref_wanted=False)


_COUNTER = {ev.ACCEPT: "n_accepted", ev.ACCEPT_DESPITE_FAIL: "n_accepted_despite_fail",
            ev.SKIP: "n_skipped", ev.GIVE_UP: "n_given_up"}


def _decision(s: SessionState, e: ev.Event, d: ev.Decision) -> SessionState:
    if d.standard:  # re-land of a cal standard: its landing no longer counts
        if d.cal_id not in (None, s.cal_id) or d.standard not in s.standards:
            return s
        standards = {k: v for k, v in s.standards.items() if k != d.standard}
        return _replace(s, standards=standards, last_standard=None)
    old = s.site(d.die, d.site)
    action = d.action
    if action == ev.ACCEPT:  # journals before schema 2 wrote a plain accept of a FAIL
        last = next((x for x in reversed(old.landings) if x.landing == d.landing and x.what == "landing"), None)
        if last is not None and last.verdict is Verdict.FAIL:
            action = ev.ACCEPT_DESPITE_FAIL
    rec_d = DecisionRec(seq=e.seq, ts=e.ts, action=action, landing=d.landing, reason=d.reason)
    changes: dict[str, Any] = {"phase": PROBING, "awaiting": None}
    if action == ev.RELAND:
        rec = _replace(old, decisions=(*old.decisions, rec_d))
    else:
        rec = _replace(old, decisions=(*old.decisions, rec_d), decision=rec_d, previous=None)
        if old.decision is None:
            changes["n_finished"] = s.n_finished + 1
        else:  # decided twice (never by the engine): count the last one only
            prev_counter = _COUNTER.get(old.decision.action)
            if prev_counter:
                changes[prev_counter] = getattr(s, prev_counter) - 1
        counter = _COUNTER.get(action)
        if counter:
            changes[counter] = changes.get(counter, getattr(s, counter)) + 1
    return _with_site(s, d.die, d.site, rec, **changes)


def _die_skipped(s: SessionState, e: ev.Event, d: ev.DieSkipped) -> SessionState:
    for site in d.sites:
        s = _decision(s, e, ev.Decision(die=d.die, site=site, action=ev.SKIP,
                                        landing=s.site(d.die, site).count, reason=d.reason))
    return s


def _note(s: SessionState, e: ev.Event, d: ev.Note) -> SessionState:
    return _replace(s, notes=(*s.notes, NoteRec(seq=e.seq, ts=e.ts, text=d.text, die=d.die, site=d.site)))


def _goto(s: SessionState, e: ev.Event, d: ev.Goto) -> SessionState:
    return _replace(s, walk_die=d.die)


def _instrument_error(s: SessionState, e: ev.Event, d: ev.InstrumentError) -> SessionState:
    rec = ErrorRec(seq=e.seq, ts=e.ts, where=d.where, error=d.error, message=d.message)
    return _replace(s, errors=(*s.errors, rec), touchdowns=_touch(s, d.touchdowns))


def _recovered(s: SessionState, e: ev.Event, d: ev.Recovered) -> SessionState:
    return _replace(s, recovered=(*s.recovered, d))


def _closed(s: SessionState, e: ev.Event, d: ev.SessionClosed) -> SessionState:
    return _replace(s, closed=d, phase=CLOSED)


def _line_figures(s: SessionState, e: ev.Event, d: ev.LineFigures) -> SessionState:
    # one event per die and line family; a later one (never written twice by the engine) wins
    by_family = {**s.line_figures.get(d.die, {}), d.family: d}
    return _replace(s, line_figures={**s.line_figures, d.die: by_family})


def _same(s: SessionState, e: ev.Event, d: Any) -> SessionState:
    return s


_HANDLERS: dict[type, Any] = {
    ev.SessionOpened: _opened, ev.SessionResumed: _resumed, ev.CautionsShown: _same,
    ev.CalStandard: _cal_standard, ev.CalComputed: _cal_computed, ev.CalVerification: _cal_verification,
    ev.CalAgreement: _cal_agreement, ev.CalAccepted: _cal_accepted, ev.CalRejected: _cal_rejected,
    ev.RecalRequested: _recal_requested, ev.Landing: _landing, ev.Drift: _drift, ev.Decision: _decision,
    ev.DieSkipped: _die_skipped, ev.Note: _note, ev.Goto: _goto, ev.InstrumentError: _instrument_error,
    ev.Recovered: _recovered, ev.SessionClosed: _closed,
    ev.LineFigures: _line_figures,
    ev.Precheck: _precheck, ev.Checkpoint: _same,
}
