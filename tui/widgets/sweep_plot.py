"""Magnitude in dB over frequency in GHz for the sweep on screen (textual-plotext).

dB = 20 log10 |S|. Each trace names its S-parameter and ports (S21: into port 2
from port 1). Beside the landing: a reference trace (the median of the landings
kept on the same site in this sitting, so the previous kept landing when there
is one) and the plan's limit on |Sii| of the contact check as a level line.
Points are capped (decimated by stride) so a redraw stays cheap whatever the
sweep length; the plot redraws once per sweep, never per point.
"""

from __future__ import annotations

import numpy as np
from textual_plotext import PlotextPlot

MAX_POINTS = 401
KEPT_MAX = 25  # kept landings per site behind the reference median
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
    """The S-parameters worth plotting for an (n_freq, n, n) array, labelled
    with their ports (S12 is left out: the reciprocity check watches it)."""
    n = s.shape[1]
    if n == 1:
        return [("S11 (p1)", (0, 0))]
    return [("S11 (p1)", (0, 0)), ("S21 (1→2)", (1, 0)), ("S22 (p2)", (1, 1))]


def reference_db(kept: list[np.ndarray]) -> np.ndarray | None:
    """Median |S| in dB over kept landings of one site, each (n_freq, n, n) in dB
    (the previous kept landing when there is one)."""
    if not kept:
        return None
    return np.median(np.stack(kept), axis=0)


def level_limits(checks) -> list[tuple[str, float]]:
    """(label, dB) level lines worth drawing over |S| in dB: the contact check's
    limit, which is a level of |Sii| (see probelog.checks.contact)."""
    out = []
    for c in checks or ():
        if c.name == "contact" and c.unit == "dB" and c.limit is not None:
            out.append((f"limit |Sii| {c.limit:g} dB", float(c.limit)))
    return out


class SweepPlot(PlotextPlot):
    """|S_ij| in dB over frequency for the landing on screen."""

    DEFAULT_CSS = """
    SweepPlot { border: round $secondary; min-height: 8; }
    """

    def on_mount(self) -> None:
        super().on_mount()
        self.kept: dict[str, list[np.ndarray]] = {}
        self.border_title = "|S| dB"
        self._draw_empty()

    def _draw_empty(self) -> None:
        self.plt.clear_data()
        self.plt.title("")
        self.plt.xlabel("GHz")
        self.refresh()

    def show_network(self, freq_hz: np.ndarray, s: np.ndarray, caption: str = "",
                     reference: np.ndarray | None = None, reference_label: str = "",
                     levels: tuple[tuple[str, float], ...] | list[tuple[str, float]] = ()) -> None:
        """Plot the magnitude of every S-parameter of an (n_freq, n, n) array;
        ``reference`` (dB, same shape) in grey, ``levels`` as level lines (dB)."""
        freq_hz, s = np.asarray(freq_hz), np.asarray(s)
        keep = cap_points(freq_hz.size)
        ghz = (freq_hz[keep] / 1e9).tolist()
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        plt.xlabel("GHz")
        traces = traces_of(s)
        if reference is not None and reference.shape == s.shape:
            for n, (_label, (i, j)) in enumerate(traces):
                plt.plot(ghz, reference[keep, i, j].tolist(), marker="dot", color="gray",
                         label=reference_label if n == 0 else None)
        for _label, level in levels:
            plt.hline(level, color="red")
        for label, (i, j) in traces:
            plt.plot(ghz, magnitude_db(s[keep, i, j]).tolist(), label=label, marker="braille")
        self.border_title = f"|S| dB · {caption}" if caption else "|S| dB"
        keys = [label for label, _ in levels] + ([reference_label] if reference is not None else [])
        self.border_subtitle = " · ".join(("red: " + k) if i < len(levels) else ("grey: " + k)
                                          for i, k in enumerate(keys))
        self.refresh()

    def show_landing(self, outcome, net) -> None:
        """A landing: its network, the site's reference and the contact limit."""
        site = outcome.step.site
        ref = reference_db(self.kept.get(site, []))
        label = ("reference: previous kept landing" if len(self.kept.get(site, [])) == 1
                 else f"reference: median of {len(self.kept.get(site, []))} kept landings")
        caption = f"{site} L{outcome.step.landing}"
        self.show_network(net.f, net.s, caption, ref, label, level_limits(outcome.checks))

    def remember(self, outcome) -> None:
        """A landing was kept: it joins its site's reference (same grid only)."""
        net = outcome.corrected if outcome.corrected is not None else outcome.raw
        kept = self.kept.setdefault(outcome.step.site, [])
        db = magnitude_db(net.s)
        if kept and kept[0].shape != db.shape:
            kept.clear()  # another sweep grid: start the reference again
        kept.append(db)
        del kept[:-KEPT_MAX]

    def clear(self) -> None:
        self.border_title = "|S| dB"
        self._draw_empty()
