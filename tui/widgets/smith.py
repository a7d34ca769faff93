"""A Smith chart (or polar chart) of reflection coefficients drawn in braille dots.

Our own widget rather than textual-plotext: plotext stretches its axes to the
widget, so circles come out as ellipses and a Smith grid is not on offer. A
braille cell holds 2 x 4 dots and a terminal cell is about twice as tall as wide,
so dots are square and the unit circle stays round at any size. The chart also
marks the first and last frequency, which is what tells an operator at a glance
whether an open stub turns clockwise (Foster's reactance theorem) as it must.

Reflection coefficients are complex, normalised to the reference impedance;
Gamma = (z - 1) / (z + 1) with z = Z / Z0. Positive imaginary part is up.
"""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.reactive import reactive
from textual.widget import Widget

# Braille dot bit for (dx, dy) inside a 2 x 4 cell (Unicode braille patterns block).
_BITS = np.array([[0x01, 0x02, 0x04, 0x40], [0x08, 0x10, 0x20, 0x80]], dtype=np.uint8)

SMITH_R = (0.0, 0.5, 1.0, 3.0)
SMITH_X = (0.5, 1.0, 3.0)
POLAR_RINGS = (0.25, 0.5, 0.75, 1.0)

TRACE_STYLES = ("bold bright_cyan", "bold bright_magenta")


def z_to_gamma(z: np.ndarray) -> np.ndarray:
    """Reflection coefficient of a normalised impedance z = Z / Z0."""
    return (z - 1.0) / (z + 1.0)


def smith_grid(n: int = 400) -> np.ndarray:
    """Points on the Smith chart's constant-resistance circles and constant-
    reactance arcs (complex Gamma), for r in SMITH_R and x in +-SMITH_X."""
    t = np.linspace(-np.pi / 2 + 1e-3, np.pi / 2 - 1e-3, n)
    pts = [z_to_gamma(r + 1j * np.tan(t)) for r in SMITH_R]
    s = np.tan(np.linspace(0, np.pi / 2 - 1e-3, n))
    for x in SMITH_X:
        pts += [z_to_gamma(s + 1j * x), z_to_gamma(s - 1j * x)]
    pts.append(np.linspace(-1, 1, n) + 0j)  # the real axis
    return np.concatenate(pts)


