"""Plots of the kept sweeps: |S11| and |S21| (dB) per site with every die
overlaid, and line metrics against the declared width-to-gap ratio."""

from __future__ import annotations

import math
from collections import Counter, defaultdict
from typing import Any

import numpy as np
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from probelog.report.common import ONE_PORT_KINDS, ReportInputs, png
from probelog.report.wafer_map import metric_kind


def overlays_section(inp: ReportInputs) -> str:
    by_site: dict[str, list[Any]] = defaultdict(list)  # Any: skrf.Network
    kinds: dict[str, str] = {}
    for r in inp.index.rows:
        ntwk = inp.networks.get(r["seq"])
        if ntwk is not None:
            by_site[r["site"]].append(ntwk)
            kinds[r["site"]] = r.get("kind", "")
    head = "<h2 id='overlays'>Sweeps per site, all dies overlaid</h2>"
    if not inp.index.rows:
        return head + "<p class='none'>No kept sweeps.</p>"
    if not by_site:
        return head + "<p class='none'>None of the kept sweeps could be read (see file integrity).</p>"
    sites = sorted(by_site)
    ncol = 4
    nrow = math.ceil(len(sites) / ncol)
    fig = Figure(figsize=(13, 2.6 * nrow))
    for i, site in enumerate(sites):
        ax = fig.add_subplot(nrow, ncol, i + 1)
        nets = by_site[site]
        one_port = kinds[site] in ONE_PORT_KINDS
        for (m, n), colour, label in (((0, 0), "#1565c0", "S11"), ((1, 0), "#e65100", "S21")):
            if one_port and (m, n) != (0, 0):
                continue
            segs = []
            for nt in nets:
                if nt.s.shape[1] <= max(m, n):
                    continue
                db = 20 * np.log10(np.maximum(np.abs(nt.s[:, m, n]), 1e-12))
                segs.append(np.column_stack((nt.f / 1e9, db)))
            if segs:
                ax.add_collection(LineCollection(segs, colors=colour, linewidths=0.7,
                                                 alpha=max(0.15, 1 / math.sqrt(len(segs))), label=label))
        ax.autoscale()
        ax.set_title(f"{site} ({len(nets)} dies)", fontsize=8)
        ax.tick_params(labelsize=7)
        ax.grid(alpha=0.3)
        if i % ncol == 0:
            ax.set_ylabel("dB", fontsize=7)
        if i >= len(sites) - ncol:
            ax.set_xlabel("GHz", fontsize=7)
        if i == 0:
            ax.legend(fontsize=7, loc="lower left")
    # fixed margins: tight_layout would draw the 40-odd panels one extra time
    fig.subplots_adjust(left=0.05, right=0.99, bottom=0.5 / (2.6 * nrow), top=1 - 0.3 / (2.6 * nrow),
                        wspace=0.22, hspace=0.45)
    return head + "<p>Blue |S11|, orange |S21| in dB (one-ports: S11 only). Corrected sweeps where a cal set was active, else raw.</p>" + png(fig, "overlays per site")


def line_trends_section(inp: ReportInputs) -> str:
    idx = inp.index
    head = "<h2 id='lines'>Line metrics against declared geometry</h2>"
    by_kind: dict[str, dict[str, list[str]]] = defaultdict(lambda: defaultdict(list))
    for c in idx.metric_columns:
        k = metric_kind(c)
        if k and "@" in c:
            by_kind[k][c.split("@")[1]].append(c)
    freqs = Counter(f for d in by_kind.values() for f in d)
    lines = [r for r in idx.rows if r.get("line_type") and r.get("w_over_g")]
    if not freqs or not lines:
        return head + "<p class='none'>No line metrics in this session (none journaled, none computed).</p>"
    ordered = sorted(freqs, key=lambda f: float(f[:-3]))
    fsel = max(ordered, key=lambda f: (freqs[f], -abs(ordered.index(f) - len(ordered) // 2)))
    # Single-line figures mean something only inside each site's window band (away
    # from half-wavelengths): take the highest frequency inside every band declared.
    tops = [float(band[1]) for r in lines
            if isinstance(band := idx.sites.get(str(r.get("site")), {}).get("window_band_hz"), list) and len(band) == 2]
    inside = [f for f in ordered if tops and float(f[:-3]) * 1e9 <= min(tops) * (1 + 1e-9)]
    if inside:
        fsel = inside[-1]
    panels = [(k, by_kind[k][fsel][0]) for k in ("z0", "loss", "eps_eff", "q") if by_kind.get(k, {}).get(fsel)]
    fig = Figure(figsize=(12, 3.6 * math.ceil(len(panels) / 2)))
    families = sorted({(r["line_type"], r.get("metal") or "") for r in lines})
    markers = "osD^v<>p*h"
    for i, (_kind, col) in enumerate(panels):
        ax = fig.add_subplot(math.ceil(len(panels) / 2), 2, i + 1)
        for j, fam in enumerate(families):
            pts = [(r["w_over_g"], r[col]) for r in lines
                   if (r["line_type"], r.get("metal") or "") == fam and isinstance(r.get(col), (int, float))]
            if not pts:
                continue
            x, y = np.array(pts, dtype=float).T
            line = ax.plot(x, y, markers[j % len(markers)], ms=4, alpha=0.45, label=f"{fam[0]} {fam[1]}")[0]
            ux = np.unique(x)
            med = [np.median(y[x == u]) for u in ux]
            ax.plot(ux, med, "-", color=line.get_color(), lw=1.4)
        ax.set_xscale("log")
        ticks = sorted({r["w_over_g"] for r in lines})
        ax.set_xticks(ticks, [f"{t:.3g}" for t in ticks])
        ax.minorticks_off()
        ax.set_xlabel("width / gap (declared)")
        ax.set_ylabel(AXIS_LABELS.get(col.split("@")[0], col.split("@")[0]))
        ax.grid(alpha=0.3, which="both")
        if i == 0:
            ax.legend(fontsize=7, title="line type, metal", title_fontsize=7)
    fig.tight_layout()
    return (head + f"<p>At {fsel[:-3]} GHz; dots: kept sweeps (all dies), lines: median per geometry. "
            "Every line length of a family is pooled.</p>" + png(fig, "line metrics against width to gap"))


AXIS_LABELS = {"z0_re": "Re Z0 (ohm)", "alpha_db_per_mm": "loss (dB/mm)", "alpha_np_per_m": "alpha (Np/m)",
               "eps_eff": "eps_eff", "q": "Q = beta / (2 alpha)"}
