"""A small engine for UI tests that follows docs/engine.md: the engine's own
phase, step, outcome and event types (imported, so they cannot drift apart), the
same methods and journal lines (docs/journal-events.md, hash-chained), with networks from
scikit-rf media so the plots show real physics. A fault (lifted tip on port 1) is
injected on chosen (die, site, landing) triples.
"""

from __future__ import annotations

import hashlib
import json
import threading
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable

import numpy as np
import skrf
from skrf.media import DefinedGammaZ0

from probelog.session import (
    CalibrationComputed,
    CalOutcome,
    DecisionRecorded,
    InstrumentError,
    InstrumentFailed,
    JumpedToDie,
    LandingOutcome,
    NoteAdded,
    Phase,
    PhaseChanged,
    SessionClosed,
    StandardStatus,
    Step,
    StepKind,
    StepMeasured,
)
from probelog.events import decode_lines
from probelog.state import SessionState, fold
from probelog.verdicts import CheckResult, Verdict, overall

CAUTIONS = ("RF power stays at or below the plan's limit. Wear an ESD strap. Never move in XY "
            "while in contact. Check the interlock. Your lab's rules and licensed practice come first.")

FREQ = skrf.Frequency(1, 50, 50, unit="GHz")
EPS_EFF = 6.0
MEDIA = DefinedGammaZ0(FREQ, z0_port=50, z0=50,
                       gamma=0.5 * np.sqrt(FREQ.f / 1e9) + 1j * 2 * np.pi * FREQ.f * np.sqrt(EPS_EFF) / 299_792_458.0)


STANDARDS = [("open", "cal-open", "open"), ("short", "cal-short", "short"),
             ("load", "cal-load", "load"), ("thru", "cal-thru", "thru")]
SITES = [("line-a", "line"), ("line-b", "line")]
DIES = [(0, 0), (1, 0), (0, 1)]
CAL_DIE = (0, 0)
PROBES = ("gsg-w", "gsg-e")


def good_network(site_kind: str, length_um: float = 450.0) -> skrf.Network:
    """What the fake bench returns for an intact structure (corrected data)."""
    if site_kind == "open":
        return skrf.network.two_port_reflect(MEDIA.open(), MEDIA.open())
    if site_kind == "short":
        return skrf.network.two_port_reflect(MEDIA.short(), MEDIA.short())
    if site_kind == "load":
        return skrf.network.two_port_reflect(MEDIA.match(), MEDIA.match())
    if site_kind == "open-stub":
        return MEDIA.line(length_um * 1e-6, "m") ** MEDIA.open()
    return MEDIA.line(length_um * 1e-6, "m")


def lifted_tip_network() -> skrf.Network:
    """Port-1 tips in the air: S11 near a small capacitance, nothing gets through."""
    cap = MEDIA.capacitor(5e-15) ** MEDIA.open()
    s = np.zeros((len(FREQ), 2, 2), dtype=complex)
    s[:, 0, 0] = cap.s[:, 0, 0]
    s[:, 1, 0] = s[:, 0, 1] = 1e-3
    s[:, 1, 1] = MEDIA.line(450e-6, "m").s[:, 1, 1]
    return skrf.Network(frequency=FREQ, s=s)


def contact_check(net: skrf.Network, site_kind: str) -> CheckResult:
    """A line must be matched: worst |S11| in dB against -10 dB."""
    if site_kind not in ("line", "thru"):
        return CheckResult("contact", Verdict.NA, None, None, None, "not judged on this kind", "dB")
    db = 20 * np.log10(np.maximum(np.abs(net.s[:, 0, 0]), 1e-12))
    k = int(np.argmax(db))
    bad = db[k] > -10.0
    return CheckResult("contact", Verdict.FAIL if bad else Verdict.PASS, float(db[k]), -10.0, float(net.f[k]),
                       "port 1 looks open: tips not down?" if bad else "both ports see the line", "dB")


def passivity_check(net: skrf.Network) -> CheckResult:
    sv = np.linalg.svd(net.s, compute_uv=False).max(axis=1)
    k = int(np.argmax(sv))
    return CheckResult("passivity", Verdict.PASS if sv[k] <= 1.01 else Verdict.FAIL, float(sv[k]), 1.01,
                       float(net.f[k]), "largest singular value of S", "")


