"""What analysts ask the catalog: sessions, trends, yield, probe wear.

Each function takes an open :class:`~probelog.catalog.db.Catalog` and returns
plain rows (dicts); the command line and the lab report format them. Only
landings whose files passed their hash check enter a trend.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from statistics import median
from typing import Any

from sqlalchemy import Select, and_, case, func, or_, select, true
from sqlalchemy.engine import Connection

from probelog.catalog.db import Catalog, CatalogError
from probelog.catalog.schema import (
    METRIC_COLUMNS,
    cal_agreement,
    checks,
    line_figures,
    metrics,
    sessions,
    site_results,
    touchdowns,
)

OUTCOMES = ("pass", "warn", "fail", "accepted-fail", "skipped", "open")
PAD_FREE = "padfree."
UNITS = {"z0_re": "ohm", "z0_im": "ohm", "alpha_db_per_mm": "dB/mm", "beta_rad_per_mm": "rad/mm",
         "eps_eff": "", "r_ohm_per_m": "ohm/m", "l_h_per_m": "H/m", "g_s_per_m": "S/m",
         "c_f_per_m": "F/m", "q": ""}


def _filters(q: Select[Any], lot: str | None, since: datetime | None) -> Select[Any]:
    if lot:
        q = q.where(sessions.c.lot == lot)
    if since:
        q = q.where(sessions.c.opened_at >= since)
    return q


def list_sessions(cat: Catalog, lot: str | None = None, since: datetime | None = None) -> list[dict[str, Any]]:
    """One row per session: ids, wafer, lot, chip, operator, station, dates,
    status, and counts of site outcomes (pass, warn, fail incl. given up,
    accepted-fail, skipped, open), oldest first."""
    counts = [func.sum(case((site_results.c.outcome == o, 1), else_=0)).label(o.replace("-", "_"))
              for o in ("pass", "warn", "given-up", "accepted-fail", "skipped", "open")]
    sub = select(site_results.c.session_id, *counts).group_by(site_results.c.session_id).subquery()
    q = select(sessions, *(func.coalesce(c, 0).label(c.name) for c in sub.c if c.name != "session_id")) \
        .select_from(sessions.outerjoin(sub, sub.c.session_id == sessions.c.session_id)) \
        .order_by(sessions.c.opened_at, sessions.c.session_id)
    with cat.engine.connect() as conn:
        rows = [dict(r._mapping) for r in conn.execute(_filters(q, lot, since))]
    for r in rows:
        r["fail"] = r.pop("given_up")
    return rows


@dataclass
class Trend:
    """A quantity of one site across sessions: ``points`` one per kept landing
    (lot, wafer, session_id, opened_at, die_col, die_row, value), ``f_hz`` the
    frequency used (None for a check figure), ``per_wafer`` n / median / min / max."""

    quantity: str
    site: str
    unit: str
    f_hz: float | None
    points: list[dict[str, Any]] = field(default_factory=list)

    @property
    def per_wafer(self) -> list[dict[str, Any]]:
        groups: dict[tuple[Any, ...], list[dict[str, Any]]] = {}
        for p in self.points:
            groups.setdefault((p["lot"], p["wafer"], p["session_id"]), []).append(p)
        out = []
        for (lot, wafer, sid), pts in groups.items():
            vals = [p["value"] for p in pts if p["value"] is not None]
            out.append({"lot": lot, "wafer": wafer, "session_id": sid, "opened_at": pts[0]["opened_at"],
                        "n": len(vals), "median": median(vals) if vals else None,
                        "min": min(vals, default=None), "max": max(vals, default=None)})
        return out


def quantities(cat: Catalog) -> list[str]:
    """Every name ``trend`` accepts: metric columns, pad-free figures, check names."""
    with cat.engine.connect() as conn:
        names = [r[0] for r in conn.execute(select(checks.c.name).distinct().order_by(checks.c.name))]
    return list(METRIC_COLUMNS) + [PAD_FREE + m for m in METRIC_COLUMNS] + names


def _pick_f(conn: Connection, col: Any, source: Any, where: Any, at_hz: float | None, what: str) -> float:
    freqs = sorted(r[0] for r in conn.execute(select(col).distinct().select_from(source).where(where))
                   if r[0] is not None)
    if not freqs:
        raise CatalogError(f"{what}: no kept landings with this figure in the catalog")
    if at_hz is None:
        return float(freqs[len(freqs) // 2])
    return float(min(freqs, key=lambda f: abs(f - at_hz)))


def trend(cat: Catalog, quantity: str, site: str, at_hz: float | None = None,
          lot: str | None = None, since: datetime | None = None) -> Trend:
    """``quantity`` of ``site`` per kept landing across sessions.

    ``quantity``: a line metric journaled with the landing (``z0_re``,
    ``alpha_db_per_mm``, ``eps_eff``, ``q``, ...: single-line, pads included), a
    pad-free figure ``padfree.<metric>`` (``site`` is either line of the pair or
    the family name), or a check name (its measured figure). ``at_hz``: the
    journaled frequency nearest to it (default: the middle one). Raises
    CatalogError for an unknown quantity or no data.
    """
    # the value rows without the sessions join (joined here from one small query): the
    # hot path is an index search on site, then primary-key lookups (SQLite and PostgreSQL)
    with cat.engine.connect() as conn:
        if quantity in METRIC_COLUMNS:
            where = and_(site_results.c.site == site, site_results.c.files_ok.is_(True))
            j = metrics.join(site_results, and_(site_results.c.session_id == metrics.c.session_id,
                                                site_results.c.kept_seq == metrics.c.seq))
            sample = select(site_results.c.session_id, site_results.c.kept_seq).where(where).limit(200).subquery()
            f = _pick_f(conn, metrics.c.f_hz, metrics.join(sample, and_(
                sample.c.session_id == metrics.c.session_id, sample.c.kept_seq == metrics.c.seq)),
                true(), at_hz, f"{quantity} of site {site}")
            q = select(metrics.c.session_id, site_results.c.die_col, site_results.c.die_row,
                       metrics.c[quantity], metrics.c.f_hz).select_from(j) \
                .where(where, metrics.c.f_hz.between(f * 0.98, f * 1.02))
            unit = UNITS[quantity]
        elif quantity.startswith(PAD_FREE) and quantity[len(PAD_FREE):] in METRIC_COLUMNS:
            name = quantity[len(PAD_FREE):]
            where = or_(line_figures.c.site_a == site, line_figures.c.site_b == site, line_figures.c.family == site)
            f = _pick_f(conn, line_figures.c.f_hz, line_figures, where, at_hz, f"{quantity} of site {site}")
            q = select(line_figures.c.session_id, line_figures.c.die_col, line_figures.c.die_row,
                       line_figures.c[name], line_figures.c.f_hz) \
                .where(where, line_figures.c.f_hz.between(f * 0.98, f * 1.02))
            unit = UNITS[name]
        else:
            known = conn.execute(select(checks.c.unit).where(checks.c.name == quantity).limit(1)).first()
            if known is None:
                names = [r[0] for r in conn.execute(select(checks.c.name).distinct().order_by(checks.c.name))]
                raise CatalogError(f"{quantity}: not a quantity in the catalog; choose one of: "
                                   + ", ".join([*METRIC_COLUMNS, *(PAD_FREE + m for m in METRIC_COLUMNS), *names]))
            f, unit = None, known[0]
            j = checks.join(site_results, and_(site_results.c.session_id == checks.c.session_id,
                                               site_results.c.kept_seq == checks.c.seq))
            q = select(checks.c.session_id, site_results.c.die_col, site_results.c.die_row, checks.c.value,
                       checks.c.at_hz).select_from(j) \
                .where(checks.c.name == quantity, site_results.c.site == site, site_results.c.files_ok.is_(True))
        values = conn.execute(q).all()
        meta = {r[0]: r for r in conn.execute(_filters(select(
            sessions.c.session_id, sessions.c.lot, sessions.c.wafer, sessions.c.opened_at), lot, since))}
    best: dict[tuple[Any, ...], tuple[Any, ...]] = {}
    for v in values:  # one value per (session, die): the one nearest the chosen frequency
        k = (v[0], v[1], v[2])
        if v[0] in meta and (k not in best or (f is not None and abs(v[4] - f) < abs(best[k][4] - f))):
            best[k] = v
    order = sorted(best.values(), key=lambda v: (meta[v[0]][3] or datetime.min, v[0], v[1], v[2]))
    rows = [{"session_id": v[0], "lot": meta[v[0]][1], "wafer": meta[v[0]][2], "opened_at": meta[v[0]][3],
             "die_col": v[1], "die_row": v[2], "value": v[3], "f_hz": v[4] if f is not None else None}
            for v in order]
    if not rows:
        raise CatalogError(f"{quantity} of site {site}: no kept landings with this figure in the catalog")
    return Trend(quantity, site, unit, f, rows)


def yield_table(cat: Catalog, lot: str | None = None, since: datetime | None = None,
                site: str | None = None) -> list[dict[str, Any]]:
    """Per wafer (session) and site: dies that passed, warned, failed (given up),
    were accepted despite a FAIL, skipped; ``yield`` = (pass + warn) / decided."""
    cols = [func.sum(case((site_results.c.outcome == o, 1), else_=0)).label(o.replace("-", "_"))
            for o in ("pass", "warn", "given-up", "accepted-fail", "skipped")]
    q = select(sessions.c.lot, sessions.c.wafer, sessions.c.session_id, sessions.c.opened_at,
               site_results.c.site, *cols) \
        .select_from(site_results.join(sessions, sessions.c.session_id == site_results.c.session_id)) \
        .group_by(sessions.c.lot, sessions.c.wafer, sessions.c.session_id, sessions.c.opened_at,
                  site_results.c.site) \
        .order_by(sessions.c.opened_at, sessions.c.session_id, site_results.c.site)
    if site:
        q = q.where(site_results.c.site == site)
    with cat.engine.connect() as conn:
        rows = [dict(r._mapping) for r in conn.execute(_filters(q, lot, since))]
    for r in rows:
        r["fail"] = r.pop("given_up")
        decided = r["pass"] + r["warn"] + r["fail"] + r["accepted_fail"]
        r["yield"] = (r["pass"] + r["warn"]) / decided if decided else None
    return rows


def wear(cat: Catalog, lot: str | None = None, since: datetime | None = None) -> list[dict[str, Any]]:
    """Touchdowns per probe id summed over sessions, with the wear limit of the
    most recent plan that used the probe and the share of it used."""
    q = select(touchdowns.c.probe_id, touchdowns.c.touchdowns, sessions.c.wear_limit, sessions.c.opened_at) \
        .select_from(touchdowns.join(sessions, sessions.c.session_id == touchdowns.c.session_id)) \
        .order_by(sessions.c.opened_at)
    out: dict[str, dict[str, Any]] = {}
    with cat.engine.connect() as conn:
        for r in conn.execute(_filters(q, lot, since)):
            w = out.setdefault(r.probe_id, {"probe_id": r.probe_id, "sessions": 0, "touchdowns": 0,
                                            "wear_limit": None, "first": r.opened_at, "last": r.opened_at})
            w["sessions"] += 1
            w["touchdowns"] += r.touchdowns
            w["last"] = r.opened_at
            if r.wear_limit:
                w["wear_limit"] = r.wear_limit
    for w in out.values():
        w["used"] = w["touchdowns"] / w["wear_limit"] if w["wear_limit"] else None
    return sorted(out.values(), key=lambda w: w["probe_id"])


def agreement_over_time(cat: Catalog, lot: str | None = None, since: datetime | None = None) -> list[dict[str, Any]]:
    """Every calibration comparison: when, which methods, the worst bound and verdict."""
    q = select(sessions.c.lot, sessions.c.wafer, sessions.c.station, cal_agreement) \
        .select_from(cal_agreement.join(sessions, sessions.c.session_id == cal_agreement.c.session_id)) \
        .order_by(cal_agreement.c.ts)
    with cat.engine.connect() as conn:
        return [dict(r._mapping) for r in conn.execute(_filters(q, lot, since))]


__all__ = ["list_sessions", "trend", "Trend", "yield_table", "wear", "agreement_over_time", "quantities",
           "OUTCOMES", "PAD_FREE", "UNITS"]
