"""The wafer map: one number per die from a manifest column, framed by the die's
worst kept verdict; die rows counted from 0 at the top of the wafer."""

from __future__ import annotations

import math
from collections import defaultdict
from typing import TYPE_CHECKING, Any

import numpy as np
from matplotlib.figure import Figure

from probelog.manifest import SessionIndex
from probelog.report.common import VERDICT_COLOURS, Die, ReportInputs, esc, png

if TYPE_CHECKING:
    from matplotlib.patches import Rectangle


def numeric_columns(index: SessionIndex) -> list[str]:
    """Manifest columns with at least one numeric value: what a wafer map can show."""
    cols = []
    for c in index.columns:
        if any(isinstance(r.get(c), (int, float)) and not isinstance(r.get(c), bool) for r in index.rows):
            cols.append(c)
    return cols


def default_metric(index: SessionIndex) -> str:
    """The wafer map's metric when none is chosen: a line Z0 if the session has
    line metrics, else the number of retries."""
    z0 = [c for c in index.metric_columns if metric_kind(c) == "z0"]
    return z0[len(z0) // 2] if z0 else "retries"


def metric_kind(col: str) -> str | None:
    """Which of Z0 / loss / eps_eff / Q a metric column holds (None: other)."""
    base = col.split("@")[0].lower()
    if base.endswith("_im") or "imag" in base:
        return None
    if base.startswith(("z0", "zc")):
        return "z0"
    if base.startswith(("alpha", "loss", "atten")):
        return "loss"
    if base.startswith(("eps", "er_eff", "eeff")):
        return "eps_eff"
    if base == "q" or base.startswith("q_"):
        return "q"
    return None


COUNT_COLUMNS = {"retries", "landing"}


def die_values(rows: list[dict[str, Any]], metric: str) -> tuple[dict[Die, float], str]:
    """One number per die (col, row) for the wafer map, and what it means.

    Counts (retries) are summed over the die. Other columns are compared site
    by site so different structures do not mix: with several sites, each value
    becomes its deviation from the wafer median of the same site (percent, or
    in the column's unit when a site median is zero or signs differ) and the
    die shows the median deviation; with one site, the die shows its median.
    """
    vals = [(r["die_col"], r["die_row"], r["site"], float(r[metric])) for r in rows
            if isinstance(r.get(metric), (int, float)) and math.isfinite(r[metric])]
    if not vals:
        return {}, metric
    per_die: dict[Die, list[float]] = defaultdict(list)
    if metric in COUNT_COLUMNS:
        for c, r, _s, v in vals:
            per_die[(c, r)].append(v)
        return {d: float(np.sum(v)) for d, v in per_die.items()}, f"{metric}, total per die"
    by_site: dict[str, list[float]] = defaultdict(list)
    for _c, _r, site, v in vals:
        by_site[site].append(v)
    if len(by_site) == 1:
        for c, r, _s, v in vals:
            per_die[(c, r)].append(v)
        return {d: float(np.median(v)) for d, v in per_die.items()}, f"{metric}, median per die ({vals[0][2]})"
    med = {s: float(np.median(v)) for s, v in by_site.items()}
    signs = {np.sign(m) for m in med.values()}
    percent = 0.0 not in signs and len(signs) == 1 and all(
        np.sign(v) == np.sign(med[s]) for _c, _r, s, v in vals)
    for c, r, s, v in vals:
        per_die[(c, r)].append(100 * (v / med[s] - 1) if percent else v - med[s])
    unit = "%" if percent else "difference"
    return ({d: float(np.median(v)) for d, v in per_die.items()},
            f"{metric}: median over the die of each site's deviation from its wafer median ({unit})")


def wafer_map_section(inp: ReportInputs) -> str:
    from matplotlib.colors import TwoSlopeNorm

    idx, metric = inp.index, inp.metric or default_metric(inp.index)
    values, meaning = die_values(idx.rows, metric)
    worst: dict[Die, str] = {}
    rank = {"pass": 1, "warn": 2, "fail": 3}
    for row in idx.rows:
        d = (row["die_col"], row["die_row"])
        verdict = str(row.get("verdict") or "")  # no verdict ranks (and is framed) like an unknown one
        if rank.get(verdict, 0) >= rank.get(worst.get(d, ""), 0):
            worst[d] = verdict
    head = f"<h2 id='wafer'>Wafer map: {esc(metric)}</h2>"
    if not worst:
        return head + "<p class='none'>No kept sweeps.</p>"
    cols = [d[0] for d in worst]
    rows = [d[1] for d in worst]
    c0, c1, r0, r1 = min(cols), max(cols), min(rows), max(rows)
    grid = np.full((r1 - r0 + 1, c1 - c0 + 1), np.nan)
    for (c, r), v in values.items():
        grid[r - r0, c - c0] = v
    fig = Figure(figsize=(7.5, 6.0))
    ax = fig.add_subplot()
    extent = (c0 - 0.5, c1 + 0.5, r1 + 0.5, r0 - 0.5)
    deviation = meaning.endswith(("(%)", "(difference)"))
    finite = grid[np.isfinite(grid)]
    norm, cmap = None, "viridis"
    if deviation and finite.size and finite.min() < 0 < finite.max():
        norm, cmap = TwoSlopeNorm(0.0, finite.min(), finite.max()), "RdBu_r"
    im = ax.imshow(grid, cmap=cmap, norm=norm, extent=extent, interpolation="nearest")
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label(metric + ((" deviation (%)" if meaning.endswith("(%)") else " deviation") if deviation else ""), fontsize=8)
    for (c, r), verdict in worst.items():
        val = grid[r - r0, c - c0]
        ax.add_patch(_die_frame(c, r, VERDICT_COLOURS.get(verdict, "#9e9e9e")))
        if np.isnan(val):
            continue
        red, green, blue, _ = im.cmap(im.norm(val))
        ink = "black" if 0.299 * red + 0.587 * green + 0.114 * blue > 0.55 else "white"
        ax.text(c, r, f"{val:.3g}", ha="center", va="center", fontsize=7, color=ink)
    ax.set_xticks(range(c0, c1 + 1))
    ax.set_yticks(range(r0, r1 + 1))
    ax.set_xlabel("die column")
    ax.set_ylabel("die row")
    ax.set_title(f"{idx.opened.wafer}; die frame: worst kept verdict "
                 "(green pass, orange warn, red fail)", fontsize=9)
    fig.tight_layout()
    note = ("" if values else f"<p class='none'>No kept sweep has a numeric value for '{esc(metric)}'.</p>")
    return head + f"<p>{esc(meaning)}. Choose another column with <code>--metric</code>.</p>" \
        + png(fig, f"wafer map of {metric}") + note


def _die_frame(c: int, r: int, colour: str) -> Rectangle:
    """The frame of die (c, r) on the map, in the colour of its worst verdict."""
    from matplotlib.patches import Rectangle

    return Rectangle((c - 0.46, r - 0.46), 0.92, 0.92, fill=False, edgecolor=colour, linewidth=2.2)
