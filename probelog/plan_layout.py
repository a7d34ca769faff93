"""Reading what is where: a plan's ``[wafer]``, ``[[site]]`` and ``[precheck]`` tables.

Each function takes the error context and the whole TOML table and returns the
validated dataclass, or raises PlanError with one line naming the key path
(``site[3].offset_um``) and its line. Units as in probelog.plan_types (um, Hz, dB).
"""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path
from typing import Any

from probelog.bench import Die
from probelog.names import MAX_ID_CHARS, name_problem
from probelog.plan_fields import (
    MISSING,
    Table,
    boolean,
    check_keys,
    describe,
    die,
    integer,
    note,
    num,
    pair,
    table,
    text,
)
from probelog.plan_toml import Ctx
from probelog.plan_types import KINDS, ORDERS, Golden, Precheck, Site, VnaSettings, Wafer

# Site names become folder names under data/: keep them portable.
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")

_WAFER = ("id", "lot", "chip", "cols", "rows", "die_pitch_um", "skip", "dies", "order")
_SITE = ("name", "kind", "offset_um", "ports", "symmetric", "length_um", "z0_window_ohm",
         "alpha_db_per_mm_max", "eps_eff_window", "window_band_hz", "line_type", "width_um", "gap_um", "metal", "note",
         "precheck", "s21_db_window", "s21_band_hz", "c_ref_pf_per_mm", "z0_ref_ohm",
         "golden_file", "golden_tol_db", "golden_tol_deg", "golden_floor_db")
_GOLDEN_TOLS = ("golden_tol_db", "golden_tol_deg", "golden_floor_db")
_PRECHECK = ("enabled", "points", "ifbw_hz")


def read_wafer(ctx: Ctx, raw: Table) -> Wafer:
    """``[wafer]``: the grid (cols x rows of die_pitch_um), skipped dies, dies and order."""
    t = table(ctx, raw, "wafer", "wafer", _WAFER, ("id", "lot", "chip", "cols", "rows", "die_pitch_um"))
    cols = integer(ctx, t, "cols", "wafer.cols", lo=1, hi=1000)
    rows = integer(ctx, t, "rows", "wafer.rows", lo=1, hi=1000)
    pitch = pair(ctx, t, "die_pitch_um", "wafer.die_pitch_um", "two numbers [x, y] in um", positive=True)
    if pitch[0] <= 0 or pitch[1] <= 0:
        raise ctx.error("wafer.die_pitch_um", f"expected two numbers > 0 in um, found [{pitch[0]:g}, {pitch[1]:g}]")
    skip_raw = t.get("skip", [])
    if not isinstance(skip_raw, list):
        raise ctx.error("wafer.skip", f"expected a list of dies [[col, row], ...], found {describe(skip_raw)}")
    skip = tuple(die(ctx, d, f"wafer.skip[{i + 1}]", cols, rows) for i, d in enumerate(skip_raw))
    order = text(ctx, t, "order", "wafer.order", "serpentine", ORDERS)
    dies = _dies(ctx, t.get("dies", "all"), order, skip, cols, rows)
    wafer_id = text(ctx, t, "id", "wafer.id")
    if len(wafer_id) > MAX_ID_CHARS:
        raise ctx.error("wafer.id", f"{name_problem(wafer_id)} (it becomes part of the session folder name)")
    return Wafer(
        id=wafer_id,
        lot=text(ctx, t, "lot", "wafer.lot"),
        chip=text(ctx, t, "chip", "wafer.chip"),
        cols=cols,
        rows=rows,
        die_pitch_um=pitch,
        skip=skip,
        dies=dies,
        order=order,
    )


def _dies(ctx: Ctx, dies_raw: object, order: str, skip: tuple[Die, ...], cols: int, rows: int) -> tuple[Die, ...] | None:
    """``wafer.dies``: None for "all" (every die of the grid but the skipped ones), else the listed dies."""
    if dies_raw == "all":
        if order == "listed":
            raise ctx.error("wafer.order", 'order "listed" needs an explicit list in wafer.dies')
        if len(set(skip)) >= cols * rows:
            raise ctx.error("wafer.skip", "every die of the grid is skipped; nothing to probe")
        return None
    if not (isinstance(dies_raw, list) and dies_raw):
        raise ctx.error("wafer.dies", f'expected "all" or a non-empty list of dies [[col, row], ...], '
                                      f"found {describe(dies_raw)}")
    dies = tuple(die(ctx, d, f"wafer.dies[{i + 1}]", cols, rows) for i, d in enumerate(dies_raw))
    seen: set[Die] = set()
    for i, d in enumerate(dies):
        if d in seen:
            raise ctx.error(f"wafer.dies[{i + 1}]", f"die [{d[0]}, {d[1]}] is listed twice")
        if d in skip:
            raise ctx.error(f"wafer.dies[{i + 1}]", f"die [{d[0]}, {d[1]}] is also in wafer.skip")
        seen.add(d)
    return dies


