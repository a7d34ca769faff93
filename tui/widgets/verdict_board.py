"""The verdict board: the overall verdict in large words and symbols, then one
row per check with its figure, limit and where it is worst.

Never colour alone: every verdict carries a word (PASS / WARN / FAIL / N/A) and a
symbol, so it reads on a monochrome terminal and for colour-blind operators.
"""

from __future__ import annotations

from typing import Any, Iterable

from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.reactive import reactive
from textual.widgets import Static

from probelog.verdicts import CheckResult, Verdict, overall
from probelog.tui.widgets.bigtext import render_big

# word, symbol, big symbol key, css class
_LOOK: dict[Verdict, tuple[str, str, str, str]] = {
    Verdict.PASS: ("PASS", "✔", "✔", "v-pass"),
    Verdict.WARN: ("WARN", "▲", "!", "v-warn"),
    Verdict.FAIL: ("FAIL", "✖", "✖", "v-fail"),
    Verdict.NA: ("N/A", "·", "-", "v-na"),
}


def verdict_word(v: Verdict) -> str:
    """``"✖ FAIL"`` style label: symbol and word, never colour alone."""
    word, sym, _, _ = _LOOK[v]
    return f"{sym} {word}"


def format_figure(value: float | None, unit: str) -> str:
    """A check figure with its unit, or an em dash when the check gave none."""
    if value is None:
        return "—"
    mag = abs(value)
    txt = f"{value:.3g}" if (mag >= 1e-3 or mag == 0) and mag < 1e5 else f"{value:.2e}"
    return f"{txt} {unit}".strip()


def format_ghz(at_hz: float | None) -> str:
    """Frequency in GHz (input in Hz) or blank."""
    return "" if at_hz is None else f"{at_hz / 1e9:.1f} GHz"


_CLASSES = tuple(look[3] for look in _LOOK.values()) + ("v-busy",)

_STYLES = {Verdict.PASS: "bold green", Verdict.WARN: "bold yellow",
           Verdict.FAIL: "bold reverse red", Verdict.NA: "dim"}


def checks_table(checks: Iterable[CheckResult], wide: bool = True) -> Group:
    """One row per check (verdict word, name, figure, limit, where), then the
    sentence of every check that did not pass, wrapped, so the reason reads in full."""
    checks = list(checks)
    table = Table(box=None, expand=True, pad_edge=False, show_edge=False)
    table.add_column("verdict", no_wrap=True, min_width=6)
    # the check name gives way first: figure and limit are what the operator reads
    table.add_column("check", no_wrap=True, overflow="ellipsis", ratio=1, min_width=4)
    table.add_column("figure", justify="right", no_wrap=True)
    table.add_column("limit", justify="right", no_wrap=True)
    if wide:  # where the figure is worst; dropped on narrow terminals
        table.add_column("at", justify="right", no_wrap=True)
    for c in checks:
        cells = [Text(verdict_word(c.verdict), style=_STYLES[c.verdict]), c.name,
                 format_figure(c.value, c.unit), format_figure(c.limit, c.unit)]
        table.add_row(*cells, *([format_ghz(c.at_hz)] if wide else []))
    why = [Text.assemble((f"{_LOOK[c.verdict][1]} {c.name}: ", "bold"), c.message)
           for c in checks if c.verdict in (Verdict.FAIL, Verdict.WARN) and c.message]
    return Group(table, *why)


class VerdictBoard(Vertical):
    """Shows the verdict of the landing on screen, or what the bench is doing."""

    DEFAULT_CSS = """
    VerdictBoard { height: auto; border: round $secondary; padding: 0 1; }
    VerdictBoard #big { height: 3; text-style: bold; content-align: center middle; width: 100%; }
    VerdictBoard #caption { height: 1; width: 100%; content-align: center middle; }
    VerdictBoard #checks { height: auto; max-height: 14; }
    VerdictBoard.v-pass { border: heavy $success; }
    VerdictBoard.v-pass #big { color: $success; }
    VerdictBoard.v-warn { border: heavy $warning; }
    VerdictBoard.v-warn #big { color: $warning; }
    VerdictBoard.v-fail { border: double $error; background: $error 15%; }
    VerdictBoard.v-fail #big { color: $error; }
    VerdictBoard.v-busy #big { color: $text-muted; }
    """

    verdict: reactive[Verdict | None] = reactive(None)
    status: reactive[str] = reactive("waiting for the first landing")

    def compose(self) -> ComposeResult:
        yield Static(id="big")
        yield Static(id="caption")
        yield Static(id="checks")

    def show_checks(self, checks: list[CheckResult], caption: str,
                    verdict: Verdict | None = None) -> None:
        """Show a finished set of checks; the overall verdict is the worst one."""
        self._set_checks(checks_table(checks, wide=self.size.width >= 56))
        self.status = caption
        self.verdict = verdict if verdict is not None else overall(checks)
        self.mutate_reactive(VerdictBoard.verdict)

    def show_busy(self, what: str) -> None:
        """The bench is working: no verdict until the sweep is checked."""
        self.verdict = None
        self.status = what
        self._set_checks("")

    def _set_checks(self, content: Any) -> None:
        """Put the checks table up. A layout pass (which measures the whole table)
        is asked for only when the table's height follows its content; a screen
        that gives the board a fixed height (the probe screen) spares it."""
        checks = self.query_one("#checks", Static)
        height = checks.styles.height
        checks.update(content, layout=height is None or height.is_auto)

    def watch_verdict(self, verdict: Verdict | None) -> None:
        big = self.query_one("#big", Static)
        look = "v-busy" if verdict is None else _LOOK[verdict][3]
        # one restyle of the board for the change of look, not one per class touched
        for cls in _CLASSES:
            self.set_class(cls == look, cls, update=False)
        self.update_node_styles(animate=False)
        if verdict is None:
            big.update(Text("· · ·", style="bold"), layout=False)
            self.border_title = "verdict"
            return
        word, sym, bigsym, _ = _LOOK[verdict]
        rows = [s + "  " + w for s, w in zip(render_big(bigsym), render_big(word), strict=False)]
        big.update("\n".join(rows), layout=False)
        self.border_title = f"verdict: {sym} {word}"

    def watch_status(self, status: str) -> None:
        self.query_one("#caption", Static).update(status, layout=False)  # one fixed row

    @property
    def shown_text(self) -> str:
        """Plain text of the board (for tests and the journal cross-check)."""
        word = "" if self.verdict is None else verdict_word(self.verdict)
        return f"{word} {self.status}"


def summarize(outcome: Any) -> str:
    """One caption line for a LandingOutcome: die, site, landing."""
    step = outcome.step
    die = tuple(step.die)
    return f"die {die[0]},{die[1]} · {step.site} ({step.site_kind}) · landing {step.landing}"
