"""Where we are and what comes next, in words, at the top of the bench screens."""

from __future__ import annotations

from typing import Any

from rich.text import Text
from textual.widgets import Static


def kind_name(obj: Any) -> str:
    """Upper-case enum member name (Phase / StepKind), whatever the enum's values."""
    return str(getattr(obj, "name", obj)).upper()


def describe_step(step: Any) -> str:
    """'die 4,4 · cal-load (load) · landing 1' for a Step, or a dash."""
    if step is None:
        return "—"
    die = tuple(step.die)
    what = getattr(step, "standard", None)
    site = f"{what} on {step.site}" if what and what != step.site else step.site
    return f"die {die[0]},{die[1]} · {site} ({step.site_kind}) · landing {step.landing}"


class WhereBar(Static):
    """Three lines: position, next step, what the bench is doing."""

    DEFAULT_CSS = """
    WhereBar { height: 3; padding: 0 1; background: $panel; text-wrap: nowrap; text-overflow: ellipsis; }
    """

    def show(self, here: str, next_: str, doing: str, doing_style: str = "") -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append("HERE  ", "bold")
        text.append(here + "\n")
        text.append("NEXT  ", "bold")
        text.append(next_ + "\n")
        text.append("BENCH ", "bold")
        text.append(doing, doing_style)
        self.update(text, layout=False)  # three fixed rows: no layout pass