def read_sites(ctx: Ctx, raw: Table, wafer: Wafer, base_dir: Path | None = None) -> tuple[Site, ...]:
    """``[[site]]``: the structures on every die, names unique and usable as folder
    names; a ``golden_file`` resolves against ``base_dir`` (default: the current folder)."""
    arr = raw.get("site", MISSING)
    if arr is MISSING:
        raise ctx.error("site", "missing; expected one [[site]] table per structure on the die")
    if not (isinstance(arr, list) and arr and all(isinstance(x, dict) for x in arr)):
        raise ctx.error("site", f"expected [[site]] tables, found {describe(arr)}")
    out: list[Site] = []
    names: dict[str, str] = {}
    for i, t in enumerate(arr, start=1):
        p = f"site[{i}]"
        check_keys(ctx, t, p, _SITE, ("name", "kind", "offset_um"))
        name = text(ctx, t, "name", f"{p}.name")
        if not _NAME_RE.match(name):
            raise ctx.error(f"{p}.name", f"{name!r} is not a usable site name; expected letters, digits, "
                                         "'.', '_' or '-' (it becomes a folder name)")
        if why := name_problem(name):
            raise ctx.error(f"{p}.name", f"{name!r} is not a usable site name: {why} (it becomes a folder name)")
        if name in names:
            raise ctx.error(f"{p}.name", f"duplicate site name {name!r} (first defined in {names[name]})")
        names[name] = p
        out.append(_site(ctx, raw, t, p, name, wafer, base_dir or Path.cwd()))
    return tuple(out)


def _site(ctx: Ctx, raw: Table, t: dict[str, Any], p: str, name: str, wafer: Wafer, base_dir: Path) -> Site:
    """One ``[[site]]`` table ``t`` at key path ``p`` of plan ``raw`` (its name already checked)."""
    kind = text(ctx, t, "kind", f"{p}.kind", choices=KINDS)
    off = pair(ctx, t, "offset_um", f"{p}.offset_um", "two numbers [x, y] in um")
    if not (0 <= off[0] <= wafer.die_pitch_um[0] and 0 <= off[1] <= wafer.die_pitch_um[1]):
        raise ctx.error(f"{p}.offset_um", f"[{off[0]:g}, {off[1]:g}] um lies outside the die "
                                          f"(0..{wafer.die_pitch_um[0]:g} x 0..{wafer.die_pitch_um[1]:g} um)")
    ports = integer(ctx, t, "ports", f"{p}.ports", 2, lo=1, hi=2)
    if kind in ("thru", "line") and ports != 2:
        raise ctx.error(f"{p}.ports", f"a {kind} has 2 ports, found {ports}")
    alpha = num(ctx, t, "alpha_db_per_mm_max", f"{p}.alpha_db_per_mm_max", None, positive=True, allow_zero=False)
    site = Site(
        name=name,
        kind=kind,
        offset_um=off,
        ports=ports,
        symmetric=boolean(ctx, t, "symmetric", f"{p}.symmetric", False),
        length_um=num(ctx, t, "length_um", f"{p}.length_um", None, positive=True, allow_zero=False),
        z0_window_ohm=pair(ctx, t, "z0_window_ohm", f"{p}.z0_window_ohm",
                           "a window [low, high] in ohm", None, ordered=True, positive=True),
        alpha_db_per_mm_max=alpha,
        eps_eff_window=pair(ctx, t, "eps_eff_window", f"{p}.eps_eff_window",
                            "a window [low, high]", None, ordered=True, positive=True),
        window_band_hz=pair(ctx, t, "window_band_hz", f"{p}.window_band_hz",
                            "a band [low, high] in Hz", None, ordered=True, positive=True),
        line_type=text(ctx, t, "line_type", f"{p}.line_type", None),
        width_um=num(ctx, t, "width_um", f"{p}.width_um", None, positive=True, allow_zero=False),
        gap_um=num(ctx, t, "gap_um", f"{p}.gap_um", None, positive=True, allow_zero=False),
        metal=text(ctx, t, "metal", f"{p}.metal", None),
        note=note(ctx, t, f"{p}.note"),
        # a site's own table overrides only the keys it names, over [precheck]
        precheck=read_precheck(ctx, t, f"{p}.precheck", None, read_precheck(ctx, raw, "precheck", Precheck())),
        s21_db_window=_s21_window(ctx, t, p, kind),
        s21_band_hz=pair(ctx, t, "s21_band_hz", f"{p}.s21_band_hz", "a band [low, high] in Hz", None,
                         ordered=True, positive=True),
        c_ref_pf_per_mm=num(ctx, t, "c_ref_pf_per_mm", f"{p}.c_ref_pf_per_mm", None, positive=True,
                            allow_zero=False),
        z0_ref_ohm=num(ctx, t, "z0_ref_ohm", f"{p}.z0_ref_ohm", None, positive=True, allow_zero=False),
        golden=_golden(ctx, t, p, base_dir),
    )
    if site.s21_band_hz is not None and site.s21_db_window is None:
        raise ctx.error(f"{p}.s21_band_hz", "needs s21_db_window (the |S21| window judged over that band)")
    return site


