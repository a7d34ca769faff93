"""Probe: walk the plan one landing at a time. Where we are, what comes next, the
sweep as it arrives, the verdict of every check in large form, the logbook and
the tip wear; the wafer full-screen on ``w``, the journal on ``j``.

Safe by default: after a PASS the main key (enter / space) keeps the landing and
lands on the next site; after a FAIL it re-lands. Keeping a FAILED landing takes
its own key (``A``) and a reason. An instrument error holds the board in an
error state until the operator retries, or skips the site or the die.
"""

from __future__ import annotations

from typing import Any

from textual import events, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import Header

from probelog import events as ev
from probelog.tui.host import host
from probelog.tui.journal_read import type_of
from probelog.tui.messages import ChecksFinished, DecisionRecorded, LandingStarted, SweepMeasured
from probelog.tui.screens.base import BUSY_SHOW_S, BenchScreen, reflections, turns_matter
from probelog.tui.screens.dialogs import Confirm
from probelog.tui.screens.probe_text import (KEEP_FAIL_PRESETS, RECAL_PRESETS, SKIP_DIE_PRESETS, SKIP_PRESETS,
                                             goto_refusal, where_parts)
from probelog.tui.screens.wafer import WaferView
from probelog.tui.screens.wafer import die_history as die_history  # one history for the panel and the tests
from probelog.tui.wafer_read import cal_die_of, kept_despite_fail
from probelog.tui.widgets.bench_footer import BenchFooter
from probelog.tui.widgets.die_map import DieMap
from probelog.tui.widgets.logbook import Logbook
from probelog.tui.widgets.smith import SmithChart
from probelog.tui.widgets.sweep_plot import SweepPlot
from probelog.tui.widgets.tip_wear import TipWear
from probelog.tui.widgets.verdict_board import VerdictBoard, summarize
from probelog.tui.widgets.where_bar import WhereBar, describe_step, kind_name

COMPACT_WIDTH, COMPACT_HEIGHT = 100, 32

# which keys apply in which state of the screen (see Probe.state)
_APPLIES = {
    "land": {"probing"}, "keep_and_land": {"pass"}, "reland_fail": {"fail"}, "retry": {"error"},
    "keep": {"pass"}, "reland": {"pass"}, "reland_quiet": {"fail", "error"}, "keep_fail": {"fail"},
    "skip": {"probing", "pass", "fail", "error"}, "skip_die": {"probing", "pass", "fail", "error"},
    "drift": {"probing"}, "recalibrate": {"probing"},
}
_NEED_IDLE = set(_APPLIES) | {"note"}


def _precheck(outcome: Any) -> bool:
    return bool(getattr(outcome, "precheck", False))


