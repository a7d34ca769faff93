"""Line metrics inside the plan's windows: Re(Z0) (ohm), loss (dB/mm) and
eps_eff of a single line from :func:`probelog.lines.metrics_from_s`, judged at
every usable frequency (Hz) of the plan's band."""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from probelog.checks.common import ghz, make_result, not_applicable
from probelog.checks.thresholds import Limits
from probelog.lines import metrics_from_s
from probelog.verdicts import CheckResult, Verdict

_WINDOW_QUANTITIES = (  # key, name, unit, plan key
    ("z0_re_ohm", "Re Z0", "ohm", "z0_window_ohm"),
    ("alpha_db_per_mm", "loss", "dB/mm", "alpha_db_per_mm_max"),
    ("eps_eff", "eps_eff", "", "eps_eff_window"),
)


def line_window_figures(
    f_hz: np.ndarray, s: np.ndarray, expectation: Mapping[str, Any], limits: Limits, z0_ref: float = 50.0
) -> dict[str, dict[str, Any]]:
    """Each windowed quantity of a line, named with its unit and both bounds:
    ``{key: {"quantity", "unit", "lo", "hi", "value", "at_hz", "inside"}}`` for
    Re Z0 (ohm), loss (alpha, dB/mm, low bound 0) and eps_eff, over the points of
    ``window_band_hz`` away from a half-wavelength (|sinh(gamma l)| >=
    ``line_min_sinh``). ``value`` is the point that misses the window by most
    (relative to its size) or, when all are inside, the closest call. Empty when
    the sweep is not a 2-port, there is no length_um, no window or no usable point."""
    if s.shape[1] < 2 or expectation.get("length_um") is None:
        return {}
    wanted = [(k, n, u, pk) for k, n, u, pk in _WINDOW_QUANTITIES if expectation.get(pk) is not None]
    if not wanted:
        return {}
    eps_guess = None
    if expectation.get("eps_eff_window") is not None:
        eps_guess = 0.5 * sum(float(x) for x in expectation["eps_eff_window"])
    length_m = float(expectation["length_um"]) * 1e-6
    f_hz = np.asarray(f_hz, dtype=float)
    with np.errstate(all="ignore"):
        m = metrics_from_s(f_hz, s, length_m, eps_guess, z0_ref)
        usable = np.abs(np.sinh(m.gamma * length_m)) >= limits.line_min_sinh
    if expectation.get("window_band_hz") is not None:
        # single-line figures carry the pads, whose effect grows with frequency:
        # the plan says where its windows mean something
        lo_b, hi_b = (float(x) for x in expectation["window_band_hz"])
        usable &= (f_hz >= lo_b) & (f_hz <= hi_b)
    if not usable.any():
        return {}
    values = {"z0_re_ohm": m.z0.real, "alpha_db_per_mm": m.alpha_db_per_mm, "eps_eff": m.eps_eff}
    f_use = f_hz[usable]
    out: dict[str, dict[str, Any]] = {}
    for key, name, unit, plan_key in wanted:
        if key == "alpha_db_per_mm":
            lo, hi = 0.0, float(expectation[plan_key])
        else:
            lo, hi = (float(x) for x in expectation[plan_key])
        x = values[key][usable]
        x = np.where(np.isfinite(x), x, np.inf)
        miss = np.maximum(lo - x, x - hi) / max(hi - lo, 1e-30)  # > 0 outside, relative to the window
        i = int(np.argmax(miss))
        out[key] = {"quantity": name, "unit": unit, "lo": lo, "hi": hi,
                    "value": float(x[i]) if np.isfinite(x[i]) else None, "at_hz": float(f_use[i]),
                    "inside": bool(miss[i] <= 0), "miss": float(miss[i])}
    return out


def line_window(
    f_hz: np.ndarray, s: np.ndarray, expectation: Mapping[str, Any], limits: Limits, z0_ref: float = 50.0,
    figures: dict[str, dict[str, Any]] | None = None,
) -> CheckResult:
    """Re(Z0) (ohm), loss (dB/mm) and eps_eff from :func:`probelog.lines.metrics_from_s`
    inside the plan's windows (``z0_window_ohm``, ``alpha_db_per_mm_max``,
    ``eps_eff_window``) at every frequency of ``window_band_hz`` (Hz; default the
    whole sweep), skipping points near a half-wavelength. The figure is the
    quantity that misses its window by most (relative to the window's size), or
    the closest call; the message names every quantity with unit and both bounds
    (:func:`line_window_figures`)."""
    if s.shape[1] < 2:
        return not_applicable("line-window", "line metrics need a 2-port sweep")
    if expectation.get("length_um") is None:
        return not_applicable("line-window", "no length_um for this site: line metrics not judged")
    if not any(expectation.get(pk) is not None for _, _, _, pk in _WINDOW_QUANTITIES):
        return not_applicable("line-window", "no window for this site in the plan")
    figs = figures if figures is not None else line_window_figures(f_hz, s, expectation, limits, z0_ref)
    if not figs:
        return not_applicable("line-window", "no frequency point inside the plan's band and away from a half-wavelength resonance")

    def text(d: dict[str, Any]) -> str:
        u = f" {d['unit']}" if d["unit"] else ""
        v = "not finite" if d["value"] is None else f"{d['value']:.4g}{u}"
        return f"{d['quantity']} {v} at {ghz(d['at_hz'])} (window {d['lo']:.4g}..{d['hi']:.4g}{u})"

    worst = max(figs.values(), key=lambda d: d["miss"])
    limit = worst["lo"] if worst["value"] is not None and worst["value"] < worst["lo"] else worst["hi"]
    all_text = "; ".join(text(d) for d in figs.values())
    if worst["miss"] > 0:
        return make_result("line-window", Verdict.FAIL, worst["value"], limit, worst["at_hz"],
                       f"outside the window: {text(worst)}: wrong site, damaged line or wrong calibration "
                       f"[{all_text}]", worst["unit"])
    return make_result("line-window", Verdict.PASS, worst["value"], limit, worst["at_hz"],
                   f"inside the plan's windows: {all_text}", worst["unit"])


_FIGURE_CHECKS = {"z0_re_ohm": "line-z0", "alpha_db_per_mm": "line-loss", "eps_eff": "line-eps-eff"}


def window_quantities(figures: dict[str, dict[str, Any]]) -> list[CheckResult]:
    """One check per windowed quantity (``line-z0``, ``line-loss``, ``line-eps-eff``):
    the figure, the bound it is nearest to (or crossed), the frequency and a
    sentence with unit and both bounds, so the screen, the manifest (one column
    each) and the report carry Z0, loss and eps_eff side by side."""
    out: list[CheckResult] = []
    for key, d in figures.items():
        u = f" {d['unit']}" if d["unit"] else ""
        v = d["value"]
        nearer_lo = v is not None and abs(v - d["lo"]) < abs(v - d["hi"])
        limit = d["lo"] if nearer_lo else d["hi"]
        text = "not finite" if v is None else f"{v:.4g}{u}"
        where = f"{text} at {ghz(d['at_hz'])}, window {d['lo']:.4g}..{d['hi']:.4g}{u}"
        if d["inside"]:
            out.append(make_result(_FIGURE_CHECKS[key], Verdict.PASS, v, limit, d["at_hz"],
                               f"{d['quantity']} inside the window (closest call {where})", d["unit"]))
        else:
            out.append(make_result(_FIGURE_CHECKS[key], Verdict.FAIL, v, limit, d["at_hz"],
                               f"{d['quantity']} outside the window: {where}", d["unit"]))
    return out

