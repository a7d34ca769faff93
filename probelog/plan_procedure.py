"""Reading how to probe: a plan's ``[sequence]``, ``[calibration]``, ``[vna]``,
``[probes]`` and ``[limits]`` tables.

These tables refer to the sites and dies read by probelog.plan_layout: every
site name must be a ``[[site]]`` (an unknown one names the nearest), every die
inside the grid and not skipped, and the calibration standards must include the
kinds the method needs. Units: Hz, dBm, um, hours.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from pathlib import Path
from types import MappingProxyType
from typing import Any

from probelog.bench import Die
from probelog.plan_fields import (
    Table,
    describe,
    die,
    integer,
    is_num,
    name_list,
    num,
    table,
    text,
)
from probelog.plan_toml import Ctx
from probelog.plan_types import METHODS, CalibrationPlan, Probes, Sequence, Site, VnaSettings, Wafer

# Standards each method needs, by site kind (multiline TRL: a thru and >= 1 line).
METHOD_NEEDS = {
    "solt": ("open", "short", "load", "thru"),
    "lrrm": ("open", "short", "load", "thru"),
    "mtrl": ("thru", "line"),
}

_SEQ = ("sites", "drift_site", "drift_die", "drift_every_landings", "recal_every_hours")
_CAL = ("method", "compare_with", "kit", "die", "standards", "verification")
_VNA = ("start_hz", "stop_hz", "points", "ifbw_hz", "power_dbm", "power_limit_dbm")
_PROBES = ("ids", "pitch_um", "wear_warn_touchdowns")


def _known_site(ctx: Ctx, name: str, path: str, by_name: Mapping[str, Site]) -> Site:
    """The site called ``name``; an unknown name is refused with the nearest known one."""
    if name not in by_name:
        near = difflib.get_close_matches(name, list(by_name), n=1)
        hint = f"; did you mean {near[0]!r}?" if near else "; expected the name of a [[site]]"
        raise ctx.error(path, f"unknown site {name!r}{hint}")
    return by_name[name]


def _usable_die(ctx: Ctx, v: object, path: str, wafer: Wafer) -> Die:
    """A die [col, row] on the grid that is not skipped."""
    d = die(ctx, v, path, wafer.cols, wafer.rows)
    if d in wafer.skip:
        raise ctx.error(path, f"die [{d[0]}, {d[1]}] is in wafer.skip")
    return d


def read_sequence(ctx: Ctx, raw: Table, wafer: Wafer, by_name: Mapping[str, Site]) -> Sequence:
    """``[sequence]``: sites per die, the drift reference and the recalibration timer."""
    t = table(ctx, raw, "sequence", "sequence", _SEQ, ("sites",))
    sites = name_list(ctx, t, "sites", "sequence.sites")
    if not sites:
        raise ctx.error("sequence.sites", "empty; expected at least one site to probe on each die")
    for i, s in enumerate(sites, start=1):
        _known_site(ctx, s, f"sequence.sites[{i}]", by_name)
    if len(set(sites)) != len(sites):
        dup = next(s for s in sites if sites.count(s) > 1)
        raise ctx.error("sequence.sites", f"site {dup!r} is listed twice")
    drift_site = text(ctx, t, "drift_site", "sequence.drift_site", None)
    every = integer(ctx, t, "drift_every_landings", "sequence.drift_every_landings", 0, lo=0)
    drift_die = None
    if drift_site is not None:
        _known_site(ctx, drift_site, "sequence.drift_site", by_name)
        if "drift_die" not in t:
            raise ctx.error("sequence.drift_die", "missing; a drift_site needs the die [col, row] it sits on")
        drift_die = _usable_die(ctx, t["drift_die"], "sequence.drift_die", wafer)
        if every < 1:
            raise ctx.error("sequence.drift_every_landings",
                            "expected a whole number >= 1 (landings between drift checks) when drift_site is set")
    elif "drift_die" in t or every:
        raise ctx.error("sequence.drift_site", "missing; drift_die / drift_every_landings need a drift_site")
    recal = t.get("recal_every_hours", "never")
    recal_h: float | None = None
    if recal != "never":
        if not is_num(recal) or not math.isfinite(recal) or recal <= 0:
            raise ctx.error("sequence.recal_every_hours",
                            f'expected a number of hours > 0 or "never", found {describe(recal)}')
        recal_h = float(recal)
    return Sequence(sites=sites, drift_site=drift_site, drift_die=drift_die,
                    drift_every_landings=every, recal_every_hours=recal_h)


def read_calibration(ctx: Ctx, raw: Table, wafer: Wafer, by_name: Mapping[str, Site],
                     base_dir: Path) -> CalibrationPlan:
    """``[calibration]``: method, standards and verification sites, the cal die and the
    kit (a file path resolved against ``base_dir``, or an inline table)."""
    t = table(ctx, raw, "calibration", "calibration", _CAL, ("method", "kit", "die", "standards"))
    method = text(ctx, t, "method", "calibration.method", choices=METHODS)
    compare = text(ctx, t, "compare_with", "calibration.compare_with", "none", (*METHODS, "none"))
    compare_with = None if compare == "none" else compare
    if compare_with == method:
        raise ctx.error("calibration.compare_with", f"compares {method} with itself; expected another method or \"none\"")
    cal_die = _usable_die(ctx, t["die"], "calibration.die", wafer)
    standards = name_list(ctx, t, "standards", "calibration.standards")
    kinds = []
    for i, s in enumerate(standards, start=1):
        site = _known_site(ctx, s, f"calibration.standards[{i}]", by_name)
        if site.ports != 2:
            raise ctx.error(f"calibration.standards[{i}]", f"site {s!r} has {site.ports} port; standards are 2-port")
        kinds.append(site.kind)
    for m in (method, compare_with):
        if m is None:
            continue
        missing = [k for k in METHOD_NEEDS[m] if k not in kinds]
        if missing:
            key = "calibration.method" if m == method else "calibration.compare_with"
            raise ctx.error(key, f"{m} needs standards of kind {', '.join(METHOD_NEEDS[m])}; "
                                 f"calibration.standards has no {', '.join(missing)}")
    verification = name_list(ctx, t, "verification", "calibration.verification", [])
    for i, s in enumerate(verification, start=1):
        _known_site(ctx, s, f"calibration.verification[{i}]", by_name)
    kit_path, kit_inline = _kit(ctx, t["kit"], base_dir)
    return CalibrationPlan(method=method, compare_with=compare_with, kit_path=kit_path, kit_inline=kit_inline,
                           die=cal_die, standards=standards, verification=verification, source=ctx.source)


def _kit(ctx: Ctx, kit: object, base_dir: Path) -> tuple[Path | None, Mapping[str, Any] | None]:
    """``calibration.kit`` as (file path, None) or (None, inline table)."""
    if isinstance(kit, str) and kit.strip():
        try:
            return (base_dir / kit).resolve(), None
        except (OSError, ValueError) as exc:
            raise ctx.error("calibration.kit", f"not a usable file path ({exc})") from None
    if isinstance(kit, dict):
        return None, MappingProxyType(kit)
    raise ctx.error("calibration.kit", f"expected a kit file path (relative to the plan) or an inline table, "
                                       f"found {describe(kit)}")


def read_vna(ctx: Ctx, raw: Table) -> VnaSettings:
    """``[vna]``: the stimulus (Hz, dBm); the power may not exceed the plan's limit."""
    t = table(ctx, raw, "vna", "vna", _VNA, _VNA)
    start = num(ctx, t, "start_hz", "vna.start_hz", positive=True, allow_zero=False)
    stop = num(ctx, t, "stop_hz", "vna.stop_hz", positive=True, allow_zero=False)
    if not start < stop:
        raise ctx.error("vna.stop_hz", f"expected stop_hz > start_hz, found start {start:g} Hz, stop {stop:g} Hz")
    points = integer(ctx, t, "points", "vna.points", lo=2, hi=100001)
    ifbw = num(ctx, t, "ifbw_hz", "vna.ifbw_hz", positive=True, allow_zero=False)
    power = num(ctx, t, "power_dbm", "vna.power_dbm")
    limit = num(ctx, t, "power_limit_dbm", "vna.power_limit_dbm")
    if power > limit:
        raise ctx.error("vna.power_dbm", f"{power:g} dBm is above power_limit_dbm {limit:g} dBm; "
                                         "lower the power or (if the DUT allows) raise the limit")
    return VnaSettings(start_hz=start, stop_hz=stop, points=points, ifbw_hz=ifbw,
                       power_dbm=power, power_limit_dbm=limit)


