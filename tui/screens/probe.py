"""Probe: walk the plan one landing at a time. Where we are, what comes next, the
sweep as it arrives, the verdict of every check in large form, the die map, the
logbook and the tip wear; one key per step."""

from __future__ import annotations

from typing import Any

from textual import events, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import Header

from probelog import events as ev
from probelog import state as st
from probelog import state_views as sv
from probelog.state import SessionState
from probelog.tui.widgets.bench_footer import BenchFooter
from probelog.tui.messages import ChecksFinished, DecisionRecorded, LandingStarted, SweepMeasured
from probelog.tui.screens.base import BUSY_SHOW_S, BenchScreen, reflections, turns_matter
from probelog.tui.screens.dialogs import Confirm
from probelog.tui.widgets.die_map import DieMap
from probelog.tui.widgets.logbook import Logbook
from probelog.tui.widgets.smith import SmithChart
from probelog.tui.widgets.sweep_plot import SweepPlot
from probelog.tui.widgets.tip_wear import TipWear
from probelog.tui.widgets.verdict_board import VerdictBoard, summarize, verdict_word
from probelog.tui.widgets.where_bar import WhereBar, describe_step, kind_name

SKIP_PRESETS = ("structure damaged", "pads contaminated", "die known bad", "out of time on this wafer")
RECAL_PRESETS = ("drift reference out of limits", "probes re-planarised", "scheduled recalibration",
                 "room temperature changed")
COMPACT_WIDTH, COMPACT_HEIGHT = 100, 32


def die_history(state: SessionState, die: tuple[int, int]) -> list[str]:
    """Landings and decisions on one die, one line each, from the session state
    (an accepted FAIL shows as accept-despite-fail with its reason)."""
    lines = []
    for _seq, site, rec in sv.die_history(state, die):
        if isinstance(rec, st.LandingRec):
            what = "" if rec.what == "landing" else f" ({rec.what})"
            lines.append(f"{site} L{rec.landing}{what}: {verdict_word_from(rec.verdict.value)}")
        else:
            reason = f" ({rec.reason})" if rec.reason else ""
            lines.append(f"{site} L{rec.landing}: {rec.action}{reason}")
    return lines


def verdict_word_from(value: str | None) -> str:
    from probelog.verdicts import Verdict

    try:
        return verdict_word(Verdict(value))
    except ValueError:
        return str(value)


