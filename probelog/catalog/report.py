"""``write_report(cat, path)``: the lab report, one self-contained HTML page
across sessions: sessions (damaged ones flagged), wafer maps side by side,
trends across wafers, pad-free line figures against width-to-gap ratio, yield,
probe wear, calibration agreement over time. Plots are inline PNG (base64);
every text from the database is HTML-escaped."""

from __future__ import annotations

import base64
import html
import os
from collections import defaultdict
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from sqlalchemy import select

from probelog.catalog.db import Catalog, CatalogError
from probelog.catalog.plots import agreement_figure, line_figures_figure, to_bytes, trend_figure, wafer_maps_figure
from probelog.catalog.queries import (
    PAD_FREE,
    _filters,
    agreement_over_time,
    list_sessions,
    trend,
    wear,
    yield_table,
)
from probelog.catalog.schema import line_figures, sessions, site_results

REPORT_HZ = 40e9
"""Frequency of the report's line figures (the journaled one nearest), Hz."""

_CSS = """body{font-family:system-ui,sans-serif;margin:24px;color:#222;max-width:1400px}
h1{font-size:22px}h2{font-size:17px;margin-top:28px;border-bottom:1px solid #ccc}
table{border-collapse:collapse;font-size:12px;margin:8px 0}td,th{border:1px solid #ddd;padding:3px 7px}
th{background:#f3f3f3;text-align:left}td.n{text-align:right}.bad{color:#b00;font-weight:600}
.note{color:#555;font-size:12px}img{max-width:100%}"""


def _e(x: Any) -> str:
    return html.escape("-" if x is None else str(x))


def _img(fig: Any, alt: str) -> str:
    data = base64.b64encode(to_bytes(fig, "png")).decode("ascii")
    return f'<img alt="{_e(alt)}" src="data:image/png;base64,{data}">'


