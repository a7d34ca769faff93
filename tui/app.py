"""The bench UI's switchboard: opens the engine in a worker, routes between
screens by the engine's phase, tails the journal, closes the session on quit.

Public API::

    build_app(engine_factory, *, show_cautions=True, intake=None) -> ProbelogApp
    run_app(engine_factory, *, intake=None) -> int

``engine_factory`` runs inside a thread worker (it opens instruments). It takes no
argument, or, when ``intake`` (a SessionRequest of defaults) is given, the
SessionRequest the operator filled in on the intake screen. When it has a
``confirm`` keyword, it gets ``ask_operator(prompt) -> bool``, callable from any
thread (for a manual prober).
"""

from __future__ import annotations

import inspect
import threading
from functools import partial
from typing import Any, Callable, Iterable

from textual import work
from textual.app import App, SystemCommand
from textual.binding import Binding
from textual.screen import ModalScreen, Screen
from textual.worker import Worker, WorkerState

from probelog import events as ev
from probelog.engine.protocol import EngineProtocol
from probelog.tui.messages import EngineNotified, EngineReady, JournalGrew, SessionClosed
from probelog.tui.screens.base import BenchScreen
from probelog.tui.screens.calibrate import Calibrate
from probelog.tui.screens.cautions import Cautions
from probelog.tui.screens.dialogs import Confirm, Failure
from probelog.tui.screens.intake import Intake, SessionRequest
from probelog.tui.screens.opening import Opening
from probelog.tui.screens.probe import Probe
from probelog.tui.widgets.logbook import JournalTail
from probelog.tui.widgets.where_bar import kind_name

EngineFactory = Callable[..., EngineProtocol]

SCREEN_FOR_PHASE = {"CALIBRATING": Calibrate, "VERIFYING": Calibrate,
                    "PROBING": Probe, "DECIDING": Probe, "DONE": Probe}


