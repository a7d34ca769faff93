"""Quick checks on one sweep (or a sweep and an earlier one of the same site).

Every check is a pure function of arrays returning a
:class:`probelog.verdicts.CheckResult`: the measured figure, its limit, the
frequency (Hz) where it is worst and one sentence a person understands.
S arrays are shaped (n_freq, n_ports, n_ports) like ``skrf.Network.s``;
frequencies in Hz; dB = 20 log10|S|; phases in degrees; time convention
e^{+j omega t}.

Port conventions: every site is measured as a 2-port. Reflect-type sites
(open, short, load, open-stub, short-stub) are pairs: port 1 and port 2 each
land on their own copy of the one-port and S21 is isolation, so one-port
figures are taken on S11 and S22 separately and the worse one is reported. A
1-port sweep works as well.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace
from typing import Any, Mapping

import numpy as np

from probelog.limits import describe, grade
from probelog.lines import C0, metrics_from_s
from probelog.verdicts import CheckResult, Verdict

KINDS = ("open", "short", "load", "thru", "line", "open-stub", "short-stub", "device")
REFLECT_KINDS = frozenset({"open", "short", "load", "open-stub", "short-stub"})
ROTATING_KINDS = frozenset({"open", "short", "open-stub", "short-stub"})
CHECK_NAMES = (
    "contact",
    "passivity",
    "reciprocity",
    "symmetry",
    "rotation",
    "line-window",
    "line-z0",
    "line-loss",
    "line-eps-eff",
    "repeatability",
    "population",
    "drift",
)


@dataclass(frozen=True)
class Limits:
    """Check limits; each default is a starting point a plan may override.

    Sources: REFERENCES.md "Trade numbers" (common practice, no source) unless
    a line says otherwise. "warn" and "fail" are the thresholds at which a
    figure turns to WARN and FAIL.
    """

    # contact
    contact_low_hz: float = 10e9  # band where pads and probe inductance barely matter; common practice, no source
    match_warn_db: float = -15.0  # matched site return loss > 15 dB (trade numbers: probe return loss > 15 dB)
    match_fail_db: float = -3.0  # a tip in air reads within 0.1-0.3 dB of 0 dB (trade numbers)
    transmission_fail_db: float = -10.0  # a lifted tip leaves |S21| near -40 dB (trade numbers); lines lose far less
    short_r_warn_ohm: float = 0.5  # contact resistance 0.1-0.5 ohm on aluminium after scrub (trade numbers)
    short_r_fail_ohm: float = 1.0  # bad > 1 ohm (trade numbers)
    stub_rotation_warn_ratio: float = 0.8  # common practice, no source
    stub_rotation_fail_ratio: float = 0.5  # common practice, no source
    # contact from physics on raw data (probelog.contact), distances as fractions of the
    # raw open-short span: landing repeatability |dS11| ~0.005-0.01 (trade numbers) is
    # 0.003-0.005 of the span, so 0.05 is ten times that; common practice, no source
    contact_floor: float = 0.05
    contact_open_dc_f: float = 25e-15  # probe open vs tip in air: the pad C, 10-30 fF (common practice, no source)
    contact_short_dl_h: float = 50e-12  # shorted path vs the probe short: a few tens of pH (common practice, no source)
    contact_judge_max: float = 0.35  # beyond this allowance a tip in air and the open are too far apart to judge
    raw_transmission_fail_db: float = -30.0  # raw thru: probe + cable loss at most ~20 dB at 150 GHz (realdata README); a lifted tip is at the isolation floor
    # population (probelog.population): accepted landings of the same site on earlier dies.
    # floor: landing repeatability |dS11| ~0.005-0.01 (trade numbers) is the two-landing
    # difference; one landing's spread is ~0.003; common practice, no source
    population_min: float = 1.0
    population_floor: float = 0.003
    # die-to-die spread of electrical length (eps_eff +-0.2 %) moves |S| in proportion
    # to the phase, so the floor rises with frequency: + 0.003 per 100 GHz; common practice, no source
    population_floor_per_hz: float = 3e-14
    population_warn_sigma: float = 3.0
    population_fail_sigma: float = 5.0
    # passivity: excess of the largest singular value over 1; trace noise 0.001-0.005 dB rms
    # is 1.2e-4-5.8e-4 in |S| (trade numbers), so these are many sigma away
    passivity_warn: float = 0.005
    passivity_fail: float = 0.02
    # reciprocity and symmetry: |dS| linear; landing repeatability |dS11| ~0.005-0.01 (trade numbers)
    reciprocity_warn: float = 0.01
    reciprocity_fail: float = 0.03
    symmetry_warn: float = 0.02
    symmetry_fail: float = 0.05
    # rotation: largest counter-clockwise excursion of the unwrapped phase, degrees;
    # phase trace noise 0.01-0.05 deg rms (trade numbers) -> peak-to-peak well under 0.5 deg
    rotation_warn_deg: float = 0.5
    rotation_fail_deg: float = 2.0
    # repeatability vs the previous landing (trade numbers: |S21| +-0.02-0.05 dB,
    # phase +-0.2-0.5 deg, ~1 deg at 110 GHz, |dS11| ~0.005-0.01)
    # dB and phase only where both |S| exceed this: the reference is the last ACCEPTED
    # landing of the site, on an earlier die, and a matched line's |S11| near -20 dB
    # swings by tenths of a dB on a 0.005 change from die to die (fault matrix, clean
    # seeds); reflections that small are judged by |dS| alone. Common practice, no source
    repeat_floor_db: float = -10.0
    repeat_db_warn: float = 0.05
    repeat_db_fail: float = 0.15
    repeat_deg_warn: float = 0.5
    repeat_deg_fail: float = 2.0
    repeat_mag_warn: float = 0.01
    repeat_mag_fail: float = 0.03
    # drift vs the reference sweep right after calibration (trade numbers: over an hour
    # |S21| 0.01-0.05 dB, phase 0.1-1 deg at 50-110 GHz)
    drift_db_warn: float = 0.05
    drift_db_fail: float = 0.15
    drift_deg_warn: float = 1.0
    drift_deg_fail: float = 3.0
    drift_mag_warn: float = 0.01
    drift_mag_fail: float = 0.03
    # line window: skip points near a half-wavelength, where Z0 = sqrt(B/C) is 0/0;
    # common practice, no source
    line_min_sinh: float = 0.1

    @classmethod
    def from_mapping(cls, d: Mapping[str, Any], source: str) -> "Limits":
        """Defaults overridden by ``d``; unknown keys and non-numbers are refused
        with a ValueError naming ``source`` (a file and table) and the key."""
        known = {f.name for f in fields(cls)}
        changes: dict[str, float] = {}
        for key, value in d.items():
            if key not in known:
                raise ValueError(f"{source}: unknown limit '{key}' (known: {', '.join(sorted(known))})")
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
                raise ValueError(f"{source}: limit '{key}' must be a finite number, got {value!r}")
            changes[key] = float(value)
        return replace(cls(), **changes)


# ---------------------------------------------------------------- helpers


def _ghz(f_hz: float) -> str:
    return f"{f_hz / 1e9:.4g} GHz"


def _db(x: np.ndarray) -> np.ndarray:
    return 20.0 * np.log10(np.maximum(np.abs(x), 1e-15))  # floor at -300 dB keeps exact zeros finite


def _grade(value: float, warn: float | None, fail: float) -> Verdict:
    """Higher is worse."""
    if np.isnan(value) or value > fail:
        return Verdict.FAIL
    if warn is not None and value > warn:
        return Verdict.WARN
    return Verdict.PASS


def _diag(s: np.ndarray) -> np.ndarray:
    """Reflection of each port, shape (n_freq, n_ports)."""
    return np.diagonal(s, axis1=1, axis2=2)


def _result(name, verdict, value, limit, at_hz, message, unit="") -> CheckResult:
    def num(x):
        return None if x is None or not np.isfinite(x) else float(x)

    return CheckResult(name, verdict, num(value), num(limit), num(at_hz), message, unit)


def _na(name: str, message: str) -> CheckResult:
    return CheckResult(name, Verdict.NA, None, None, None, message)


def _worst(results: list[CheckResult]) -> CheckResult:
    return max(results, key=lambda r: r.verdict.rank)  # first of the worst on ties


def _low_band(f_hz: np.ndarray, limits: Limits) -> np.ndarray:
    mask = f_hz <= limits.contact_low_hz
    if not mask.any():
        mask = f_hz <= f_hz[0]
    return mask


# ---------------------------------------------------------------- contact


def _reads_as(f_hz: np.ndarray, gamma: np.ndarray, want_short: bool) -> CheckResult | None:
    """FAIL when a port's lowest-frequency reflection has the wrong sign of Re(S):
    a short (S ~ -1) that reads as an open (S ~ +1), or the other way round."""
    re0 = gamma[0].real
    bad = re0 > 0 if want_short else re0 < 0
    if not bad.any():
        return None
    port = int(np.argmax(re0 if want_short else -re0))
    expected, found = ("short", "an open") if want_short else ("open", "a short")
    return _result(
        "contact",
        Verdict.FAIL,
        re0[port],
        0.0,
        f_hz[0],
        f"port {port + 1} should read as a {expected} but reads as {found} "
        f"(Re S{port + 1}{port + 1} = {re0[port]:+.3f} at {_ghz(f_hz[0])}): is the tip down?",
    )


def _short_resistance(f_hz, gamma, z0, limits) -> CheckResult:
    low = _low_band(f_hz, limits)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = (z0 * (1 + gamma[low]) / (1 - gamma[low])).real
    r_med = np.median(r, axis=0)
    port = int(np.argmax(r_med))
    value = float(r_med[port])
    verdict = _grade(value, limits.short_r_warn_ohm, limits.short_r_fail_ohm)
    words = {Verdict.PASS: "good contact", Verdict.WARN: "contact resistance is high", Verdict.FAIL: "contact resistance too high"}
    return _result(
        "contact",
        verdict,
        value,
        limits.short_r_fail_ohm,
        f_hz[low][-1],
        f"{words[verdict]}: Re(Z) of the short on port {port + 1} is {value:.3f} ohm "
        f"(median up to {_ghz(f_hz[low][-1])}); re-land with more scrub if it stays high",
        "ohm",
    )


def _match(f_hz, gamma, mask, warn_db, fail_db, what) -> CheckResult:
    db = _db(gamma[mask])
    i, port = np.unravel_index(int(np.nanargmax(np.where(np.isnan(db), np.inf, db))), db.shape)
    value = float(db[i, port])
    verdict = _grade(value, warn_db, fail_db)
    at = f_hz[mask][i]
    if verdict is Verdict.FAIL:
        msg = f"port {port + 1} reflects like an open on a {what} (|S{port + 1}{port + 1}| = {value:.2f} dB at {_ghz(at)}): a tip is lifted or skated off"
    elif verdict is Verdict.WARN:
        msg = f"port {port + 1} is poorly matched on a {what} (|S{port + 1}{port + 1}| = {value:.2f} dB at {_ghz(at)}): check the landing"
    else:
        msg = f"both tips see the {what} (worst |Sii| {value:.2f} dB at {_ghz(at)})"
    return _result("contact", verdict, value, fail_db, at, msg, "dB")


def _transmission(f_hz, s, mask, limits) -> CheckResult:
    db = _db(s[mask][:, 1, 0])
    i = int(np.argmin(np.where(np.isnan(db), -np.inf, db)))
    value = float(db[i])
    at = f_hz[mask][i]
    if not value >= limits.transmission_fail_db:
        return _result("contact", Verdict.FAIL, value, limits.transmission_fail_db, at,
                       f"almost nothing gets through (|S21| = {value:.2f} dB at {_ghz(at)}): a tip is not down", "dB")
    return _result("contact", Verdict.PASS, value, limits.transmission_fail_db, at,
                   f"signal passes (lowest |S21| {value:.2f} dB up to {_ghz(f_hz[mask][-1])})", "dB")


def _stub_rotation(f_hz, gamma, length_m, eps_lo, limits) -> CheckResult:
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
    return _result(
        "contact", verdict, value, fail_at, f_hz[-1],
        f"{word} (port {port + 1} turns {value:.1f} deg clockwise up to {_ghz(f_hz[-1])}, "
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
        return _na("contact", "no point of the sweep inside the plan's s21_band_hz")
    db = _db(s[band][:, 1, 0])
    miss = np.maximum(lo - db, db - hi)  # dB outside the window, > 0 outside
    # graded as 1 + dB outside: a run outside fails, one point only when 3 dB or more out
    verdict, i = grade(1.0 + np.maximum(miss, 0.0), None, 1.0)
    f_b = f_hz[band]
    where = f"over {_ghz(f_b[0])}..{_ghz(f_b[-1])}"
    if verdict is Verdict.PASS:
        return _result("contact", Verdict.PASS, db[i], lo, f_b[i],
                       f"transmits as the plan says: |S21| within {lo:g}..{hi:g} dB {where}", "dB")
    words = "a tip is not down, or the wrong device" if db[i] < lo else "more than the device can pass"
    return _result("contact", Verdict.FAIL if verdict is Verdict.FAIL else Verdict.WARN, db[i],
                   lo if db[i] < lo else hi, f_b[i],
                   f"|S21| = {db[i]:.2f} dB at {_ghz(f_b[i])}, the plan expects {lo:g}..{hi:g} dB {where}: {words}",
                   "dB")


# Highest eps_eff we expect on-wafer when the plan gives no window (GaAs eps_r 12.9, Si 11.7)
_EPS_EFF_CEILING = 13.0


def _stub_is_short_at(f0_hz: float, length_um, expectation: Mapping[str, Any], limits: Limits) -> bool:
    """True when a stub is electrically short at ``f0_hz`` (round trip under 90 deg),
    so it must still read like its termination there."""
    if length_um is None:
        return f0_hz <= limits.contact_low_hz
    eps_hi = float(expectation.get("eps_eff_window", [1.0, _EPS_EFF_CEILING])[1])
    return 2.0 * 360.0 * f0_hz * float(length_um) * 1e-6 * np.sqrt(eps_hi) / C0 < 90.0


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
    gamma = _diag(s)
    if kind == "open":
        # a tip in the air reads like an open too (probelog.contact judges it on raw data);
        # what the corrected sweep can tell is an open that reads as a short
        return _reads_as(f_hz, gamma, want_short=False) or _na(
            "contact", "reads as an open; a tip in the air would too (judged from raw data and earlier landings)")
    if kind == "device":
        if expectation.get("s21_db_window") is not None and s.shape[1] >= 2:
            return _s21_window(f_hz, s, expectation)
        return _na("contact", "no generic reflection signature for a device: judged from raw data against "
                              "the cal's open and short, and against earlier dies")
    if kind == "short":
        return _reads_as(f_hz, gamma, want_short=True) or _short_resistance(f_hz, gamma, z0, limits)
    if kind == "load":
        return _match(f_hz, gamma, np.ones(f_hz.shape, bool), limits.match_warn_db, limits.match_fail_db, "load")
    if kind in ("thru", "line"):
        if s.shape[1] < 2:
            return _na("contact", f"a {kind} needs a 2-port sweep, got a 1-port")
        low = _low_band(f_hz, limits)
        if kind == "thru":
            refl = _match(f_hz, gamma, np.ones(f_hz.shape, bool), limits.match_warn_db, limits.match_fail_db, "thru")
        else:
            refl = _match(f_hz, gamma, low, None, limits.match_fail_db, "line")
        return _worst([refl, _transmission(f_hz, s, low, limits)])
    if kind in ("open-stub", "short-stub"):
        length_um = expectation.get("length_um")
        if _stub_is_short_at(f_hz[0], length_um, expectation, limits):
            wrong = _reads_as(f_hz, gamma, want_short=kind == "short-stub")
            if wrong is not None:
                return wrong
        if length_um is None:
            return _na("contact", f"rotation of the {kind} is not judged without length_um")
        eps_lo = float(expectation.get("eps_eff_window", [1.0])[0])
        return _stub_rotation(f_hz, gamma, float(length_um) * 1e-6, max(eps_lo, 1.0), limits)
    raise ValueError(f"unknown site kind '{kind}' (known: {', '.join(KINDS)})")


# ---------------------------------------------------------------- passivity, reciprocity, symmetry


def largest_singular_value(s: np.ndarray) -> np.ndarray:
    """sigma_max of each (n, n) matrix of ``s`` (n_freq, n, n).

    For 2-ports in closed form: sigma_max^2 = (F + sqrt(F^2 - 4 |det S|^2)) / 2
    with F the squared Frobenius norm (the eigenvalues of S^H S; Horn & Johnson,
    Matrix Analysis, ch. 7, from memory); ~10x faster than a batched SVD. Other
    sizes use numpy's SVD."""
    if s.shape[1:] == (1, 1):
        return np.abs(s[:, 0, 0])
    if s.shape[1:] != (2, 2):
        return np.linalg.svd(s, compute_uv=False)[:, 0]
    fro = np.einsum("fij,fij->f", s.real, s.real) + np.einsum("fij,fij->f", s.imag, s.imag)
    det = s[:, 0, 0] * s[:, 1, 1] - s[:, 0, 1] * s[:, 1, 0]
    disc = np.maximum(fro * fro - 4.0 * (det.real ** 2 + det.imag ** 2), 0.0)
    return np.sqrt(0.5 * (fro + np.sqrt(disc)))


