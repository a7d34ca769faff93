"""The die map: every die of the wafer, coloured and marked by status or shaded by
a chosen metric; arrow keys move a cursor, enter asks to land there next, h shows
what the journal holds for the die under the cursor.

Status marks (never colour alone): ``·`` to do, ``◐`` partly done, ``✔`` done,
``!`` accepted despite a FAIL (with a reason), ``✖`` failed, ``↷`` skipped; the die under
the probes is framed ``[ ]``.
"""

from __future__ import annotations

import math

from rich.text import Text
from textual.binding import Binding
from textual.message import Message
from textual.reactive import reactive
from textual.widget import Widget

Die = tuple[int, int]

STATUS_MARK = {"todo": "·", "partial": "◐", "done": "✔", "accepted-despite-fail": "!", "failed": "✖", "skipped": "↷"}
STATUS_STYLE = {"todo": "grey50", "partial": "bold cyan", "done": "bold green", "accepted-despite-fail": "bold magenta",
                "failed": "bold red", "skipped": "bold yellow"}
SHADES = "░▒▓█"


def shade_index(value: float, lo: float, hi: float) -> int:
    """Which of the four shades a value takes on a linear scale from lo to hi."""
    if not math.isfinite(value):
        return 0
    if hi <= lo:
        return len(SHADES) - 1
    k = int((value - lo) / (hi - lo) * len(SHADES))
    return min(max(k, 0), len(SHADES) - 1)


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
        Binding("enter", "choose", "go to die", tooltip="Land on this die next (asks first)"),
        Binding("h", "history", "die history", tooltip="Show what the journal holds for this die"),
    ]

    class DieChosen(Message):
        """The operator picked a die on the map to land on next."""

        def __init__(self, die: Die) -> None:
            super().__init__()
            self.die = die

    class HistoryWanted(Message):
        """The operator asked what the journal holds for a die."""

        def __init__(self, die: Die) -> None:
            super().__init__()
            self.die = die

    cursor: reactive[Die | None] = reactive(None)
    colour_by: reactive[str] = reactive("status")

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.status: dict[Die, str] = {}
        self.metrics: dict[Die, dict[str, float]] = {}
        self.current: Die | None = None

    def update_state(self, status: dict[Die, str], current: Die | None,
                     metrics: dict[Die, dict[str, float]] | None = None) -> None:
        """New statuses (die -> todo/partial/done/failed/skipped) and the die under the probes."""
        resized = set(self.status) != {tuple(d) for d in status}
        self.status = {tuple(d): s for d, s in status.items()}
        self.current = tuple(current) if current is not None else None
        if metrics is not None:
            self.metrics = metrics
        if self.cursor is None and self.current is not None:
            self.cursor = self.current
        self._titles()
        self.refresh(layout=resized)  # a new layout only when the set of dies changed

    def metric_names(self) -> list[str]:
        return sorted({k for m in self.metrics.values() for k in m})

    def cycle_colouring(self) -> str:
        """status -> each metric in turn -> status; returns the new choice."""
        choices = ["status", *self.metric_names()]
        i = choices.index(self.colour_by) if self.colour_by in choices else 0
        self.colour_by = choices[(i + 1) % len(choices)]
        return self.colour_by

    def watch_colour_by(self, _v: str) -> None:
        self._titles()
        self.refresh()

    def watch_cursor(self, _v: Die | None) -> None:
        self._titles()
        self.refresh()

    def _titles(self) -> None:
        counts = dict.fromkeys(STATUS_MARK, 0)
        for s in self.status.values():
            counts[s] = counts.get(s, 0) + 1
        self.border_title = f"die map · {self.colour_by}"
        self.border_subtitle = " ".join(f"{STATUS_MARK[k]}{counts[k]}" for k in STATUS_MARK)

    def _bounds(self) -> tuple[int, int, int, int]:
        cols = [d[0] for d in self.status] or [0]
        rows = [d[1] for d in self.status] or [0]
        return min(cols), max(cols), min(rows), max(rows)

    def get_content_width(self, container, viewport) -> int:
        c0, c1, _, _ = self._bounds()
        return max(3 * (c1 - c0 + 1) + 4, 24)

    def get_content_height(self, container, viewport, width) -> int:
        _, _, r0, r1 = self._bounds()
        return (r1 - r0 + 1) + 2

    def render(self) -> Text:
        c0, c1, r0, r1 = self._bounds()
        metric = self.colour_by if self.colour_by != "status" else None
        values = [m[metric] for m in self.metrics.values() if metric in m] if metric else []
        lo, hi = (min(values), max(values)) if values else (0.0, 0.0)
        out = Text(no_wrap=True)
        out.append("   " + "".join(f"{c:>3}" for c in range(c0, c1 + 1)) + "\n", "dim")
        for r in range(r0, r1 + 1):
            out.append(f"{r:>3}", "dim")
            for c in range(c0, c1 + 1):
                die = (c, r)
                if die not in self.status:
                    out.append("   ")
                    continue
                st = self.status[die]
                mark, style = STATUS_MARK.get(st, "?"), STATUS_STYLE.get(st, "")
                if metric:
                    v = self.metrics.get(die, {}).get(metric)
                    mark = "·" if v is None else SHADES[shade_index(v, lo, hi)]
                    style = "grey50" if v is None else "bold"
                left, right = ("[", "]") if die == self.current else (" ", " ")
                if die == self.cursor and self.has_focus:
                    style += " reverse"
                out.append(left + mark + right, style)
            out.append("\n")
        if metric:
            out.append(f"{SHADES[0]} {lo:.4g} … {SHADES[-1]} {hi:.4g}", "dim")
        else:
            out.append("[ ] under the probes", "dim")
        return out

    def action_move(self, dc: int, dr: int) -> None:
        if not self.status:
            return
        c, r = self.cursor or next(iter(self.status))
        for step in range(1, 10):  # hop over holes at the wafer's edge
            cand = (c + dc * step, r + dr * step)
            if cand in self.status:
                self.cursor = cand
                return

    def action_choose(self) -> None:
        if self.cursor is not None:
            self.post_message(self.DieChosen(self.cursor))

    def action_history(self) -> None:
        if self.cursor is not None:
            self.post_message(self.HistoryWanted(self.cursor))
