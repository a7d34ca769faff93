"""What the two bench screens (calibrate, probe) share: the engine workers, the
busy flag that greys out keys while the instrument works, and the common keys.

Every engine call runs in the thread worker group ``bench`` (one at a time) and
reports back with a past-tense message; a failed call surfaces through
Worker.StateChanged, handled once in the app.
"""

from __future__ import annotations

from typing import Any

from textual import work
from textual.reactive import var
from textual.screen import Screen
from textual.worker import Worker, WorkerState

from probelog import events as ev
from probelog.engine.protocol import EngineProtocol
from probelog.state import FINISHED
from probelog.tui.host import host
from probelog.tui.messages import CalibrationSolved, ChecksFinished, DecisionRecorded, LandingStarted, SweepMeasured
from probelog.tui.screens.dialogs import AskReason, KeysHelp, help_rows
from probelog.tui.widgets.verdict_board import VerdictBoard
from probelog.tui.widgets.where_bar import kind_name
from probelog.tui.widgets.logbook import Logbook
from probelog.tui.widgets.smith import SmithChart

NOTE_PRESETS = ("pad scrubbed, marks visible", "debris near the pads", "probe tips cleaned",
                "planarity adjusted")


REACTIVE_KINDS = ("open", "short", "open-stub", "short-stub")


def turns_matter(outcome: Any) -> bool:
    """Whether the direction of rotation on the Smith chart says something here."""
    return outcome.step.site_kind in REACTIVE_KINDS


def reflections(outcome: Any) -> tuple[list[tuple[str, Any]], Any]:
    """(label, Gamma over frequency) of each port, from the corrected sweep when
    there is one, else the raw; plus the network used."""
    net = outcome.corrected if outcome.corrected is not None else outcome.raw
    s = net.s
    traces = [("S11", s[:, 0, 0])]
    if s.shape[1] > 1:
        traces.append(("S22", s[:, 1, 1]))
    return traces, net


# How long an instrument step may run before the screen says so (s): shorter steps
# would only flash; every real sweep is longer.
BUSY_SHOW_S = 0.05


