"""The self-contained HTML report of an analyst bundle.

Every plot is drawn with matplotlib's Agg canvas (no pyplot state, no display)
and embedded as a base64 PNG, so the single HTML file can be mailed or archived
and still shows everything. Magnitudes are dB = 20 log10 |S|; frequencies in GHz
on the axes; die rows counted from 0 at the top of the wafer map.
"""

from __future__ import annotations

import base64
import html
import io
import math
import re
from collections import Counter, defaultdict
from dataclasses import dataclass
from typing import Any, Iterable

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib import rc_context
from matplotlib.figure import Figure
from matplotlib.text import Text

from probelog import events as ev
from probelog.pad_free_bundle import section as pad_free_section
from probelog.manifest import ChainStatus, SessionIndex, check_column

VERDICT_COLOURS = {"pass": "#2e7d32", "warn": "#ef8f00", "fail": "#c62828", "n/a": "#9e9e9e"}
ONE_PORT_KINDS = {"open", "short", "load", "open-stub", "short-stub"}


@dataclass
class ReportInputs:
    """Everything the report draws from. ``networks`` maps a manifest row's
    ``seq`` to its (corrected, else raw) skrf.Network; ``cal_networks`` maps a
    journal file path to a Network (verification structures)."""

    index: SessionIndex
    chain: ChainStatus
    networks: dict[int, Any]
    cal_networks: dict[str, Any]
    integrity: list[str]
    metric: str | None
    torn_tail: bool = False


# ---------------------------------------------------------------- helpers


def _png(fig: Figure, alt: str) -> str:
    # Every label comes from the session (wafer ids, site names, line types):
    # plain text, never mathtext, so a '$' in an id is drawn, not parsed.
    for text in fig.findobj(Text):
        text.set_parse_math(False)
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=80)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{data}">'


def _esc(x: Any) -> str:
    if x is None:
        return ""
    if isinstance(x, float):
        return html.escape(f"{x:.4g}")
    return html.escape(str(x))


