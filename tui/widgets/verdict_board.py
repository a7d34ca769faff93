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
from textual.containers import Vertical, VerticalScroll
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


def verdict_word_of(value: str | None) -> str:
    """verdict_word of a journaled verdict value ("pass", "fail", ...), or the value as is."""
    try:
        return verdict_word(Verdict(value))
    except ValueError:
        return str(value)


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


_CLASSES = tuple(look[3] for look in _LOOK.values()) + ("v-busy", "v-error", "v-ref")

_STYLES = {Verdict.PASS: "bold green", Verdict.WARN: "bold yellow",
           Verdict.FAIL: "bold reverse red", Verdict.NA: "dim"}


# what each check's figure is a figure of (S-parameter and port), when its
# message does not name one itself; the formulas are in probelog.checks
_QUANTITY = {"contact": "|Sii| worst port", "passivity": "σmax(S)", "reciprocity": "|S21−S12|",
             "symmetry": "|S11−S22|", "rotation": "∠S11 turn", "line-window": "Z0 from S",
             "repeatability": "Δ|Sij| vs last", "drift": "Δ|Sij| vs ref"}


def _contact_quantity(check: CheckResult) -> str:
    """Contact is judged several ways (probelog.contact, checks.signature,
    standard_checks): name the figure this result gives and, where a higher
    figure is the good side, say so (a 7.2 against a limit of 1 passes)."""
    import re

    msg = check.message or ""
    if "the plan expects" in msg or "transmits as the plan says" in msg:
        return "|S21| in the plan's window"
    if any(k in msg for k in ("transmission", "gets through", "|S21|", "|S12|")):
        return ("raw |S21|" if "raw" in msg else "|S21|") + " ≥ limit"
    if check.unit == "x allowance":
        found = re.search(r"probe (open|short)", msg)
        return f"off the probe {found.group(1) if found else 'open'} ≥ limit"
    if check.unit == "ohm":
        return "Re Z of the short"
    if check.unit == "dB":
        return "|Sii| worst port"
    return ""


def quantity_of(check: CheckResult) -> str:
    """The S-parameter (and port) a check's figure is about: the first one its
    message names (e.g. "S21 at 40.0 GHz"), else what the check measures."""
    import re

    base = check.name.split(" ")[0]
    if base == "contact":
        return _contact_quantity(check)
    if base in ("passivity", "reciprocity", "symmetry", "line-window"):
        return _QUANTITY[base]  # fixed by what the check computes
    found = re.search(r"\|?S(\d)(\d)\|?", check.message or "")
    if found and found.group(1) != found.group(2):
        return f"S{found.group(1)}{found.group(2)} ({found.group(2)}→{found.group(1)})"
    if found:
        return f"S{found.group(1)}{found.group(2)} (port {found.group(1)})"
    return _QUANTITY.get(check.name.split(" ")[0], "")


def checks_table(checks: Iterable[CheckResult], wide: bool = True) -> Group:
    """The sentence of every check that did not pass first, wrapped, so the reason
    reads in full without scrolling; then one row per check (verdict word, name
    and what its figure is of, figure, limit, where). Narrow: two lines a check,
    nothing cut."""
    checks = list(checks)
    why = [Text.assemble((f"{_LOOK[c.verdict][1]} {c.name}: ", "bold"), c.message)
           for c in checks if c.verdict in (Verdict.FAIL, Verdict.WARN) and c.message]
    if not wide:
        lines = []
        for c in checks:
            line = Text.assemble((verdict_word(c.verdict), _STYLES[c.verdict]), " ", (c.name, "bold"))
            what = quantity_of(c)
            if what:
                line.append(f" · {what}", "dim")
            lines.append(line)
            lines.append(Text(f"    {format_figure(c.value, c.unit)}  limit {format_figure(c.limit, c.unit)}"
                              f"  {format_ghz(c.at_hz)}", no_wrap=True, overflow="ellipsis"))
        return Group(*why, *([Text("")] if why else []), *lines)
    table = Table(box=None, expand=True, pad_edge=False, show_edge=False)
    table.add_column("verdict", no_wrap=True, min_width=6)
    # the check name gives way first: figure and limit are what the operator reads
    table.add_column("check", no_wrap=True, overflow="ellipsis", ratio=1, min_width=4)
    table.add_column("figure", justify="right", no_wrap=True)
    table.add_column("limit", justify="right", no_wrap=True)
    table.add_column("at", justify="right", no_wrap=True)
    for c in checks:
        what = quantity_of(c)
        name = Text(c.name)
        if what:
            name.append(f" {what}", style="dim")
        table.add_row(Text(verdict_word(c.verdict), style=_STYLES[c.verdict]), name,
                      format_figure(c.value, c.unit), format_figure(c.limit, c.unit), format_ghz(c.at_hz))
    return Group(*why, *([Text("")] if why else []), table)