def polar_grid(n: int = 400) -> np.ndarray:
    """Points on |Gamma| rings and 30-degree spokes (complex Gamma)."""
    th = np.linspace(0, 2 * np.pi, n)
    pts = [r * np.exp(1j * th) for r in POLAR_RINGS]
    radius = np.linspace(0, 1, n // 4)
    pts += [radius * np.exp(1j * np.deg2rad(a)) for a in range(0, 360, 30)]
    return np.concatenate(pts)


def densify(gamma: np.ndarray, per_step: int = 8) -> np.ndarray:
    """Linearly interpolate between successive points so a trace draws as a line."""
    if gamma.size < 2:
        return gamma
    k = np.linspace(0.0, 1.0, per_step, endpoint=False)
    a, b = gamma[:-1, None], gamma[1:, None]
    return np.concatenate([(a + (b - a) * k).ravel(), gamma[-1:]])


def rotation_sense(gamma: np.ndarray) -> float:
    """Total signed turn of Gamma about the chart centre in degrees over the sweep:
    negative is clockwise (what a lossless-ish one-port must do as frequency rises)."""
    if gamma.size < 2:
        return 0.0
    phase = np.unwrap(np.angle(gamma))
    return float(np.rad2deg(phase[-1] - phase[0]))


class Canvas:
    """A width x height cell canvas of braille dots with a square dot scale."""

    def __init__(self, width: int, height: int) -> None:
        self.width, self.height = max(width, 1), max(height, 1)
        self.dots_w, self.dots_h = 2 * self.width, 4 * self.height
        self.radius = max(min(self.dots_w, self.dots_h) / 2 - 1, 1)

    def to_dots(self, gamma: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Dot columns and rows of complex points (inside the unit circle area)."""
        col = np.rint((self.dots_w - 1) / 2 + gamma.real * self.radius).astype(int)
        row = np.rint((self.dots_h - 1) / 2 - gamma.imag * self.radius).astype(int)
        keep = (col >= 0) & (col < self.dots_w) & (row >= 0) & (row < self.dots_h)
        return col[keep], row[keep]

    def layer(self, gamma: np.ndarray) -> np.ndarray:
        """Braille bit patterns (height, width) of the given points."""
        bits = np.zeros((self.height, self.width), dtype=np.uint8)
        col, row = self.to_dots(gamma)
        np.bitwise_or.at(bits, (row // 4, col // 2), _BITS[col % 2, row % 4])
        return bits

    def cell_of(self, gamma: complex) -> tuple[int, int] | None:
        col, row = self.to_dots(np.array([gamma]))
        if col.size == 0:
            return None
        return int(row[0] // 4), int(col[0] // 2)


class SmithChart(Widget):
    """Reflection of up to two ports on a Smith or polar grid; ◦ marks the first
    frequency point and ● the last."""

    DEFAULT_CSS = """
    SmithChart { border: round $secondary; min-width: 20; min-height: 8; }
    """

    mode: reactive[str] = reactive("smith")

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self._traces: list[tuple[str, np.ndarray]] = []
        self.caption = ""
        self.judge_rotation = False
        self._drawn: tuple[tuple, Text] | None = None  # (key, text): drawn once per sweep and size

    def set_traces(self, traces: list[tuple[str, np.ndarray]], caption: str = "",
                   judge_rotation: bool = False) -> None:
        """Show ``[(label, gamma), ...]`` (complex arrays over frequency, first two).
        ``judge_rotation``: say which way the first trace turns (only meaningful for
        a reactive one-port such as an open stub)."""
        self._traces = [(lbl, np.asarray(g, dtype=complex)) for lbl, g in traces[:2]]
        self.caption = caption
        self.judge_rotation = judge_rotation
        self._drawn = None
        self._update_titles()
        self.refresh()

    def clear(self) -> None:
        self.set_traces([], "")

    def toggle_mode(self) -> None:
        self.mode = "polar" if self.mode == "smith" else "smith"

    def watch_mode(self, _mode: str) -> None:
        self._update_titles()
        self.refresh()

    def _update_titles(self) -> None:
        self.border_title = f"{self.mode} · {self.caption}" if self.caption else self.mode
        if self._traces and self.judge_rotation:
            turn = rotation_sense(self._traces[0][1])
            sense = "clockwise ↻" if turn < 0 else "counter-clockwise ↺"
            self.border_subtitle = f"{self._traces[0][0]} turns {sense}"
        elif self._traces:
            self.border_subtitle = "◦ start ● stop"
        else:
            self.border_subtitle = ""

    def render_lines_text(self, width: int, height: int) -> list[Text]:
        """The chart as styled text rows (grid dim, traces bright, end markers)."""
        canvas = Canvas(width, height)
        grid = canvas.layer(smith_grid() if self.mode == "smith" else polar_grid())
        layers = [canvas.layer(densify(g)) for _, g in self._traces]
        chars = np.full((canvas.height, canvas.width), "", dtype=object)
        style = np.full((canvas.height, canvas.width), "grey35", dtype=object)
        combined = grid.copy()
        for i in range(len(layers) - 1, -1, -1):  # first trace drawn on top
            combined |= layers[i]
            style[layers[i] > 0] = TRACE_STYLES[i]
        codes = 0x2800 + combined.astype(np.int32)
        for r in range(canvas.height):
            for c in range(canvas.width):
                chars[r, c] = chr(codes[r, c]) if combined[r, c] else " "
        if self._traces:
            g = self._traces[0][1]
            for point, mark in ((g[0], "◦"), (g[-1], "●")):
                cell = canvas.cell_of(point)
                if cell is not None:
                    chars[cell] = mark
                    style[cell] = "bold bright_white"
        out = []
        for r in range(canvas.height):  # one span per run of equal style, not one per cell
            line = Text("".join(chars[r]))
            row = style[r]
            start = 0
            for c in range(1, canvas.width + 1):
                if c == canvas.width or row[c] != row[start]:
                    line.stylize(row[start], start, c)
                    start = c
            out.append(line)
        return out

    def render(self) -> Text:
        size = self.content_size
        if size.width < 2 or size.height < 2:
            return Text("")
        # Textual calls render() on every repaint of the screen's layout; the chart
        # only changes with new traces, the mode or the size.
        key = (size.width, size.height, self.mode)
        if self._drawn is None or self._drawn[0] != key:
            self._drawn = (key, Text("\n").join(self.render_lines_text(size.width, size.height)))
        return self._drawn[1].copy()