def passivity(f_hz: np.ndarray, s: np.ndarray, limits: Limits, unc: np.ndarray | None = None) -> CheckResult:
    """Largest singular value of S over frequency: passive iff <= 1 everywhere
    (I - S^H S positive semidefinite). Value is sigma_max; the excess over 1 is
    graded per frequency against ``passivity_fail`` + 2 u(f) (u: the cal's
    uncertainty, linear, see :mod:`probelog.limits`) with :func:`probelog.limits.grade`."""
    sigma = largest_singular_value(s)
    u = np.zeros(len(sigma)) if unc is None else np.asarray(unc, float)
    fail = limits.passivity_fail + 2.0 * u
    verdict, i = grade(sigma - 1.0, limits.passivity_warn + 2.0 * u, fail)
    value = float(sigma[i])
    how = describe(limits.passivity_fail, 2, unc)
    if verdict is Verdict.PASS:
        msg = f"passive: largest singular value {value:.4f} at {_ghz(f_hz[i])} (allowed 1 + {how})"
    elif verdict is Verdict.WARN:
        msg = (f"slightly active at isolated points: largest singular value {value:.4f} at {_ghz(f_hz[i])} "
               f"(allowed 1 + {fail[i]:.4g} there)")
    else:
        msg = (f"gives out more power than it takes in: largest singular value {value:.4f} at {_ghz(f_hz[i])}, "
               f"allowed 1 + {fail[i]:.4g} there (calibration, port mapping or instrument problem)")
    return _result("passivity", verdict, value, 1.0 + float(fail[i]), f_hz[i], msg)


