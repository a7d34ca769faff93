"""The die map: every die of the wafer inside its outline, marked by status or
shaded by a chosen metric; arrow keys move a cursor, enter asks to land there
next, h opens the history of the die under the cursor.

Marks (never colour alone): ``·`` to do, ``◐`` partly done, ``✔`` done, ``✖``
failed, ``↷`` skipped, ``!`` done with a FAIL kept; a ``!`` beside a die: a landing kept despite a FAIL; a
``c``: the calibration die; the die under the probes is framed ``[ ]``. By
metric, the four shades ``░▒▓█`` run from the lowest to the highest value shown.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from rich.text import Text
from textual.binding import Binding
from textual.message import Message
from textual.reactive import reactive
from textual.widget import Widget

from probelog.state import ACCEPTED_DESPITE_FAIL, DONE, FAILED, NOT_STARTED, PARTIAL, SKIPPED

Die = tuple[int, int]

# keyed by the state's die status values (probelog.state), the one list of them
STATUS_MARK = {NOT_STARTED: "·", PARTIAL: "◐", DONE: "✔", ACCEPTED_DESPITE_FAIL: "!", FAILED: "✖", SKIPPED: "↷"}
STATUS_WORD = {NOT_STARTED: "to do", PARTIAL: "partly done", DONE: "done",
               ACCEPTED_DESPITE_FAIL: "done with a FAIL kept", FAILED: "failed", SKIPPED: "skipped"}
STATUS_STYLE = {NOT_STARTED: "grey50", PARTIAL: "bold cyan", DONE: "bold green", ACCEPTED_DESPITE_FAIL: "bold magenta",
                FAILED: "bold red", SKIPPED: "bold yellow"}
SHADES = "░▒▓█"
SHADE_STYLE = ("blue", "cyan", "yellow", "bold red")
OUTLINE = "•"


def _die(d: Sequence[int]) -> Die:
    return int(d[0]), int(d[1])


def shade_index(value: float, lo: float, hi: float) -> int:
    """Which of the four shades a value takes on a linear scale from lo to hi."""
    if not math.isfinite(value):
        return 0
    if hi <= lo:
        return len(SHADES) - 1
    k = int((value - lo) / (hi - lo) * len(SHADES))
    return min(max(k, 0), len(SHADES) - 1)


def legend(values: dict[Die, float] | None, label: str = "") -> Text:
    """The key to the map's marks (by status) or shades (by metric)."""
    out = Text(no_wrap=False)
    if values is None:
        for k, mark in STATUS_MARK.items():
            if k == "accepted-despite-fail":
                continue  # the "!" entry below says it
            out.append(f"{mark} {STATUS_WORD[k]}  ", STATUS_STYLE[k])
        out.append("! kept despite FAIL  c cal die  [ ] probes here", "dim")
        return out
    finite = [v for v in values.values() if math.isfinite(v)]
    lo, hi = (min(finite), max(finite)) if finite else (0.0, 0.0)
    out.append(f"{label}: ", "bold")
    for i, sh in enumerate(SHADES):
        a = lo + (hi - lo) * i / len(SHADES)
        out.append(f"{sh}", SHADE_STYLE[i])
        out.append(f" {a:.4g}  ")
    out.append(f"… {hi:.4g}   · no value", "dim")
    return out