def _table(header: Iterable[str], rows: Iterable[Iterable[Any]], cls: str = "") -> str:
    head = "".join(f"<th>{_esc(h)}</th>" for h in header)
    body = []
    for r in rows:
        cells = []
        for v in r:
            if isinstance(v, str) and v in VERDICT_COLOURS:
                cells.append(f'<td class="v-{v.replace("/", "")}">{_esc(v)}</td>')
            else:
                cells.append(f"<td>{_esc(v)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    if not body:
        return '<p class="none">None.</p>'
    return f'<table class="{cls}"><thead><tr>{head}</tr></thead><tbody>{"".join(body)}</tbody></table>'


def _die(data: Any) -> str:
    d = getattr(data, "die", None)
    return f"({d[0]}, {d[1]})" if d else ""


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
    z0 = [c for c in index.metric_columns if _metric_kind(c) == "z0"]
    return z0[len(z0) // 2] if z0 else "retries"


def _metric_kind(col: str) -> str | None:
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


# ---------------------------------------------------------------- sections


def _header(inp: ReportInputs) -> str:
    o, chain = inp.index.opened, inp.chain
    s = o.settings
    bench = o.bench
    closed = inp.index.closed
    resumes = inp.index.state.resumes
    rows = [
        ("Session", o.session_id), ("Wafer / lot", f"{o.wafer} / {o.lot}"),
        ("Chip", o.chip), ("Plan", f"{o.plan_name} ({o.plan_file}, SHA-256 {o.plan_sha256})"),
        ("Operator", o.operator), ("Probes", ", ".join(o.probes)),
        ("Bench", f"{bench.get('description', '')} | VNA: {bench.get('vna_idn', '')} | prober: {bench.get('prober_idn', '')}"),
        ("Sweep", f"{_ghz(s.start_hz)} to {_ghz(s.stop_hz)} GHz, {s.points} points, "
                  f"IF bandwidth {s.ifbw_hz} Hz, {s.power_dbm} dBm"),
        ("probelog", o.probelog_version),
        ("Resumed", "; ".join(f"{r.ts} by {r.operator or r.login} (probelog {r.probelog_version})" for r in resumes)
         or "never"),
        ("Closed", "not closed (session ended without session-closed)" if closed is None
         else f"{'completed' if closed.completed else 'stopped early'}: {_summary_text(closed.summary)}"),
    ]
    state = "intact" if chain.ok else "BROKEN"
    count = f"{chain.total} events" if chain.ok else f"intact through line {chain.events} of {chain.total}"
    cls = "ok" if chain.ok else "bad"
    torn = "<p class='bad'>The journal ended in a torn line (crash while writing); it was not read.</p>" if inp.torn_tail else ""
    return (
        f"<h1>Probing session {_esc(o.session_id)}</h1>"
        + _table(("", ""), rows, "kv")
        + f'<div class="chain {cls}"><b>Journal hash chain: {state}</b> ({count}, '
        f"checked by {_esc(chain.checked_by)}){'. ' + _esc(chain.problem) if chain.problem else ''}<br>"
        f"SHA-256 of the last journal line: <code>{chain.last_hash}</code><br>"
        "<small>Copy this hash off the machine: with it, any later edit of the journal shows.</small></div>"
        + torn
    )


def _summary_text(summary: Any) -> str:
    if isinstance(summary, dict):
        return ", ".join(f"{k}: {_summary_text(v)}" for k, v in summary.items())
    return "" if summary is None else str(summary)


def _ghz(hz: Any) -> str:
    return f"{hz / 1e9:g}" if isinstance(hz, (int, float)) else "?"


def _summary(inp: ReportInputs) -> str:
    idx = inp.index
    state = idx.state
    relands = sum(1 for by_site in state.sites.values() for rec in by_site.values()
                  for d in rec.decisions if d.action == "reland")
    verdicts = Counter(r.get("verdict") for r in idx.rows)
    dies = {(r["die_col"], r["die_row"]) for r in idx.rows}
    rows = [
        ("Kept sweeps", len(idx.rows)), ("Dies with kept sweeps", len(dies)),
        ("Sites", len({r["site"] for r in idx.rows})), ("Landings (all)", len(idx.landings)),
        ("Accepted", state.n_accepted),
        ("Accepted despite FAIL", state.n_accepted_despite_fail),
        ("Re-landed", relands), ("Skipped", state.n_skipped),
        ("Given up", state.n_given_up), ("Notes", len(idx.notes)),
        ("Kept verdicts", ", ".join(f"{k}: {v}" for k, v in sorted(verdicts.items()))),
        ("File integrity", "all files present, SHA-256 match" if not inp.integrity
         else f"{len(inp.integrity)} problem(s), see below"),
    ]
    return "<h2 id='summary'>Summary</h2>" + _table(("", ""), rows, "kv")


COUNT_COLUMNS = {"retries", "landing"}


def die_values(rows: list[dict], metric: str) -> tuple[dict[tuple, float], str]:
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
    per_die: dict[tuple, list[float]] = defaultdict(list)
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


def _wafer_map(inp: ReportInputs) -> str:
    from matplotlib.colors import TwoSlopeNorm

    idx, metric = inp.index, inp.metric or default_metric(inp.index)
    values, meaning = die_values(idx.rows, metric)
    worst: dict[tuple, str] = {}
    rank = {"pass": 1, "warn": 2, "fail": 3}
    for r in idx.rows:
        d = (r["die_col"], r["die_row"])
        if rank.get(r.get("verdict"), 0) >= rank.get(worst.get(d, ""), 0):
            worst[d] = r.get("verdict")
    head = f"<h2 id='wafer'>Wafer map: {_esc(metric)}</h2>"
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
    for (c, r), v in worst.items():
        val = grid[r - r0, c - c0]
        ax.add_patch(_die_frame(c, r, VERDICT_COLOURS.get(v, "#9e9e9e")))
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
    note = ("" if values else f"<p class='none'>No kept sweep has a numeric value for '{_esc(metric)}'.</p>")
    return head + f"<p>{_esc(meaning)}. Choose another column with <code>--metric</code>.</p>" \
        + _png(fig, f"wafer map of {metric}") + note


def _die_frame(c: int, r: int, colour: str):
    from matplotlib.patches import Rectangle

    return Rectangle((c - 0.46, r - 0.46), 0.92, 0.92, fill=False, edgecolor=colour, linewidth=2.2)


def _overlays(inp: ReportInputs) -> str:
    by_site: dict[str, list] = defaultdict(list)
    kinds = {}
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
    return head + "<p>Blue |S11|, orange |S21| in dB (one-ports: S11 only). Corrected sweeps where a cal set was active, else raw.</p>" + _png(fig, "overlays per site")


def _calibration(inp: ReportInputs) -> str:
    idx = inp.index
    rows, ver_rows, agr_rows = [], [], []
    std_count: Counter = Counter()
    status: dict[str, str] = {}
    for e in idx.cal_events:
        d = e.data
        if isinstance(d, ev.CalStandard):
            std_count[d.cal_id] += 1
        elif isinstance(d, ev.CalComputed):
            kit = f" (kit SHA-256 {d.kit_sha256[:12]}...)" if d.kit_sha256 else ""
            rows.append([d.cal_id, d.method + kit, ", ".join(d.standards),
                         d.file.path if d.file else "", "yes" if d.ok else "no", d.message])
        elif isinstance(d, ev.CalVerification):
            ver_rows.append([d.cal_id, d.site, _die(d), d.verdict.value,
                             "; ".join(f"{c.name}: {c.verdict.value}" for c in d.checks)])
        elif isinstance(d, ev.CalAgreement):
            agr_rows.append([d.cal_id, f"{d.method} vs {d.other_method}",
                             d.worst, _ghz(d.at_hz), d.verdict.value])
        elif isinstance(d, (ev.CalAccepted, ev.CalRejected)):
            status[str(d.cal_id)] = f"{e.type[4:]}: {d.reason}"
    for r in rows:
        r.insert(3, std_count.get(r[0], 0))
        r.append(status.get(r[0], "no decision"))
    out = ["<h2 id='calibration'>Calibration</h2>",
           _table(("cal set", "method", "standards", "standard sweeps", "file", "solved", "message", "decision"), rows),
           "<h3>Verification structures</h3>",
           _table(("cal set", "site", "die", "verdict", "checks"), ver_rows),
           "<h3>Agreement between algorithms (worst-case bound over passive DUTs)</h3>",
           _table(("cal set", "methods", "worst |dS|", "at GHz", "verdict"), agr_rows)]
    smith = _smith(inp)
    if smith:
        out.append("<h3>Verification stubs on the Smith chart</h3>" + smith)
    return "".join(out)


STUB_KINDS = {"open-stub", "short-stub"}


def smith_background(ax: Any) -> None:
    """scikit-rf's Smith chart grid with plain-text labels: it writes infinity in
    mathtext, and every label of the report is drawn as plain text (see _png)."""
    import skrf

    skrf.plotting.smith(ax=ax, chart_type="z", draw_labels=True)
    for text in ax.texts:
        if text.get_text() == r"$\infty$":
            text.set_text("\u221e")


def _smith(inp: ReportInputs) -> str:
    """Verification stubs (plan kind open-stub / short-stub; every verification
    structure when the plan does not say) on a Smith chart, with |Sii| in dB
    beside it: a passive stub stays inside the chart and below 0 dB."""
    traces = []
    for e in inp.index.cal_events:
        d = e.data
        if not isinstance(d, ev.CalVerification):
            continue
        kind = inp.index.sites.get(d.site, {}).get("kind")
        if kind is not None and kind not in STUB_KINDS:
            continue
        ref = d.corrected or d.raw
        ntwk = inp.cal_networks.get(ref.path) if ref is not None else None
        if ntwk is not None:
            traces.append((f"{d.cal_id} {d.site} {_die(d)}", ntwk, d.verdict.value))
    if not traces:
        return ""
    fig = Figure(figsize=(12, 5.6))
    ax = fig.add_subplot(1, 2, 1)
    mag = fig.add_subplot(1, 2, 2)
    smith_background(ax)
    for label, ntwk, verdict in traces:
        for port, style in ((0, "-"), (1, "--")):
            if ntwk.s.shape[1] <= port:
                continue
            g = ntwk.s[:, port, port]
            name = f"{label} S{port + 1}{port + 1}" + (f" ({verdict})" if port == 0 else "")
            line = ax.plot(g.real, g.imag, style, lw=1.1, label=name)[0]
            ax.plot(g.real[:1], g.imag[:1], "o", ms=4, color=line.get_color())
            mag.plot(ntwk.f / 1e9, 20 * np.log10(np.maximum(np.abs(g), 1e-12)), style, lw=1.1,
                     color=line.get_color(), label=name)
    ax.legend(fontsize=7, loc="lower left")
    ax.set_title("Corrected; dot = first frequency; a passive stub turns clockwise inside the chart", fontsize=8)
    mag.axhline(0.0, color="black", lw=0.8)
    mag.set_xlabel("GHz")
    mag.set_ylabel("|Sii| (dB)")
    mag.grid(alpha=0.3)
    mag.set_title("Above 0 dB is gain: the cal or the stub is wrong", fontsize=8)
    fig.tight_layout()
    return _png(fig, "verification stubs on the Smith chart")


def _line_trends(inp: ReportInputs) -> str:
    idx = inp.index
    head = "<h2 id='lines'>Line metrics against declared geometry</h2>"
    by_kind: dict[str, dict[str, list[str]]] = defaultdict(lambda: defaultdict(list))
    for c in idx.metric_columns:
        k = _metric_kind(c)
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
            if isinstance(band := idx.sites.get(r.get("site"), {}).get("window_band_hz"), list) and len(band) == 2]
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
            "Every line length of a family is pooled.</p>" + _png(fig, "line metrics against width to gap"))


