"""A sweep against an earlier sweep of the same site: repeatability (the last
accepted landing) and drift (the reference right after calibration)."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from probelog.checks.common import db20, ghz, make_result, not_applicable
from probelog.checks.thresholds import Limits
from probelog.limits import grade
from probelog.verdicts import CheckResult, Verdict


PHASE_REF_HZ = 55e9  # phase limits widen as f / 55 GHz above it: 0.5 deg there is ~1 deg at 110 GHz


def _compare(name: str, f_hz: np.ndarray, s: np.ndarray, f_other: np.ndarray, s_other: np.ndarray, floor_db: float,
             lims: tuple[float, float, float, float, float, float], against: str,
             unc: np.ndarray | None = None) -> CheckResult:
    """|dS| (linear), |d dB| and |d phase| (degrees) per frequency between two
    sweeps of the same site, worst S_ij at each point, graded per frequency with
    :func:`probelog.limits.grade`; dB and phase only where both |S| exceed
    ``floor_db``; the |dS| limits widen by u(f), the cal's uncertainty (what
    does not cancel between two sweeps corrected with the same cal).
    ``lims`` = (db_warn, db_fail, deg_warn, deg_fail, mag_warn, mag_fail)."""
    if s.shape != s_other.shape or not np.allclose(f_hz, f_other, rtol=1e-9, atol=0.0):
        return not_applicable(name, f"{against} was taken on another frequency grid or port count: not compared")
    db_w, db_f, deg_w, deg_f, mag_w, mag_f = lims
    # A placement (or cable) length change dx moves a phase by beta*dx, which grows
    # in proportion to frequency: the phase limits hold up to PHASE_REF_HZ and widen
    # with f above it (trade numbers: +-0.2-0.5 deg at 40-67 GHz, ~1 deg at 110 GHz).
    widen = np.maximum(1.0, f_hz / PHASE_REF_HZ)
    deg_w_f, deg_f_f = deg_w * widen, deg_f * widen
    u = np.zeros(len(f_hz)) if unc is None else np.asarray(unc, float)
    floor = 10.0 ** (floor_db / 20.0)
    big = (np.abs(s) > floor) & (np.abs(s_other) > floor)
    with np.errstate(divide="ignore", invalid="ignore"):
        d_mag = np.abs(s - s_other)
        d_db = np.where(big, np.abs(db20(s) - db20(s_other)), 0.0)
        d_deg = np.where(big, np.abs(np.degrees(np.angle(s / s_other))), 0.0)
    parts: list[tuple[int, float, float, float, float, str, str, str]] = []
    n = len(f_hz)
    for arr, warn, fail, unit, label in ((d_db, db_w, db_f, "dB", "|S| in dB"),
                                         (d_deg, deg_w_f, deg_f_f, "deg", "phase"),
                                         (d_mag, mag_w + u, mag_f + u, "", "|dS|")):
        flat = np.where(np.isnan(arr), np.inf, arr).reshape(n, -1)
        per_f = flat.max(axis=1)
        which = flat.argmax(axis=1)
        verdict, k = grade(per_f, warn, fail)
        fail_k = float(np.broadcast_to(fail, (n,))[k])
        ij = int(which[k])
        i, j = divmod(ij, s.shape[2])
        parts.append((verdict.rank, per_f[k] / fail_k, float(per_f[k]), fail_k, f_hz[k], f"S{i + 1}{j + 1}",
                      unit, label))
    text = ", ".join(f"{p[7]} {p[2]:.3g}{' ' + p[6] if p[6] else ''} ({p[5]} at {ghz(p[4])})" for p in parts)
    rank, _, value, limit, at, _, unit, _ = max(parts, key=lambda p: (p[0], p[1]))
    verdict = {1: Verdict.PASS, 2: Verdict.WARN, 3: Verdict.FAIL}[rank]
    lead = {Verdict.PASS: "agrees with", Verdict.WARN: "moved from", Verdict.FAIL: "differs from"}[verdict]
    return make_result(name, verdict, value, limit, at, f"{lead} {against}: largest {text}", unit)


def repeatability(f_hz: ArrayLike, s: np.ndarray, f_prev: ArrayLike, s_prev: np.ndarray, limits: Limits,
                  unc: np.ndarray | None = None, against: str = "the previous landing") -> CheckResult:
    """Difference to the last accepted landing on the same site (skating, worn
    tips); ``against`` names that landing in the message."""
    lims = (limits.repeat_db_warn, limits.repeat_db_fail, limits.repeat_deg_warn, limits.repeat_deg_fail,
            limits.repeat_mag_warn, limits.repeat_mag_fail)
    return _compare("repeatability", np.asarray(f_hz, float), s, np.asarray(f_prev, float), s_prev,
                    limits.repeat_floor_db, lims, against, unc)


def drift(f_hz: ArrayLike, s: np.ndarray, f_ref: ArrayLike, s_ref: np.ndarray, limits: Limits,
          unc: np.ndarray | None = None) -> CheckResult:
    """Difference to the reference sweep of this site taken right after calibration."""
    lims = (limits.drift_db_warn, limits.drift_db_fail, limits.drift_deg_warn, limits.drift_deg_fail,
            limits.drift_mag_warn, limits.drift_mag_fail)
    return _compare("drift", np.asarray(f_hz, float), s, np.asarray(f_ref, float), s_ref,
                    limits.repeat_floor_db, lims, "the reference taken after calibration", unc)

