"""Run a session without a person at the keyboard.

Policy: calibrate, re-landing a standard whose contact check failed up to
``retries`` times; redo a calibration that did not solve, whose standards failed
contact or whose verification or agreement failed up to ``retries`` times, then
stop with one line and exit 1 (a cal that cannot be right is never accepted); for every site accept a landing that did not fail, re-land a failed
one up to ``retries`` times, then give up on it (recorded as failed) and go on.
Instrument errors are retried the same way. A failed drift check recalibrates
once per run; later drift failures are only recorded.

One line a landing goes to ``out`` (a rich Console or any text stream), with a
progress bar when ``out`` is a terminal; the last line is the session folder.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Callable, TextIO

from probelog.session import (
    Engine,
    EngineEvent,
    InstrumentError,
    Phase,
    RecalibrationAdvised,
    StepKind,
)
from probelog.verdicts import Verdict

if TYPE_CHECKING:  # annotations only: rich stays a lazy import
    from rich.console import Console
    from rich.progress import Progress, TaskID

    from probelog.engine.types import LandingOutcome, Step

StepKey = tuple[StepKind, tuple[int, int], str]  # (kind, die, site) of a step


@dataclass
class Summary:
    """What a headless run did. ``exit_code`` is 0 when the plan completed."""

    completed: bool
    accepted: int
    skipped: int
    failed: int
    landings: int
    relands: int
    instrument_errors: int
    recalibrations: int
    session_dir: Path
    accepted_despite_fail: int = 0  # FAIL landings kept with a reason (never by this runner's policy)

    @property
    def exit_code(self) -> int:
        return 0 if self.completed else 1


class _Out:
    """Lines to a rich Console (with a progress bar on a terminal) or a stream."""

    def __init__(self, out: TextIO | Console | None) -> None:
        from rich.console import Console

        self.console = out if isinstance(out, Console) else Console(
            file=out or sys.stdout, highlight=False, soft_wrap=True)
        self.progress: Progress | None = None
        self.task: TaskID | None = None

    def start(self, total: int, done: int) -> None:
        if not self.console.is_terminal:
            return
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

        self.progress = Progress(TextColumn("sites"), BarColumn(), MofNCompleteColumn(),
                                 console=self.console, transient=True)
        self.task = self.progress.add_task("sites", total=total, completed=done)
        self.progress.start()

    def advance(self, done: int) -> None:
        if self.progress is not None and self.task is not None:  # both set by start()
            self.progress.update(self.task, completed=done)

    def line(self, text: str) -> None:
        self.console.print(text, markup=False, highlight=False)
        if not self.console.is_terminal:
            self.console.file.flush()

    def stop(self) -> None:
        if self.progress is not None:
            self.progress.stop()


def _fmt_checks(outcome: LandingOutcome) -> str:
    bad = [c for c in outcome.checks if c.verdict in (Verdict.FAIL, Verdict.WARN)]
    return "; ".join(f"{c.name} {c.verdict.value}: {c.message}" for c in bad[:2])


def run_headless(engine: Engine, retries: int = 2, out: TextIO | None = None,
                 close: bool = True, stop: Callable[[], str | None] | None = None) -> Summary:
    """Drive ``engine`` to the end of its plan with the policy above.

    ``retries``: re-landings of a failed site before giving up (>= 0). Closes the
    session (``session-closed``) when ``close`` is true; never closes the bench.
    ``stop`` is asked before every step: a cause (e.g. "SIGTERM") ends the run
    there, the step before it finished and journaled; the close (probes
    separated) journals that cause unless the plan was complete anyway.
    """
    if retries < 0:
        raise ValueError(f"retries must be >= 0, got {retries}")
    printer = _Out(out)
    advised: list[str] = []
    counts = {"relands": 0, "errors": 0, "recals": 0, "landings": 0}

    def on_event(ev: EngineEvent) -> None:
        if isinstance(ev, RecalibrationAdvised):
            advised.append(ev.reason)

    engine.subscribe(on_event)
    engine.show_cautions()
    done, total = engine.progress
    printer.start(total, done)
    printer.line(f"session {engine.session_id}: {total - done} site landings to go")
    # failed landings / instrument errors per step (kind, die, site): a drift
    # re-measure in between does not restart a site's count
    fails: dict[StepKey | tuple[()] | None, int] = {}
    key: StepKey | tuple[()] | None = ()
    cal_redos = 0  # calibrations redone in a row because their verification failed

    def reland_after(o: LandingOutcome) -> Callable[[], object]:
        return lambda: engine.reland(f"headless: {_fmt_checks(o)}")

    def retry(failed: bool, again: Callable[[], object]) -> bool:
        """Call ``again`` (re-land) while the step keeps failing, up to ``retries``
        times; False (and the count reset) once it passed or the tries are used up."""
        if failed and fails.get(key, 0) < retries:
            fails[key] = fails.get(key, 0) + 1
            counts["relands"] += 1
            again()
            return True
        fails.pop(key, None)
        return False
    try:
        while engine.phase is not Phase.DONE:
            if stop is not None and stop() is not None:
                printer.line(f"stopping: {stop()}")
                break
            phase = engine.phase
            if phase is Phase.CALIBRATING and engine.next_step is None:
                cal = engine.compute_calibration()
                agree = ""
                if cal.agreement:
                    agree = f", {cal.agreement['other_method']} agrees within {cal.agreement['worst']:.4f}"
                printer.line(f"cal {cal.cal_id} {cal.method}: {cal.verdict.value} ({cal.message}{agree})")
                continue
            if phase is Phase.VERIFYING:
                pending = engine.pending_cal
                why = engine.cal_refusal(pending)
                if why is None:
                    cal_redos = 0
                    engine.accept_calibration("headless: solved, standards landed, verification passed")
                elif cal_redos < retries:
                    cal_redos += 1
                    engine.redo_calibration(f"headless: {why}")
                    printer.line(f"{why}: redo {cal_redos}/{retries}")
                else:  # a cal that cannot be right is never accepted: stop, exit 1
                    printer.line(f"stopped: {why} (after {cal_redos} redos)")
                    break
                continue
            step = engine.next_step
            key = (step.kind, step.die, step.site) if step is not None else None
            try:
                outcome = engine.measure()
            except InstrumentError as exc:
                counts["errors"] += 1
                fails[key] = fails.get(key, 0) + 1
                printer.line(f"instrument error ({exc}); retry {fails[key]}/{retries + 1}")
                if fails[key] > retries:
                    fails.pop(key, None)
                    if step is not None and step.kind is StepKind.SITE:
                        engine.give_up(f"headless: instrument error after {retries + 1} tries: {exc}")
                        printer.line(f"{_where(step)} given up after instrument errors")
                    else:
                        raise  # a cal standard or drift step cannot be given up
                continue
            counts["landings"] += 1
            step = outcome.step
            failed = outcome.verdict is Verdict.FAIL
            if step.kind is StepKind.CAL_STANDARD:
                line = f"cal {step.standard:<8} {_where(step)} L{step.landing} {outcome.verdict.value}"
                if retry(failed, reland_after(outcome)):
                    printer.line(f"{line} -> re-land ({_fmt_checks(outcome)})")
                else:
                    printer.line(f"{line} {_fmt_checks(outcome)}".rstrip())
                continue
            if step.kind is StepKind.DRIFT:
                printer.line(f"drift {_where(step)} {outcome.verdict.value} {_fmt_checks(outcome)}".rstrip())
                landed_badly = any(c.name == "contact" and c.verdict is Verdict.FAIL for c in outcome.checks)
                # re-land the reference when its contact failed: that is the landing, not the cal
                if retry(landed_badly, engine.request_drift):
                    continue
                if advised:
                    reason = advised.pop()
                    if counts["recals"] == 0:
                        counts["recals"] += 1
                        printer.line(f"recalibrating: {reason}")
                        engine.recalibrate(f"headless: {reason}")
                    advised.clear()
                continue
            d, t = engine.progress
            line = f"[{d + 1}/{t}] {_where(step)} L{step.landing} {outcome.verdict.value}"
            if not failed:
                engine.accept()
                fails.pop(key, None)
                printer.line(line)
            elif retry(failed, reland_after(outcome)):
                printer.line(f"{line} -> re-land ({_fmt_checks(outcome)})")
            else:
                engine.give_up(f"headless: still failing after {retries} re-landings: {_fmt_checks(outcome)}")
                printer.line(f"{line} -> given up ({_fmt_checks(outcome)})")
            printer.advance(engine.progress[0])
    finally:
        printer.stop()
    summary_d = engine.summary()
    completed = engine.phase is Phase.DONE
    summary = Summary(completed, summary_d["accepted"], summary_d["skipped"], summary_d["failed"],
                      counts["landings"], counts["relands"], counts["errors"], counts["recals"],
                      engine.session_dir, summary_d["accepted_despite_fail"])
    if close:
        engine.close(completed, cause=None if completed or stop is None else stop())
    despite = f", {summary.accepted_despite_fail} accepted despite FAIL" if summary.accepted_despite_fail else ""
    printer.line(f"done: {summary.accepted} accepted{despite}, {summary.failed} failed, {summary.skipped} skipped; "
                 f"{summary.relands} re-landings, {summary.instrument_errors} instrument errors, "
                 f"{summary.recalibrations} recalibrations")
    printer.line(str(engine.session_dir))
    return summary


def _where(step: Step) -> str:
    return f"die {step.die[0]},{step.die[1]} {step.site}"