AXIS_LABELS = {"z0_re": "Re Z0 (ohm)", "alpha_db_per_mm": "loss (dB/mm)", "alpha_np_per_m": "alpha (Np/m)",
               "eps_eff": "eps_eff", "q": "Q = beta / (2 alpha)"}
MAX_TABLE_ROWS = 60


def _capped(rows: list, what: str) -> tuple[list, str]:
    """At most MAX_TABLE_ROWS rows in the page; the rest is in the manifest/journal."""
    if len(rows) <= MAX_TABLE_ROWS:
        return rows, ""
    return rows[:MAX_TABLE_ROWS], f"<p class='none'>{len(rows) - MAX_TABLE_ROWS} more {what} not shown here.</p>"


def _checks(inp: ReportInputs) -> str:
    idx = inp.index
    rows = []
    for name, unit in idx.check_units.items():
        counts: Counter = Counter()
        worst = None
        for r in idx.rows:
            col = check_column(name)
            v = r.get(col)
            if v is None:
                continue
            counts[v] += 1
            val = r.get(f"{col}_value")
            if v in ("warn", "fail") and isinstance(val, (int, float)):
                if worst is None or {"warn": 1, "fail": 2}[v] > {"warn": 1, "fail": 2}[worst[0]]:
                    worst = (v, f"{val:.4g} {unit} at d({r['die_col']}, {r['die_row']}) {r['site']}")
        rows.append([name, counts.get("pass", 0), counts.get("warn", 0), counts.get("fail", 0),
                     counts.get("n/a", 0), worst[1] if worst else ""])
    flagged = [[r["die_col"], r["die_row"], r["site"], r["landing"], r["verdict"],
                "; ".join(f"{name}: {r.get(check_column(name))}" for name in idx.check_units
                          if r.get(check_column(name)) in ("warn", "fail")),
                f"{r.get('decision', '')}: {r.get('decision_reason') or ''}".rstrip(": ")]
               for r in idx.rows if r.get("verdict") in ("warn", "fail")]
    flagged.sort(key=lambda x: (x[4] != "fail", x[0], x[1], x[2]))
    flagged, more = _capped(flagged, "rows (filter verdict in manifest.csv)")
    return ("<h2 id='checks'>Checks on kept sweeps</h2>"
            + _table(("check", "pass", "warn", "fail", "n/a", "worst flagged"), rows)
            + f"<h3>Kept despite a warn or fail verdict ({sum(1 for r in idx.rows if r.get('verdict') in ('warn', 'fail'))})</h3>"
            + _table(("die col", "die row", "site", "landing", "verdict", "flagged by", "decision"), flagged) + more)