class ProbelogApp(App[int]):
    """probelog at the bench."""

    CSS_PATH = "app.tcss"
    TITLE = "probelog"
    BINDINGS = [
        Binding("ctrl+q", "close_session", "quit", show=False, priority=True,
                tooltip="Close the journal and quit"),
    ]

    def __init__(self, engine_factory: EngineFactory, *, show_cautions: bool = True,
                 intake: SessionRequest | None = None) -> None:
        super().__init__()
        self.engine_factory = engine_factory
        self.show_cautions = show_cautions
        self.intake = intake
        self.engine: EngineProtocol | None = None
        self.journal_events: list[ev.Event] = []
        self._tail: JournalTail | None = None
        self._session_closing = False
        self.close_cause: str | None = None  # a signal's name, set by probelog.tui.interrupts
        self.farewell = ""  # printed by run_app once the terminal is back

    # ---------------------------------------------------------------- opening

    def on_mount(self) -> None:
        if self.intake is not None:
            self.push_screen(Intake(self.intake))
        else:
            self.push_screen(Opening())
            self.open_engine(None)

    def on_intake_requested(self, message: Intake.Requested) -> None:
        what = (f"Reopening {message.request.resume.name}…" if message.request.resume
                else "Opening the bench and a new journal…")
        self.switch_screen(Opening(what))
        self.open_engine(message.request)

    @work(thread=True, exclusive=True, exit_on_error=False, group="open", description="Opening the session")
    def open_engine(self, request: SessionRequest | None) -> None:
        args = () if request is None else (request,)
        kwargs = {"confirm": self.ask_operator} if _takes_confirm(self.engine_factory) else {}
        engine = self.engine_factory(*args, **kwargs)
        tail = JournalTail(engine.session_dir / "journal.jsonl")
        events = tail.read_new()
        cautions = None
        if self.show_cautions and not any(e.type == "cautions-shown" for e in events):
            cautions = engine.show_cautions()
            events += tail.read_new()
        self._tail = tail
        self.post_message(EngineReady(engine, cautions, events))

    def on_engine_ready(self, message: EngineReady) -> None:
        self.engine = message.engine
        self.journal_events.extend(message.events)
        self.sub_title = f"session {message.engine.session_dir.name}"
        message.engine.subscribe(self._engine_event)
        self.route()
        if message.cautions:
            self.push_screen(Cautions(message.cautions), self._cautions_read)

    def ask_operator(self, prompt: str) -> bool:
        """Ask a yes/no question from a worker thread and wait for the answer (a
        manual prober asks the operator to move the probes this way)."""
        answered = threading.Event()
        box: dict[str, bool] = {}

        def show() -> None:
            def done(yes: bool | None) -> None:
                box["yes"] = bool(yes)
                answered.set()
            self.push_screen(Confirm(prompt), done)

        self.call_from_thread(show)
        answered.wait()
        return box["yes"]

    def _cautions_read(self, ok: bool | None) -> None:
        if not ok:
            self._start_closing()

    def _engine_event(self, event: Any) -> None:
        """Engine subscriber; runs on the worker thread that called the engine."""
        self.post_message(EngineNotified(event))

    # ---------------------------------------------------------------- routing

    def route(self) -> None:
        """Put the screen the engine's phase calls for under any open dialog."""
        if self.engine is None:
            return  # nothing to route to before the session is open
        wanted = SCREEN_FOR_PHASE[kind_name(self.engine.phase)]
        base = next((s for s in reversed(self.screen_stack) if not isinstance(s, ModalScreen)), None)
        if isinstance(base, wanted):
            base.refresh_view()
            return
        if isinstance(self.screen, ModalScreen):
            return  # routed again when the dialog closes and the next event arrives
        self.switch_screen(wanted())

    def on_engine_notified(self, message: EngineNotified) -> None:
        event = message.event
        name = type(event).__name__
        if name == "PhaseChanged":
            self.route()
        elif name == "RecalibrationAdvised":
            self.notify(f"Recalibration advised: {event.reason}  (press c)", severity="warning", timeout=10)
        elif name == "InstrumentFailed":
            title, todo = instrument_advice(event.where)
            for screen in self.screen_stack:
                if isinstance(screen, BenchScreen):
                    screen.instrument_failed(title, todo, event.message)
        self.read_journal()

    @work(thread=True, exclusive=False, exit_on_error=False, group="journal", description="Reading the journal")
    def read_journal(self) -> None:
        if self._tail is not None:
            events = self._tail.read_new()
            if events:
                self.post_message(JournalGrew(events))

    def on_journal_grew(self, message: JournalGrew) -> None:
        self.journal_events.extend(message.events)
        for screen in self.screen_stack:
            if isinstance(screen, BenchScreen):
                screen.journal_grew(message.events)

    # ---------------------------------------------------------------- failures

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.state is WorkerState.ERROR:
            self.worker_failed(event.worker)

    def worker_failed(self, worker: Worker) -> None:
        """The one place a failed worker is reported: a modal saying what went wrong.
        (Worker.StateChanged does not bubble; screens forward their failures here.)"""
        error = worker.error
        text = f"{type(error).__name__}: {error}"
        if worker.group == "open":
            self.push_screen(Failure("Could not open the session", text,
                                     "Check the instruments' addresses and that they are on, then start again."),
                             self._open_failed)
        elif worker.group == "closing":
            self.push_screen(Failure("Could not close the journal cleanly", text,
                                     "Everything acknowledged is on disk; resume the session to finish it."),
                             lambda _: self.exit(1))
        elif (where := getattr(error, "where", None)) is not None:
            # an instrument failed (probelog.engine InstrumentError): the board holds the error state too
            title, todo = instrument_advice(where)
            inner = getattr(error, "error", None)
            detail = f"{type(inner).__name__}: {inner}" if inner is not None else text
            for screen in self.screen_stack:
                if isinstance(screen, BenchScreen):
                    screen.instrument_failed(title, todo, detail)
            self.push_screen(Failure(title, detail, todo))
            self.read_journal()  # an instrument error is journaled; show it
        else:
            title, todo = STEP_FAILED.get(worker.description, (f"{worker.description or worker.name} failed", ""))
            self.push_screen(Failure(title, text, todo))
            self.read_journal()

    def _open_failed(self, _: None) -> None:
        if self.intake is not None:
            self.switch_screen(Intake(self.intake))
        else:
            self.exit(1)

    # ---------------------------------------------------------------- closing

    async def action_quit(self) -> None:
        # App.action_quit (overridden: it would exit without closing the journal) is a
        # coroutine. After the next repaint: from the command palette, a dialog pushed at once
        # would be taken down with the palette
        self.call_after_refresh(self.action_close_session)

    def action_close_session(self) -> None:
        if self._session_closing:
            return
        if self.engine is None:
            self.exit(0)
            return
        done, total = self.engine.progress
        state = ("every site is decided: the session is marked complete" if done >= total else
                 f"{done}/{total} sites decided: the session stays open to resume later")
        self.push_screen(Confirm(f"Close the journal and quit?\n{state}"),
                         lambda yes: self._start_closing() if yes else None)

    def _start_closing(self) -> None:
        if self.engine is None:
            self.exit(0)
            return
        self._session_closing = True
        self.notify("closing the journal…", timeout=3)
        self.close_engine()

    @work(thread=True, exclusive=True, exit_on_error=False, group="closing", description="Closing the journal")
    def close_engine(self) -> None:
        engine = self.engine
        if engine is None:
            return  # _start_closing exits at once without an engine
        cause = self.close_cause
        engine.close(cause=cause) if cause else engine.close()
        bench = getattr(engine, "bench", None)
        if bench is not None:
            bench.close()
        self.post_message(SessionClosed(kind_name(engine.phase) == "DONE"))

    def on_session_closed(self, message: SessionClosed) -> None:
        assert self.engine is not None  # posted by close_engine, which needs one
        folder = self.engine.session_dir
        if message.completed:
            self.farewell = f"probelog: session complete; journal and data in {folder}"
        else:
            self.farewell = (f"probelog: session stopped; journal and data in {folder}\n"
                             f"  resume it with: probelog run --resume {folder}")
        self.exit(0)

    # ---------------------------------------------------------------- palette

    def get_system_commands(self, screen: Screen) -> Iterable[SystemCommand]:
        yield from super().get_system_commands(screen)
        for binding in getattr(screen, "BINDINGS", []):
            if not isinstance(binding, Binding) or not binding.description:
                continue
            if binding.action.startswith("app."):
                continue
            action = binding.action
            if screen.check_action(action.split("(")[0], ()) is not True:
                continue
            key = binding.key.split(",")[0]
            yield SystemCommand(f"{binding.description} [{key}]", binding.tooltip or binding.description,
                                partial(screen.run_action, action))


