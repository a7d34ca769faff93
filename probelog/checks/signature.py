"""Contact from the kind's signature on the corrected sweep: does a site read
like its kind (open, short, load, thru, line, stub, device), or like tips in air?

The physics verdict on raw data against the cal's open and short lives in
:mod:`probelog.contact`; :func:`probelog.checks.suite.run_checks` reports the
worse of the two. Reflections are Sii per port (see :func:`probelog.checks.common.diag`);
magnitudes in dB = 20 log10|S|, phases in degrees, clockwise on the Smith chart
is a falling phase (time convention e^{+j omega t}).
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from probelog.checks.common import db20, diag, ghz, grade_scalar, low_band, make_result, not_applicable, worst_of
from probelog.checks.thresholds import KINDS, Limits
from probelog.limits import grade
from probelog.lines import C0
from probelog.verdicts import CheckResult, Verdict


def _reads_as(f_hz: np.ndarray, gamma: np.ndarray, want_short: bool) -> CheckResult | None:
    """FAIL when a port's lowest-frequency reflection has the wrong sign of Re(S):
    a short (S ~ -1) that reads as an open (S ~ +1), or the other way round."""
    re0 = gamma[0].real
    bad = re0 > 0 if want_short else re0 < 0
    if not bad.any():
        return None
    port = int(np.argmax(re0 if want_short else -re0))
    expected, found = ("short", "an open") if want_short else ("open", "a short")
    return make_result(
        "contact",
        Verdict.FAIL,
        re0[port],
        0.0,
        f_hz[0],
        f"port {port + 1} should read as a {expected} but reads as {found} "
        f"(Re S{port + 1}{port + 1} = {re0[port]:+.3f} at {ghz(f_hz[0])}): is the tip down?",
    )


def _short_resistance(f_hz: np.ndarray, gamma: np.ndarray, z0: float, limits: Limits) -> CheckResult:
    """Median Re(Z) (ohm) of the short over the low band, worst port; Z = z0 (1 + S) / (1 - S)."""
    low = low_band(f_hz, limits)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = (z0 * (1 + gamma[low]) / (1 - gamma[low])).real
    r_med = np.median(r, axis=0)
    port = int(np.argmax(r_med))
    value = float(r_med[port])
    verdict = grade_scalar(value, limits.short_r_warn_ohm, limits.short_r_fail_ohm)
    words = {Verdict.PASS: "good contact", Verdict.WARN: "contact resistance is high", Verdict.FAIL: "contact resistance too high"}
    return make_result(
        "contact",
        verdict,
        value,
        limits.short_r_fail_ohm,
        f_hz[low][-1],
        f"{words[verdict]}: Re(Z) of the short on port {port + 1} is {value:.3f} ohm "
        f"(median up to {ghz(f_hz[low][-1])}); re-land with more scrub if it stays high",
        "ohm",
    )


def _match(f_hz: np.ndarray, gamma: np.ndarray, mask: np.ndarray, warn_db: float | None, fail_db: float,
           what: str) -> CheckResult:
    """Worst |Sii| (dB) over ``mask``, worst port: a matched site reflects little, a lifted tip all."""
    db = db20(gamma[mask])
    i, port = np.unravel_index(int(np.nanargmax(np.where(np.isnan(db), np.inf, db))), db.shape)
    value = float(db[i, port])
    verdict = grade_scalar(value, warn_db, fail_db)
    at = f_hz[mask][i]
    if verdict is Verdict.FAIL:
        msg = f"port {port + 1} reflects like an open on a {what} (|S{port + 1}{port + 1}| = {value:.2f} dB at {ghz(at)}): a tip is lifted or skated off"
    elif verdict is Verdict.WARN:
        msg = f"port {port + 1} is poorly matched on a {what} (|S{port + 1}{port + 1}| = {value:.2f} dB at {ghz(at)}): check the landing"
    else:
        msg = f"both tips see the {what} (worst |Sii| {value:.2f} dB at {ghz(at)})"
    return make_result("contact", verdict, value, fail_db, at, msg, "dB")


def _transmission(f_hz: np.ndarray, s: np.ndarray, mask: np.ndarray, limits: Limits) -> CheckResult:
    """Lowest |S21| (dB) over ``mask``: a lifted tip lets almost nothing through."""
    db = db20(s[mask][:, 1, 0])
    i = int(np.argmin(np.where(np.isnan(db), -np.inf, db)))
    value = float(db[i])
    at = f_hz[mask][i]
    if not value >= limits.transmission_fail_db:
        return make_result("contact", Verdict.FAIL, value, limits.transmission_fail_db, at,
                       f"almost nothing gets through (|S21| = {value:.2f} dB at {ghz(at)}): a tip is not down", "dB")
    return make_result("contact", Verdict.PASS, value, limits.transmission_fail_db, at,
                   f"signal passes (lowest |S21| {value:.2f} dB up to {ghz(f_hz[mask][-1])})", "dB")


def _stub_rotation(f_hz: np.ndarray, gamma: np.ndarray, length_m: float, eps_lo: float, limits: Limits) -> CheckResult:
    """Total clockwise turn of each port over the sweep vs the least a landed
    stub must turn: 2 * 360 * df * l * sqrt(eps_lo) / c degrees."""
    phase = np.degrees(np.unwrap(np.angle(gamma), axis=0))
    turned = phase[0] - phase[-1]  # clockwise is positive
    port = int(np.argmin(turned))
    value = float(turned[port])
    expected = 2.0 * 360.0 * (f_hz[-1] - f_hz[0]) * length_m * np.sqrt(eps_lo) / C0
    fail_at = limits.stub_rotation_fail_ratio * expected
    warn_at = limits.stub_rotation_warn_ratio * expected
    if value < fail_at:
        verdict, word = Verdict.FAIL, "too little rotation: the tip is probably not on the stub"
    elif value < warn_at:
        verdict, word = Verdict.WARN, "less rotation than the stub should give"
    else:
        verdict, word = Verdict.PASS, "stub rotation as expected"
    return make_result(
        "contact", verdict, value, fail_at, f_hz[-1],
        f"{word} (port {port + 1} turns {value:.1f} deg clockwise up to {ghz(f_hz[-1])}, "
        f"a {length_m * 1e6:.0f} um stub needs at least {expected:.1f} deg)",
        "deg",
    )


def _s21_window(f_hz: np.ndarray, s: np.ndarray, expectation: Mapping[str, Any]) -> CheckResult:
    """The plan's statement of what a device transmits: corrected |S21| (dB) inside
    ``s21_db_window`` over ``s21_band_hz`` (default the whole sweep), graded with
    :func:`probelog.limits.grade` (a run of points outside fails)."""
    lo, hi = (float(x) for x in expectation["s21_db_window"])
    band = np.ones(f_hz.shape, bool)
    if expectation.get("s21_band_hz") is not None:
        b0, b1 = (float(x) for x in expectation["s21_band_hz"])
        band = (f_hz >= b0) & (f_hz <= b1)
    if not band.any():
        return not_applicable("contact", "no point of the sweep inside the plan's s21_band_hz")
    db = db20(s[band][:, 1, 0])
    miss = np.maximum(lo - db, db - hi)  # dB outside the window, > 0 outside
    # graded as 1 + dB outside: a run outside fails, one point only when 3 dB or more out
    verdict, i = grade(1.0 + np.maximum(miss, 0.0), None, 1.0)
    f_b = f_hz[band]
    where = f"over {ghz(f_b[0])}..{ghz(f_b[-1])}"
    if verdict is Verdict.PASS:
        return make_result("contact", Verdict.PASS, db[i], lo, f_b[i],
                       f"transmits as the plan says: |S21| within {lo:g}..{hi:g} dB {where}", "dB")
    words = "a tip is not down, or the wrong device" if db[i] < lo else "more than the device can pass"
    return make_result("contact", Verdict.FAIL if verdict is Verdict.FAIL else Verdict.WARN, db[i],
                   lo if db[i] < lo else hi, f_b[i],
                   f"|S21| = {db[i]:.2f} dB at {ghz(f_b[i])}, the plan expects {lo:g}..{hi:g} dB {where}: {words}",
                   "dB")


# Highest eps_eff we expect on-wafer when the plan gives no window (GaAs eps_r 12.9, Si 11.7)
_EPS_EFF_CEILING = 13.0


def _stub_is_short_at(f0_hz: float, length_um: Any, expectation: Mapping[str, Any], limits: Limits) -> bool:
    """True when a stub is electrically short at ``f0_hz`` (round trip under 90 deg),
    so it must still read like its termination there."""
    if length_um is None:
        return f0_hz <= limits.contact_low_hz
    eps_hi = float(expectation.get("eps_eff_window", [1.0, _EPS_EFF_CEILING])[1])
    return bool(2.0 * 360.0 * f0_hz * float(length_um) * 1e-6 * np.sqrt(eps_hi) / C0 < 90.0)


def contact(
    f_hz: np.ndarray,
    s: np.ndarray,
    kind: str,
    limits: Limits,
    expectation: Mapping[str, Any] | None = None,
    z0: float = 50.0,
) -> CheckResult:
    """Does the reflection (and transmission) look like the kind, or like tips in air?

    - open, device: N/A (tips in air look like an open; a device has no generic signature).
    - load: worst |Sii| over the sweep, warn above ``match_warn_db``, fail above ``match_fail_db``.
    - thru: as load, plus |S21| over the low band above ``transmission_fail_db``.
    - line: low band only, fail only (a line need not be 50 ohm), plus |S21|.
    - short: Re(Sii) at the lowest frequency must be < 0, then the median Re(Z) over
      the low band (f <= ``contact_low_hz``) is the contact resistance (ohm).
    - open-stub / short-stub: must read as open / short at the lowest frequency (when the
      stub is electrically short there), and
      turn clockwise by at least a fraction of 2 beta l (with eps_eff at the low end of
      the plan's window, or 1 when unknown) over the sweep; needs ``length_um``.
    ``z0`` is the port reference impedance (ohm).
    """
    expectation = expectation or {}
    f_hz = np.asarray(f_hz, dtype=float)
    gamma = diag(s)
    if kind == "open":
        # a tip in the air reads like an open too (probelog.contact judges it on raw data);
        # what the corrected sweep can tell is an open that reads as a short
        return _reads_as(f_hz, gamma, want_short=False) or not_applicable(
            "contact", "reads as an open; a tip in the air would too (judged from raw data and earlier landings)")
    if kind == "device":
        if expectation.get("s21_db_window") is not None and s.shape[1] >= 2:
            return _s21_window(f_hz, s, expectation)
        return not_applicable("contact", "no generic reflection signature for a device: judged from raw data against "
                              "the cal's open and short, and against earlier dies")
    if kind == "short":
        return _reads_as(f_hz, gamma, want_short=True) or _short_resistance(f_hz, gamma, z0, limits)
    if kind == "load":
        return _match(f_hz, gamma, np.ones(f_hz.shape, bool), limits.match_warn_db, limits.match_fail_db, "load")
    if kind in ("thru", "line"):
        if s.shape[1] < 2:
            return not_applicable("contact", f"a {kind} needs a 2-port sweep, got a 1-port")
        low = low_band(f_hz, limits)
        if kind == "thru":
            refl = _match(f_hz, gamma, np.ones(f_hz.shape, bool), limits.match_warn_db, limits.match_fail_db, "thru")
        else:
            refl = _match(f_hz, gamma, low, None, limits.match_fail_db, "line")
        return worst_of([refl, _transmission(f_hz, s, low, limits)])
    if kind in ("open-stub", "short-stub"):
        length_um = expectation.get("length_um")
        if _stub_is_short_at(f_hz[0], length_um, expectation, limits):
            wrong = _reads_as(f_hz, gamma, want_short=kind == "short-stub")
            if wrong is not None:
                return wrong
        if length_um is None:
            return not_applicable("contact", f"rotation of the {kind} is not judged without length_um")
        eps_lo = float(expectation.get("eps_eff_window", [1.0])[0])
        return _stub_rotation(f_hz, gamma, float(length_um) * 1e-6, max(eps_lo, 1.0), limits)
    raise ValueError(f"unknown site kind '{kind}' (known: {', '.join(KINDS)})")