def _table(head: list[str], rows: list[list[Any]], numeric: frozenset[int] | set[int] = frozenset()) -> str:
    out = ["<table><tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"]
    for r in rows:
        cells = []
        for i, v in enumerate(r):
            cls = ' class="n"' if i in numeric else ""
            cells.append(f"<td{cls}>{v if isinstance(v, _Raw) else _e(v)}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    return "\n".join(out) + "</table>"


class _Raw(str):
    """Already-escaped HTML for a table cell."""


def _day(t: datetime | None) -> str:
    return t.strftime("%Y-%m-%d %H:%M") if t else "-"


def _pct(x: float | None) -> str:
    return "-" if x is None else f"{100 * x:.0f} %"


def _wafer_maps(cat: Catalog, lot: str | None, since: datetime | None) -> str:
    q = select(sessions.c.session_id, sessions.c.lot, sessions.c.wafer, sessions.c.opened_at,
               site_results.c.die_col, site_results.c.die_row, site_results.c.outcome) \
        .select_from(site_results.join(sessions, sessions.c.session_id == site_results.c.session_id)) \
        .order_by(sessions.c.opened_at)
    dies: dict[str, dict[tuple[int, int], list[int]]] = defaultdict(lambda: defaultdict(lambda: [0, 0]))
    titles: dict[str, str] = {}
    with cat.engine.connect() as conn:
        for r in conn.execute(_filters(q, lot, since)):
            titles[r.session_id] = f"{r.lot} / {r.wafer}\n{_day(r.opened_at)}"
            if r.outcome in ("skipped", "open"):
                continue
            cell = dies[r.session_id][(r.die_col, r.die_row)]
            cell[0] += r.outcome in ("pass", "warn")
            cell[1] += 1
    if not dies:
        return "<p>No decided sites.</p>"
    cols = 1 + max(c for d in dies.values() for c, _ in d)
    rows = 1 + max(r for d in dies.values() for _, r in d)
    maps = [{"title": titles[sid], "dies": {k: v[0] / v[1] for k, v in d.items() if v[1]}} for sid, d in dies.items()]
    return _img(wafer_maps_figure(maps, cols, rows), "wafer maps") + \
        '<p class="note">Each die: share of its decided sites that passed or warned (red 0, green 1); blank: not probed.</p>'


def _line_section(cat: Catalog, lot: str | None, since: datetime | None) -> str:
    q = select(line_figures, sessions.c.lot).select_from(
        line_figures.join(sessions, sessions.c.session_id == line_figures.c.session_id))
    with cat.engine.connect() as conn:
        rows = [dict(r._mapping) for r in conn.execute(_filters(q, lot, since))]
    if not rows:
        return "<p>No line family was measured at two lengths on a die: no pad-free figures.</p>"
    freqs = sorted({r["f_hz"] for r in rows})
    f = min(freqs, key=lambda x: abs(x - REPORT_HZ))
    at = [r for r in rows if abs(r["f_hz"] - f) <= 0.02 * f]
    parts = [_img(line_figures_figure(at, f), "pad-free line figures")]
    if all(r["z0_re"] is None for r in at):
        parts.append('<p class="note">Z0 needs a capacitance (c_ref_pf_per_mm) or Z0 reference (z0_ref_ohm) '
                     "in the plan's site table; none was stated, so Z0 is left out rather than guessed.</p>")
    fams: dict[str, str] = {}
    for r in at:
        fams.setdefault(r["family"], r["site_a"])
    for fam, site in list(fams.items())[:4]:
        for qty in ("eps_eff", "alpha_db_per_mm"):
            try:
                t = trend(cat, PAD_FREE + qty, site, f, lot, since)
            except CatalogError:
                continue
            parts.append(_img(trend_figure(t), f"{fam} {qty}"))
    return "\n".join(parts)


def _yield_pivot(ys: list[dict[str, Any]]) -> str:
    sites = sorted({y["site"] for y in ys})
    rows: dict[str, list[Any]] = {}
    for y in ys:
        row = rows.setdefault(y["session_id"], [y["lot"], y["wafer"], _day(y["opened_at"])] + [None] * len(sites))
        extra = ", ".join(f"{k} {y[c]}" for k, c in (("fail", "fail"), ("af", "accepted_fail"), ("skip", "skipped"))
                          if y[c])
        cell = _pct(y["yield"]) + (f" ({extra})" if extra else "")
        row[3 + sites.index(y["site"])] = _Raw(f'<span class="bad">{_e(cell)}</span>') if extra else cell
    return _table(["lot", "wafer", "opened", *sites], list(rows.values()), set(range(3, 3 + len(sites))))


def build_report(cat: Catalog, lot: str | None = None, since: datetime | None = None) -> str:
    """The page as a string."""
    ss = list_sessions(cat, lot, since)
    scope = ", ".join(x for x in (f"lot {lot}" if lot else "", f"since {since:%Y-%m-%d}" if since else "") if x)
    now = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    out = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>probelog lab report</title>"
           f"<style>{_CSS}</style></head><body>",
           f"<h1>Lab report: {len(ss)} session(s){_e(' (' + scope + ')') if scope else ''}</h1>",
           f'<p class="note">Catalog {_e(cat.url)}, written {now}.</p>', "<h2>Sessions</h2>"]
    damaged = [s for s in ss if s["status"] != "ok"]
    if damaged:
        out.append(f'<p class="bad">{len(damaged)} damaged session(s): their figures are not to be trusted '
                   "until `probelog verify` explains them.</p>")
    out.append(_table(
        ["lot", "wafer", "chip", "operator", "station", "opened", "status", "pass", "warn", "fail", "acc-fail", "skip"],
        [[s["lot"], s["wafer"], s["chip"], s["operator"], s["station"], _day(s["opened_at"]),
          _Raw(f'<span class="bad">{_e(s["status"])}: {_e(s["problem"])}</span>') if s["status"] != "ok" else "ok",
          s["pass"], s["warn"], s["fail"], s["accepted_fail"], s["skipped"]] for s in ss], set(range(7, 12))))
    out += ["<h2>Wafer maps</h2>", _wafer_maps(cat, lot, since)]
    out += ["<h2>Pad-free line figures and their trends across wafers</h2>",
            '<p class="note">Two-line method (probelog.lines.gamma_two_lines): the same line type, width, gap '
            "and metal at two lengths on a die; free of the GSG pads.</p>", _line_section(cat, lot, since)]
    out += ["<h2>Yield per site and wafer</h2>",
            '<p class="note">One row a session, one column a site: share of decided dies that passed or warned; '
            "then fail (given up after re-landings), af (accepted by the operator despite a FAIL), skip.</p>",
            _yield_pivot(yield_table(cat, lot, since))]
    ws = wear(cat, lot, since)
    out += ["<h2>Probe wear</h2>", _table(
        ["probe", "sessions", "touchdowns", "wear limit", "used", "first", "last"],
        [[w["probe_id"], w["sessions"], w["touchdowns"], w["wear_limit"],
          _Raw(f'<span class="bad">{_pct(w["used"])}</span>') if (w["used"] or 0) >= 1 else _pct(w["used"]),
          _day(w["first"]), _day(w["last"])] for w in ws], {1, 2, 3, 4})]
    ag = agreement_over_time(cat, lot, since)
    out.append("<h2>Calibration agreement over time</h2>")
    if ag:
        out.append(_img(agreement_figure(ag), "calibration agreement"))
        out.append(_table(["when", "lot", "wafer", "station", "cal", "methods", "worst bound", "at GHz", "verdict"],
                          [[_day(a["ts"]), a["lot"], a["wafer"], a["station"], a["cal_id"],
                            f"{a['method']} vs {a['other_method']}", None if a["worst"] is None else f"{a['worst']:.4f}",
                            None if a["at_hz"] is None else f"{a['at_hz'] / 1e9:.4g}", a["verdict"]] for a in ag],
                          {6, 7}))
    else:
        out.append("<p>No calibration comparisons recorded.</p>")
    out.append("</body></html>")
    return "\n".join(out)


def write_report(cat: Catalog, path: str | Path, lot: str | None = None, since: datetime | None = None) -> Path:
    """Write the page atomically (temporary name, then rename); returns its path."""
    path = Path(path)
    if not path.parent.is_dir():
        raise CatalogError(f"{path}: folder {path.parent} does not exist")
    page = build_report(cat, lot, since)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    tmp.write_text(page, encoding="utf-8")
    tmp.replace(path)
    return path


__all__ = ["build_report", "write_report", "REPORT_HZ"]
