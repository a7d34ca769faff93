"""The engine's common ground: the journal and the state it folds, the bench
(landing and sweeping, instrument errors), the store, and notifications.

Every change of state goes one way: build a typed event (probelog.events),
append it to the journal, decode what was stored, and fold it into the state
with ``probelog.state.apply``: the same reducer resume folds the journal with.
"""

from __future__ import annotations

import threading
from contextlib import contextmanager
from pathlib import Path
from collections.abc import Iterator, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
import skrf

from probelog import events as ev
from probelog import state as st
from probelog.bench import Bench, Die
from probelog.engine import checkpoint
from probelog.engine.planview import PlanView, expectation
from probelog.engine.store import Store
from probelog.engine.types import (CalOutcome, EngineError, EngineEvent, InstrumentError, InstrumentFailed,
                                   LandingOutcome, Phase, PhaseChanged, Step, StepKind, Subscriber)
from probelog.journal import Journal
from probelog.plan_types import Site
from probelog.verdicts import CheckResult

if TYPE_CHECKING:  # the walk imports the evidence lazily, when a landing is judged
    from probelog.calset import CalSet
    from probelog.engine.evidence import Evidence

_PHASES = {st.CALIBRATING: Phase.CALIBRATING, st.VERIFYING: Phase.VERIFYING,
           st.DECIDING: Phase.DECIDING}