def instrument_advice(where: str) -> tuple[str, str]:
    """(title, what to do) for a failed instrument, ``where`` as the engine names it."""
    noun = {"vna": "VNA", "prober": "prober"}.get(str(where).lower(), f"instrument ({where})")
    return (f"The {noun} failed during the landing",
            f"Nothing was recorded for this landing; the probes are lifted. Check the {noun} and its "
            "cable, then: enter retries (the link is reopened), s skips the site, x skips the die.")


# titles and advice for the other steps that can fail, by worker description
STEP_FAILED = {
    "Solving the calibration": ("The calibration could not be solved",
                                "Re-land the standards that failed, or redo the calibration (x)."),
    "Recording a decision": ("Recording a decision failed",
                             "The decision was not journaled; try it again, or quit and resume."),
    "Going to a die": ("Could not go to that die", "The walk goes on where it was; pick another die."),
    "Landing and sweeping": ("The landing could not be made",
                             "Nothing was recorded for it; try again, or skip the site."),
}


def _takes_confirm(factory: EngineFactory) -> bool:
    try:
        return "confirm" in inspect.signature(factory).parameters
    except (TypeError, ValueError):
        return False


def build_app(engine_factory: EngineFactory, *, show_cautions: bool = True,
              intake: SessionRequest | None = None) -> ProbelogApp:
    """The app, not yet running. See the module docstring for the factory."""
    return ProbelogApp(engine_factory, show_cautions=show_cautions, intake=intake)


def run_app(engine_factory: EngineFactory, *, intake: SessionRequest | None = None) -> int:
    """Run the app in this terminal until the journal is closed; the exit code."""
    from probelog.tui.interrupts import report, ui_signals

    app = build_app(engine_factory, intake=intake)
    with ui_signals(app) as stop:  # SIGTERM, SIGHUP (terminal closed): close the session, then exit
        result = app.run()
    if stop.cause is not None:
        where = getattr(app.engine, "session_dir", None)
        report(f"probelog: stopped by {stop.cause}; the session was closed as interrupted"
               + (f", resume with --resume {where}" if where else ""))
        return stop.exit_code
    if app.farewell:
        print(app.farewell)
    if app.return_code not in (None, 0):
        return int(app.return_code)
    return int(result or 0)
