"""The session engine: a UI-agnostic state machine that walks a probing plan.

The TUI, the headless runner and the tests drive it the same way (docs/engine.md).
Every method that touches an instrument blocks; every method that changes state
writes the journal first (data files before the event that names them, see
docs/journal-events.md) and only then notifies subscribers.

Phases: CALIBRATING (measure each standard) -> VERIFYING (cal computed and
verified, waiting for accept / redo) -> PROBING <-> DECIDING (a landing waits for
the operator) -> DONE. Drift re-measures happen inside PROBING and need no
decision.

Units: frequencies in Hz, power in dBm, offsets in um. Networks are skrf.Network
with ``s`` shaped (n_freq, n_ports, n_ports).
"""

from __future__ import annotations

import dataclasses
import os
import threading
from dataclasses import dataclass, field
from enum import Enum
from pathlib import Path
from typing import Any, Callable

import skrf

from probelog.bench import Bench, Die
from probelog.touchstone_out import network_to_touchstone
from probelog.verdicts import CheckResult, Verdict, overall

CAUTIONS = """\
Before you land:
- ESD: wear a grounded wrist strap; keep the chuck and the probes grounded.
  Millimetre-wave devices and probe tips are easily damaged by discharge.
- Probe care: never move in XY while in contact (probelog separates first);
  check planarity and tip marks before the session; keep overtravel modest.
- RF power: the source power stays at or below the plan's limit.
- Lab rules come first: follow your lab's procedures and safety instructions,
  which take precedence over anything this tool says."""


class EngineError(Exception):
    """A call the engine cannot honour in its current state, or bad input."""


class InstrumentError(EngineError):
    """An instrument call failed; it was journaled as ``instrument-error``.

    The engine is left in the state it had before the failed ``measure()``,
    so the caller may simply call ``measure()`` again.
    """

    def __init__(self, where: str, error: BaseException):
        super().__init__(f"{where}: {type(error).__name__}: {error}")
        self.where = where
        self.error = error


class Phase(str, Enum):
    CALIBRATING = "calibrating"
    VERIFYING = "verifying"
    PROBING = "probing"
    DECIDING = "deciding"
    DONE = "done"


class StepKind(str, Enum):
    CAL_STANDARD = "cal-standard"
    SITE = "site"
    VERIFY = "verify"
    DRIFT = "drift"


@dataclass(frozen=True)
class Step:
    """One thing ``measure()`` does.

    ``landing`` is the 1-based landing number this measurement will get on
    (die, site); ``index`` / ``total`` count steps of the same kind (standards of
    the cal, or site landings of the plan). ``standard`` names the cal standard
    for CAL_STANDARD steps.
    """

    kind: StepKind
    die: Die
    site: str
    site_kind: str
    landing: int
    index: int
    total: int
    standard: str | None = None


@dataclass
class LandingOutcome:
    """One measured landing (site, cal standard, verification or drift)."""

    step: Step
    raw: skrf.Network
    corrected: skrf.Network | None
    checks: list[CheckResult]
    verdict: Verdict
    metrics: dict | None
    seq: int
    files: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class StandardStatus:
    name: str
    site: str
    kind: str
    measured: bool
    verdict: Verdict | None


@dataclass
class CalOutcome:
    """A computed calibration and what its verification said.

    ``agreement`` holds ``other_method``, ``worst`` (linear |dS| bound), ``at_hz``
    and ``verdict`` when a second algorithm could be compared, else None.
    """

    cal_id: str
    method: str
    ok: bool
    message: str
    calset: Any
    verification: list[LandingOutcome]
    agreement: dict | None
    verdict: Verdict
    seq: int
    file: str | None = None


# ---------------------------------------------------------------- events


@dataclass(frozen=True, kw_only=True)
class EngineEvent:
    """Base of every engine notification; ``seq`` is the journal seq it follows."""

    seq: int


@dataclass(frozen=True, kw_only=True)
class PhaseChanged(EngineEvent):
    phase: Phase


@dataclass(frozen=True, kw_only=True)
class StepMeasured(EngineEvent):
    outcome: LandingOutcome


@dataclass(frozen=True, kw_only=True)
class CalibrationComputed(EngineEvent):
    outcome: CalOutcome


@dataclass(frozen=True, kw_only=True)
class DecisionRecorded(EngineEvent):
    die: Die
    site: str
    landing: int
    action: str
    reason: str


@dataclass(frozen=True, kw_only=True)
class NoteAdded(EngineEvent):
    text: str


@dataclass(frozen=True, kw_only=True)
class DriftChecked(EngineEvent):
    outcome: LandingOutcome


@dataclass(frozen=True, kw_only=True)
class RecalibrationAdvised(EngineEvent):
    reason: str


@dataclass(frozen=True, kw_only=True)
class InstrumentFailed(EngineEvent):
    where: str
    message: str


@dataclass(frozen=True, kw_only=True)
class JumpedToDie(EngineEvent):
    """``goto(die)`` moved the walk: the next site step is on ``die``."""

    die: Die
    reason: str


@dataclass(frozen=True, kw_only=True)
class SessionClosed(EngineEvent):
    completed: bool


Subscriber = Callable[[EngineEvent], None]


# ---------------------------------------------------------------- engine


def _die_json(die: Die) -> list[int]:
    return [int(die[0]), int(die[1])]


def _die_dir(die: Die) -> str:
    return f"d{int(die[0])}_{int(die[1])}"


