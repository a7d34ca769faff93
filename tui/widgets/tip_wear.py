"""Touchdowns per probe against the probe's rated life, with a wear warning.

The default life (100 000 touchdowns) is common practice for GSG probes on
aluminium pads, no source; a plan may set its own.
"""

from __future__ import annotations

from rich.text import Text
from textual.widget import Widget

DEFAULT_LIFE = 100_000
WARN_FRACTION = 0.8


def wear_state(count: int, life: int, warn_fraction: float = WARN_FRACTION) -> str:
    """'ok', 'worn' (past the warning fraction of life) or 'spent' (past life)."""
    if count >= life:
        return "spent"
    if count >= warn_fraction * life:
        return "worn"
    return "ok"


class TipWear(Widget):
    """One bar per probe: touchdowns used of its life."""

    DEFAULT_CSS = """
    TipWear { border: round $secondary; height: auto; min-height: 4; padding: 0 1; }
    TipWear.worn { border: heavy $warning; }
    """

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.counts: dict[str, int] = {}
        self.life = DEFAULT_LIFE

    def on_mount(self) -> None:
        self.border_title = "tip wear"

    def update_counts(self, counts: dict[str, int], life: int | None = None) -> None:
        relayout = set(counts) != set(self.counts)
        self.counts = dict(counts)
        if life:
            self.life = int(life)
        states = [wear_state(n, self.life) for n in self.counts.values()]
        self.set_class(any(s != "ok" for s in states), "worn")
        self.border_subtitle = "▲ WEAR: check tips" if any(s != "ok" for s in states) else ""
        self.refresh(layout=relayout)  # the height follows the number of probes only

    def get_content_height(self, container, viewport, width) -> int:
        return max(len(self.counts), 1)

    def render(self) -> Text:
        if not self.counts:
            return Text("no touchdowns yet", style="dim")
        # the full probe id: "GSG100-A17" and "GSG100-A19" must not both read "GSG100-A"
        name_w = min(max(len(p) for p in self.counts), 16)
        width = max(self.content_size.width - name_w - 18, 4)
        out = Text(no_wrap=True)
        for i, (probe, n) in enumerate(sorted(self.counts.items())):
            state = wear_state(n, self.life)
            used = min(n / self.life, 1.0)
            fill = int(round(used * width))
            style = {"ok": "green", "worn": "bold yellow", "spent": "bold red"}[state]
            mark = {"ok": " ", "worn": "▲", "spent": "✖"}[state]
            out.append(f"{probe[:name_w]:<{name_w}} {n:>7} ", "bold")
            out.append("█" * fill, style)
            out.append("░" * (width - fill), "grey35")
            out.append(f" {mark}{used:>5.0%}", style)
            if i < len(self.counts) - 1:
                out.append("\n")
        return out