def _pair_difference(name, f_hz, a, b, warn, fail, unc, ok_msg, bad_msg) -> CheckResult:
    d = np.abs(a - b)
    u = np.zeros(len(d)) if unc is None else np.asarray(unc, float)
    fail_f = fail + 2.0 * u
    verdict, i = grade(d, warn + 2.0 * u, fail_f)
    value = float(d[i])
    msg = (ok_msg if verdict is Verdict.PASS else bad_msg).format(
        v=value, f=_ghz(f_hz[i]), lim=float(fail_f[i]), how=describe(fail, 2, unc))
    return _result(name, verdict, value, float(fail_f[i]), f_hz[i], msg)


def reciprocity(f_hz: np.ndarray, s: np.ndarray, limits: Limits, unc: np.ndarray | None = None) -> CheckResult:
    """|S21 - S12| (linear) per frequency against ``reciprocity_fail`` + 2 u(f);
    a passive site is reciprocal (S = S^T)."""
    if s.shape[1] < 2:
        return _na("reciprocity", "a 1-port has nothing to compare")
    return _pair_difference(
        "reciprocity", f_hz, s[:, 1, 0], s[:, 0, 1], limits.reciprocity_warn, limits.reciprocity_fail, unc,
        "reciprocal: max |S21 - S12| = {v:.4f} at {f} (allowed {how})",
        "not reciprocal: |S21 - S12| = {v:.4f} at {f}, allowed {lim:.4g} there "
        "(ports swapped, switch terms or calibration)",
    )


