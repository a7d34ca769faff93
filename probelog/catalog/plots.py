"""Figures of the catalog (matplotlib, Agg): a trend across wafers, pad-free
line figures against width-to-gap ratio, wafer maps, calibration agreement
over time. Each returns a Figure; ``to_bytes`` renders it as PNG or SVG."""

from __future__ import annotations

import io
from collections import defaultdict
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # the bundle's report draws line figures without the catalog's database layer
    from probelog.catalog.queries import Trend


def _plt() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def to_bytes(fig: Any, fmt: str = "png") -> bytes:
    """Render and close ``fig``; ``fmt`` 'png' (100 dpi) or 'svg'."""
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=100, bbox_inches="tight")
    _plt().close(fig)
    return bytes(buf.getvalue())


def trend_figure(t: Trend) -> Any:
    """One box per wafer (session), oldest left, every die as a dot; the x
    labels name lot and wafer."""
    plt = _plt()
    groups: dict[str, list[float]] = defaultdict(list)
    labels: dict[str, str] = {}
    for p in t.points:
        if p["value"] is not None:
            groups[p["session_id"]].append(p["value"])
            labels[p["session_id"]] = f"{p['lot']}\n{p['wafer']}"
    keys = list(groups)
    fig, ax = plt.subplots(figsize=(max(5.0, 0.8 * len(keys) + 2), 3.6))
    if keys:
        ax.boxplot([groups[k] for k in keys], showfliers=False)
        for i, k in enumerate(keys, start=1):
            ax.plot(np.full(len(groups[k]), float(i)), groups[k], ".", color="tab:blue", alpha=0.5)
        ax.set_xticks(range(1, len(keys) + 1), [labels[k] for k in keys], fontsize=7,
                      rotation=30 if len(keys) > 6 else 0)
    at = f" at {t.f_hz / 1e9:.4g} GHz" if t.f_hz else ""
    unit = f" ({t.unit})" if t.unit else ""
    ax.set_ylabel(f"{t.quantity}{unit}")
    ax.set_title(f"{t.quantity} of {t.site}{at}, per wafer", fontsize=10)
    ax.grid(True, alpha=0.3)
    return fig


def line_figures_figure(rows: list[dict[str, Any]], f_hz: float) -> Any:
    """Z0, loss (dB/mm), eps_eff and Q against width-to-gap ratio, pad-free:
    one curve per line type and metal level (median over dies), the die-to-die
    spread (min..max) as a band. ``rows``: line_figures rows at ``f_hz``."""
    plt = _plt()
    panels = [(k, label) for k, label in (("z0_re", "Re Z0 (ohm)"), ("alpha_db_per_mm", "loss (dB/mm)"),
                                          ("eps_eff", "eps_eff"), ("q", "Q"))
              if any(r[k] is not None for r in rows)]  # no Z0 panel without a reference in the plan
    fig, axes = plt.subplots(1, max(1, len(panels)), figsize=(3.5 * max(1, len(panels)), 3.4), squeeze=False)
    axes = axes[0]
    curves: dict[str, dict[float, list[dict[str, Any]]]] = defaultdict(lambda: defaultdict(list))
    for r in rows:
        curves[f"{r['line_type']} {r['metal']}"][r["width_um"] / r["gap_um"]].append(r)
    for ax, (key, label) in zip(axes, panels, strict=False):  # no panel at all: one empty axis
        for name, by_ratio in sorted(curves.items()):
            ratios = sorted(by_ratio)
            vals = [[x[key] for x in by_ratio[w] if x[key] is not None] for w in ratios]
            keep = [i for i, v in enumerate(vals) if v]
            if not keep:
                continue
            x = np.array([ratios[i] for i in keep])
            med = np.array([np.median(vals[i]) for i in keep])
            lo = np.array([min(vals[i]) for i in keep])
            hi = np.array([max(vals[i]) for i in keep])
            (line,) = ax.plot(x, med, "o-", label=name)
            ax.fill_between(x, lo, hi, color=line.get_color(), alpha=0.2)
        ax.set_xscale("log")
        ax.set_xlabel("width / gap")
        ax.set_ylabel(label)
        ax.grid(True, which="both", alpha=0.3)
    if any(ax.get_legend_handles_labels()[0] for ax in axes):
        axes[-1].legend(fontsize=7, loc="best")
    fig.suptitle(f"Pad-free line figures at {f_hz / 1e9:.4g} GHz (two-line method; band: die-to-die min..max)",
                 fontsize=10)
    fig.tight_layout()
    return fig


def wafer_maps_figure(maps: list[dict[str, Any]], cols: int, rows: int) -> Any:
    """Wafer maps side by side: ``maps`` items {title, dies: {(c, r): share of
    sites passed or warned, 0..1}}; a missing die stays blank."""
    plt = _plt()
    n = max(1, len(maps))
    per_row = min(n, 4)
    nrows = (n + per_row - 1) // per_row
    fig, axes = plt.subplots(nrows, per_row, figsize=(3.2 * per_row, 3.3 * nrows), squeeze=False)
    im = None
    for ax in axes.flat:
        ax.set_axis_off()
    for ax, m in zip(axes.flat, maps, strict=False):
        grid = np.full((rows, cols), np.nan)
        for (c, r), v in m["dies"].items():
            if 0 <= c < cols and 0 <= r < rows:
                grid[r, c] = v
        im = ax.imshow(grid, cmap="RdYlGn", vmin=0.0, vmax=1.0)
        ax.set_title(m["title"], fontsize=8)
        ax.set_axis_on()
        ax.set_xticks([])
        ax.set_yticks([])
    if im is not None:
        fig.colorbar(im, ax=axes.ravel().tolist(), shrink=0.7, label="share of sites pass / warn")
    return fig


def agreement_figure(rows: list[dict[str, Any]]) -> Any:
    """Worst calibration-agreement bound against time, one series per method pair."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(7, 3.2))
    series: dict[str, list[dict[str, Any]]] = defaultdict(list)
    for r in rows:
        if r["ts"] is not None and r["worst"] is not None:
            series[f"{r['method']} vs {r['other_method']}"].append(r)
    for name, pts in sorted(series.items()):
        ax.plot([p["ts"] for p in pts], [p["worst"] for p in pts], "o-", label=name)
    ax.set_ylabel("worst |dS| bound")
    ax.ticklabel_format(axis="y", useOffset=False)
    ax.set_title("Calibration agreement over time", fontsize=10)
    ax.grid(True, alpha=0.3)
    if series:
        ax.legend(fontsize=7)
    fig.autofmt_xdate()
    return fig


__all__ = ["trend_figure", "line_figures_figure", "wafer_maps_figure", "agreement_figure", "to_bytes"]