def _retries_and_notes(inp: ReportInputs) -> str:
    idx = inp.index
    landed: dict[tuple, list[ev.Landing]] = defaultdict(list)
    for e in idx.landings:
        if isinstance(e.data, ev.Landing):
            landed[(e.data.die, e.data.site)].append(e.data)
    reasons: dict[tuple, list[str]] = defaultdict(list)
    other = []
    for e in idx.decisions:
        d = e.data
        if isinstance(d, ev.DieSkipped):
            other.append([e.ts, _die(d), ", ".join(d.sites), "skip (whole die)", d.reason])
            continue
        if not isinstance(d, ev.Decision) or d.standard:
            continue
        k = (d.die, d.site)
        if d.action == ev.RELAND:
            reasons[k].append(f"L{d.landing}: {d.reason}")
        elif d.action in (ev.SKIP, ev.GIVE_UP):
            other.append([e.ts, _die(d), d.site, d.action, d.reason])
    retry_rows = []
    for k, ps in landed.items():
        if len(ps) > 1:
            retry_rows.append([f"({k[0][0]}, {k[0][1]})", k[1], len(ps),
                               " > ".join(p.verdict.value for p in ps), " | ".join(reasons.get(k, []))])
    notes = [[e.ts, _die(e.data), getattr(e.data, "site", None) or "", getattr(e.data, "text", "")]
             for e in idx.notes]
    errs = [[e.ts, e.type, getattr(e.data, "where", "") or "",
             getattr(e.data, "message", "") or getattr(e.data, "reason", "") or ""] for e in idx.errors]
    drifts = [[e.ts, _die(e.data), e.data.site, e.data.verdict.value,
               "; ".join(f"{c.name}: {c.verdict.value}" for c in e.data.checks)]
              for e in idx.drifts if isinstance(e.data, ev.Drift)]
    n_retry = len(retry_rows)
    retry_rows, more = _capped(retry_rows, "re-landed sites (see the retries column of manifest.csv)")
    return (f"<h2 id='retries'>Retries ({n_retry} die/site pairs landed more than once)</h2>"
            + _table(("die", "site", "landings", "verdicts in order", "re-land reasons"), retry_rows) + more
            + "<h3>Skipped and given up</h3>" + _table(("time", "die", "site", "action", "reason"), other)
            + "<h2 id='notes'>Notes</h2>" + _table(("time", "die", "site", "note"), notes)
            + "<h2 id='events'>Drift checks, instrument errors, recoveries</h2>"
            + _table(("time", "die", "site", "verdict", "checks"), drifts)
            + _table(("time", "event", "where", "message"), errs))