def symmetry(f_hz: np.ndarray, s: np.ndarray, limits: Limits, unc: np.ndarray | None = None) -> CheckResult:
    """|S11 - S22| (linear) per frequency against ``symmetry_fail`` + 2 u(f), for
    sites that are the same seen from both ports."""
    if s.shape[1] < 2:
        return _na("symmetry", "a 1-port has nothing to compare")
    return _pair_difference(
        "symmetry", f_hz, s[:, 0, 0], s[:, 1, 1], limits.symmetry_warn, limits.symmetry_fail, unc,
        "both ports agree: max |S11 - S22| = {v:.4f} at {f} (allowed {how})",
        "the ports disagree: |S11 - S22| = {v:.4f} at {f}, allowed {lim:.4g} there "
        "(one bad tip or a skated ground)",
    )


# ---------------------------------------------------------------- rotation


def rotation(f_hz: np.ndarray, s: np.ndarray, limits: Limits, unc: np.ndarray | None = None) -> CheckResult:
    """Foster's reactance theorem (Foster, Bell Syst. Tech. J. 3, 1924): a
    lossless passive one-port turns clockwise on the Smith chart, so the
    unwrapped phase of Sii falls with frequency. Value: the largest rise of the
    phase over any span (degrees, counter-clockwise), worst port, graded per
    frequency against ``rotation_fail_deg`` + 2 asin(u(f) / |Sii(f)|) in degrees
    (a cal error u moves the phase of a reflection of size |S| by up to
    asin(u / |S|), at both ends of the span). Apply to opens, shorts and stubs only."""
    f_hz = np.asarray(f_hz, dtype=float)
    g = _diag(s)
    phase = np.degrees(np.unwrap(np.angle(g), axis=0))
    rise = phase - np.minimum.accumulate(phase, axis=0)
    allow = np.zeros(g.shape)
    if unc is not None:
        ratio = np.clip(np.asarray(unc, float)[:, None] / np.maximum(np.abs(g), 1e-12), 0.0, 1.0)
        allow = 2.0 * np.degrees(np.arcsin(ratio))
    per_port = [grade(rise[:, p], limits.rotation_warn_deg + allow[:, p], limits.rotation_fail_deg + allow[:, p])
                for p in range(g.shape[1])]
    port = max(range(g.shape[1]), key=lambda p: (per_port[p][0].rank, rise[per_port[p][1], p]))
    verdict, end = per_port[port]
    value = float(rise[end, port])
    start = int(np.argmin(phase[: end + 1, port]))
    fail_at = float(limits.rotation_fail_deg + allow[end, port])
    if verdict is Verdict.PASS:
        msg = f"turns clockwise (largest counter-clockwise excursion {value:.3f} deg)"
    else:
        msg = (f"port {port + 1} turns counter-clockwise by {value:.3f} deg from {_ghz(f_hz[start])} to "
               f"{_ghz(f_hz[end])} (allowed {fail_at:.3g} deg there): reference plane beyond the standard, "
               "over-specified open C / short L, or a coarse frequency step")
    return _result("rotation", verdict, value, fail_at, f_hz[end], msg, "deg")