class DieMap(Widget, can_focus=True):
    """The wafer as a grid of dies; state comes from ``engine.wafer_status``."""

    DEFAULT_CSS = """
    DieMap { border: round $secondary; height: auto; min-height: 5; padding: 0 1; }
    DieMap:focus { border: heavy $accent; }
    """
    BINDINGS = [
        Binding("up", "move(0,-1)", "up", show=False),
        Binding("down", "move(0,1)", "down", show=False),
        Binding("left", "move(-1,0)", "left", show=False),
        Binding("right", "move(1,0)", "right", show=False),
    ]

    class DieChosen(Message):
        """The operator picked a die on the map to land on next."""

        def __init__(self, die: Die) -> None:
            super().__init__()
            self.die = die

    cursor: reactive[Die | None] = reactive(None)

    def __init__(self, *args, big: bool = False, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.big = big  # full-screen: wider cells, the wafer outline
        self.status: dict[Die, str] = {}
        self.values: dict[Die, float] | None = None  # None: marks by status
        self.value_label = ""
        self.current: Die | None = None
        self.cal_die: Die | None = None
        self.flagged: set[Die] = set()

    def update_state(self, status: dict[Die, str], current: Die | None, *, cal_die: Die | None = None,
                     flagged: set[Die] | None = None) -> None:
        """New statuses (die -> todo/partial/done/failed/skipped), the die under the
        probes, the calibration die, the dies with a landing kept despite a FAIL."""
        # (column, row) pairs as tuples whatever sequence they came as (a journal gives lists)
        fresh = {_die(d): s for d, s in status.items()}
        resized = set(self.status) != set(fresh)
        self.status = fresh
        self.current = _die(current) if current is not None else None
        if cal_die is not None:
            self.cal_die = _die(cal_die)
        if flagged is not None:
            self.flagged = set(flagged)
        if self.cursor is None and self.status:
            self.cursor = self.current if self.current in self.status else next(iter(self.status))
        self._titles()
        self.refresh(layout=resized)  # a new layout only when the set of dies changed

    def colour_by(self, values: dict[Die, float] | None, label: str = "") -> None:
        """Shade by ``values`` (die -> figure), or back to status marks with None."""
        self.values, self.value_label = values, label
        self._titles()
        self.refresh()

    def watch_cursor(self, _v: Die | None) -> None:
        self._titles()
        self.refresh()

    def _titles(self) -> None:
        counts = dict.fromkeys(STATUS_MARK, 0)
        for s in self.status.values():
            counts[s] = counts.get(s, 0) + 1
        self.border_title = "wafer" + (f" · {self.value_label}" if self.values is not None else " · status")
        self.border_subtitle = " ".join(f"{STATUS_MARK[k]}{counts[k]}" for k in STATUS_MARK)

    def _bounds(self) -> tuple[int, int, int, int]:
        dies = list(self.status) + ([self.cal_die] if self.cal_die is not None else [])
        cols = [d[0] for d in dies] or [0]
        rows = [d[1] for d in dies] or [0]
        return min(cols), max(cols), min(rows), max(rows)

    def _cell(self) -> tuple[int, int]:
        """(width, height) in characters of one die; 5 x 2 is close to square."""
        return (5, 2) if self.big else (3, 1)

    def _margin(self) -> int:
        return 1 if self.big else 0  # dies of room around the grid for the outline

    def get_content_width(self, container, viewport) -> int:
        c0, c1, _, _ = self._bounds()
        cw, _ = self._cell()
        return max(cw * (c1 - c0 + 1 + 2 * self._margin()) + 3, 24)

    def get_content_height(self, container, viewport, width) -> int:
        _, _, r0, r1 = self._bounds()
        _, ch = self._cell()
        return ch * (r1 - r0 + 1 + 2 * self._margin()) + 1

    def _mark(self, die: Die) -> tuple[str, str]:
        st = self.status[die]
        if self.values is None:
            return STATUS_MARK.get(st, "?"), STATUS_STYLE.get(st, "")
        v = self.values.get(die)
        if v is None or not math.isfinite(v):
            return "·", "grey50"
        finite = [x for x in self.values.values() if math.isfinite(x)]
        k = shade_index(v, min(finite), max(finite))
        return SHADES[k], SHADE_STYLE[k]

    def render(self) -> Text:
        c0, c1, r0, r1 = self._bounds()
        cw, ch = self._cell()
        m = self._margin()
        ncol, nrow = c1 - c0 + 1 + 2 * m, r1 - r0 + 1 + 2 * m
        # the outline: a circle round the grid's centre through its farthest die corner
        cx, cy = (ncol - 1) / 2, (nrow - 1) / 2
        radius = max((math.hypot(d[0] - c0 + m - cx, d[1] - r0 + m - cy) for d in self.status), default=0.1) + 0.9
        out = Text(no_wrap=True)
        out.append("   " + "".join(f"{c:^{cw}}" for c in range(c0 - m, c1 + m + 1)) + "\n", "dim")
        for gr in range(nrow):
            r = r0 - m + gr
            for sub in range(ch):
                out.append(f"{r:>3}" if sub == ch - 1 else "   ", "dim")  # on the marks' row
                for gc in range(ncol):
                    die = (c0 - m + gc, r)
                    if die not in self.status:
                        if die == self.cal_die and sub == ch - 1:  # calibrated on, not probed
                            out.append(f"{'c':^{cw}}", "bold yellow")
                        else:
                            out.append(self._outline_cell(gc, gr, sub, cx, cy, radius, cw, ch), "dim")
                        continue
                    if sub != ch - 1 and ch > 1:  # the upper row of a tall cell: flags
                        flag = ("c" if die == self.cal_die else " ") + ("!" if die in self.flagged else " ")
                        out.append(f"{flag:^{cw}}", "bold yellow")
                        continue
                    mark, style = self._mark(die)
                    left, right = ("[", "]") if die == self.current else (" ", " ")
                    if ch == 1:  # flags in the frame's place when there is no room above
                        if die != self.current:
                            right = "!" if die in self.flagged else "c" if die == self.cal_die else " "
                    if die == self.cursor and self.has_focus:
                        style += " reverse"
                    body = left + mark + right
                    out.append(f"{body:^{cw}}", style)
                out.append("\n")
        return out

    @staticmethod
    def _outline_cell(gc, gr, sub, cx, cy, radius, cw, ch) -> str:
        """Characters of an empty cell: a dot where the wafer's edge passes."""
        chars = []
        for k in range(cw):
            x = gc + (k + 0.5) / cw - 0.5
            y = gr + (sub + 0.5) / ch - 0.5
            d = math.hypot(x - cx, y - cy)
            chars.append(OUTLINE if abs(d - radius) < 0.5 / cw * 2 and k % 2 == 0 else " ")
        return "".join(chars)

    def action_move(self, dc: int, dr: int) -> None:
        if not self.status:
            return
        c, r = self.cursor or next(iter(self.status))
        for step in range(1, 10):  # hop over holes at the wafer's edge
            cand = (c + dc * step, r + dr * step)
            if cand in self.status:
                self.cursor = cand
                return