def _integrity(inp: ReportInputs) -> str:
    if not inp.integrity:
        return ""
    return ("<h2 id='integrity' class='bad'>File integrity problems</h2><ul>"
            + "".join(f"<li>{_esc(p)}</li>" for p in inp.integrity) + "</ul>")


CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:24px auto;max-width:1180px;color:#212121}
h1{font-size:22px}h2{font-size:18px;border-bottom:1px solid #ccc;padding-top:10px}h3{font-size:15px}
table{border-collapse:collapse;font-size:13px;margin:6px 0 14px}td,th{border:1px solid #ddd;padding:3px 7px;text-align:left;vertical-align:top}
th{background:#f3f3f3}table.kv td:first-child{font-weight:600;white-space:nowrap}
img{max-width:100%}code{font-size:12px;word-break:break-all}
.chain{padding:8px 12px;margin:10px 0;border-radius:4px}.chain.ok{background:#e8f5e9}.chain.bad,.bad{background:#ffebee;color:#b71c1c}
.v-pass{color:#2e7d32}.v-warn{color:#ef8f00;font-weight:600}.v-fail{color:#c62828;font-weight:600}.v-na{color:#9e9e9e}
.none{color:#757575;font-style:italic}nav a{margin-right:12px}
"""


def build_report(inp: ReportInputs) -> str:
    """The whole report as one self-contained HTML string (no external links)."""
    nav = "".join(f'<a href="#{a}">{t}</a>' for a, t in (
        ("summary", "Summary"), ("wafer", "Wafer map"), ("calibration", "Calibration"),
        ("overlays", "Overlays"), ("lines", "Line metrics"), ("padfree", "Pad-free lines"), ("checks", "Checks"),
        ("retries", "Retries"), ("notes", "Notes")))
    # A user's matplotlibrc with text.usetex would hand '$', '_' or '%' in a label to TeX.
    with rc_context({"text.usetex": False, "text.parse_math": False}):
        body = "".join((_header(inp), f"<nav>{nav}</nav>", _summary(inp), _integrity(inp), _wafer_map(inp),
                        _calibration(inp), _overlays(inp), _line_trends(inp),
                        pad_free_section(inp.index, inp.networks), _checks(inp),
                        _retries_and_notes(inp)))
    title = html.escape(f"probelog report {inp.index.opened.session_id}")
    return (f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>{title}</title>"
            f"<style>{CSS}</style></head><body>{body}</body></html>")


def self_contained(page: str) -> bool:
    """True when no src/href points outside the file (http, https or protocol-relative)."""
    return re.search(r"""(?:src|href)\s*=\s*["']?\s*(?:https?:|//)""", page, re.I) is None