class Engine:
    """Walks a plan over a bench, checking and journaling every landing.

    Not thread-safe for concurrent calls: the UI calls one method at a time from
    a worker; a lock makes accidental overlap fail loudly instead of corrupting
    state.
    """

    def __init__(self, plan, bench: Bench, journal, operator: str = "", *, _replay: list | None = None):
        self.plan = plan
        self.bench = bench
        self.journal = journal
        self.operator = operator
        self._subscribers: list[Subscriber] = []
        self._lock = threading.Lock()
        self._configured = False
        self._reopen_vna = False
        power = float(plan.settings.power_dbm)
        if power > float(plan.power_limit_dbm):
            raise EngineError(
                f"plan {plan.name!r}: source power {power:g} dBm is above the plan's "
                f"limit of {float(plan.power_limit_dbm):g} dBm; refusing to start"
            )
        # --- state, rebuilt from the journal on resume
        self._phase = Phase.CALIBRATING if self._has_cal() else Phase.PROBING
        self._cal_count = 0  # cal ids are cal1, cal2, ...
        self._cal_id: str | None = None  # the cal being measured / verified
        self._std_measured: dict[str, tuple[skrf.Network | None, Verdict, int, str]] = {}
        self._std_landings: dict[tuple[str, str], int] = {}
        self._last_standard: str | None = None
        self._switch_terms: tuple | None = None
        self._pending_cal: CalOutcome | None = None
        self._active_cal: CalOutcome | None = None
        self._finished: dict[tuple[Die, str], str] = {}  # accept | skip | give-up
        self._landings: dict[tuple[Die, str], int] = {}
        self._touchdowns: dict[str, int] = dict.fromkeys(self._probe_ids(), 0)
        self._last_outcome: LandingOutcome | None = None
        self._previous: dict[tuple[Die, str], skrf.Network] = {}
        self._drift_ref: tuple[skrf.Network, int] | None = None
        self._since_drift = 0
        self._drift_due = False
        self._ref_wanted = False  # a reference is taken right after a cal is accepted
        self._auto_recals = 0
        self._sequence = [(die, site) for die in plan.dies_in_order() for site in plan.sequence_sites]
        self._walk_from = 0  # index into _sequence where the walk starts; goto() moves it
        if _replay is None:
            self._open_session()
            if self._phase is Phase.CALIBRATING:
                self._start_cal()
        else:
            self._replay(_replay)

    # ------------------------------------------------------------ construction

    @classmethod
    def new(cls, plan, bench: Bench, sessions_root: Path | str, operator: str = "",
            session_id: str | None = None) -> "Engine":
        """Create ``sessions_root/<session_id>/`` with a fresh journal and start."""
        from probelog.journal import Journal, JournalError, new_session_id

        try:
            journal = Journal.create(Path(sessions_root), session_id or new_session_id(plan.wafer.id))
        except JournalError as exc:
            raise EngineError(str(exc)) from None
        try:
            return cls(plan, bench, journal, operator)
        except BaseException:
            journal.close()
            raise

    @classmethod
    def resume(cls, session_dir: Path | str, bench: Bench) -> "Engine":
        """Reopen a session (after a crash or a quit) and continue where it stopped.

        The journal's own recovery runs first (torn tail moved aside, orphan data
        files adopted). State is rebuilt from the events alone; only the active
        cal set and the drift reference are read back from disk.
        """
        from probelog.journal import Journal, JournalError

        try:
            journal = Journal.open(Path(session_dir))
        except JournalError as exc:
            raise EngineError(str(exc)) from None
        try:
            events = list(_journal_events(journal))
            opened = next((e for e in events if e.type == "session-opened"), None)
            if opened is None:
                raise EngineError(f"{session_dir}: journal has no session-opened event; cannot resume")
            closed = [e for e in events if e.type == "session-closed"]
            if closed and closed[-1].payload.get("completed"):
                raise EngineError(f"{session_dir}: session already completed; nothing to resume")
            plan = _plan_from_opened(opened.payload, Path(session_dir))
            return cls(plan, bench, journal, opened.payload.get("operator", ""), _replay=events)
        except BaseException:
            journal.close()
            raise

    # ------------------------------------------------------------ read-only view

    def subscribe(self, callback: Subscriber) -> None:
        self._subscribers.append(callback)

    @property
    def phase(self) -> Phase:
        return self._phase

    @property
    def session_dir(self) -> Path:
        return Path(self.journal.root)

    @property
    def session_id(self) -> str:
        return self.session_dir.name

    @property
    def active_cal(self) -> CalOutcome | None:
        return self._active_cal

    @property
    def pending_cal(self) -> CalOutcome | None:
        """The computed cal waiting for accept / redo (phase VERIFYING)."""
        return self._pending_cal

    @property
    def last_outcome(self) -> LandingOutcome | None:
        return self._last_outcome

    @property
    def last_standard(self) -> str | None:
        """Role of the standard measured last in this calibration (what reland() re-lands)."""
        return self._last_standard if self._phase is Phase.CALIBRATING else None

    @property
    def touchdowns(self) -> dict[str, int]:
        return dict(self._touchdowns)

    @property
    def progress(self) -> tuple[int, int]:
        return len(self._finished), len(self._sequence)

    @property
    def cal_standards(self) -> list[StandardStatus]:
        out = []
        for name, site in self._required():
            got = self._std_measured.get(name)
            out.append(StandardStatus(name, site, self._site(site).kind, got is not None,
                                      got[1] if got else None))
        return out

    @property
    def wafer_status(self) -> dict[Die, str]:
        n_sites = len(self.plan.sequence_sites)
        status: dict[Die, str] = {}
        for die in self.plan.dies_in_order():
            acts = [self._finished.get((die, s.name)) for s in self.plan.sequence_sites]
            done = [a for a in acts if a is not None]
            if not done:
                status[die] = "todo"
            elif len(done) < n_sites:
                status[die] = "partial"
            elif all(a == "skip" for a in done):
                status[die] = "skipped"
            elif any(a == "give-up" for a in done):
                status[die] = "failed"
            else:
                status[die] = "done"
        return status

    @property
    def next_step(self) -> Step | None:
        if self._phase is Phase.CALIBRATING:
            req = self._required()
            for i, (name, site) in enumerate(req):
                if name not in self._std_measured:
                    return Step(StepKind.CAL_STANDARD, self._cal_die(), site, self._site(site).kind,
                                self._std_landings.get((self._cal_id, site), 0) + 1, i, len(req), name)
            return None
        if self._phase is not Phase.PROBING:
            return None
        drift_site = self._drift_site()
        if drift_site and self._active_cal is not None and (self._ref_wanted or self._drift_due):
            die = self._drift_die()
            return Step(StepKind.DRIFT, die, drift_site, self._site(drift_site).kind,
                        self._landings.get((die, drift_site), 0) + 1, 0, 1)
        n = len(self._sequence)
        for i in (k % n for k in range(self._walk_from, self._walk_from + n)):
            die, site = self._sequence[i]
            if (die, site.name) not in self._finished:
                return Step(StepKind.SITE, die, site.name, site.kind,
                            self._landings.get((die, site.name), 0) + 1, i, len(self._sequence))
        return None

    # ------------------------------------------------------------ actions

    def show_cautions(self) -> str:
        """The cautions text (ESD, probe care, lab rules); journals ``cautions-shown``."""
        self._append("cautions-shown", {"text": CAUTIONS})
        return CAUTIONS

    def measure(self) -> LandingOutcome:
        """Execute ``next_step``: land, sweep, correct, check, write data, journal.

        Raises InstrumentError (after journaling it) when a driver fails; the
        engine state is unchanged and ``measure()`` may be called again.
        """
        with self._busy():
            step = self.next_step
            if step is None:
                raise EngineError(f"nothing to measure in phase {self._phase.value}"
                                  + (" (compute the calibration first)" if self._phase is Phase.CALIBRATING else ""))
            if step.kind is StepKind.CAL_STANDARD:
                return self._measure_standard(step)
            if step.kind is StepKind.DRIFT:
                return self._measure_drift(step)
            return self._measure_site(step)

    def compute_calibration(self) -> CalOutcome:
        """Solve the cal from the measured standards, verify it on the verification
        sites (measured now), compare with a second algorithm when the standards
        allow. Phase becomes VERIFYING; call accept_calibration() or
        redo_calibration(reason)."""
        with self._busy():
            self._require_phase(Phase.CALIBRATING)
            missing = [n for n, _ in self._required() if n not in self._std_measured]
            if missing:
                raise EngineError(f"calibration {self._cal_id}: standards not measured yet: {', '.join(missing)}")
            outcome = self._compute_and_verify()
            self._pending_cal = outcome
            self._set_phase(Phase.VERIFYING, outcome.seq)
            self._emit(CalibrationComputed(seq=outcome.seq, outcome=outcome))
            return outcome

    def accept_calibration(self, reason: str = "") -> None:
        with self._busy():
            self._require_phase(Phase.VERIFYING)
            cal = self._pending_cal
            if cal is None or cal.calset is None:
                raise EngineError(f"calibration {self._cal_id} could not be computed; redo it")
            ev = self._append("cal-accepted", {"cal_id": cal.cal_id, "reason": reason})
            self._activate(cal)
            self._set_phase(self._probing_or_done(), ev.seq)

    def redo_calibration(self, reason: str) -> None:
        with self._busy():
            self._require_phase(Phase.VERIFYING)
            reason = _need_reason(reason, "redo the calibration")
            ev = self._append("cal-rejected", {"cal_id": self._cal_id, "reason": reason})
            self._pending_cal = None
            self._start_cal()
            self._set_phase(Phase.CALIBRATING, ev.seq)

    def accept(self) -> None:
        self._decide("accept", "")

    def reland(self, reason: str = "") -> None:
        """Measure the same site again (its landing number goes up by one). While
        calibrating, re-measures the standard measured last: its earlier landing
        stays on record but no longer counts for the calibration."""
        if self._phase is Phase.CALIBRATING:
            self._reland_standard(reason)
            return
        self._decide("reland", reason)

    def _reland_standard(self, reason: str) -> None:
        with self._busy():
            role = self._last_standard
            if role is None or role not in self._std_measured:
                raise EngineError("no standard measured yet in this calibration to re-land")
            site = dict(self._required())[role]
            landing = self._std_landings.get((self._cal_id, site), 1)
            ev = self._append("decision", {"die": _die_json(self._cal_die()), "site": site, "landing": landing,
                                           "action": "reland", "reason": reason, "standard": role,
                                           "cal_id": self._cal_id})
            del self._std_measured[role]
            self._last_standard = None
            self._emit(DecisionRecorded(seq=ev.seq, die=self._cal_die(), site=site, landing=landing,
                                        action="reland", reason=reason))

    def skip(self, reason: str) -> None:
        self._decide("skip", _need_reason(reason, "skip a site"))

    def give_up(self, reason: str) -> None:
        """Record the site as failed and go on."""
        self._decide("give-up", _need_reason(reason, "give up on a site"))

    def goto(self, die: Die, reason: str = "") -> None:
        """Make the first unfinished site of ``die`` (in sequence order) the next
        site step; after it the walk goes on in the plan's order (wrapping round
        to the sites before it), skipping what is finished. PROBING only; a due
        drift re-measure still comes first. Journals ``goto``."""
        with self._busy():
            self._require_phase(Phase.PROBING)
            die = (int(die[0]), int(die[1]))
            start = self._die_start(die)
            if not any(d == die and (d, s.name) not in self._finished for d, s in self._sequence):
                raise EngineError(f"die {die[0]},{die[1]}: every site is already decided; nothing left to land on")
            payload = {"die": _die_json(die)}
            if (reason or "").strip():
                payload["reason"] = reason.strip()
            ev = self._append("goto", payload)
            self._walk_from = start
            self._emit(JumpedToDie(seq=ev.seq, die=die, reason=payload.get("reason", "")))

    def _die_start(self, die: Die) -> int:
        """Index of the die's first site in the sequence; EngineError if not planned."""
        for i, (d, _) in enumerate(self._sequence):
            if d == die:
                return i
        raise EngineError(f"plan {self.plan.name!r}: die {die[0]},{die[1]} is not in the plan's die list")

    def note(self, text: str) -> None:
        with self._busy():
            text = _need_reason(text, "add a note")
            pos = self._position()
            ev = self._append("note", {"text": text, "die": _die_json(pos[0]) if pos else None,
                                       "site": pos[1] if pos else None})
            self._emit(NoteAdded(seq=ev.seq, text=text))

    def request_drift(self) -> None:
        """Make the next ``measure()`` re-measure the drift reference."""
        if not self._drift_site():
            raise EngineError(f"plan {self.plan.name!r} names no drift reference site")
        self._drift_due = True

    def recalibrate(self, reason: str) -> None:
        """Back to CALIBRATING with a new cal id. The old cal stays active for
        nothing: landings wait until the new cal is accepted."""
        with self._busy():
            if not self._has_cal():
                raise EngineError(f"plan {self.plan.name!r} has no calibration")
            if self._phase is Phase.DECIDING:
                raise EngineError("decide on the current landing before recalibrating")
            reason = _need_reason(reason, "recalibrate")
            ev = self._append("recal-requested", {"reason": reason, "cal_id": self._next_cal_id()})
            self._pending_cal = None
            self._start_cal()
            self._set_phase(Phase.CALIBRATING, ev.seq)

    def close(self, completed: bool | None = None) -> None:
        """Journal ``session-closed`` (completed defaults to: plan finished), close
        the journal. Does not close the bench: whoever built it closes it."""
        if completed is None:
            completed = self._phase is Phase.DONE
        try:
            self._safe_separate()
            ev = self._append("session-closed", {"completed": bool(completed), "summary": self.summary()})
            self._emit(SessionClosed(seq=ev.seq, completed=bool(completed)))
        finally:
            self.journal.close()

    def summary(self) -> dict:
        acts = list(self._finished.values())
        return {
            "sites": len(self._sequence),
            "accepted": acts.count("accept"),
            "skipped": acts.count("skip"),
            "failed": acts.count("give-up"),
            "landings": sum(self._landings.values()),
            "touchdowns": dict(self._touchdowns),
            "cal_id": self._active_cal.cal_id if self._active_cal else None,
        }

    # ------------------------------------------------------------ decisions

    def _decide(self, action: str, reason: str) -> None:
        with self._busy():
            if self._phase is Phase.PROBING and action in ("skip", "give-up"):
                step = self.next_step  # skip / give up a site before landing on it
                if step is None or step.kind is not StepKind.SITE:
                    raise EngineError(f"nothing to {action} now")
                die, site, landing = step.die, step.site, step.landing - 1
            else:
                self._require_phase(Phase.DECIDING)
                out = self._last_outcome
                die, site, landing = out.step.die, out.step.site, out.step.landing
            ev = self._append("decision", {"die": _die_json(die), "site": site, "landing": landing,
                                           "action": action, "reason": reason})
            if action != "reland":
                self._finished[(die, site)] = action
                self._previous.pop((die, site), None)
            self._last_outcome = None
            self._emit(DecisionRecorded(seq=ev.seq, die=die, site=site, landing=landing,
                                        action=action, reason=reason))
            self._set_phase(self._probing_or_done(), ev.seq)

    # ------------------------------------------------------------ measuring

    def _measure_site(self, step: Step) -> LandingOutcome:
        raw = self._land(step.die, step.site)
        cor = self._correct(raw)
        use = cor if cor is not None else raw
        site = self._site(step.site)
        checks = self._checks(use, site, previous=self._previous.get((step.die, step.site)))
        metrics = self._metrics(use, site)
        base = f"data/{_die_dir(step.die)}/{step.site}/L{step.landing}"
        files = self._write_pair(base, raw, cor, step)
        verdict = overall(checks)
        ev = self._append("landing", {
            "die": _die_json(step.die), "site": step.site, "kind": site.kind, "landing": step.landing,
            "cal_id": self._active_cal.cal_id if self._active_cal else None,
            "raw": files["raw"], "corrected": files.get("corrected"),
            "checks": [c.to_json() for c in checks], "verdict": verdict.value,
            "metrics": metrics, "touchdowns": dict(self._touchdowns),
        })
        self._landings[(step.die, step.site)] = step.landing
        if verdict is not Verdict.FAIL:  # repeatability against a lifted tip says nothing
            self._previous[(step.die, step.site)] = use
        self._count_for_drift()
        out = LandingOutcome(step, raw, cor, checks, verdict, metrics, ev.seq,
                             {k: v["path"] for k, v in files.items()})
        self._last_outcome = out
        self._emit(StepMeasured(seq=ev.seq, outcome=out))
        self._set_phase(Phase.DECIDING, ev.seq)
        return out

    def _measure_standard(self, step: Step) -> LandingOutcome:
        raw = self._land(step.die, step.site)
        site = self._site(step.site)
        # raw data: the kind checks expect corrected data, so judge contact by
        # transmission and by how the standard differs from those already measured
        from probelog.standard_checks import raw_standard_checks

        earlier = {role: net for role, net in self._standard_networks_by_role().items() if role != step.standard}
        checks = raw_standard_checks(raw, step.standard, earlier, self._limits())
        verdict = overall(checks)
        suffix = "" if step.landing == 1 else f"-L{step.landing}"
        files = self._write_pair(f"data/cal/{self._cal_id}/{step.site}{suffix}", raw, None, step)
        switch = self._fetch_switch_terms(raw, site, step, f"data/cal/{self._cal_id}/{step.site}{suffix}")
        ev = self._append("cal-standard", {
            "cal_id": self._cal_id, "standard": step.standard, "die": _die_json(step.die),
            "site": step.site, "kind": site.kind, "landing": step.landing, "raw": files["raw"],
            "checks": [c.to_json() for c in checks], "verdict": verdict.value,
            "touchdowns": dict(self._touchdowns), "switch_terms": switch,
        })
        self._std_landings[(self._cal_id, step.site)] = step.landing
        self._std_measured[step.standard] = (raw, verdict, ev.seq, files["raw"]["path"])
        self._last_standard = step.standard
        out = LandingOutcome(step, raw, None, checks, verdict, None, ev.seq, {"raw": files["raw"]["path"]})
        self._emit(StepMeasured(seq=ev.seq, outcome=out))
        return out

    def _fetch_switch_terms(self, raw: skrf.Network, site, step: Step, stem: str) -> list[dict] | None:
        """Fetch and store the VNA's switch terms right after a transmissive standard
        (they belong to the instrument; any reciprocal 2-port reveals them, Marks,
        50th ARFTG 1997). None when the VNA does not offer them."""
        fetch = getattr(self.bench.vna, "switch_terms", None)
        if raw.nports != 2 or site.kind not in ("thru", "line") or not callable(fetch):
            return None
        try:
            terms = fetch()
        except Exception as exc:
            self._instrument_failed("vna", exc)
        if terms is None:
            return None
        self._switch_terms = tuple(terms)
        return [self._write_net(f"{stem}-switch-{d}", t, step, f"switch term {d}")
                for d, t in zip(("gf", "gr"), terms, strict=False)]

    def _switch_networks(self) -> tuple | None:
        terms = self._switch_terms
        if terms and isinstance(terms[0], str):  # resumed: read the two small files back once
            terms = tuple(skrf.Network(str(self.session_dir / p)) for p in terms)
            self._switch_terms = terms
        return terms

    def _measure_drift(self, step: Step) -> LandingOutcome:
        raw = self._land(step.die, step.site)
        cor = self._correct(raw)
        use = cor if cor is not None else raw
        site = self._site(step.site)
        ref = self._drift_ref
        checks = self._checks(use, site, previous=None, reference=ref[0] if ref else None)
        verdict = overall(checks)
        files = self._write_pair(f"data/{_die_dir(step.die)}/{step.site}/L{step.landing}", raw, cor, step)
        ev = self._append("drift", {
            "die": _die_json(step.die), "site": step.site, "landing": step.landing,
            "cal_id": self._active_cal.cal_id if self._active_cal else None,
            "reference_seq": ref[1] if ref else None, "raw": files["raw"],
            "corrected": files.get("corrected"), "checks": [c.to_json() for c in checks],
            "verdict": verdict.value, "touchdowns": dict(self._touchdowns),
        })
        self._landings[(step.die, step.site)] = step.landing
        if ref is None and verdict is not Verdict.FAIL:  # never take a bad landing as the reference
            self._drift_ref = (use, ev.seq)
        self._since_drift = 0
        self._drift_due = False
        # one try right after the cal; if it landed badly, the next due re-measure
        # (or request_drift) becomes the reference instead
        self._ref_wanted = False
        out = LandingOutcome(step, raw, cor, checks, verdict, None, ev.seq,
                             {k: v["path"] for k, v in files.items()})
        self._emit(DriftChecked(seq=ev.seq, outcome=out))
        # Only the drift figure itself calls for a new cal; a failed contact means the
        # reference was landed badly and is re-measured, not that the cal went stale.
        drift_failed = any(c.name == "drift" and c.verdict is Verdict.FAIL for c in checks)
        contact_failed = any(c.name == "contact" and c.verdict is Verdict.FAIL for c in checks)
        if ref is not None and drift_failed and not contact_failed:
            worst = next(c for c in checks if c.name == "drift")
            reason = f"drift on {step.site}: {worst.message}"
            adv = self._append("recal-requested", {"reason": reason, "advised_by": "drift",
                                                   "drift_seq": ev.seq})
            self._emit(RecalibrationAdvised(seq=adv.seq, reason=reason))
        return out

    def _compute_and_verify(self) -> CalOutcome:
        from probelog import calibration as cal

        method = self._cal_method()
        kit = self._kit()
        measured = self._standard_networks()
        cal_dir = f"data/cal/{self._cal_id}"
        names = [name for name, _ in self._required()]
        try:
            calset = cal.solve(method, measured, kit, switch_terms=self._switch_networks(), cal_id=self._cal_id)
            ok, message = True, f"{method.upper()} solved from {len(measured)} standards"
        except Exception as exc:  # a singular or inconsistent set of standards
            calset, ok, message = None, False, f"{method.upper()} could not be solved: {exc}"
        refs = self._save_calset(calset, cal_dir) if calset is not None else []
        ref = refs[0] if refs else None
        ev = self._append("cal-computed", {"cal_id": self._cal_id, "method": method, "standards": names,
                                           "file": ref, "files": refs, "ok": ok, "message": message,
                                           "summary": calset.summary() if calset is not None else None})
        outcome = CalOutcome(self._cal_id, method, ok, message, calset, [], None,
                             Verdict.PASS if ok else Verdict.FAIL, ev.seq, ref["path"] if ref else None)
        if not ok:
            return outcome
        outcome.verification = self._verification(calset, kit)
        outcome.agreement = self._agreement(method, calset, measured, kit, cal_dir)
        worst = [o.verdict for o in outcome.verification]
        if outcome.agreement:
            worst.append(Verdict(outcome.agreement["verdict"]))
        outcome.verdict = max(worst, key=lambda v: v.rank, default=Verdict.PASS)
        outcome.seq = self._last_seq()
        return outcome

    def _verification(self, calset, kit) -> list[LandingOutcome]:
        """Measure every verification site, then judge: the kit's open stub and
        thru with calibration.verify, any other site with its kind's checks."""
        from probelog import calibration as cal

        die = self._cal_die()
        measured = []
        for site_name in self._verify_sites():
            site = self._site(site_name)
            landing = self._landings.get((die, site_name), 0) + 1
            step = Step(StepKind.VERIFY, die, site_name, site.kind, landing, len(measured),
                        len(self._verify_sites()))
            raw = self._land(die, site_name)
            cor = calset.apply(raw)
            # own folder: a re-landed standard on the same site is {site}-L{n} too
            files = self._write_pair(f"data/cal/{self._cal_id}/verify/{site_name}-L{landing}", raw, cor, step)
            self._landings[(die, site_name)] = landing
            measured.append((step, raw, cor, files))
        stub_site = kit.verification.get("open_stub_site") if isinstance(kit.verification, dict) else None
        thru_site = kit.site_of("thru")
        by_site = {m[0].site: m[2] for m in measured}
        ver_checks: list[CheckResult] = []
        if stub_site in by_site:
            ver_checks = list(cal.verify(by_site[stub_site], by_site.get(thru_site), kit))
        outs = []
        for step, raw, cor, files in measured:
            if step.site == stub_site:
                checks = [c for c in ver_checks if c.name.startswith("ver-stub")]
            elif step.site == thru_site and stub_site in by_site:
                checks = [c for c in ver_checks if c.name.startswith("ver-thru")]
            else:
                checks = self._checks(cor, self._site(step.site))
            verdict = overall(checks)
            ev = self._append("cal-verification", {
                "cal_id": self._cal_id, "site": step.site, "die": _die_json(die), "landing": step.landing,
                "raw": files["raw"], "corrected": files["corrected"],
                "checks": [c.to_json() for c in checks], "verdict": verdict.value,
                "touchdowns": dict(self._touchdowns),
            })
            out = LandingOutcome(step, raw, cor, checks, verdict, None, ev.seq,
                                 {k: v["path"] for k, v in files.items()})
            self._emit(StepMeasured(seq=ev.seq, outcome=out))
            outs.append(out)
        return outs

    # ------------------------------------------------------------ instruments

    def _configure(self) -> None:
        if self._configured:
            return
        try:
            reopen = getattr(self.bench.vna, "reopen", None)
            if self._reopen_vna and callable(reopen):
                reopen()  # a stale reply left in the link after a failure would shift every answer
            self._reopen_vna = False
            self.bench.vna.configure(self.plan.settings, float(self.plan.power_limit_dbm))
        except Exception as exc:
            self._instrument_failed("vna", exc)
        self._configured = True

    def _land(self, die: Die, site_name: str) -> skrf.Network:
        """Separate, move at separation, contact, sweep. Counts touchdowns."""
        site = self._site(site_name)
        self._configure()
        prober = self.bench.prober
        try:
            prober.separate()  # never move in XY while in contact
            prober.move_to(die, tuple(site.offset_um))
            before = dict(prober.touchdowns)
            prober.contact()
            after = dict(prober.touchdowns)
        except Exception as exc:
            self._instrument_failed("prober", exc)
        counted = {p: after.get(p, 0) - before.get(p, 0) for p in after}
        if not any(v > 0 for v in counted.values()):
            counted = dict.fromkeys(self._touchdowns, 1)  # prober keeps no count: one per landing
        for p, n in counted.items():
            self._touchdowns[p] = self._touchdowns.get(p, 0) + max(n, 0)
        try:
            return self.bench.vna.sweep(ports=int(getattr(site, "ports", 2)))
        except Exception as exc:
            self._instrument_failed("vna", exc)

    def _instrument_failed(self, where: str, exc: BaseException):
        self._configured = False  # the instrument may have been reset or reconnected
        self._reopen_vna = where == "vna"
        self._safe_separate()
        ev = self._append("instrument-error", {"where": where, "error": type(exc).__name__,
                                               "message": str(exc), "touchdowns": dict(self._touchdowns)})
        self._emit(InstrumentFailed(seq=ev.seq, where=where, message=f"{type(exc).__name__}: {exc}"))
        raise InstrumentError(where, exc) from exc

    def _safe_separate(self) -> None:
        try:
            if self.bench.prober.in_contact:
                self.bench.prober.separate()
        except Exception:  # a broken prober is reported by the call that found it
            pass

    # ------------------------------------------------------------ data

    def _correct(self, raw: skrf.Network) -> skrf.Network | None:
        if self._active_cal is None or self._active_cal.calset is None:
            return None
        return self._active_cal.calset.apply(raw)

    def _checks(self, ntwk: skrf.Network, site, previous=None, reference=None) -> list[CheckResult]:
        from probelog.checks import run_checks

        return list(run_checks(ntwk, site.kind, self._limits(), _expectation(site), previous, reference))

    def _metrics(self, ntwk: skrf.Network, site) -> dict | None:
        length_um = getattr(site, "length_um", None)
        if site.kind not in ("line", "thru") or not length_um or ntwk.nports != 2:
            return None
        from probelog import lines

        import numpy as np

        try:
            with np.errstate(all="ignore"):  # a lifted tip gives singular ABCD; checks judge it
                m = lines.line_metrics(ntwk, float(length_um) * 1e-6)
                return lines.metrics_at(m, lines.default_frequencies(m.f_hz, prefer_round=True))
        except (ValueError, FloatingPointError, ZeroDivisionError):
            return None  # metrics are information; the line-window check judges

    def _write_pair(self, base: str, raw: skrf.Network, cor: skrf.Network | None, step: Step) -> dict:
        """Raw (and corrected) sweep files of one landing, stored together."""
        nets = {"raw": raw} if cor is None else {"raw": raw, "corrected": cor}
        base = self._unused(base, [f"-{'raw' if what == 'raw' else 'cor'}.s{n.nports}p" for what, n in nets.items()])
        items = [(f"{base}-{'raw' if what == 'raw' else 'cor'}.s{n.nports}p",
                  network_to_touchstone(n, self._header(n, step, what))) for what, n in nets.items()]
        refs = self.journal.write_files(items)
        return {what: {"path": str(ref.path), "sha256": ref.sha256} for what, ref in zip(nets, refs, strict=False)}

    def _write_net(self, stem: str, ntwk: skrf.Network, step: Step, what: str) -> dict:
        data = network_to_touchstone(ntwk, self._header(ntwk, step, what))
        ref = self.journal.write_file(f"{self._unused(stem, [f'.s{ntwk.nports}p'])}.s{ntwk.nports}p", data)
        return {"path": str(ref.path), "sha256": ref.sha256}

    def _header(self, ntwk: skrf.Network, step: Step, what: str) -> dict:
        """The self-describing comment header of a data file."""
        s = self.plan.settings
        header = {
            "session": self.session_id, "seq": self._last_seq() + 1, "what": what,
            "step": step.kind.value, "die": f"{step.die[0]},{step.die[1]}", "site": step.site,
            "kind": step.site_kind, "landing": step.landing,
            "cal_id": (self._cal_id if step.kind in (StepKind.CAL_STANDARD, StepKind.VERIFY)
                       else (self._active_cal.cal_id if self._active_cal else None)),
            "wafer": self._wafer_id(), "start_hz": s.start_hz, "stop_hz": s.stop_hz,
            "points": s.points, "ifbw_hz": s.ifbw_hz, "power_dbm": s.power_dbm,
        }
        return header

    def _save_calset(self, calset, cal_dir: str) -> list[dict]:
        """FileRef dicts of the saved cal set, calset.json first."""
        folder = self._unused(f"{cal_dir}/calset", [""])
        return [{"path": str(r.path), "sha256": r.sha256} for r in _save_calset(calset, self.journal, folder)]

    def _unused(self, stem: str, suffixes: list[str]) -> str:
        """``stem``, or ``stem-r2``, ``-r3``... when a file of that name exists: one a
        crash left behind (written, its event lost, adopted on resume). Data files
        are never overwritten, and the redone step names its own files."""
        k, name = 1, stem
        while any(os.path.lexists(self.session_dir / f"{name}{sfx}") for sfx in suffixes):
            k += 1
            name = f"{stem}-r{k}"
        return name

    def _standard_networks_by_role(self) -> dict[str, skrf.Network]:
        """Raw standards measured so far, keyed by role (open, short, ..., line:<name>)."""
        out = {}
        for role, (ntwk, verdict, seq, path) in list(self._std_measured.items()):
            if ntwk is None:  # resumed mid-calibration: read the raw standard back once
                ntwk = skrf.Network(str(self.session_dir / path))
                self._std_measured[role] = (ntwk, verdict, seq, path)
            out[role] = ntwk
        return out

    def _standard_networks(self) -> dict[str, skrf.Network]:
        """Raw standards keyed by site name (as calibration.solve wants them)."""
        sites = dict(self._required())
        return {sites[role]: ntwk for role, ntwk in self._standard_networks_by_role().items()}

    def _agreement(self, method: str, calset, measured, kit, cal_dir: str) -> dict | None:
        from probelog import calibration as cal

        others = cal.comparable_methods(method, list(measured), kit)
        if not others:
            return None
        wanted = self._cal().compare_with
        other_method = wanted if wanted in others else others[0]
        try:
            other = cal.solve(other_method, measured, kit, switch_terms=self._switch_networks(),
                              cal_id=f"{self._cal_id}-{other_method}")
            result = cal.agreement(calset, other, list(measured.values()))
        except Exception:  # the second algorithm is a cross-check, not a requirement
            return None
        stem = self._unused(f"{cal_dir}/agreement-{method}-{other_method}", [".csv"])
        ref = self.journal.write_file(f"{stem}.csv",
                                      _agreement_csv(result))
        payload = {"cal_id": self._cal_id, "method": method, "other_method": other_method,
                   "worst": float(result.worst), "at_hz": float(result.at_hz),
                   "file": {"path": str(ref.path), "sha256": ref.sha256},
                   "verdict": _agreement_verdict(result).value}
        self._append("cal-agreement", payload)
        return payload

    # ------------------------------------------------------------ plan view

    def _site(self, name: str):
        try:
            return self.plan.site(name)
        except KeyError:
            raise EngineError(f"plan {self.plan.name!r}: no site named {name!r}") from None

    def _cal(self):
        return getattr(self.plan, "calibration", None)

    def _has_cal(self) -> bool:
        cal = self._cal()
        return cal is not None and str(cal.method).lower() not in ("", "none")

    def _cal_method(self) -> str:
        return str(self._cal().method).lower()

    def _kit(self):
        from probelog import calibration as cal

        if getattr(self, "_kit_cache", None) is None:
            plan_cal = self._cal()
            source = str(plan_cal.kit_path) if plan_cal.kit_path else f"{self.plan.source}: calibration.kit"
            self._kit_cache = cal.kit_from_mapping(plan_cal.load_kit(), source)
        return self._kit_cache

    def _required(self) -> list[tuple[str, str]]:
        """(standard name, site name) pairs of the plan's cal method."""
        if not self._has_cal():
            return []
        if getattr(self, "_required_cache", None) is None:
            from probelog import calibration as cal

            self._required_cache = [(str(n), str(s)) for n, s in
                                    _pairs(cal.required_sites(self._cal_method(), self._kit()))]
        return self._required_cache

    def _cal_die(self) -> Die:
        return tuple(self._cal().die)

    def _drift_die(self) -> Die:
        die = self.plan.sequence.drift_die
        return tuple(die) if die is not None else self._cal_die()

    def _verify_sites(self) -> list[str]:
        return list(self._cal().verification)

    def _drift_site(self) -> str | None:
        return self.plan.sequence.drift_site if self._has_cal() else None

    def _drift_every(self) -> int:
        return int(self.plan.sequence.drift_every_landings or 0)

    def _limits(self):
        if getattr(self, "_limits_cache", None) is None:
            from probelog.checks import Limits

            try:
                self._limits_cache = Limits.from_mapping(self.plan.limits, f"{self.plan.source}: [limits]")
            except ValueError as exc:
                raise EngineError(str(exc)) from None
        return self._limits_cache

    def _probe_ids(self) -> list[str]:
        return list(self.plan.probes.ids)

    def _wafer_id(self) -> str:
        return self.plan.wafer.id

    # ------------------------------------------------------------ bookkeeping

    def _open_session(self) -> None:
        plan, s = self.plan, self.plan.settings
        bench_info = {"kind": getattr(self.bench, "kind", "") or "", "description": self.bench.description}
        for key, inst in (("vna_idn", self.bench.vna), ("prober_idn", self.bench.prober)):
            try:
                bench_info[key] = inst.identify()
            except Exception as exc:  # the session opens anyway; the error is on record
                bench_info[key] = f"unavailable: {type(exc).__name__}: {exc}"
        from probelog import __version__

        self._append("session-opened", {
            "session_id": self.session_id, "probelog_version": __version__,
            "plan_name": plan.name, "plan_file": plan.source, "plan_sha256": plan.sha256,
            "plan_text": plan.text, "operator": self.operator, "wafer": plan.wafer.id,
            "lot": plan.wafer.lot, "chip": plan.wafer.chip, "probes": self._probe_ids(), "bench": bench_info,
            "settings": {"start_hz": s.start_hz, "stop_hz": s.stop_hz, "points": s.points,
                         "ifbw_hz": s.ifbw_hz, "power_dbm": s.power_dbm},
        })

    def _next_cal_id(self) -> str:
        return f"cal{self._cal_count + 1}"

    def _start_cal(self, cal_id: str | None = None) -> None:
        cal_id = cal_id or self._next_cal_id()
        self._cal_count = max(self._cal_count, int(cal_id.removeprefix("cal") or 0))
        self._cal_id = cal_id
        self._std_measured = {}
        self._last_standard: str | None = None
        # (gamma_f, gamma_r) Networks, or journal paths until read back after a resume
        self._switch_terms: tuple | None = None
        self._phase = Phase.CALIBRATING

    def _activate(self, cal: CalOutcome) -> None:
        self._active_cal = cal
        self._pending_cal = None
        self._drift_ref = None  # a new cal needs a new drift reference
        self._ref_wanted = True
        self._drift_due = False
        self._since_drift = 0
        self._previous.clear()  # repeatability across cals compares apples and pears

    def _probing_or_done(self) -> Phase:
        return Phase.DONE if len(self._finished) >= len(self._sequence) else Phase.PROBING

    def _count_for_drift(self) -> None:
        self._since_drift += 1
        every = self._drift_every()
        if every and self._since_drift >= every:
            self._drift_due = True

    def _position(self) -> tuple[Die, str] | None:
        if self._last_outcome is not None:
            return self._last_outcome.step.die, self._last_outcome.step.site
        step = self.next_step
        return (step.die, step.site) if step else None

    def _busy(self):
        engine = self

        class _Guard:
            def __enter__(self):
                if not engine._lock.acquire(blocking=False):
                    raise EngineError("the engine is busy with another call")

            def __exit__(self, *exc):
                engine._lock.release()

        return _Guard()

    def _require_phase(self, phase: Phase) -> None:
        if self._phase is not phase:
            raise EngineError(f"expected phase {phase.value}, engine is {self._phase.value}")

    def _append(self, type_: str, payload: dict):
        return self.journal.append(type_, payload)

    def _last_seq(self) -> int:
        last = self.journal.last
        return int(last.seq) if last is not None else 0

    def _set_phase(self, phase: Phase, seq: int) -> None:
        if phase is not self._phase:
            self._phase = phase
            self._emit(PhaseChanged(seq=seq, phase=phase))

    def _emit(self, event: EngineEvent) -> None:
        for cb in list(self._subscribers):
            cb(event)

    # ------------------------------------------------------------ resume

    def _replay(self, events: list) -> None:
        """Rebuild state from journal events; reads no Touchstone file here."""
        pending: dict | None = None
        active: dict | None = None
        drift_ref: tuple[str, int] | None = None
        ref_wanted = False
        phase = Phase.CALIBRATING if self._has_cal() else Phase.PROBING
        for ev in events:
            t, p = ev.type, ev.payload
            if t == "cal-standard":
                if p["cal_id"] != self._cal_id:
                    self._start_cal(p["cal_id"])
                self._std_landings[(p["cal_id"], p["site"])] = int(p["landing"])
                self._std_measured[p["standard"]] = (None, Verdict(p["verdict"]), ev.seq, p["raw"]["path"])
                self._last_standard = p["standard"]
                if p.get("switch_terms"):
                    self._switch_terms = tuple(ref["path"] for ref in p["switch_terms"])
                self._touchdowns.update(p.get("touchdowns") or {})
                phase = Phase.CALIBRATING
            elif t == "cal-computed":
                if p["cal_id"] != self._cal_id:
                    self._start_cal(p["cal_id"])
                pending = {"cal_id": p["cal_id"], "method": p["method"], "ok": bool(p["ok"]),
                           "message": p.get("message", ""), "file": (p.get("file") or {}).get("path"),
                           "seq": ev.seq, "verdicts": [Verdict.PASS if p["ok"] else Verdict.FAIL],
                           "agreement": None}
                phase = Phase.VERIFYING
            elif t == "cal-verification":
                self._landings[(tuple(p["die"]), p["site"])] = int(p.get("landing") or 1)
                self._touchdowns.update(p.get("touchdowns") or {})
                if pending is not None:
                    pending["verdicts"].append(Verdict(p["verdict"]))
            elif t == "cal-agreement" and pending is not None:
                pending["agreement"] = dict(p)
                pending["verdicts"].append(Verdict(p["verdict"]))
            elif t == "cal-accepted":
                active, pending, drift_ref, ref_wanted = pending, None, None, True
                self._since_drift, self._drift_due = 0, False
                phase = Phase.PROBING
            elif t == "cal-rejected":
                pending = None
                self._start_cal()
                phase = Phase.CALIBRATING
            elif t == "recal-requested" and p.get("cal_id"):
                pending = None
                self._start_cal(p["cal_id"])
                phase = Phase.CALIBRATING
            elif t == "landing":
                self._landings[(tuple(p["die"]), p["site"])] = int(p["landing"])
                self._touchdowns.update(p.get("touchdowns") or {})
                self._count_for_drift()
                phase = Phase.DECIDING
            elif t == "drift":
                self._landings[(tuple(p["die"]), p["site"])] = int(p["landing"])
                self._touchdowns.update(p.get("touchdowns") or {})
                ref_wanted = False
                if p.get("reference_seq") is None and p.get("verdict") != "fail":
                    drift_ref = ((p.get("corrected") or p["raw"])["path"], ev.seq)
                self._since_drift, self._drift_due = 0, False
            elif t == "decision" and p.get("standard"):
                if p.get("cal_id") == self._cal_id:
                    self._std_measured.pop(p["standard"], None)
            elif t == "decision":
                if p["action"] != "reland":
                    self._finished[(tuple(p["die"]), p["site"])] = p["action"]
                phase = Phase.PROBING
            elif t == "goto":
                self._walk_from = self._die_start(tuple(p["die"]))
            elif t == "instrument-error":
                self._touchdowns.update(p.get("touchdowns") or {})
        # An undecided landing is measured again: after a crash the tips may
        # have moved, so its data stays on record but is not decided upon.
        if phase is Phase.DECIDING:
            phase = Phase.PROBING
        self._ref_wanted = ref_wanted and active is not None
        if active is not None:
            calset = _load_calset(self.session_dir / active["file"])
            self._active_cal = _cal_outcome(active, calset)
            if drift_ref is not None:
                self._drift_ref = (skrf.Network(str(self.session_dir / drift_ref[0])), drift_ref[1])
        if pending is not None and phase is Phase.VERIFYING:
            calset = _load_calset(self.session_dir / pending["file"]) if pending["file"] else None
            self._pending_cal = _cal_outcome(pending, calset)
        self._phase = phase
        if phase is Phase.PROBING:
            self._phase = self._probing_or_done()
        if self._phase is Phase.CALIBRATING and self._cal_id is None:
            self._start_cal()