class BenchScreen(Screen):
    """Base of the calibrate and probe screens."""

    # a var, not a reactive: the flag greys keys (refresh_bindings below) and must
    # not repaint the whole screen each time a worker starts or ends
    busy: var[bool] = var(False)

    @property
    def engine(self) -> EngineProtocol:
        engine = host(self.app).engine
        assert engine is not None  # the app opens a bench screen only once the engine is open
        return engine

    # ---------------------------------------------------------------- workers

    @work(thread=True, exclusive=True, exit_on_error=False, group="bench", description="Landing and sweeping")
    def measure_next(self, before: str = "") -> None:
        """Optionally record a decision first (reland / drift), then measure the next step."""
        engine = self.engine
        if before == "reland":
            engine.reland()
            self.post_message(DecisionRecorded("reland"))  # the engine re-lands before a due drift check
        elif before == "drift":
            engine.request_drift()
        self._measure_one(engine)

    def _measure_one(self, engine: Any) -> None:
        self.post_message(LandingStarted(engine.next_step))
        outcome = engine.measure()
        self.post_message(SweepMeasured(outcome))
        self.post_message(ChecksFinished(outcome))

    @work(thread=True, exclusive=True, exit_on_error=False, group="bench", description="Solving the calibration")
    def solve_calibration(self) -> None:
        self.post_message(CalibrationSolved(self.engine.compute_calibration()))

    @work(thread=True, exclusive=True, exit_on_error=False, group="bench", description="Recording a decision")
    def record(self, action: str, reason: str = "", then_measure: bool = False, die: Any = None,
               site: str | None = None) -> None:
        """Journal one operator decision through the engine. ``accept`` with a
        reason keeps a FAILED landing; ``skip-die`` and ``note`` use ``die``
        (and ``site``)."""
        engine = self.engine
        calls = {
            "accept": lambda: engine.accept(reason),
            "skip": lambda: engine.skip(reason),
            "skip-die": lambda: self._skip_die(engine, die, reason),
            "note": lambda: engine.note(reason, tuple(die) if die is not None else None, site),
            "recalibrate": lambda: engine.recalibrate(reason),
            "cal-accept": lambda: engine.accept_calibration(),
            "cal-redo": lambda: engine.redo_calibration(reason),
        }
        calls[action]()
        self.post_message(DecisionRecorded(action, reason))
        if then_measure and engine.next_step is not None:
            self._measure_one(engine)

    @staticmethod
    def _skip_die(engine: Any, die: Any, reason: str) -> None:
        """The engine skips a die while probing: a landing waiting for a decision
        on it is skipped first, with the same reason."""
        if kind_name(engine.phase) == "DECIDING":
            engine.skip(reason)
        if engine.wafer_status.get(tuple(die)) not in FINISHED:
            engine.skip_die(die, reason)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.state is WorkerState.ERROR:
            host(self.app).worker_failed(event.worker)
        if event.worker.group == "bench":
            self.busy = event.state in (WorkerState.PENDING, WorkerState.RUNNING)
            if not self.busy:
                self.refresh_view()

    def watch_busy(self, busy: bool) -> None:
        # Keys are refused at once (check_action reads ``busy``); greying them on
        # screen waits BUSY_SHOW_S, so a fast landing costs no footer repaint while
        # the worker runs (the UI thread and the worker share the GIL).
        if busy:
            self.set_timer(BUSY_SHOW_S, self._grey_if_still_busy)
        else:
            self.refresh_bindings()

    def _grey_if_still_busy(self) -> None:
        if self.busy:
            self.refresh_bindings()

    # ---------------------------------------------------------------- views

    def refresh_view(self) -> None:
        """Redraw what the engine's state says (overridden by each screen)."""

    def journal_grew(self, events: list[ev.Event]) -> None:
        for log in self.query(Logbook):
            log.sync(host(self.app).journal_events)

    def on_mount(self) -> None:
        for log in self.query(Logbook):
            log.sync(host(self.app).journal_events)
        self.refresh_view()

    # ---------------------------------------------------------------- shared keys

    def ask_then_record(self, action: str, question: str, presets, title: str = "", **kwargs: Any) -> None:
        """Ask for a reason (a digit picks a preset), then journal ``action`` with it;
        nothing is recorded when the operator backs out."""
        def done(reason: str | None) -> None:
            if reason:
                self.record(action, reason, **kwargs)
        self.app.push_screen(AskReason(question, presets, title=title), done)

    def shown_position(self) -> tuple[Any, str] | None:
        """(die, site) of what the screen shows: overridden by the probe screen."""
        return None

    def action_note(self) -> None:
        # the note goes where the operator is looking: the landing on the board
        # (decided or not), else the next site
        pos = self.shown_position()
        where = f"die {pos[0][0]},{pos[0][1]} · {pos[1]}" if pos else "the session"
        self.ask_then_record("note", f"Note for the journal, at {where}:", NOTE_PRESETS,
                             die=pos[0] if pos else None, site=pos[1] if pos else None)

    def action_toggle_polar(self) -> None:
        for chart in self.query(SmithChart):
            chart.toggle_mode()

    def action_journal(self) -> None:
        from probelog.tui.screens.journal_view import JournalView

        self.app.push_screen(JournalView(list(host(self.app).journal_events)))

    def action_keys(self) -> None:
        self.app.push_screen(KeysHelp(f"keys · {self.sub_title}", help_rows(self)))

    def on_screen_resume(self) -> None:
        # a dialog closed: the engine's phase may have moved on while it was up
        if host(self.app).engine is not None:
            host(self.app).route()

    def instrument_failed(self, title: str, todo: str, detail: str) -> None:
        """An instrument call failed: the board says so until the operator acts."""
        for board in self.query(VerdictBoard):
            board.show_error(title, todo, detail)
        self.refresh_bindings()
