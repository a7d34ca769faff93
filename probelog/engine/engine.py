"""The session engine: a UI-agnostic state machine that walks a probing plan.

The TUI, the headless runner and the tests drive it the same way (docs/engine.md).
Every method that touches an instrument blocks; every method that changes state
writes the journal first (data files before the event that names them, see
docs/journal-events.md), folds the event into ``self.state`` with the reducer
resume uses (probelog.state.apply), and only then notifies subscribers.

Phases: CALIBRATING (measure each standard) -> VERIFYING (cal computed and
verified, waiting for accept / redo) -> PROBING <-> DECIDING (a landing waits for
the operator) -> DONE. Drift re-measures happen inside PROBING and need no
decision.
"""

from __future__ import annotations

import gc
import getpass
from pathlib import Path
from typing import Any

from probelog import events as ev
from probelog import golden
from probelog import state as st
from probelog.bench import Bench
from probelog.engine.checkpoint import open_session
from probelog.engine.planview import PlanView, plan_from_opened, validate
from probelog.engine.policy import Policy
from probelog.engine.store import StoreError
from probelog.engine.types import (CAUTIONS, CalibrationComputed, CalOutcome, EngineError, LandingOutcome, NoteAdded,
                                   Phase, SessionClosed)
from probelog.journal import Journal, JournalError
from probelog.plan_types import Plan
from probelog.state_views import die_status