class VerdictBoard(Vertical):
    """Shows the verdict of the landing on screen, or what the bench is doing."""

    DEFAULT_CSS = """
    VerdictBoard { height: auto; border: round $secondary; padding: 0 1; }
    VerdictBoard #big { height: 3; text-style: bold; content-align: center middle; width: 100%; }
    VerdictBoard #caption { height: 1; width: 100%; content-align: center middle; }
    VerdictBoard #checks-scroll { height: auto; max-height: 14; }
    VerdictBoard.v-pass { border: heavy $success; }
    VerdictBoard.v-pass #big { color: $success; }
    VerdictBoard.v-warn { border: heavy $warning; }
    VerdictBoard.v-warn #big { color: $warning; }
    VerdictBoard.v-fail { border: double $error; background: $error 15%; }
    VerdictBoard.v-fail #big { color: $error; }
    VerdictBoard.v-busy #big { color: $text-muted; }
    VerdictBoard.v-error { border: double $error; background: $error 30%; }
    VerdictBoard.v-error #big { color: $error; }
    VerdictBoard.v-ref { border: dashed $secondary; }
    VerdictBoard.v-ref #big { color: $text-muted; }
    """

    verdict: reactive[Verdict | None] = reactive(None)
    status: reactive[str] = reactive("waiting for the first landing")
    # "site" (a landing of the plan), "ref" (the drift reference), "error" (an
    # instrument failed: stays until the operator retries or skips)
    mode: str = "site"

    def compose(self) -> ComposeResult:
        yield Static(id="big")
        yield Static(id="caption")
        with VerticalScroll(id="checks-scroll"):
            yield Static(id="checks")

    def show_checks(self, checks: list[CheckResult], caption: str,
                    verdict: Verdict | None = None, reference: bool = False) -> None:
        """Show a finished set of checks; the overall verdict is the worst one.
        ``reference``: the drift reference, not a site of the plan (another look)."""
        self.mode = "ref" if reference else "site"
        self._set_checks(checks_table(checks, wide=self.size.width >= 64))
        self.status = caption
        self.verdict = verdict if verdict is not None else overall(checks)
        self.mutate_reactive(VerdictBoard.verdict)

    def show_busy(self, what: str) -> None:
        """The bench is working: no verdict until the sweep is checked."""
        self.mode = "site"
        self.verdict = None
        self.status = what
        self._set_checks("")
        self.mutate_reactive(VerdictBoard.verdict)

    def show_error(self, title: str, todo: str, detail: str) -> None:
        """An instrument failed: what failed, what to do, the instrument's words.
        Stays until the next show_busy / show_checks (a retry or a skip)."""
        self.mode = "error"
        self.status = title
        self._set_checks(Group(Text(todo, style="bold"), Text(""), Text(detail, style="dim")))
        self.verdict = None
        self.mutate_reactive(VerdictBoard.verdict)

    @property
    def in_error(self) -> bool:
        return self.mode == "error"

    def _set_checks(self, content: Any) -> None:
        """Put the checks table up. A layout pass (which measures the whole table)
        is asked for only when the table's height follows its content; a screen
        that gives the board a fixed height (the probe screen) spares it."""
        checks = self.query_one("#checks", Static)
        height = checks.styles.height
        checks.update(content, layout=height is None or height.is_auto)

    def watch_verdict(self, verdict: Verdict | None) -> None:
        big = self.query_one("#big", Static)
        look = ("v-error" if self.mode == "error" else "v-ref" if self.mode == "ref"
                else "v-busy" if verdict is None else _LOOK[verdict][3])
        # one restyle of the board for the change of look, not one per class touched
        for cls in _CLASSES:
            self.set_class(cls == look, cls, update=False)
        # only the board and the big word change look: restyling the scrolling
        # table under them too would cost a few ms on every verdict
        self.app.stylesheet.update_nodes([self, big], animate=False)
        if self.mode == "error":
            big.update("\n".join(render_big("✖ ERROR")), layout=False)
            self.border_title = "✖ INSTRUMENT ERROR: nothing recorded for this landing"
            return
        if verdict is None:
            big.update(Text("· · ·", style="bold"), layout=False)
            self.border_title = "verdict"
            return
        word, sym, bigsym, _ = _LOOK[verdict]
        if self.mode == "ref":  # small on purpose: not a landing of the plan
            big.update(Text(f"drift reference  {sym} {word}\n(the reference site, not a site of the plan)",
                            justify="center"), layout=False)
            self.border_title = f"drift reference: {sym} {word}"
            return
        rows = [s + "  " + w for s, w in zip(render_big(bigsym), render_big(word), strict=False)]
        big.update("\n".join(rows), layout=False)
        self.border_title = f"verdict: {sym} {word}"

    def watch_status(self, status: str) -> None:
        self.query_one("#caption", Static).update(status, layout=False)  # one fixed row

    @property
    def shown_text(self) -> str:
        """Plain text of the board (for tests and the journal cross-check)."""
        word = "" if self.verdict is None else verdict_word(self.verdict)
        if self.mode == "ref":
            word = f"drift reference {word}"
        elif self.mode == "error":
            word = "ERROR"
        return f"{word} {self.status}"


def summarize(outcome: Any) -> str:
    """One caption line for a LandingOutcome: die, site, landing."""
    step = outcome.step
    die = tuple(step.die)
    return f"die {die[0]},{die[1]} · {step.site} ({step.site_kind}) · landing {step.landing}"
