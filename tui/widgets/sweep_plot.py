"""Magnitude in dB over frequency in GHz for the sweep on screen (textual-plotext).

dB = 20 log10 |S|. Points are capped (decimated by stride) so a redraw stays cheap
whatever the sweep length; the plot redraws once per sweep, never per point.
"""

from __future__ import annotations

import numpy as np
from textual_plotext import PlotextPlot

MAX_POINTS = 401
FLOOR_DB = -120.0  # shown for |S| == 0 instead of -inf


def magnitude_db(s: np.ndarray) -> np.ndarray:
    """20 log10 |s| in dB, with exact zeros shown at FLOOR_DB."""
    mag = np.abs(np.asarray(s))
    with np.errstate(divide="ignore"):
        db = 20.0 * np.log10(mag)
    return np.where(mag > 0, db, FLOOR_DB)


def cap_points(n: int, cap: int = MAX_POINTS) -> slice:
    """A stride slice that keeps at most ``cap`` of ``n`` points, first one included."""
    return slice(None, None, max(1, -(-n // cap)))


def traces_of(s: np.ndarray) -> list[tuple[str, tuple[int, int]]]:
    """The S-parameters worth plotting for an (n_freq, n, n) array."""
    n = s.shape[1]
    if n == 1:
        return [("S11", (0, 0))]
    return [("S11", (0, 0)), ("S21", (1, 0)), ("S12", (0, 1)), ("S22", (1, 1))]


class SweepPlot(PlotextPlot):
    """|S_ij| in dB over frequency for the landing on screen."""

    DEFAULT_CSS = """
    SweepPlot { border: round $secondary; min-height: 8; }
    """

    def on_mount(self) -> None:
        super().on_mount()
        self.border_title = "|S| dB"
        self._draw_empty()

    def _draw_empty(self) -> None:
        self.plt.clear_data()
        self.plt.title("")
        self.plt.xlabel("GHz")
        self.refresh()

    def show_network(self, freq_hz: np.ndarray, s: np.ndarray, caption: str = "") -> None:
        """Plot the magnitude of every S-parameter of an (n_freq, n, n) array."""
        freq_hz, s = np.asarray(freq_hz), np.asarray(s)
        keep = cap_points(freq_hz.size)
        ghz = (freq_hz[keep] / 1e9).tolist()
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        plt.xlabel("GHz")
        for label, (i, j) in traces_of(s):
            plt.plot(ghz, magnitude_db(s[keep, i, j]).tolist(), label=label, marker="braille")
        self.border_title = f"|S| dB · {caption}" if caption else "|S| dB"
        self.refresh()

    def clear(self) -> None:
        self.border_title = "|S| dB"
        self._draw_empty()
