"""Calibrate: land on each standard in turn, solve the cal set, read its
verification (open stub on the Smith chart must turn clockwise) and the agreement
between two algorithms, then accept or redo."""

from __future__ import annotations

from typing import Any

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import DataTable, Header, Static

from probelog.verdicts import CheckResult, Verdict, overall
from probelog.tui.widgets.bench_footer import BenchFooter
from probelog.tui.messages import CalibrationSolved, ChecksFinished, LandingStarted, SweepMeasured
from probelog.tui.screens.base import BenchScreen, reflections, turns_matter
from probelog.tui.widgets.logbook import Logbook
from probelog.tui.widgets.smith import SmithChart
from probelog.tui.widgets.sweep_plot import SweepPlot
from probelog.tui.widgets.verdict_board import VerdictBoard, format_figure, format_ghz, summarize, verdict_word
from probelog.tui.widgets.where_bar import WhereBar, describe_step, kind_name

REDO_PRESETS = ("verification failed", "standard landed badly", "algorithms disagree",
                "probe re-planarised")


def agreement_check(agreement: dict | None) -> CheckResult | None:
    """The cal-agreement figure as a check row (linear |dS| bound, at its frequency)."""
    if not agreement:
        return None
    return CheckResult(
        name=f"agreement vs {agreement.get('other_method', '?')}",
        verdict=Verdict(agreement.get("verdict", "n/a")),
        value=agreement.get("worst"), limit=agreement.get("limit"),
        at_hz=agreement.get("at_hz"), message=agreement.get("message", "worst |ΔS| bound over passive DUTs"),
        unit="",
    )


def cal_checks(outcome: Any) -> list[CheckResult]:
    """Every verification check (named "check · site") and the agreement, for the board."""
    rows = []
    for v in outcome.verification:
        for c in v.checks:
            # what was checked first, where second: a narrow board cuts from the end
            rows.append(CheckResult(f"{c.name.removeprefix('ver-')} · {v.step.site}", c.verdict, c.value,
                                    c.limit, c.at_hz, c.message, c.unit))
    agree = agreement_check(outcome.agreement)
    if agree is not None:
        rows.append(agree)
    return rows


