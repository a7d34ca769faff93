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
            self.notify(f"{event.where}: {event.message}", title="instrument", severity="error", timeout=10)
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
            self.push_screen(Failure("Could not open the session", text), self._open_failed)
        elif worker.group == "closing":
            self.push_screen(Failure("Could not close the journal cleanly", text), lambda _: self.exit(1))
        else:
            self.push_screen(Failure(f"{worker.description or worker.name} failed", text))
            self.read_journal()  # an instrument error is journaled; show it

    def _open_failed(self, _: None) -> None:
        if self.intake is not None:
            self.switch_screen(Intake(self.intake))
        else:
            self.exit(1)

    # ---------------------------------------------------------------- closing

    def action_quit(self) -> None:
        self.action_close_session()

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
        cause = getattr(self, "close_cause", None)  # a signal's name, set by probelog.tui.interrupts
        engine.close(cause=cause) if cause else engine.close()
        bench = getattr(engine, "bench", None)
        if bench is not None:
            bench.close()
        self.post_message(SessionClosed(kind_name(engine.phase) == "DONE"))

    def on_session_closed(self, message: SessionClosed) -> None:
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
    if app.return_code not in (None, 0):
        return int(app.return_code)
    return int(result or 0)