# ---------------------------------------------------------------- line window


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
        return _na("line-window", "line metrics need a 2-port sweep")
    if expectation.get("length_um") is None:
        return _na("line-window", "no length_um for this site: line metrics not judged")
    if not any(expectation.get(pk) is not None for _, _, _, pk in _WINDOW_QUANTITIES):
        return _na("line-window", "no window for this site in the plan")
    figs = figures if figures is not None else line_window_figures(f_hz, s, expectation, limits, z0_ref)
    if not figs:
        return _na("line-window", "no frequency point inside the plan's band and away from a half-wavelength resonance")

    def text(d: dict[str, Any]) -> str:
        u = f" {d['unit']}" if d["unit"] else ""
        v = "not finite" if d["value"] is None else f"{d['value']:.4g}{u}"
        return f"{d['quantity']} {v} at {_ghz(d['at_hz'])} (window {d['lo']:.4g}..{d['hi']:.4g}{u})"

    worst = max(figs.values(), key=lambda d: d["miss"])
    limit = worst["lo"] if worst["value"] is not None and worst["value"] < worst["lo"] else worst["hi"]
    all_text = "; ".join(text(d) for d in figs.values())
    if worst["miss"] > 0:
        return _result("line-window", Verdict.FAIL, worst["value"], limit, worst["at_hz"],
                       f"outside the window: {text(worst)}: wrong site, damaged line or wrong calibration "
                       f"[{all_text}]", worst["unit"])
    return _result("line-window", Verdict.PASS, worst["value"], limit, worst["at_hz"],
                   f"inside the plan's windows: {all_text}", worst["unit"])