def read_probes(ctx: Ctx, raw: Table) -> Probes:
    """``[probes]``: one or two distinct probe ids, GSG pitch (um), wear warning (touchdowns)."""
    t = table(ctx, raw, "probes", "probes", _PROBES, ("ids",))
    ids = t["ids"]
    if not (isinstance(ids, list) and 1 <= len(ids) <= 2 and all(isinstance(x, str) and x.strip() for x in ids)):
        raise ctx.error("probes.ids", f"expected one or two probe ids (port 1 first), found {describe(ids)}")
    if len(set(ids)) != len(ids):
        raise ctx.error("probes.ids", f"probe id {ids[0]!r} is listed twice")
    pitch = num(ctx, t, "pitch_um", "probes.pitch_um", 100.0, positive=True, allow_zero=False)
    wear = integer(ctx, t, "wear_warn_touchdowns", "probes.wear_warn_touchdowns", 5000, lo=1)
    return Probes(ids=tuple(str(x) for x in ids), pitch_um=pitch, wear_warn_touchdowns=wear)


def read_limits(ctx: Ctx, raw: Table) -> Mapping[str, float]:
    """``[limits]``: check thresholds overriding the built-in ones, by name (names are
    checked against the known limits by probelog.engine.planview.validate)."""
    t = raw.get("limits", {})
    if not isinstance(t, dict):
        raise ctx.error("limits", f"expected a table of numbers, found {describe(t)}")
    out: dict[str, float] = {}
    for k, v in t.items():
        if not is_num(v) or not math.isfinite(v):
            raise ctx.error(f"limits.{k}", f"expected a finite number, found {describe(v)}")
        out[k] = float(v)
    return MappingProxyType(out)
