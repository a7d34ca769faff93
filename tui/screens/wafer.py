"""The wafer, full-screen (``w`` on the probe screen): every die inside the
wafer's outline, the calibration die, status marks or one line metric of one
site at one frequency with its legend, and the history of the die under the
cursor in a panel that stays until it is closed.

It is a modal over the probe screen, so the app's routing leaves it alone; it
answers with what the operator asked for (go to a die, skip a die) or None.
"""

from __future__ import annotations

from textual import events
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

from probelog import events as ev
from probelog import state as st
from probelog import state_views as sv
from probelog.engine.protocol import EngineProtocol
from probelog.state import SessionState
from probelog.tui.wafer_read import MetricChoice, cal_die_of, kept_despite_fail, metric_choices, metric_values
from probelog.tui.widgets.bench_footer import BenchFooter
from probelog.tui.widgets.die_map import STATUS_WORD, DieMap, legend
from probelog.tui.widgets.verdict_board import verdict_word_of


def die_history(state: SessionState, die: tuple[int, int]) -> list[str]:
    """Landings and decisions on one die, one line each, from the session state
    (an accepted FAIL shows as accept-despite-fail with its reason)."""
    lines = []
    for _seq, site, rec in sv.die_history(state, die):
        if isinstance(rec, st.LandingRec):
            what = "" if rec.what == "landing" else f" ({rec.what})"
            lines.append(f"{site} L{rec.landing}{what}: {verdict_word_of(rec.verdict.value)}")
        else:
            reason = f" ({rec.reason})" if rec.reason else ""
            lines.append(f"{site} L{rec.landing}: {rec.action}{reason}")
    return lines


def history_panel(state: SessionState, die: tuple[int, int]) -> list[str]:
    """The die history panel: the state's landings and decisions, with the notes
    taken on the die, in journal order."""
    rows = [(seq, f"#{seq} {line}") for (seq, _s, _r), line in zip(sv.die_history(state, die),
                                                                   die_history(state, die), strict=True)]
    rows += [(n.seq, f"#{n.seq} note at {n.site}: “{n.text}”") for n in state.notes
             if n.die is not None and tuple(n.die) == tuple(die)]
    return [text for _, text in sorted(rows)]