class Calibrate(BenchScreen):
    """Tip calibration."""

    CSS_PATH = "calibrate.tcss"
    BINDINGS = [
        Binding("space,m", "measure", "land std", tooltip="Land on the next standard and sweep it"),
        Binding("r", "reland", "re-land std", tooltip="Land on the standard just measured again (the first landing stays on record)"),
        Binding("k", "solve", "solve cal", tooltip="Solve the cal set, measure the verification sites, compare algorithms"),
        Binding("a", "accept_cal", "accept cal", tooltip="Use this cal set for the landings that follow"),
        Binding("x", "redo_cal", "redo cal", tooltip="Reject this cal set (asks a reason) and measure the standards again"),
        Binding("n", "note", "note", tooltip="Add a note to the journal"),
        Binding("p", "toggle_polar", "smith/polar", show=False, tooltip="Switch the reflection chart between Smith and polar"),
        Binding("j", "journal", "journal", tooltip="The journal: every event, filtered by die, site, type"),
        Binding("question_mark", "keys", "keys", tooltip="Every key of this screen"),
        Binding("q", "app.close_session", "quit", tooltip="Close the journal and quit"),
    ]

    def compose(self) -> ComposeResult:
        yield Header()
        yield WhereBar(id="where")
        with Horizontal(id="cal-body"):
            with Vertical(id="cal-left"):
                yield DataTable(id="standards", cursor_type="row", zebra_stripes=False)
                yield VerdictBoard(id="board")
                yield Static(id="calset")
            with Vertical(id="cal-right"):
                yield SweepPlot(id="sweep")
                with Horizontal(id="cal-lower"):
                    yield SmithChart(id="smith")
                    yield Logbook(id="logbook")
        yield BenchFooter()

    def on_resize(self, event) -> None:
        self.set_class(event.size.width < 100 or event.size.height < 32, "compact")

    def on_mount(self) -> None:
        self.title = "probelog"
        self.sub_title = "tip calibration"
        table = self.query_one("#standards", DataTable)
        table.add_columns("", "standard", "site", "kind", "verdict")
        table.border_title = "standards"
        self.query_one("#calset", Static).border_title = "cal set"
        super().on_mount()
        pending = getattr(self.engine, "pending_cal", None)
        if pending is not None:
            self._show_cal(pending)

    # ---------------------------------------------------------------- keys

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        phase = kind_name(self.engine.phase)
        # keys that do not apply now leave the footer (False); busy greys them (None)
        if action == "reland":
            ok = phase == "CALIBRATING" and bool(getattr(self.engine, "last_standard", None))
        elif action == "measure":
            ok = phase == "CALIBRATING" and self.engine.next_step is not None
        elif action == "solve":
            ok = phase == "CALIBRATING" and self.engine.next_step is None
        elif action in ("accept_cal", "redo_cal"):
            ok = phase == "VERIFYING"
        elif action == "note":
            ok = True
        else:
            return True
        if not ok:
            return False
        if self.busy:
            return None
        if action == "accept_cal" and self._cal_refusal() is not None:
            return None  # a cal that cannot be right is never accepted (greyed, with why)
        return True

    def _cal_refusal(self) -> str | None:
        refusal = getattr(self.engine, "cal_refusal", None)
        return refusal(self.engine.pending_cal) if callable(refusal) else None

    def action_measure(self) -> None:
        self.measure_next()

    def action_reland(self) -> None:
        self.measure_next("reland")

    def action_solve(self) -> None:
        self.query_one("#board", VerdictBoard).show_busy("solving the cal set, landing on the verification sites…")
        self.solve_calibration()

    def action_accept_cal(self) -> None:
        why = self._cal_refusal()
        if why is not None:
            self.app.notify(why, severity="error")
            return
        self.record("cal-accept")

    def action_redo_cal(self) -> None:
        self.ask_then_record("cal-redo", "Why redo the calibration?", REDO_PRESETS)

    # ---------------------------------------------------------------- messages

    def on_landing_started(self, message: LandingStarted) -> None:
        self.query_one("#board", VerdictBoard).show_busy(f"landing: {describe_step(message.step)}")
        self._where(doing="▶ moving, contacting, sweeping…")

    def on_sweep_measured(self, message: SweepMeasured) -> None:
        traces, net = reflections(message.outcome)
        caption = message.outcome.step.standard or message.outcome.step.site
        self.query_one("#sweep", SweepPlot).show_network(net.f, net.s, caption)
        self.query_one("#smith", SmithChart).set_traces(traces, caption, turns_matter(message.outcome))

    def on_checks_finished(self, message: ChecksFinished) -> None:
        o = message.outcome
        self.query_one("#board", VerdictBoard).show_checks(o.checks, summarize(o), o.verdict)

    def on_calibration_solved(self, message: CalibrationSolved) -> None:
        self._show_cal(message.outcome)

    def _show_cal(self, cal: Any) -> None:
        checks = cal_checks(cal)
        verdict = cal.verdict if cal.ok else Verdict.FAIL
        self.query_one("#board", VerdictBoard).show_checks(
            checks, f"cal set {cal.cal_id} ({cal.method}): {cal.message}", verdict)
        stub = next((v for v in cal.verification if "stub" in v.step.site_kind), None)
        show = stub or (cal.verification[0] if cal.verification else None)
        if show is not None:
            traces, net = reflections(show)
            self.query_one("#smith", SmithChart).set_traces(traces[:1], f"verify {show.step.site}", turns_matter(show))
            self.query_one("#sweep", SweepPlot).show_network(net.f, net.s, f"verify {show.step.site} (corrected)")
        self.query_one("#calset", Static).update(self._cal_table(cal))

    @staticmethod
    def _cal_table(cal: Any) -> Table:
        t = Table(box=None, show_header=False, expand=True, pad_edge=False)
        t.add_column(no_wrap=True)
        t.add_column(ratio=1)
        t.add_row("id / method", f"{cal.cal_id} · {cal.method.upper()}")
        t.add_row("solved", Text("✔ yes" if cal.ok else "✖ NO", style="bold green" if cal.ok else "bold red"))
        for v in cal.verification:
            t.add_row(f"verify {v.step.site}", verdict_word(v.verdict))
        agree = agreement_check(cal.agreement)
        if agree is not None:
            t.add_row(agree.name, f"{verdict_word(agree.verdict)}  worst {format_figure(agree.value, '')} "
                                  f"{format_ghz(agree.at_hz)}")
        else:
            t.add_row("agreement", "no second algorithm for these standards")
        t.add_row("overall", verdict_word(overall([CheckResult("", cal.verdict, None, None, None, "")])))
        return t

    # ---------------------------------------------------------------- view

    def refresh_view(self) -> None:
        engine = self.engine
        table = self.query_one("#standards", DataTable)
        table.clear()
        nxt = engine.next_step
        next_name = getattr(nxt, "standard", None) if nxt is not None else None
        standards = list(engine.cal_standards)
        for s in standards:
            here = "▶" if s.name == next_name else ("✔" if s.measured else " ")
            verdict = verdict_word(s.verdict) if s.verdict is not None else "—"
            table.add_row(here, s.name, s.site, s.kind, verdict)
        done = sum(1 for s in standards if s.measured)
        table.border_subtitle = f"{done}/{len(standards)} measured"
        self.set_class(kind_name(engine.phase) == "VERIFYING", "verifying")
        self._where()
        self.refresh_bindings()

    def _where(self, doing: str | None = None) -> None:
        engine = self.engine
        phase = kind_name(engine.phase)
        nxt = engine.next_step
        last = getattr(engine, "last_standard", None) if phase == "CALIBRATING" else None
        last_failed = last is not None and any(
            s.name == last and s.verdict is not None and kind_name(s.verdict) == "FAIL" for s in engine.cal_standards)
        if phase == "CALIBRATING" and nxt is not None:
            here = f"calibrating at the tips · standard {nxt.index + 1} of {nxt.total}"
            next_ = f"land on {describe_step(nxt)}   [space]"
            if last_failed:
                next_ = f"the {last} failed: re-land it [r], or go on [space]"
        elif phase == "CALIBRATING":
            here, next_ = "all standards measured", "solve the cal set and verify it   [k]"
        else:
            here, next_ = "cal set solved and verified", "accept [a]   or redo [x]"
        if doing is None:
            doing = "busy…" if self.busy else "idle: probes up, waiting for you"
        self.query_one("#where", WhereBar).show(here, next_, doing)
