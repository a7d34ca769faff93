"""Intake: who probes which wafer on which bench with which plan; or pick an
unfinished session to resume. Produces a :class:`SessionRequest`."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Button, Header, Input, Label, OptionList, Select, Static
from textual.widgets.option_list import Option

from probelog import events as ev
from probelog.tui.host import host
from probelog.tui.widgets.bench_footer import BenchFooter

BENCH_KINDS = (
    ("simulated bench (in-process)", "sim"),
    ("VISA resources (VNA + prober)", "visa"),
    ("manual prober (I move the probes)", "manual"),
    ("watched folder (I save Touchstone files)", "folder"),
)


@dataclass(frozen=True)
class SessionRequest:
    """What the operator asked for on the intake screen.

    ``resume`` is a session folder to reopen; when set the other fields are
    informative only (the journal already says who, what and where).
    """

    operator: str = ""
    wafer: str = ""
    lot: str = ""
    probes: tuple[str, ...] = ()
    bench: str = "sim"
    vna_resource: str = ""
    prober_resource: str = ""
    folder: str = ""
    plan: str = ""
    sessions_root: str = "sessions"
    resume: Path | None = None
    extra: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Unfinished:
    """A session folder whose journal has no completed ``session-closed``."""

    path: Path
    operator: str
    wafer: str
    events: int
    closed: bool


def find_unfinished(root: Path) -> list[Unfinished]:
    """Sessions under ``root`` that can be resumed, newest folder first: not an
    export bundle (it holds a copy of a journal beside its manifest.csv), not a
    session whose journal says it was completed."""
    found = []
    for journal in sorted(Path(root).glob("*/journal.jsonl"), reverse=True):
        if journal.parent.name.startswith("."):
            continue  # a start killed before its folder was renamed into place
        if (journal.parent / "manifest.csv").exists():
            continue  # an analyst bundle: resuming it would write landings into it
        try:
            events = ev.decode_lines(journal.read_bytes(), str(journal))
        except (OSError, ev.EventError):
            continue
        opened = next((e.data for e in events if isinstance(e.data, ev.SessionOpened)), None)
        closed = next((e.data for e in reversed(events) if isinstance(e.data, ev.SessionClosed)), None)
        if closed is not None and closed.completed:
            continue
        found.append(Unfinished(journal.parent, opened.operator if opened else "?",
                                opened.wafer if opened else "?", len(events), closed is not None))
    return found


class Intake(Screen):
    """The form. ctrl+s starts a new session; enter on a listed session resumes it."""

    CSS_PATH = "intake.tcss"
    BINDINGS = [
        Binding("ctrl+s", "start", "start session", tooltip="Open the bench and start a new session"),
        Binding("ctrl+r", "resume", "resume selected", tooltip="Reopen the highlighted unfinished session"),
        Binding("escape", "app.quit", "quit", tooltip="Leave without starting"),
    ]

    class Requested(Message):
        """The operator asked to open a session (new or resumed)."""

        def __init__(self, request: SessionRequest) -> None:
            super().__init__()
            self.request = request

    def __init__(self, defaults: SessionRequest) -> None:
        super().__init__()
        self.defaults = defaults
        self.unfinished: list[Unfinished] = []

    def compose(self) -> ComposeResult:
        d = self.defaults
        yield Header()
        with Horizontal(id="intake-body"):
            with VerticalScroll(id="intake-form"):
                yield Static("NEW SESSION", classes="section")
                for label, ident, value in (
                    ("operator", "operator", d.operator),
                    ("wafer", "wafer", d.wafer),
                    ("lot", "lot", d.lot),
                    ("probe ids (comma separated)", "probes", ", ".join(d.probes)),
                    ("plan file", "plan", d.plan),
                ):
                    yield Label(label)
                    yield Input(value=value, id=f"in-{ident}")
                yield Label("bench")
                yield Select(BENCH_KINDS, value=d.bench, allow_blank=False, id="in-bench")
                with Vertical(id="visa-fields"):
                    yield Label("VNA resource")
                    yield Input(value=d.vna_resource, placeholder="TCPIP::host::port::SOCKET", id="in-vna")
                    yield Label("prober resource")
                    yield Input(value=d.prober_resource, id="in-prober")
                with Vertical(id="folder-fields"):
                    yield Label("watched folder")
                    yield Input(value=d.folder, id="in-folder")
                yield Button("Start  (ctrl+s)", id="start", variant="primary")
            with Vertical(id="intake-resume"):
                yield Static("RESUME AN UNFINISHED SESSION", classes="section")
                yield OptionList(id="resume-list")
                yield Static("", id="resume-hint")
        yield BenchFooter()

    def on_mount(self) -> None:
        self.title = "probelog"
        self.sub_title = "intake"
        self._show_bench_fields(self.defaults.bench)
        self.query_one("#in-operator", Input).focus()
        self._scan()

    @work(thread=True, exclusive=True, exit_on_error=False, group="scan", description="Looking for unfinished sessions")
    def _scan(self) -> None:
        found = find_unfinished(Path(self.defaults.sessions_root))
        self.app.call_from_thread(self._show_unfinished, found)

    def _show_unfinished(self, found: list[Unfinished]) -> None:
        self.unfinished = found
        ol = self.query_one("#resume-list", OptionList)
        ol.clear_options()
        for u in found:
            state = "quit" if u.closed else "interrupted"
            ol.add_option(Option(f"{u.path.name}  {u.wafer}  {u.operator}  ({u.events} events, {state})"))
        self.query_one("#resume-hint", Static).update(
            "highlight one, then ctrl+r" if found else f"none under {self.defaults.sessions_root}/")

    def on_worker_state_changed(self, event) -> None:
        if event.state.name == "ERROR":
            host(self.app).worker_failed(event.worker)

    @on(Select.Changed, "#in-bench")
    def _bench_changed(self, event: Select.Changed) -> None:
        self._show_bench_fields(str(event.value))

    def _show_bench_fields(self, kind: str) -> None:
        self.query_one("#visa-fields").display = kind == "visa"
        self.query_one("#folder-fields").display = kind == "folder"

    def _value(self, ident: str) -> str:
        return self.query_one(f"#in-{ident}", Input).value.strip()

    @on(Button.Pressed, "#start")
    def action_start(self) -> None:
        if not self._value("operator"):
            self.notify("Who is probing? The operator field is needed.", severity="warning")
            self.query_one("#in-operator", Input).focus()
            return
        request = replace(
            self.defaults,
            operator=self._value("operator"), wafer=self._value("wafer"), lot=self._value("lot"),
            probes=tuple(p.strip() for p in self._value("probes").split(",") if p.strip()),
            bench=str(self.query_one("#in-bench", Select).value), plan=self._value("plan"),
            vna_resource=self._value("vna"), prober_resource=self._value("prober"),
            folder=self._value("folder"), resume=None,
        )
        self.post_message(self.Requested(request))

    @on(OptionList.OptionSelected, "#resume-list")
    def action_resume(self) -> None:
        ol = self.query_one("#resume-list", OptionList)
        if ol.highlighted is None or not self.unfinished:
            self.notify("No unfinished session is highlighted.", severity="warning")
            return
        chosen = self.unfinished[ol.highlighted]
        self.post_message(self.Requested(replace(self.defaults, resume=chosen.path)))