# ---------------------------------------------------------------- helpers


def _need_reason(text: str, what: str) -> str:
    text = (text or "").strip()
    if not text:
        raise EngineError(f"a reason is required to {what}")
    return text


def _pairs(required) -> list[tuple[str, str]]:
    """required_sites() as (standard, site) pairs, whatever mapping or list it gives."""
    if isinstance(required, dict):
        return list(required.items())
    out = []
    for item in required:
        if isinstance(item, (tuple, list)):
            out.append((item[0], item[1]))
        else:
            out.append((getattr(item, "name", getattr(item, "standard", None)), item.site))
    return out




def _journal_events(journal):
    return journal.events()


def _plan_from_opened(payload: dict, session_dir: Path):
    from probelog.plan import load_plan_text

    text = payload.get("plan_text")
    if not text:
        raise EngineError(f"{session_dir}: session-opened carries no plan text; cannot resume")
    source = payload.get("plan_file") or f"{session_dir}/journal.jsonl"
    # A relative kit path resolves against the plan's folder, as when it was loaded.
    if source.endswith("(built-in)"):
        from importlib import resources

        base = Path(str(resources.files("probelog") / "plans"))
    else:
        base = Path(source).resolve().parent if Path(source).is_file() else session_dir
    return load_plan_text(text, source, base_dir=base)