class EngineCore:
    """State, journal, bench and store shared by the walk, the calibration step
    and the decision policy (the mixins that make up :class:`Engine`)."""

    def __init__(self, view: PlanView, bench: Bench, journal: Journal, operator: str) -> None:
        self.view = view
        self.plan = view.plan
        self.bench = bench
        self.journal = journal
        self.operator = operator
        self.store = Store(journal)
        self.state = st.SessionState()
        self._decoder = ev.Decoder(str(journal.path))
        self._subscribers: list[Subscriber] = []
        self._lock = threading.Lock()
        self._configured = False
        self._reopen_vna = False
        self._drift_requested = False
        self._walk_cursor = (0, 0)  # (walk start, sequence offset the last next_step stopped at)
        self._touchdowns: dict[str, int] = dict.fromkeys(view.probe_ids(), 0)
        self._phase = Phase.CALIBRATING if view.has_cal() else Phase.PROBING
        self._calsets: dict[str, CalSet] = {}  # cal_id -> solved cal set (kept in memory once read)
        self._unc_cache: dict[str, tuple[np.ndarray, np.ndarray]] = {}  # cal_id -> (f in Hz, u(f)), see evidence
        self._last_outcome: LandingOutcome | None = None  # the landing waiting for a decision
        self._pending_cal: CalOutcome | None = None  # the live outcome of compute_calibration()

    # ------------------------------------------------------------ state

    def _fold(self, e: ev.Event) -> None:
        self.state = st.apply(self.state, e)
        self._phase = self._phase_of(self.state)

    def _append(self, data: ev.Payload) -> ev.Event:
        """Journal ``data``, then fold what was stored (NaN as null...) into the state."""
        raw = self.journal.append(data.TYPE, ev.encode(data))
        e = self._decoder.event(raw.seq, raw.ts, raw.type, raw.payload, raw.hash)
        self._fold(e)
        if e.seq % checkpoint.EVERY == 0:
            self._checkpoint()
        return e

    def _checkpoint(self) -> Path | None:
        """Write a state snapshot and journal the ``checkpoint`` event that vouches
        for it (resume takes no snapshot without one); None when it could not be written."""
        try:
            sha = checkpoint.save_state(self.session_dir, self.state, self.journal.prefix())
        except OSError:  # a snapshot only speeds up a resume; the journal is the record
            return None
        self._append(ev.Checkpoint(seq=self.state.seq, sha256=sha))
        return self.session_dir / checkpoint.SNAPSHOT_NAME

    def _phase_of(self, s: st.SessionState) -> Phase:
        p = _PHASES.get(s.phase)
        if p is not None:
            return p
        if s.phase == st.OPENED and self.view.has_cal():
            return Phase.CALIBRATING
        return Phase.DONE if st.planned_done(s, len(self.view.sequence)) else Phase.PROBING

    @property
    def phase(self) -> Phase:
        return self._phase

    @property
    def session_dir(self) -> Path:
        return Path(self.journal.root)

    @property
    def session_id(self) -> str:
        return self.session_dir.name

    def _cal_id(self) -> str:
        """The cal being measured or verified (cal1 before anything was measured)."""
        return self.state.cal_id or f"cal{self.state.cal_count + 1}"

    def _active_cal_id(self) -> str | None:
        return self.state.active.cal_id if self.state.active else None

    def _last_seq(self) -> int:
        return self.state.seq

    # ------------------------------------------------------------ notifications

    def subscribe(self, callback: Subscriber) -> None:
        self._subscribers.append(callback)

    def _emit(self, event: EngineEvent) -> None:
        for cb in list(self._subscribers):
            cb(event)

    def _announce_phase(self, before: Phase, seq: int) -> None:
        if self._phase is not before:
            self._emit(PhaseChanged(seq=seq, phase=self._phase))

    @contextmanager
    def _busy(self) -> Iterator[None]:
        if not self._lock.acquire(blocking=False):
            raise EngineError("the engine is busy with another call")
        try:
            yield
        finally:
            self._lock.release()

    def _require_phase(self, phase: Phase) -> None:
        if self._phase is not phase:
            raise EngineError(f"expected phase {phase.value}, engine is {self._phase.value}")

    # ------------------------------------------------------------ instruments

    def _configure(self) -> None:
        if self._configured:
            return
        try:
            if self._reopen_vna:
                self.bench.vna.reopen()  # a stale reply left in the link would shift every answer
            self._reopen_vna = False
            self.bench.vna.configure(self.plan.settings, self.plan.power_limit_dbm)
        except Exception as exc:
            self._instrument_failed("vna", exc)
        self._configured = True

    def _land(self, die: Die, site_name: str) -> skrf.Network:
        """Separate, move at separation, contact, sweep. Counts touchdowns."""
        return self._sweep(self._touch_down(die, site_name))

    def _touch_down(self, die: Die, site_name: str) -> Site:
        """Configure the VNA, separate, move at separation, contact; counts
        touchdowns. Returns the plan's site."""
        site = self.view.site(site_name)
        self._configure()
        prober = self.bench.prober
        try:
            prober.separate()  # never move in XY while in contact
            prober.move_to(die, site.offset_um)
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
        return site

    def _sweep(self, site: Site) -> skrf.Network:
        """The plan's sweep of ``site`` (probes down)."""
        try:
            net: skrf.Network = self.bench.vna.sweep(ports=site.ports)
        except Exception as exc:
            self._instrument_failed("vna", exc)
        return net

    def _instrument_failed(self, where: str, exc: BaseException) -> None:
        self._configured = False  # the instrument may have been reset or reconnected
        self._reopen_vna = where == "vna"
        self._safe_separate()
        e = self._append(ev.InstrumentError(where=where, error=type(exc).__name__, message=str(exc),
                                            touchdowns=dict(self._touchdowns)))
        self._emit(InstrumentFailed(seq=e.seq, where=where, message=f"{type(exc).__name__}: {exc}"))
        raise InstrumentError(where, exc) from exc

    def _safe_separate(self) -> None:
        try:
            if self.bench.prober.in_contact:
                self.bench.prober.separate()
        except Exception:  # a broken prober is reported by the call that found it
            pass

    # ------------------------------------------------------------ data

    def _checks(self, ntwk: skrf.Network, site: Site, previous: skrf.Network | None = None,
                reference: skrf.Network | None = None, evidence: Evidence | None = None,
                raw: skrf.Network | None = None) -> list[CheckResult]:
        """The checks of ``site``'s kind; ``evidence`` (probelog.engine.evidence) adds
        physics contact on ``raw``, the cal's uncertainty, the population and the
        last accepted landing as the repeatability reference."""
        from probelog.checks import run_checks

        extra = evidence.kwargs(raw) if evidence is not None else {}
        if evidence is not None:
            previous = evidence.previous
        return list(run_checks(ntwk, site.kind, self.view.limits(), expectation(site), previous, reference,
                               **extra))

    def _header(self, step: Step, what: str) -> dict[str, Any]:
        """The self-describing comment header of a data file."""
        s = self.plan.settings
        cal_id = self._cal_id() if step.kind in (StepKind.CAL_STANDARD, StepKind.VERIFY) else self._active_cal_id()
        return {
            "session": self.session_id, "seq": self._last_seq() + 1, "what": what,
            "step": step.kind.value, "die": f"{step.die[0]},{step.die[1]}", "site": step.site,
            "kind": step.site_kind, "landing": step.landing, "cal_id": cal_id,
            "wafer": self.plan.wafer.id, "start_hz": s.start_hz, "stop_hz": s.stop_hz,
            "points": s.points, "ifbw_hz": s.ifbw_hz, "power_dbm": s.power_dbm,
        }


def need_reason(text: str, what: str) -> str:
    text = (text or "").strip()
    if not text:
        raise EngineError(f"a reason is required to {what}")
    return text


def die_of(die: Sequence[int]) -> Die:
    """(col, row) as ints, from a die the caller gave as any pair (a list read from JSON too)."""
    return (int(die[0]), int(die[1]))