class Engine(Policy):
    """Walks a plan over a bench, checking and journaling every landing.

    Not thread-safe for concurrent calls: the UI calls one method at a time from
    a worker; a lock makes accidental overlap fail loudly instead of corrupting
    state. ``state`` (probelog.state.SessionState) is the session so far.
    """

    def __init__(self, plan: Plan, bench: Bench, journal: Journal, operator: str = "", *,
                 _state: st.SessionState | None = None, _kit_text: str | None = None) -> None:
        super().__init__(validate(plan, _kit_text, resuming=_state is not None), bench, journal, operator)
        self._active_outcome: CalOutcome | None = None
        if _state is None:
            self._open_session()
        else:
            self.state = _state
            self._phase = self._phase_of(_state)
            self._touchdowns.update(_state.touchdowns)

    # ------------------------------------------------------------ construction

    @classmethod
    def new(cls, plan: Plan, bench: Bench, sessions_root: Path | str, operator: str = "",
            session_id: str | None = None) -> "Engine":
        """Create ``sessions_root/<session_id>/`` with a fresh journal and start.
        The whole plan (kit file and contents, limit names, power) is checked first:
        a bad plan leaves no folder behind."""
        from probelog.journal import new_session_id

        validate(plan)
        try:
            journal = Journal.create(Path(sessions_root), session_id or new_session_id(plan.wafer.id),
                                     unique=session_id is None)  # same wafer twice in a second: -2
        except JournalError as exc:
            raise EngineError(str(exc)) from None
        try:
            return cls(plan, bench, journal, operator)
        except BaseException:
            journal.close()
            raise

    @classmethod
    def resume(cls, session_dir: Path | str, bench: Bench, operator: str | None = None) -> "Engine":
        """Reopen a session (after a crash or a quit) and continue where it stopped.

        The journal's own recovery runs first (torn tail moved aside, orphan data
        files adopted). State is folded from the events (from a checkpoint when a
        valid one exists); every file the session goes on using (cal set, drift
        reference, switch terms, raw standards) is hash-checked first; then
        ``session-resumed`` is journaled.
        """
        # Reading a long journal builds millions of small objects that never form
        # cycles; the cyclic collector would walk them all again and again.
        gc_was_on = gc.isenabled()
        gc.disable()
        try:
            return cls._resume(Path(session_dir), bench, operator)
        finally:
            if gc_was_on:
                gc.enable()

    @classmethod
    def _resume(cls, session_dir: Path, bench: Bench, operator: str | None) -> "Engine":
        try:
            journal, state = open_session(session_dir)
        except JournalError as exc:
            raise EngineError(str(exc)) from None
        try:
            opened = state.opened
            if opened is None:
                raise EngineError(f"{session_dir}: journal has no session-opened event; cannot resume")
            if state.closed is not None and state.closed.completed:
                raise EngineError(f"{session_dir}: session already completed; nothing to resume")
            try:
                plan = plan_from_opened(opened.plan_text, opened.plan_file, Path(session_dir))
            except ValueError as exc:
                raise EngineError(f"{session_dir}: the plan in session-opened no longer loads: {exc}") from None
            if why := golden.resume_problem(plan.sites, opened.golden_sha256):
                raise EngineError(why)
            engine = cls(plan, bench, journal, opened.operator if operator is None else operator, _state=state,
                         _kit_text=_journaled_kit(state))
            checked = engine._check_files()
            engine._append(ev.SessionResumed(operator=engine.operator, login=_login(),
                                             probelog_version=_version(), checked_files=checked))
            return engine
        except BaseException:
            journal.close()
            raise

    def _check_files(self) -> int:
        """Read back (hash-checked) every file the session will use from here on."""
        s = self.state
        try:
            n = 0
            if s.active is not None and s.active.ok:
                self._active_calset()
                n += len(s.active.files) or 1
            if s.pending is not None and s.pending.ok and s.phase == st.VERIFYING:
                self._calsets[s.pending.cal_id] = self._calset_of(s.pending)
                n += len(s.pending.files) or 1
            if s.drift_ref is not None:
                self.store.network(s.drift_ref[0], "drift reference")
                n += 1
            if s.phase == st.CALIBRATING:
                n += len(self._standard_networks_by_role())
                n += len(self._switch_networks() or ())
        except StoreError as exc:
            raise EngineError(f"cannot resume: {exc}") from None
        return n

    def checkpoint(self) -> Path:
        """Write a state snapshot beside the journal and journal the event that
        vouches for it (resume then folds only what follows)."""
        path = self._checkpoint()
        if path is None:
            raise EngineError(f"{self.session_dir}: cannot write the state snapshot")
        return path

    # ------------------------------------------------------------ read-only view

    @property
    def active_cal(self) -> CalOutcome | None:
        rec = self.state.active
        if rec is None:
            return None
        if self._active_outcome is None or self._active_outcome.cal_id != rec.cal_id:
            self._active_outcome = self._outcome_of(rec, self._active_calset())
        return self._active_outcome

    @property
    def pending_cal(self) -> CalOutcome | None:
        """The computed cal waiting for accept / redo (phase VERIFYING)."""
        rec = self.state.pending
        if rec is None or self._phase is not Phase.VERIFYING:
            return None
        if self._pending_cal is None or self._pending_cal.cal_id != rec.cal_id:
            calset = self._calsets.get(rec.cal_id) if rec.ok else None
            self._pending_cal = self._outcome_of(rec, calset)
        return self._pending_cal

    @property
    def last_outcome(self) -> LandingOutcome | None:
        return self._last_outcome if self._phase is Phase.DECIDING else None

    @property
    def touchdowns(self) -> dict[str, int]:
        return dict(self._touchdowns)

    @property
    def wafer_status(self) -> dict[tuple[int, int], str]:
        """Die -> todo / partial / done / skipped / failed / accepted-despite-fail."""
        names = [s.name for s in self.plan.sequence_sites]
        return {die: die_status(self.state, die, names) for die in self.plan.iter_dies()}

    def summary(self) -> dict[str, Any]:
        return self.state.summary(len(self.view.sequence))

    # ------------------------------------------------------------ actions

    def show_cautions(self) -> str:
        """The cautions text (ESD, probe care, lab rules); journals ``cautions-shown``."""
        self._append(ev.CautionsShown(text=CAUTIONS))
        return CAUTIONS

    def measure(self) -> LandingOutcome:
        """Execute ``next_step``: land, sweep, correct, check, write data, journal.

        Raises InstrumentError (after journaling it) when a driver fails; the
        engine state is unchanged and ``measure()`` may be called again.
        """
        from probelog.engine.types import StepKind

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
            missing = [n for n, _ in self.view.required() if n not in self.state.standards]
            if missing:
                raise EngineError(f"calibration {self._cal_id()}: standards not measured yet: {', '.join(missing)}")
            before = self._phase
            outcome = self._compute_and_verify()
            self._pending_cal = outcome
            self._announce_phase(before, outcome.seq)
            self._emit(CalibrationComputed(seq=outcome.seq, outcome=outcome))
            return outcome

    def accept_calibration(self, reason: str = "") -> None:
        with self._busy():
            self._require_phase(Phase.VERIFYING)
            cal = self.pending_cal
            why = self.cal_refusal(cal)  # did not solve, a standard or the verification failed
            if why is not None:  # never accepted "when solved" (issue 10)
                raise EngineError(why)
            assert cal is not None
            before = self._phase
            e = self._append(ev.CalAccepted(cal_id=cal.cal_id, reason=reason))
            self._active_outcome, self._pending_cal = cal, None
            self._drift_requested = False
            self._announce_phase(before, e.seq)

    def redo_calibration(self, reason: str) -> None:
        from probelog.engine.core import need_reason

        with self._busy():
            self._require_phase(Phase.VERIFYING)
            reason = need_reason(reason, "redo the calibration")
            before = self._phase
            e = self._append(ev.CalRejected(cal_id=self._cal_id(), reason=reason))
            self._pending_cal = None
            self._announce_phase(before, e.seq)

    def recalibrate(self, reason: str) -> None:
        """Back to CALIBRATING with a new cal id. Landings wait until the new cal
        is accepted; then the walk goes on where it stopped."""
        from probelog.engine.core import need_reason

        with self._busy():
            if not self.view.has_cal():
                raise EngineError(f"plan {self.view.name!r} has no calibration")
            if self._phase is Phase.DECIDING:
                raise EngineError("decide on the current landing before recalibrating")
            reason = need_reason(reason, "recalibrate")
            before = self._phase
            e = self._append(ev.RecalRequested(reason=reason, cal_id=f"cal{self.state.cal_count + 1}"))
            self._pending_cal = None
            self._announce_phase(before, e.seq)

    def note(self, text: str, die: tuple[int, int] | None = None, site: str | None = None) -> None:
        """Journal a note at (die, site): the ones given (the landing the operator is
        looking at, already decided or not), else the landing waiting for a
        decision, else the next site."""
        from probelog.engine.core import need_reason

        with self._busy():
            text = need_reason(text, "add a note")
            if die is not None and site is not None:
                self.view.site(site)  # EngineError for a site the plan does not have
                pos: tuple[tuple[int, int], str] | None = ((int(die[0]), int(die[1])), site)
            else:
                pos = self._position()
            e = self._append(ev.Note(text=text, die=pos[0] if pos else None, site=pos[1] if pos else None))
            self._emit(NoteAdded(seq=e.seq, text=text))

    def close(self, completed: bool | None = None, cause: str | None = None) -> None:
        """Separate the probes, journal ``session-closed`` (completed defaults to:
        plan finished; ``cause`` says why a run stopped early, e.g. "SIGTERM" or
        "broken pipe"), close the journal. Does not close the bench: whoever
        built it closes it."""
        if completed is None:
            completed = self._phase is Phase.DONE
        try:
            self._safe_separate()
            # the snapshot and its checkpoint event come before session-closed, which
            # stays the last event; a resume then folds those two events only
            self._checkpoint()
            e = self._append(ev.SessionClosed(completed=bool(completed), summary=self.summary(), cause=cause))
            self._emit(SessionClosed(seq=e.seq, completed=bool(completed)))
        finally:
            self.journal.close()

    # ------------------------------------------------------------ bookkeeping

    def _position(self) -> tuple[tuple[int, int], str] | None:
        aw = self.state.awaiting
        if aw is not None and self._phase is Phase.DECIDING:
            return aw[0], aw[1]
        step = self.next_step
        return (step.die, step.site) if step else None

    def _open_session(self) -> None:
        plan, s = self.plan, self.plan.settings
        bench_info = {"kind": self.bench.kind, "description": self.bench.description}
        for key, inst in (("vna_idn", self.bench.vna), ("prober_idn", self.bench.prober)):
            try:
                bench_info[key] = inst.identify()
            except Exception as exc:  # the session opens anyway; the error is on record
                bench_info[key] = f"unavailable: {type(exc).__name__}: {exc}"
        self._append(ev.SessionOpened(
            schema=ev.SCHEMA, session_id=self.session_id, probelog_version=_version(),
            plan_name=plan.name, plan_file=str(plan.source), plan_sha256=plan.sha256, plan_text=plan.text,
            operator=self.operator, wafer=plan.wafer.id, lot=plan.wafer.lot or "", chip=plan.wafer.chip or "",
            probes=self.view.probe_ids(), bench={k: str(v) for k, v in bench_info.items()},
            settings=ev.Settings(start_hz=s.start_hz, stop_hz=s.stop_hz, points=s.points,
                                 ifbw_hz=s.ifbw_hz, power_dbm=s.power_dbm),
            golden_sha256=golden.site_hashes(plan.sites)))


def _journaled_kit(state: st.SessionState) -> str | None:
    """The kit text of the last ``cal-computed`` that carries one (schema 2)."""
    cals = [c for c in state.cals.values() if c.kit_text is not None]
    return max(cals, key=lambda c: c.seq).kit_text if cals else None


def _version() -> str:
    from probelog import __version__

    return str(__version__)


def _login() -> str:
    try:
        return getpass.getuser()
    except (OSError, KeyError):  # no login name in this environment (containers)
        return ""


__all__ = ["Engine", "PlanView"]