class Journal:
    """Hash-chained JSON lines, as docs/journal-events.md describes."""

    def __init__(self, root: Path, clock: Callable[[], datetime] | None = None) -> None:
        self.root = root
        # snapshot tests freeze the clock (the logbook and the journal view show times)
        self.clock = clock or (lambda: datetime.now(timezone.utc))
        self.path = root / "journal.jsonl"
        self.seq, self.prev = 0, "0" * 64
        if self.path.exists():
            for line in self.path.read_bytes().splitlines():
                self.seq = json.loads(line)["seq"]
                self.prev = hashlib.sha256(line).hexdigest()
        self.closed = False

    def append(self, type_: str, payload: dict) -> int:
        if self.closed:
            raise RuntimeError("journal is closed")
        self.seq += 1
        ts = self.clock().strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"
        line = json.dumps({"seq": self.seq, "ts": ts, "type": type_, "payload": payload, "prev": self.prev},
                          sort_keys=True, separators=(",", ":")).encode()
        with self.path.open("ab") as fh:
            fh.write(line + b"\n")
        self.prev = hashlib.sha256(line).hexdigest()
        return self.seq

    def events(self) -> list[dict]:
        return [json.loads(x) for x in self.path.read_bytes().splitlines()]


class FakeEngine:
    """docs/engine.md, on a three-die plan of two line sites, with SOLT + one verification stub."""

    def __init__(self, session_dir: Path, operator: str = "ana", faults: set | None = None,
                 bench: Any = None, _resume: bool = False, errors: set | None = None,
                 clock: Callable[[], datetime] | None = None) -> None:
        session_dir.mkdir(parents=True, exist_ok=True)
        self.journal = Journal(session_dir, clock)
        self.faults = set(faults or ())
        # (die, site, landing) where the VNA fails mid-sweep, once each (docs/engine.md:
        # InstrumentError after journaling instrument-error, state unchanged)
        self.errors = set(errors or ())
        self.bench = bench
        self.operator = operator
        self._subs: list[Callable] = []
        self._lock = threading.Lock()
        self._phase = Phase.CALIBRATING
        self._cal_n = 1
        self._std: dict[str, Verdict] = {}
        self._pending: CalOutcome | None = None
        self._active: CalOutcome | None = None
        self._finished: dict[tuple, str] = {}
        self._landings: dict[tuple, int] = {}
        self._touch = dict.fromkeys(PROBES, 0)
        self._last: LandingOutcome | None = None
        self._drift_due = False
        self._last_std: str | None = None
        self._walk_from = 0  # index into the site sequence; goto() moves it
        self.calls: list[str] = []
        if _resume:
            self._replay(self.journal.events())
        else:
            self.journal.append("session-opened", {"operator": operator, "wafer": "QF2611-W07", "lot": "QF2611",
                                                   "chip": "PLX-7", "plan_name": "fake", "probes": list(PROBES)})

    @classmethod
    def resume(cls, session_dir: Path, bench: Any = None, faults: set | None = None) -> "FakeEngine":
        return cls(session_dir, faults=faults, bench=bench, _resume=True)

    def _replay(self, events: list[dict]) -> None:
        for ev in events:
            t, p = ev["type"], ev["payload"]
            if t == "session-opened":
                self.operator = p["operator"]
            elif t == "cal-accepted":
                self._active = CalOutcome(p["cal_id"], "solt", True, "", None, [], None, Verdict.PASS, ev["seq"])
                self._phase = Phase.PROBING
            elif t == "landing":
                key = (tuple(p["die"]), p["site"])
                self._landings[key] = p["landing"]
                self._touch = dict(p["touchdowns"])
            elif t == "decision" and p["action"] != "reland":
                self._finished[(tuple(p["die"]), p["site"])] = p["action"]
            elif t == "goto":
                self._walk_from = DIES.index(tuple(p["die"])) * len(SITES)
        if self._phase is Phase.PROBING and len(self._finished) == len(DIES) * len(SITES):
            self._phase = Phase.DONE
        self.journal.append("recovered", {"torn_line": None, "adopted": [], "message": "reopened"})

    # ------------------------------------------------------------ view
    def subscribe(self, callback: Callable) -> None:
        self._subs.append(callback)

    def _emit(self, ev: Any) -> None:
        for cb in self._subs:
            cb(ev)

    def _set_phase(self, phase: Phase, seq: int) -> None:
        self._phase = phase
        self._emit(PhaseChanged(seq=seq, phase=phase))

    @property
    def state(self) -> SessionState:
        """The journal folded by the real reducer (what the UI reads for map and history)."""
        return fold(decode_lines(self.journal.path.read_bytes()))

    @property
    def phase(self) -> Phase:
        return self._phase

    @property
    def session_dir(self) -> Path:
        return self.journal.root

    @property
    def last_standard(self) -> str | None:
        """The standard measured last in the cal being measured (re-landed with reland())."""
        return self._last_std if self._phase is Phase.CALIBRATING else None

    @property
    def session_id(self) -> str:
        return self.journal.root.name

    def summary(self) -> dict[str, Any]:
        acts = list(self._finished.values())
        return {"sites": len(DIES) * len(SITES), "accepted": acts.count("accept"), "skipped": acts.count("skip")}

    @property
    def progress(self) -> tuple[int, int]:
        return len(self._finished), len(DIES) * len(SITES)

    @property
    def cal_standards(self) -> list[StandardStatus]:
        return [StandardStatus(n, s, k, n in self._std, self._std.get(n)) for n, s, k in STANDARDS]

    @property
    def active_cal(self):
        return self._active

    @property
    def pending_cal(self):
        return self._pending

    @property
    def last_outcome(self):
        return self._last

    @property
    def touchdowns(self) -> dict[str, int]:
        return dict(self._touch)

    @property
    def wafer_status(self) -> dict:
        out = {}
        for die in DIES:
            acts = [self._finished.get((die, s)) for s, _ in SITES]
            done = [a for a in acts if a]
            out[die] = ("todo" if not done else "partial" if len(done) < len(SITES)
                        else "skipped" if all(a == "skip" for a in done) else "done")
        return out

    @property
    def next_step(self) -> Step | None:
        if self._phase is Phase.CALIBRATING:
            for i, (n, s, k) in enumerate(STANDARDS):
                if n not in self._std:
                    return Step(StepKind.CAL_STANDARD, CAL_DIE, s, k, 1, i, len(STANDARDS), n)
            return None
        if self._phase is not Phase.PROBING:
            return None
        if self._drift_due:
            return Step(StepKind.DRIFT, CAL_DIE, "line-a", "line", self._landings.get((CAL_DIE, "line-a"), 0) + 1, 0, 1)
        seq = [(d, s, k) for d in DIES for s, k in SITES]
        for i in (j % len(seq) for j in range(self._walk_from, self._walk_from + len(seq))):
            d, s, k = seq[i]
            if (d, s) not in self._finished:
                return Step(StepKind.SITE, d, s, k, self._landings.get((d, s), 0) + 1, i, len(seq))
        return None

    # ------------------------------------------------------------ actions
    def show_cautions(self) -> str:
        self.journal.append("cautions-shown", {"text": CAUTIONS})
        return CAUTIONS

    def _touchdown(self) -> None:
        for p in self._touch:
            self._touch[p] += 1

    def measure(self) -> LandingOutcome:
        with self._lock:
            self.calls.append("measure")
            step = self.next_step
            if step is None:
                raise RuntimeError(f"nothing to measure in phase {self._phase.value}")
            self._touchdown()
            if step.kind is StepKind.CAL_STANDARD:
                net = good_network(step.site_kind)
                checks = [passivity_check(net)]
                verdict = overall(checks)
                seq = self.journal.append("cal-standard", {
                    "cal_id": f"cal{self._cal_n}", "standard": step.standard, "die": list(step.die),
                    "site": step.site, "kind": step.site_kind, "landing": step.landing, "raw": None,
                    "checks": [c.to_json() for c in checks], "verdict": verdict.value})
                self._std[step.standard] = verdict
                self._last_std = step.standard
                out = LandingOutcome(step, net, None, checks, verdict, None, seq)
                self._emit(StepMeasured(seq=seq, outcome=out))
                return out
            key = (step.die, step.site)
            if (step.die, step.site, step.landing) in self.errors:
                self.errors.discard((step.die, step.site, step.landing))
                exc = TimeoutError("VNA: no reply to the sweep trigger within 5 s")
                seq = self.journal.append("instrument-error", {"where": "vna", "error": "TimeoutError",
                                                               "message": str(exc), "touchdowns": dict(self._touch)})
                self._emit(InstrumentFailed(seq=seq, where="vna", message=f"TimeoutError: {exc}"))
                raise InstrumentError("vna", exc)
            self._landings[key] = step.landing
            fault = (step.die, step.site, step.landing) in self.faults
            net = lifted_tip_network() if fault else good_network(step.site_kind)
            checks = [contact_check(net, step.site_kind), passivity_check(net)]
            verdict = overall(checks)
            # per-frequency lists, as the real engine journals line metrics
            metrics = None if fault else {"f_hz": [40e9], "z0_ohm": [50.0 + step.die[0]], "eps_eff": [EPS_EFF]}
            kind = "drift" if step.kind is StepKind.DRIFT else "landing"
            payload = {
                "die": list(step.die), "site": step.site, "landing": step.landing,
                "cal_id": self._active.cal_id if self._active else None, "raw": None, "corrected": None,
                "checks": [c.to_json() for c in checks], "verdict": verdict.value,
                "touchdowns": dict(self._touch)}
            if kind == "landing":
                payload.update(kind=step.site_kind, metrics=metrics)
            seq = self.journal.append(kind, payload)
            out = LandingOutcome(step, net, net, checks, verdict, metrics, seq)
            if step.kind is StepKind.DRIFT:
                self._drift_due = False
            else:
                self._last = out
                self._set_phase(Phase.DECIDING, seq)
            self._emit(StepMeasured(seq=seq, outcome=out))
            return out

    def compute_calibration(self) -> CalOutcome:
        with self._lock:
            self.calls.append("compute")
            if any(n not in self._std for n, _, _ in STANDARDS):
                raise RuntimeError("standards not measured yet")
            cal_id = f"cal{self._cal_n}"
            self.journal.append("cal-computed", {"cal_id": cal_id, "method": "solt", "standards": [s for _, s, _ in STANDARDS],
                                                       "file": None, "ok": True, "message": "solved"})
            stub = good_network("open-stub", 800.0)
            step = Step(StepKind.VERIFY, CAL_DIE, "ver-ostub", "open-stub", 1, 0, 1)
            phase = np.unwrap(np.angle(stub.s[:, 0, 0]))
            turning = float(np.rad2deg(phase[-1] - phase[0]))
            rot = CheckResult("rotation", Verdict.PASS if turning < 0 else Verdict.FAIL, turning, 0.0, None,
                              "open stub turns clockwise", "deg")
            self._touchdown()
            vseq = self.journal.append("cal-verification", {"cal_id": cal_id, "site": "ver-ostub", "die": list(CAL_DIE),
                                                            "raw": None, "corrected": None, "checks": [rot.to_json()],
                                                            "verdict": rot.verdict.value})
            ver = LandingOutcome(step, stub, stub, [rot], rot.verdict, None, vseq)
            agreement = {"other_method": "lrrm", "worst": 0.004, "at_hz": 40e9, "verdict": "pass", "limit": 0.02}
            aseq = self.journal.append("cal-agreement", {"cal_id": cal_id, "method": "solt", "other_method": "lrrm",
                                                         "worst": 0.004, "at_hz": 40e9, "file": None, "verdict": "pass"})
            out = CalOutcome(cal_id, "solt", True, "solved from 4 standards", object(), [ver], agreement,
                             Verdict.PASS, aseq)
            self._pending = out
            self._set_phase(Phase.VERIFYING, aseq)
            self._emit(CalibrationComputed(seq=aseq, outcome=out))
            return out

    def accept_calibration(self, reason: str = "") -> None:
        with self._lock:
            self.calls.append("accept_calibration")
            seq = self.journal.append("cal-accepted", {"cal_id": self._pending.cal_id, "reason": reason})
            self._active, self._pending = self._pending, None
            self._set_phase(Phase.PROBING, seq)

    def redo_calibration(self, reason: str) -> None:
        with self._lock:
            if not reason.strip():
                raise ValueError("a reason is needed to redo the calibration")
            seq = self.journal.append("cal-rejected", {"cal_id": f"cal{self._cal_n}", "reason": reason})
            self._cal_n += 1
            self._std, self._pending, self._last_std = {}, None, None
            self._set_phase(Phase.CALIBRATING, seq)

    def _decide(self, action: str, reason: str, landing_verdict_needs_reason: bool = False) -> None:
        with self._lock:
            self.calls.append(action)
            if self._phase is Phase.PROBING and action == "skip":
                step = self.next_step
                die, site, landing = step.die, step.site, step.landing - 1
            else:
                if self._phase is not Phase.DECIDING:
                    raise RuntimeError(f"cannot {action} in phase {self._phase.value}")
                die, site, landing = self._last.step.die, self._last.step.site, self._last.step.landing
            seq = self.journal.append("decision", {"die": list(die), "site": site, "landing": landing,
                                                   "action": action, "reason": reason})
            if action != "reland":
                self._finished[(die, site)] = action
            self._last = None
            self._emit(DecisionRecorded(seq=seq, die=die, site=site, landing=landing, action=action, reason=reason))
            done = len(self._finished) == len(DIES) * len(SITES)
            self._set_phase(Phase.DONE if done else Phase.PROBING, seq)

    def accept(self, reason: str = "") -> None:
        """A FAILED landing is kept only with a reason (the engine's rule, docs/engine.md)."""
        if self._phase is Phase.DECIDING and self._last is not None and self._last.verdict is Verdict.FAIL:
            if not reason.strip():
                raise ValueError("a reason is needed to keep a landing that FAILED")
            self._decide("accept-despite-fail", reason)
            return
        self._decide("accept", reason)

    def skip_die(self, die: tuple[int, int], reason: str) -> list[str]:
        """Skip every undecided site of ``die`` with one reason: one ``die-skipped``
        event; PROBING only (as the engine)."""
        if not reason.strip():
            raise ValueError("a reason is needed to skip a die")
        die = tuple(die)
        with self._lock:
            self.calls.append("skip_die")
            if self._phase is not Phase.PROBING:
                raise RuntimeError(f"cannot skip a die in phase {self._phase.value}")
            sites = [site for site, _ in SITES if (die, site) not in self._finished]
            seq = self.journal.append("die-skipped", {"die": list(die), "sites": sites, "reason": reason})
            for site in sites:
                self._finished[(die, site)] = "skip"
                self._emit(DecisionRecorded(seq=seq, die=die, site=site, landing=self._landings.get((die, site), 0),
                                            action="skip", reason=reason))
            done = len(self._finished) == len(DIES) * len(SITES)
            self._set_phase(Phase.DONE if done else Phase.PROBING, seq)
            return sites

    def reland(self, reason: str = "") -> None:
        if self._phase is Phase.CALIBRATING:  # the standard measured last, again
            with self._lock:
                std = self._last_std
                if std is None:
                    raise RuntimeError("no standard measured yet in this calibration to re-land")
                site = next(s for n, s, _ in STANDARDS if n == std)
                seq = self.journal.append("decision", {"die": list(CAL_DIE), "site": site, "landing": 1,
                                                       "action": "reland", "reason": reason, "standard": std,
                                                       "cal_id": f"cal{self._cal_n}"})
                del self._std[std]
                self._last_std = None
                self._emit(DecisionRecorded(seq=seq, die=CAL_DIE, site=site, landing=1, action="reland",
                                            reason=reason))
            return
        self._decide("reland", reason)

    def skip(self, reason: str) -> None:
        if not reason.strip():
            raise ValueError("a reason is needed to skip a site")
        self._decide("skip", reason)

    def give_up(self, reason: str) -> None:
        self._decide("give-up", reason)

    def note(self, text: str, die: tuple[int, int] | None = None, site: str | None = None) -> None:
        with self._lock:
            pos = self._last.step if self._last else self.next_step
            where = (list(die), site) if die is not None and site is not None else (
                (list(pos.die), pos.site) if pos else (None, None))
            seq = self.journal.append("note", {"text": text, "die": where[0], "site": where[1]})
            self._emit(NoteAdded(seq=seq, text=text))

    def goto(self, die: tuple[int, int], reason: str = "") -> None:
        """docs/engine.md: PROBING only; the die must be planned and have a site left."""
        with self._lock:
            self.calls.append("goto")
            die = tuple(die)
            if self._phase is not Phase.PROBING:
                raise RuntimeError(f"cannot go to a die in phase {self._phase.value}")
            if die not in DIES:
                raise RuntimeError(f"die {die[0]},{die[1]} is not in the plan")
            if all((die, s) in self._finished for s, _ in SITES):
                raise RuntimeError(f"die {die[0]},{die[1]}: nothing left to land on")
            payload = {"die": list(die), **({"reason": reason} if reason else {})}
            seq = self.journal.append("goto", payload)
            self._walk_from = DIES.index(die) * len(SITES)
            self._emit(JumpedToDie(seq=seq, die=die, reason=reason))

    def request_drift(self) -> None:
        self._drift_due = True

    def recalibrate(self, reason: str) -> None:
        with self._lock:
            seq = self.journal.append("recal-requested", {"reason": reason})
            self._cal_n += 1
            self._std, self._last_std = {}, None
            self._set_phase(Phase.CALIBRATING, seq)

    def close(self, completed: bool | None = None, cause: str | None = None) -> None:
        with self._lock:
            if completed is None:
                completed = self._phase is Phase.DONE
            seq = self.journal.append("session-closed", {"completed": completed, "summary": {}, "cause": cause})
            self.journal.closed = True
            self._emit(SessionClosed(seq=seq, completed=completed))