def _save_calset(calset, journal, folder: str) -> list:
    """CalSet.save writes plain files: save to a scratch folder, then store each
    file through the journal (atomic, hashed) in ``folder``. Returns FileRefs,
    calset.json first."""
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        paths = sorted(calset.save(tmp), key=lambda p: p.name != "calset.json")
        return [journal.write_file(f"{folder}/{p.name}", p.read_bytes()) for p in paths]


def _load_calset(path: Path):
    from probelog.calibration import load_calset

    return load_calset(path.parent if path.name == "calset.json" else path)


def _cal_outcome(d: dict, calset) -> CalOutcome:
    verdict = max(d["verdicts"], key=lambda v: v.rank, default=Verdict.PASS)
    return CalOutcome(d["cal_id"], d["method"], d["ok"], d["message"], calset, [], d["agreement"],
                      verdict, d["seq"], d["file"])


def _expectation(site) -> dict:
    """The plan's expectations of a site as the mapping run_checks reads."""
    return {k: v for k, v in dataclasses.asdict(site).items() if v is not None}


def _agreement_csv(result) -> bytes:
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        return result.write_csv(Path(tmp) / "agreement.csv").read_bytes()


# Worst-case |dS| (linear) between two cal sets from the same standards: above a
# few hundredths the choice of algorithm shows in the data (common practice, no source).
AGREEMENT_WARN = 0.03
AGREEMENT_FAIL = 0.10


def _agreement_verdict(result) -> Verdict:
    if result.worst > AGREEMENT_FAIL:
        return Verdict.FAIL
    return Verdict.WARN if result.worst > AGREEMENT_WARN else Verdict.PASS