class Probe(BenchScreen):
    """The probing screen."""

    CSS_PATH = "probe.tcss"
    # in the order they are used; only those that apply now are in the footer
    BINDINGS = [
        Binding("enter,space", "land", "land", tooltip="Move to the next site, touch down and sweep"),
        Binding("enter,space", "keep_and_land", "keep+next", tooltip="Keep this landing and land on the next site"),
        Binding("enter,space", "reland_fail", "re-land", tooltip="FAIL: lift, touch down again on the same site"),
        Binding("enter,space", "retry", "retry", tooltip="Try the landing again (the instrument link is reopened)"),
        Binding("a", "keep", "keep", tooltip="Keep this landing; the probes stay up"),
        Binding("r", "reland", "re-land", tooltip="Lift, touch down again on the same site and sweep"),
        Binding("r", "reland_quiet", "re-land", show=False, tooltip="Re-land (after a FAIL or an error)"),
        Binding("s", "skip", "skip", tooltip="Skip this site (asks a reason)"),
        Binding("x", "skip_die", "skip die", show=False, tooltip="Skip every site left on this die (one reason)"),
        Binding("A", "keep_fail", "keep FAIL", tooltip="Keep this FAILED landing anyway (asks a reason)"),
        Binding("n", "note", "note", tooltip="Add a note at the die and site on screen"),
        Binding("d", "drift", "drift", show=False, tooltip="Re-measure the drift reference now"),
        Binding("c", "recalibrate", "recal", tooltip="Calibrate again, then come back to the walk (asks a reason)"),
        Binding("w", "wafer", "wafer", tooltip="The wafer full-screen: status or a metric, die history"),
        Binding("j", "journal", "journal", tooltip="The journal: every event, filtered by die, site, type"),
        Binding("p", "toggle_polar", "smith/polar", show=False, tooltip="Switch the reflection chart between Smith and polar"),
        Binding("question_mark", "keys", "keys", tooltip="Every key of this screen"),
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
        self._shown: Any = None  # the LandingOutcome on the board
        self._error = False
        self._map_key: tuple | None = None
        self._decisions_seen = 0
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
            self.query_one(Header).display = not compact

    # ---------------------------------------------------------------- keys

    def state(self) -> str:
        """busy, error, probing, pass (deciding on a PASS or WARN), fail, done, other."""
        if self.busy:
            return "busy"
        if self._error:
            return "error"
        phase = kind_name(self.engine.phase)
        if phase == "DECIDING":
            last = self.engine.last_outcome
            return "fail" if last is not None and kind_name(last.verdict) == "FAIL" else "pass"
        if phase == "PROBING":
            return "probing" if self.engine.next_step is not None else "other"
        return "done" if phase == "DONE" else "other"

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action not in _NEED_IDLE:
            return True
        state = self.state()
        if action == "note":
            return None if state == "busy" else True
        applies = _APPLIES[action]
        if state == "busy":  # shown greyed in the state it had, not hidden
            return None if self._keys_state and self._keys_state[0] in applies else False
        if action in ("skip", "skip_die") and state == "probing":
            nxt = self.engine.next_step
            return True if nxt is not None and kind_name(nxt.kind) == "SITE" else False
        if action == "keep_fail" and state == "fail" and _precheck(self.engine.last_outcome):
            return False  # a failed contact pre-check took no sweep: nothing to keep (the engine refuses)
        return state in applies

    def action_land(self) -> None:
        self.measure_next()

    def action_keep_and_land(self) -> None:
        self.record("accept", then_measure=True)

    def action_keep(self) -> None:
        self.record("accept")

    def action_reland(self) -> None:
        self.measure_next("reland")

    def action_reland_fail(self) -> None:
        self.measure_next("reland")

    def action_reland_quiet(self) -> None:
        if self._error:
            self.action_retry()
        else:
            self.measure_next("reland")

    def action_retry(self) -> None:
        self._error = False
        self.measure_next()

    def action_drift(self) -> None:
        self.measure_next("drift")

    def action_keep_fail(self) -> None:
        self.ask_then_record(
            "accept", f"The checks FAILED {self._target()}.\nKeeping it puts this landing in the dataset as "
                      "accepted despite the FAIL. Why keep it?",
            KEEP_FAIL_PRESETS, title="✖ Keep a FAILED landing?")

    def action_skip(self) -> None:
        self.ask_then_record("skip", f"Skip {self._target()}? Why:", SKIP_PRESETS)

    def action_skip_die(self) -> None:
        die = self._target_die()
        if die is not None:
            self._ask_skip_die(die)

    def _ask_skip_die(self, die: tuple[int, int]) -> None:
        self.ask_then_record("skip-die", f"Skip every site left on die {die[0]},{die[1]}? One reason for all:",
                             SKIP_DIE_PRESETS, die=die)

    def action_recalibrate(self) -> None:
        self.ask_then_record("recalibrate", "Recalibrate now? The walk goes on from here once the new cal "
                                            "is accepted. Why:", RECAL_PRESETS)

    def action_wafer(self) -> None:
        def answered(choice: tuple[str, tuple[int, int]] | None) -> None:
            if choice is None:
                return
            what, die = choice
            if what == "goto":
                self._ask_goto(die)
            elif what == "skip-die":
                self._ask_skip_die(die)
        self.app.push_screen(WaferView(self.engine, list(host(self.app).journal_events)), answered)

    def _ask_goto(self, die: tuple[int, int]) -> None:
        """Land on ``die`` next, after a y/n confirmation (or say why not)."""
        refusal = goto_refusal(self.engine, die, self.busy)
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

    def _target(self) -> str:
        last = self.engine.last_outcome
        if kind_name(self.engine.phase) == "DECIDING" and last is not None:
            return describe_step(last.step)
        return describe_step(self.engine.next_step)

    def _target_die(self) -> tuple[int, int] | None:
        last, nxt = self.engine.last_outcome, self.engine.next_step
        step = last.step if kind_name(self.engine.phase) == "DECIDING" and last is not None else nxt
        return step.die if step is not None else None

    def shown_position(self) -> tuple[Any, str] | None:
        last = self.engine.last_outcome
        if kind_name(self.engine.phase) == "DECIDING" and last is not None:
            return tuple(last.step.die), last.step.site
        shown = self._shown  # a decided landing stays on the board until the next one
        if shown is not None and kind_name(shown.step.kind) == "SITE":
            return tuple(shown.step.die), shown.step.site
        nxt = self.engine.next_step
        return (tuple(nxt.die), nxt.site) if nxt is not None else None

    def instrument_failed(self, title: str, todo: str, detail: str) -> None:
        self._error = True
        if self._landing_note is not None:
            self._landing_note.stop()
            self._landing_note = None
        super().instrument_failed(title, todo, detail)
        self._where()

    # ---------------------------------------------------------------- messages

    def on_landing_started(self, message: LandingStarted) -> None:
        self._error = False
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
        traces, net = reflections(outcome)
        caption = f"{outcome.step.site} L{outcome.step.landing}"
        self.query_one("#sweep", SweepPlot).show_landing(outcome, net)
        self.query_one("#smith", SmithChart).set_traces(traces, caption, turns_matter(outcome))

    def on_checks_finished(self, message: ChecksFinished) -> None:
        if self._landing_note is not None:
            self._landing_note.stop()
            self._landing_note = None
        o = message.outcome
        drift = kind_name(o.step.kind) == "DRIFT"
        self._shown = o
        caption = summarize(o)
        if drift:
            caption = f"drift reference · {caption} · [space] lands on the next site"
        with self.app.batch_update():  # table, caption, verdict and look in one screen update
            self.query_one("#board", VerdictBoard).show_checks(o.checks, caption, o.verdict, reference=drift)

    def on_decision_recorded(self, message: DecisionRecorded) -> None:
        # the decided landing stays on the board (a note goes to it) with what was decided
        board = self.query_one("#board", VerdictBoard)
        shown = self._shown
        about = summarize(shown) if shown is not None else ""
        if self._error and message.action in ("skip", "skip-die"):  # the operator dealt with the error
            self._error = False
            board.show_busy(f"{'site' if message.action == 'skip' else 'die'} skipped ({message.reason})"
                            " · [enter] next site")
            self._shown = None
        elif message.action == "accept" and message.reason:
            board.status = f"KEPT DESPITE FAIL ({message.reason}) · {about} · [enter] next site"
        elif message.action in ("accept", "skip"):
            board.status = f"{'kept' if message.action == 'accept' else 'skipped'} · {about} · [enter] next site"
        elif message.action == "skip-die":
            board.show_busy(f"die skipped ({message.reason}) · [enter] next site")
            self._shown = None
        elif message.action == "goto":
            board.show_busy(f"next: {describe_step(self.engine.next_step)} · [enter] to land")
            self._shown = None
        shown = self._shown
        if (message.action == "accept" and not message.reason and shown is not None
                and kind_name(shown.step.kind) == "SITE"):
            self.query_one("#sweep", SweepPlot).remember(shown)
        if message.action in ("accept", "skip-die"):
            self._refresh_map()

    def _show_outcome(self, outcome: Any) -> None:
        self.on_sweep_measured(SweepMeasured(outcome))
        self.on_checks_finished(ChecksFinished(outcome))

    # ---------------------------------------------------------------- view

    def refresh_view(self) -> None:
        with self.app.batch_update():  # map, wear, where bar and keys in one screen update
            self._refresh_view()

    def _refresh_view(self) -> None:
        engine = self.engine
        self._refresh_map()
        life = getattr(getattr(getattr(engine, "plan", None), "probes", None), "wear_warn_touchdowns", None)
        # the plan's warning threshold is 80 % of the life we draw against
        self.query_one("#wear", TipWear).update_counts(engine.touchdowns, int(life / 0.8) if life else None)
        self._where()
        # the keys depend on the screen's state and the next step's kind only;
        # each refresh_bindings costs the footer a pass over every binding
        nxt = engine.next_step
        keys_state = (self.state(), None if nxt is None else kind_name(nxt.kind))
        if keys_state != self._keys_state:
            if keys_state[0] != "busy":
                self._keys_state = keys_state
            self.refresh_bindings()

    def _refresh_map(self) -> None:
        """Redraw the small map when what it shows changed: the decided count, the
        die under the probes or the journal's decisions. It runs on every worker
        state change, alongside a landing in progress, so it must stay cheap."""
        engine = self.engine
        last = engine.last_outcome
        current = last.step.die if last is not None else (engine.next_step.die if engine.next_step else None)
        key = (engine.progress, current, self._decisions_seen)
        if key == self._map_key:
            return
        self._map_key = key
        self.query_one("#map", DieMap).update_state(engine.wafer_status, current,
                                                    cal_die=cal_die_of(host(self.app).journal_events),
                                                    flagged=kept_despite_fail(engine.state))

    def journal_grew(self, events_: list[ev.Event]) -> None:
        super().journal_grew(events_)
        decided = sum(1 for e in events_ if type_of(e) in ("decision", "die-skipped"))
        if decided:
            self._decisions_seen += decided
            self._refresh_map()

    def _where(self, doing: str | None = None) -> None:
        here, next_, idle = where_parts(self.engine, self.state(), self.busy)
        self.query_one("#where", WhereBar).show(here, next_, doing if doing is not None else idle)