_FIGURE_CHECKS = {"z0_re_ohm": "line-z0", "alpha_db_per_mm": "line-loss", "eps_eff": "line-eps-eff"}


def window_quantities(figures: dict[str, dict[str, Any]]) -> list[CheckResult]:
    """One check per windowed quantity (``line-z0``, ``line-loss``, ``line-eps-eff``):
    the figure, the bound it is nearest to (or crossed), the frequency and a
    sentence with unit and both bounds, so the screen, the manifest (one column
    each) and the report carry Z0, loss and eps_eff side by side."""
    out = []
    for key, d in figures.items():
        u = f" {d['unit']}" if d["unit"] else ""
        v = d["value"]
        nearer_lo = v is not None and abs(v - d["lo"]) < abs(v - d["hi"])
        limit = d["lo"] if nearer_lo else d["hi"]
        text = "not finite" if v is None else f"{v:.4g}{u}"
        where = f"{text} at {_ghz(d['at_hz'])}, window {d['lo']:.4g}..{d['hi']:.4g}{u}"
        if d["inside"]:
            out.append(_result(_FIGURE_CHECKS[key], Verdict.PASS, v, limit, d["at_hz"],
                               f"{d['quantity']} inside the window (closest call {where})", d["unit"]))
        else:
            out.append(_result(_FIGURE_CHECKS[key], Verdict.FAIL, v, limit, d["at_hz"],
                               f"{d['quantity']} outside the window: {where}", d["unit"]))
    return out