class Probe(BenchScreen):
    """The probing screen."""

    CSS_PATH = "probe.tcss"
    BINDINGS = [
        Binding("space,m", "measure", "land", tooltip="Move to the next site, touch down and sweep"),
        Binding("enter", "accept_next", "accept+land", tooltip="Keep this landing and land on the next site"),
        Binding("a", "accept", "accept", tooltip="Keep this landing and move on"),
        Binding("r", "reland", "re-land", tooltip="Lift, touch down again on the same site and sweep"),
        Binding("s", "skip", "skip", tooltip="Skip this site (asks a reason)"),
        Binding("n", "note", "note", tooltip="Add a note at this die and site"),
        Binding("d", "drift", "drift ref", tooltip="Re-measure the drift reference now"),
        Binding("c", "recalibrate", "recal", tooltip="Go back and calibrate again (asks a reason)"),
        Binding("w", "toggle_map", "die map", tooltip="Show the die map and move its cursor"),
        Binding("v", "colour_map", "map colour", show=False, tooltip="Colour the die map by status or by a metric"),
        Binding("j", "toggle_logbook", "logbook", show=False, tooltip="Show or hide the logbook"),
        Binding("p", "toggle_polar", "smith/polar", show=False, tooltip="Switch the reflection chart between Smith and polar"),
        Binding("q", "app.close_session", "quit", tooltip="Close the journal and quit"),
    ]

    def compose(self) -> ComposeResult:
        yield Header()
        yield WhereBar(id="where")
        with Horizontal(id="probe-body"):
            with Vertical(id="probe-left"):
                yield VerdictBoard(id="board")
                yield Logbook(id="logbook")
            with Vertical(id="probe-right"):
                yield SweepPlot(id="sweep")
                with Horizontal(id="probe-lower"):
                    yield SmithChart(id="smith")
                    with Vertical(id="side"):
                        yield DieMap(id="map")
                        yield TipWear(id="wear")
        yield BenchFooter()

    _landing_note = None  # Timer that shows "landing…" if the landing takes a while

    def on_mount(self) -> None:
        self.title = "probelog"
        self.sub_title = "probing"
        self._compact: bool | None = None
        self._keys_state: tuple | None = None
        super().on_mount()
        last = self.engine.last_outcome
        if last is not None:  # resumed (or came back) while a landing awaits a decision
            self._show_outcome(last)

    def on_resize(self, event: events.Resize) -> None:
        compact = event.size.width < COMPACT_WIDTH or event.size.height < COMPACT_HEIGHT
        if compact != self._compact:
            self._compact = compact
            self.set_class(compact, "compact")
            self.query_one("#logbook").display = not compact
            self.query_one("#side").display = not compact

    # ---------------------------------------------------------------- keys

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        engine = self.engine
        phase = kind_name(engine.phase)
        nxt = engine.next_step
        if action in ("measure", "accept_next", "accept", "reland", "skip", "note", "drift",
                      "recalibrate") and self.busy:
            return None
        if action == "measure":
            return True if phase == "PROBING" and nxt is not None else None
        if action in ("accept", "reland", "accept_next"):
            return True if phase == "DECIDING" else None
        if action == "skip":
            return True if phase == "DECIDING" or (phase == "PROBING" and nxt is not None
                                                   and kind_name(nxt.kind) == "SITE") else None
        if action in ("drift", "recalibrate"):
            return True if phase == "PROBING" else None
        return True

    def action_measure(self) -> None:
        self.measure_next()

    def action_accept(self) -> None:
        self.record("accept")

    def action_accept_next(self) -> None:
        self.record("accept", then_measure=True)

    def action_reland(self) -> None:
        self.measure_next("reland")

    def action_drift(self) -> None:
        self.measure_next("drift")

    def action_skip(self) -> None:
        self.ask_then_record("skip", f"Skip {self._target()}? Why:", SKIP_PRESETS)

    def action_recalibrate(self) -> None:
        self.ask_then_record("recalibrate", "Recalibrate now? Why:", RECAL_PRESETS)

    def action_toggle_map(self) -> None:
        side, die_map = self.query_one("#side"), self.query_one("#map", DieMap)
        if not side.display:
            side.display = True
            die_map.focus()
        elif die_map.has_focus:
            die_map.blur()
            if self._compact:
                side.display = False
        else:
            die_map.focus()

    def action_colour_map(self) -> None:
        choice = self.query_one("#map", DieMap).cycle_colouring()
        self.notify(f"die map coloured by {choice}", timeout=2)

    def on_die_map_die_chosen(self, message: DieMap.DieChosen) -> None:
        """Enter on a die: land there next, after a y/n confirmation."""
        die = message.die
        status = self.engine.wafer_status.get(die)
        phase = kind_name(self.engine.phase)
        refusal = ("wait: the instrument is busy" if self.busy else
                   "decide on this landing first (accept, re-land or skip)" if phase == "DECIDING" else
                   "calibrate first" if phase in ("CALIBRATING", "VERIFYING") else
                   "every site of the plan is decided" if phase == "DONE" else
                   f"die {die[0]},{die[1]} is not in the plan" if status is None else
                   f"die {die[0]},{die[1]} is {status}: nothing left to land on"
                   if status in ("done", "failed", "skipped") else None)
        if refusal:
            self.notify(refusal, title=f"cannot go to die {die[0]},{die[1]}", severity="warning", timeout=4)
            return

        def answered(yes: bool | None) -> None:
            if yes:
                self.goto_die(die)
        self.app.push_screen(Confirm(f"Land on die {die[0]},{die[1]} next?\n"
                                     "Its first undecided site comes next; the plan's order goes on from there."),
                             answered)

    @work(thread=True, exclusive=True, exit_on_error=False, group="bench", description="Going to a die")
    def goto_die(self, die: tuple[int, int]) -> None:
        self.engine.goto(die)
        self.post_message(DecisionRecorded("goto"))

    def on_die_map_history_wanted(self, message: DieMap.HistoryWanted) -> None:
        die = message.die
        lines = die_history(self.engine.state, die)
        status = self.engine.wafer_status.get(die, "?")
        body = "\n".join(lines[-8:]) if lines else "nothing measured here yet"
        self.notify(body, title=f"die {die[0]},{die[1]}: {status}", timeout=8)

    def _target(self) -> str:
        last = self.engine.last_outcome
        if kind_name(self.engine.phase) == "DECIDING" and last is not None:
            return describe_step(last.step)
        return describe_step(self.engine.next_step)

    # ---------------------------------------------------------------- messages

    def on_landing_started(self, message: LandingStarted) -> None:
        # shown only if the landing outlasts BUSY_SHOW_S (see BenchScreen.watch_busy)
        self._landing_note = self.set_timer(BUSY_SHOW_S, lambda: self._show_landing(message.step))

    def _show_landing(self, step: Any) -> None:
        self._landing_note = None
        if not self.busy:  # finished (or failed) meanwhile
            return
        with self.app.batch_update():  # board and where bar in one screen update
            self.query_one("#board", VerdictBoard).show_busy(f"landing: {describe_step(step)}")
            self._where(doing="▶ moving at separation, contacting, sweeping…")

    def on_sweep_measured(self, message: SweepMeasured) -> None:
        # The verdict matters first: the plots are drawn after the next repaint, so
        # the board (updated by ChecksFinished, right behind this) is not held up.
        self.call_after_refresh(self._plot, message.outcome)

    def _plot(self, outcome: Any) -> None:
        message = SweepMeasured(outcome)
        traces, net = reflections(message.outcome)
        caption = f"{message.outcome.step.site} L{message.outcome.step.landing}"
        self.query_one("#sweep", SweepPlot).show_network(net.f, net.s, caption)
        self.query_one("#smith", SmithChart).set_traces(traces, caption, turns_matter(message.outcome))

    def on_checks_finished(self, message: ChecksFinished) -> None:
        if self._landing_note is not None:
            self._landing_note.stop()
            self._landing_note = None
        o = message.outcome
        prefix = "drift reference · " if kind_name(o.step.kind) == "DRIFT" else ""
        with self.app.batch_update():  # table, caption, verdict and look in one screen update
            self.query_one("#board", VerdictBoard).show_checks(o.checks, prefix + summarize(o), o.verdict)

    def on_decision_recorded(self, message: DecisionRecorded) -> None:
        if message.action in ("accept", "skip"):
            self.query_one("#board", VerdictBoard).show_busy(f"{message.action} recorded · next: space")
        elif message.action == "goto":
            self.query_one("#board", VerdictBoard).show_busy(
                f"next: {describe_step(self.engine.next_step)} · space to land")

    def _show_outcome(self, outcome: Any) -> None:
        self.on_sweep_measured(SweepMeasured(outcome))
        self.on_checks_finished(ChecksFinished(outcome))

    # ---------------------------------------------------------------- view

    def refresh_view(self) -> None:
        with self.app.batch_update():  # map, wear, where bar and keys in one screen update
            self._refresh_view()

    def _refresh_view(self) -> None:
        engine = self.engine
        last = engine.last_outcome
        current = last.step.die if last is not None else (engine.next_step.die if engine.next_step else None)
        self.query_one("#map", DieMap).update_state(engine.wafer_status, current, self._die_metrics())
        life = getattr(getattr(getattr(engine, "plan", None), "probes", None), "wear_warn_touchdowns", None)
        # the plan's warning threshold is 80 % of the life we draw against
        self.query_one("#wear", TipWear).update_counts(engine.touchdowns, int(life / 0.8) if life else None)
        self._where()
        # the keys depend on the phase, the busy flag and the next step's kind only;
        # each refresh_bindings costs the footer a pass over every binding
        nxt = engine.next_step
        keys_state = (kind_name(engine.phase), self.busy, None if nxt is None else kind_name(nxt.kind))
        if keys_state != self._keys_state:
            self._keys_state = keys_state
            self.refresh_bindings()

    def journal_grew(self, events_: list[ev.Event]) -> None:
        super().journal_grew(events_)
        if any(e.type == "decision" for e in events_):  # a kept landing may bring metrics
            die_map = self.query_one("#map", DieMap)
            die_map.update_state(self.engine.wafer_status, die_map.current, self._die_metrics())

    def _die_metrics(self) -> dict[tuple[int, int], dict[str, float]]:
        """Each die's kept-landing metrics at one journaled frequency (the middle one), from the state."""
        return sv.die_metrics(self.engine.state)

    def _where(self, doing: str | None = None) -> None:
        engine = self.engine
        phase = kind_name(engine.phase)
        done, total = engine.progress
        last, nxt = engine.last_outcome, engine.next_step
        if phase == "DECIDING" and last is not None:
            here = f"{describe_step(last.step)} · {verdict_word(last.verdict)} · decide"
            next_ = "[a] accept  [enter] accept+land next  [r] re-land  [s] skip"
        elif phase == "DONE":
            here, next_ = "every site of the plan is decided", "[q] close the journal and quit"
        else:
            here = describe_step(last.step) if last is not None else "probes up"
            next_ = f"{describe_step(nxt)}   [space]" if nxt is not None else "—"
            if nxt is not None and kind_name(nxt.kind) == "DRIFT":
                next_ = "drift reference: " + next_
        here += f"   ·   sites {done}/{total}"
        if doing is None:
            doing = "busy…" if self.busy else ("DONE" if phase == "DONE" else "idle: waiting for you")
        self.query_one("#where", WhereBar).show(here, next_, doing)