def _s21_window(ctx: Ctx, t: Table, p: str, kind: str) -> tuple[float, float] | None:
    """``s21_db_window``: what a device (or line) must transmit, [low, high] in dB
    (20 log10 |S21| of the corrected sweep, at most +1 dB: a passive site)."""
    w = pair(ctx, t, "s21_db_window", f"{p}.s21_db_window", "a window [low, high] in dB", None, ordered=True)
    if w is None:
        return None
    if kind not in ("device", "thru", "line"):
        raise ctx.error(f"{p}.s21_db_window", f"a {kind} does not transmit; only device, thru and line sites take it")
    if w[1] > 1.0:
        raise ctx.error(f"{p}.s21_db_window", f"high end {w[1]:g} dB is above 0 dB: a passive site cannot gain")
    return w


def _golden(ctx: Ctx, t: Table, p: str, base_dir: Path) -> Golden | None:
    """``golden_file`` (a 2-port Touchstone file, relative to the plan's folder),
    read and hashed now, with ``golden_tol_db`` (dB), ``golden_tol_deg``
    (degrees) and ``golden_floor_db`` (dB) over the defaults of probelog.golden."""
    from probelog import golden as g

    name = text(ctx, t, "golden_file", f"{p}.golden_file", None)
    if name is None:
        for key in _GOLDEN_TOLS:
            if key in t:
                raise ctx.error(f"{p}.{key}", "needs golden_file (the Touchstone file it is a tolerance of)")
        return None
    if not name.strip():
        raise ctx.error(f"{p}.golden_file", "empty; expected a Touchstone file path relative to the plan")
    floor = num(ctx, t, "golden_floor_db", f"{p}.golden_floor_db", g.FLOOR_DB)
    if not -200.0 <= floor < 0.0:
        raise ctx.error(f"{p}.golden_floor_db", f"expected a level below 0 dB (|S| in dB), found {floor:g}")
    tol_db = num(ctx, t, "golden_tol_db", f"{p}.golden_tol_db", g.TOL_DB, positive=True, allow_zero=False)
    tol_deg = num(ctx, t, "golden_tol_deg", f"{p}.golden_tol_deg", g.TOL_DEG, positive=True, allow_zero=False)
    try:
        path = (base_dir / name).resolve()
    except (OSError, RuntimeError, ValueError) as exc:
        raise ctx.error(f"{p}.golden_file", f"not a usable file path ({exc})") from None
    try:
        data = g.read_golden(path)
    except g.GoldenFileError as exc:
        raise ctx.error(f"{p}.golden_file", str(exc)) from None
    return Golden(file=str(path), sha256=data.sha256, tol_db=tol_db, tol_deg=tol_deg, floor_db=floor,
                  z0_ohm=data.z0_ohm, f_hz=data.f_hz, s=data.s)


def check_golden_span(ctx: Ctx, sites: tuple[Site, ...], vna: VnaSettings) -> None:
    """Every golden file shares part of the plan's band ``[vna]`` (Hz) with the sweep."""
    for i, site in enumerate(sites, start=1):
        gd = site.golden
        if gd is None:
            continue
        lo, hi = max(float(gd.f_hz[0]), vna.start_hz), min(float(gd.f_hz[-1]), vna.stop_hz)
        if not lo < hi:
            raise ctx.error(f"site[{i}].golden_file",
                            f"{gd.file} covers {gd.f_hz[0] / 1e9:.6g}-{gd.f_hz[-1] / 1e9:.6g} GHz, the plan sweeps "
                            f"{vna.start_hz / 1e9:.6g}-{vna.stop_hz / 1e9:.6g} GHz: no common span to compare")


def read_precheck(ctx: Ctx, t: Table, path: str, missing: Precheck | None,
                  base: Precheck | None = None) -> Precheck | None:
    """``precheck`` of ``t``: true / false, or a table of _PRECHECK keys over
    ``base`` (default: built-in values); ``missing`` when ``t`` has none."""
    key = path.rsplit(".", 1)[-1]
    v = t.get(key, MISSING)
    if v is MISSING:
        return missing
    b = base or Precheck()
    if isinstance(v, bool):
        return replace(b, enabled=v)
    if not isinstance(v, dict):
        raise ctx.error(path, f"expected true, false or a table of {', '.join(_PRECHECK)}, found {describe(v)}")
    check_keys(ctx, v, path, _PRECHECK, ())
    return Precheck(enabled=boolean(ctx, v, "enabled", f"{path}.enabled", b.enabled),
                    points=integer(ctx, v, "points", f"{path}.points", b.points, lo=2, hi=201),
                    ifbw_hz=num(ctx, v, "ifbw_hz", f"{path}.ifbw_hz", b.ifbw_hz, positive=True, allow_zero=False))