# ---------------------------------------------------------------- repeatability and drift

PHASE_REF_HZ = 55e9  # phase limits widen as f / 55 GHz above it: 0.5 deg there is ~1 deg at 110 GHz


def _compare(name, f_hz, s, f_other, s_other, floor_db, lims, against, unc=None) -> CheckResult:
    """|dS| (linear), |d dB| and |d phase| (degrees) per frequency between two
    sweeps of the same site, worst S_ij at each point, graded per frequency with
    :func:`probelog.limits.grade`; dB and phase only where both |S| exceed
    ``floor_db``; the |dS| limits widen by u(f), the cal's uncertainty (what
    does not cancel between two sweeps corrected with the same cal).
    ``lims`` = (db_warn, db_fail, deg_warn, deg_fail, mag_warn, mag_fail)."""
    if s.shape != s_other.shape or not np.allclose(f_hz, f_other, rtol=1e-9, atol=0.0):
        return _na(name, f"{against} was taken on another frequency grid or port count: not compared")
    db_w, db_f, deg_w, deg_f, mag_w, mag_f = lims
    # A placement (or cable) length change dx moves a phase by beta*dx, which grows
    # in proportion to frequency: the phase limits hold up to PHASE_REF_HZ and widen
    # with f above it (trade numbers: +-0.2-0.5 deg at 40-67 GHz, ~1 deg at 110 GHz).
    widen = np.maximum(1.0, f_hz / PHASE_REF_HZ)
    deg_w, deg_f = deg_w * widen, deg_f * widen
    u = np.zeros(len(f_hz)) if unc is None else np.asarray(unc, float)
    floor = 10.0 ** (floor_db / 20.0)
    big = (np.abs(s) > floor) & (np.abs(s_other) > floor)
    with np.errstate(divide="ignore", invalid="ignore"):
        d_mag = np.abs(s - s_other)
        d_db = np.where(big, np.abs(_db(s) - _db(s_other)), 0.0)
        d_deg = np.where(big, np.abs(np.degrees(np.angle(s / s_other))), 0.0)
    parts = []
    n = len(f_hz)
    for arr, warn, fail, unit, label in ((d_db, db_w, db_f, "dB", "|S| in dB"),
                                         (d_deg, deg_w, deg_f, "deg", "phase"),
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
    text = ", ".join(f"{p[7]} {p[2]:.3g}{' ' + p[6] if p[6] else ''} ({p[5]} at {_ghz(p[4])})" for p in parts)
    rank, _, value, limit, at, _, unit, _ = max(parts, key=lambda p: (p[0], p[1]))
    verdict = {1: Verdict.PASS, 2: Verdict.WARN, 3: Verdict.FAIL}[rank]
    lead = {Verdict.PASS: "agrees with", Verdict.WARN: "moved from", Verdict.FAIL: "differs from"}[verdict]
    return _result(name, verdict, value, limit, at, f"{lead} {against}: largest {text}", unit)


def repeatability(f_hz, s, f_prev, s_prev, limits: Limits, unc: np.ndarray | None = None,
                  against: str = "the previous landing") -> CheckResult:
    """Difference to the last accepted landing on the same site (skating, worn
    tips); ``against`` names that landing in the message."""
    lims = (limits.repeat_db_warn, limits.repeat_db_fail, limits.repeat_deg_warn, limits.repeat_deg_fail,
            limits.repeat_mag_warn, limits.repeat_mag_fail)
    return _compare("repeatability", np.asarray(f_hz, float), s, np.asarray(f_prev, float), s_prev,
                    limits.repeat_floor_db, lims, against, unc)


def drift(f_hz, s, f_ref, s_ref, limits: Limits, unc: np.ndarray | None = None) -> CheckResult:
    """Difference to the reference sweep of this site taken right after calibration."""
    lims = (limits.drift_db_warn, limits.drift_db_fail, limits.drift_deg_warn, limits.drift_deg_fail,
            limits.drift_mag_warn, limits.drift_mag_fail)
    return _compare("drift", np.asarray(f_hz, float), s, np.asarray(f_ref, float), s_ref,
                    limits.repeat_floor_db, lims, "the reference taken after calibration", unc)


# ---------------------------------------------------------------- all checks of a kind


def is_symmetric(kind: str, expectation: Mapping[str, Any] | None) -> bool:
    """Whether S11 and S22 should agree: the plan's ``symmetric`` if given, else
    True for every kind but ``device`` (reflect pairs are two copies of one standard)."""
    if expectation and "symmetric" in expectation:
        return bool(expectation["symmetric"])
    return kind != "device"


def run_checks(ntwk, kind: str, limits: Limits, expectation: dict | None = None, previous=None, reference=None,
               *, unc: np.ndarray | None = None, previous_label: str = "the previous landing",
               history=None, raw=None, raw_open=None, raw_short=None,
               previous_other_die: bool = False, population_unc: np.ndarray | None = None) -> list[CheckResult]:
    """Every check that applies to ``kind`` on one sweep (an ``skrf.Network``).

    ``previous`` and ``reference`` are Networks of the same site (the last
    ACCEPTED landing, named by ``previous_label``; the reference right after
    calibration) or None. ``unc`` (n_freq,) is the cal's uncertainty per frequency
    (linear |S|, :func:`probelog.limits.cal_uncertainty`); ``history`` the
    (label, f_hz, s) of the accepted landings of this site on earlier dies
    (:mod:`probelog.population`); ``previous_other_die`` caps repeatability at
    WARN when the reference was landed on another die; ``population_unc`` widens
    the population's spread (the cal's uncertainty, when the history spans cals); ``raw``, ``raw_open``, ``raw_short`` the raw
    sweep and the active cal's raw open and short (:mod:`probelog.contact`):
    when given, contact is the worse of the physics verdict on raw data and the
    kind signature on the corrected sweep. Order follows :data:`CHECK_NAMES`.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown site kind '{kind}' (known: {', '.join(KINDS)})")
    expectation = expectation or {}
    f, s = np.asarray(ntwk.f, dtype=float), ntwk.s
    z0 = float(np.real(np.asarray(ntwk.z0).flat[0]))
    if unc is not None and len(unc) != len(f):
        unc = None  # uncertainty of another grid says nothing here
    kind_contact = contact(f, s, kind, limits, expectation, z0)
    if raw is not None and raw_open is not None and raw_short is not None:
        from probelog.contact import physics_contact  # contact imports this module

        phys = physics_contact(raw, raw_open, raw_short, kind, expectation, limits)
        kind_contact = _worst([phys, kind_contact])  # physics first on a tie
    out = [kind_contact, passivity(f, s, limits, unc)]
    if ntwk.nports >= 2:
        out.append(reciprocity(f, s, limits, unc))
        if is_symmetric(kind, expectation):
            out.append(symmetry(f, s, limits, unc))
    if kind in ROTATING_KINDS:
        out.append(rotation(f, s, limits, unc))
    if kind == "line":
        figures = line_window_figures(f, s, expectation, limits, z0) if s.shape[1] >= 2 else {}
        out.append(line_window(f, s, expectation, limits, z0, figures))
        out.extend(window_quantities(figures))
    if previous is not None:
        rep = repeatability(f, s, previous.f, previous.s, limits, unc, previous_label)
        if previous_other_die and rep.verdict in (Verdict.WARN, Verdict.FAIL):
            # the re-landing limits hold on one die; between dies the process spread adds
            # to them, and the population check judges that: a difference past the
            # re-landing WARN limit is normal spread (a clean demo wafer had 17 % of its
            # landings there), one past the FAIL limit only warns
            rep = replace(rep, verdict=Verdict.WARN if rep.verdict is Verdict.FAIL else Verdict.PASS,
                          message=rep.message + " (another die: die-to-die differences are judged by the population)")
        out.append(rep)
    if history:
        from probelog.population import population  # population imports Limits from here

        pop_unc = population_unc if population_unc is not None and len(population_unc) == len(f) else None
        out.append(population(f, s, history, limits, pop_unc))
    if reference is not None:
        out.append(drift(f, s, reference.f, reference.s, limits, unc))
    return out