class WaferView(ModalScreen[tuple[str, tuple[int, int]] | None]):
    """The die map, full-screen."""

    DEFAULT_CSS = """
    WaferView { background: $background; }
    WaferView #wafer-body { height: 1fr; }
    WaferView #wafer-map { width: auto; height: auto; max-height: 100%; }
    WaferView #wafer-side { width: 1fr; min-width: 24; }
    WaferView #legend { height: auto; border: round $secondary; padding: 0 1; }
    WaferView #history { height: 1fr; border: round $accent; padding: 0 1; }
    WaferView #wafer-title { height: 1; background: $panel; padding: 0 1; }
    """
    BINDINGS = [
        Binding("enter", "go", "go to die", tooltip="Land on the die under the cursor next (asks first)"),
        Binding("h", "history", "history", tooltip="Open or close the history of the die under the cursor"),
        Binding("m", "metric", "colour by", tooltip="Colour by status, then by each line metric of each site"),
        Binding("f", "frequency", "freq", tooltip="The frequency the metric is shown at (next one)"),
        Binding("x", "skip_die", "skip die", tooltip="Skip every site left on the die under the cursor (asks a reason)"),
        Binding("escape,w", "back", "back", tooltip="Back to probing"),
    ]

    def __init__(self, engine: EngineProtocol, events: list[ev.Event]) -> None:
        super().__init__()
        self.engine = engine
        self.events = events
        # the session as the engine reads it, at the moment the view opens (a modal:
        # nothing is measured while it is up)
        self.state = engine.state
        self.choices = metric_choices(self.state)
        self.freqs = sv.metric_frequencies(self.state)
        self.choice_i = -1  # -1: by status
        self.freq_i = len(self.freqs) // 2  # the middle one, as state_views.die_metrics

    def compose(self) -> ComposeResult:
        yield Static(id="wafer-title")
        with Horizontal(id="wafer-body"):
            yield DieMap(id="wafer-map", big=True)
            with Vertical(id="wafer-side"):
                yield Static(id="legend")
                yield Static(id="history")
        yield BenchFooter()

    def on_mount(self) -> None:
        die_map = self.query_one(DieMap)
        last, nxt = self.engine.last_outcome, self.engine.next_step
        current = last.step.die if last is not None else (nxt.die if nxt is not None else None)
        die_map.update_state(self.engine.wafer_status, current, cal_die=cal_die_of(self.events),
                             flagged=kept_despite_fail(self.state))
        self.query_one("#history").display = False
        self.query_one("#history").border_title = "die history"
        self.query_one("#legend").border_title = "legend"
        die_map.focus()
        self.watch(die_map, "cursor", self._cursor_moved, init=False)
        self._recolour()

    def on_resize(self, event: events.Resize) -> None:
        die_map = self.query_one(DieMap)
        c0, c1, r0, r1 = die_map._bounds()
        # 5 x 2 cells with a die of margin for the outline, if they fit beside a side panel
        big = 2 * (r1 - r0 + 3) + 3 <= event.size.height - 2 and 5 * (c1 - c0 + 3) + 7 <= event.size.width - 24
        if big != die_map.big:
            die_map.big = big
            die_map.refresh(layout=True)

    def _choice(self) -> MetricChoice | None:
        if self.choice_i < 0 or not self.choices:
            return None
        site, key = self.choices[self.choice_i]
        freqs = self.freqs or [0.0]
        return MetricChoice(site, key, freqs[self.freq_i % len(freqs)])

    def _recolour(self) -> None:
        die_map = self.query_one(DieMap)
        choice = self._choice()
        if choice is None:
            die_map.colour_by(None)
            self.query_one("#legend", Static).update(legend(None))
        else:
            values = metric_values(self.state, choice)
            die_map.colour_by(values, choice.label)
            self.query_one("#legend", Static).update(legend(values, choice.label))
        self._title()
        self._history()

    def _title(self) -> None:
        die_map = self.query_one(DieMap)
        cur = die_map.cursor
        where = ""
        if cur is not None:
            where = f"cursor die {cur[0]},{cur[1]}: {STATUS_WORD.get(die_map.status.get(cur, ''), 'not in the plan')}"
            if cur in die_map.flagged:
                where += " · a landing kept despite FAIL"
        choice = self._choice()
        what = "status" if choice is None else choice.label
        self.query_one("#wafer-title", Static).update(f"[b]WAFER[/b]  colour: {what}   ·   {where}")

    def _history(self) -> None:
        panel = self.query_one("#history", Static)
        cur = self.query_one(DieMap).cursor
        if not panel.display or cur is None:
            return
        lines = history_panel(self.state, cur)
        panel.border_title = f"die {cur[0]},{cur[1]} history (h closes)"
        panel.update("\n".join(lines[-30:]) if lines else "nothing measured on this die yet")

    def _cursor_moved(self, _die: tuple[int, int] | None) -> None:
        self._title()
        self._history()

    # ---------------------------------------------------------------- keys

    def action_history(self) -> None:
        panel = self.query_one("#history", Static)
        panel.display = not panel.display
        self._history()

    def action_metric(self) -> None:
        if not self.choices:
            self.notify("no line metrics journaled yet: only line and thru sites have them", timeout=3)
            return
        self.choice_i = self.choice_i + 1 if self.choice_i + 1 < len(self.choices) else -1
        self._recolour()

    def action_frequency(self) -> None:
        choice = self._choice()
        if choice is None:
            self.notify("colour by a metric first (m)", timeout=3)
            return
        self.freq_i += 1
        self._recolour()

    def action_go(self) -> None:
        cur = self.query_one(DieMap).cursor
        if cur is not None:
            self.dismiss(("goto", cur))

    def action_skip_die(self) -> None:
        cur = self.query_one(DieMap).cursor
        if cur is not None:
            self.dismiss(("skip-die", cur))

    def action_back(self) -> None:
        self.dismiss(None)
