"""Contact from physics: does each port read like the probe open (a tip in the air)
or like the probe short (a tip on a shorted path), or like the site's kind?

Works on RAW data, before any correction, against the raw open and short that
the active calibration measured with the same probes. Through one port's error
box the raw reflection is a bilinear map of the true one (the one-port error
model; Pozar, Microwave Engineering 4th ed., sec. 4.3, signal-flow graphs):
Gamma_m = e00 + e10 e01 Gamma / (1 - e11 Gamma). Two standards do not fix
that map, but distances between raw reflections scale with |e10 e01| (to within
the source-match factor |1 - e11 Gamma|), so the figure used here is the
distance to a standard as a fraction of the raw open-short span:

    d_open(f)  = |G(f) - G_open(f)|  / |G_short(f) - G_open(f)|
    d_short(f) = |G(f) - G_short(f)| / |G_short(f) - G_open(f)|

An open and a short are 2 apart on the Smith chart, so d ~ |Gamma - Gamma_std| / 2
in corrected terms: a matched site sits near 0.5 from both, a short near 1 from
the open.

A tip in the air is not exactly the calibration's open: it lacks the pad's
capacitance (a few to a few tens of fF). A small capacitance dC moves an open by
|dGamma| ~ 2 omega dC Z0, i.e. d ~ omega dC Z0; a small inductance dL and a
resistance R move a short by d ~ omega dL / Z0 + R / Z0. The allowances are
therefore per frequency:

    allow_open(f)  = floor + 2 pi f dC Z0          (Limits.contact_floor, contact_open_dc_f)
    allow_short(f) = floor + 2 pi f dL / Z0        (contact_short_dl_h)

and only points where the allowance stays below ``Limits.contact_judge_max``
are judged (at high frequency a tip in air and a pad open are far apart, and the
allowance would swallow everything). A port "reads like the open" when it
departs from the open by more than the allowance at fewer than k judged points,
k = clip(ceil(5 % of the judged points), 1, 3): one noisy point cannot make a
lifted tip look landed, and a landed structure departs at many points.

What physics alone cannot tell apart, said plainly:

- on an ``open`` site, a tip in the air reads like the open (within the pad
  capacitance allowance): a lifted tip there is left to the population check;
- an open stub (or a device) electrically shorter than the allowance: it departs
  from the open only by its equivalent capacitance, l sqrt(eps_eff) / (c0 Z0)
  (about 130 fF for 800 um on silicon CPW); a stub under about
  dC c0 Z0 / sqrt(eps_eff) (~200 um at eps_eff 6.4 with dC = 25 fF) reads
  like a tip in air over the judged band, so it is reported n/a;
- a device that is an open (a tiny series capacitor, a broken device) over the
  whole judged band fails as a lifted tip: the plan must say otherwise;
- a few ohm of contact resistance and a skating ground move the reflection by
  far less than the allowance (2 ohm is d ~ 0.04): the population check
  (:mod:`probelog.population`) judges those.

The function is cheap and accepts a coarse sweep (5-11 points) on another grid
than the standards: the standards are interpolated (complex, linear in real and
imaginary parts) to the sweep's frequencies inside their band.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np
import skrf

from probelog.checks import Limits
from probelog.lines import C0
from probelog.verdicts import CheckResult, Verdict

__all__ = ["physics_contact", "standards_on", "distances"]

# Highest eps_eff we expect on-wafer when the plan gives no window (GaAs 12.9, Si 11.7)
_EPS_EFF_CEILING = 13.0


def _ghz(f_hz: float) -> str:
    return f"{f_hz / 1e9:.4g} GHz"


def _na(message: str) -> CheckResult:
    return CheckResult("contact", Verdict.NA, None, None, None, message)


def standards_on(raw: skrf.Network, raw_open: skrf.Network, raw_short: skrf.Network
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """(mask, open_s, short_s): the standards' S (n_in, p, p) at the points of
    ``raw`` inside the standards' band (mask over raw.f), or None when no point
    of ``raw`` lies inside it."""
    f = np.asarray(raw.f, dtype=float)
    lo = max(raw_open.f[0], raw_short.f[0])
    hi = min(raw_open.f[-1], raw_short.f[-1])
    tol = 1e-9 * hi
    mask = (f >= lo - tol) & (f <= hi + tol)
    if not mask.any():
        return None
    f_in = np.clip(f[mask], lo, hi)
    out = []
    for std in (raw_open, raw_short):
        if len(std.f) == len(f_in) and np.allclose(std.f, f_in, rtol=1e-12, atol=0.0):
            out.append(std.s)
        else:
            freq = skrf.Frequency.from_f(f_in, unit="Hz")
            out.append(std.interpolate(freq, coords="cart", kind="linear").s)
    return mask, out[0], out[1]


def distances(gamma: np.ndarray, g_open: np.ndarray, g_short: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """d_open, d_short (same shape as ``gamma``): distances of the raw reflection
    to the raw open and short as fractions of the raw open-short span."""
    span = np.maximum(np.abs(g_short - g_open), 1e-12)
    return np.abs(gamma - g_open) / span, np.abs(gamma - g_short) / span


def _required(n_judged: int) -> int:
    return int(min(3, max(1, math.ceil(0.05 * n_judged))))


def _kth_ratio(ratio: np.ndarray, k: int) -> tuple[float, int]:
    """k-th largest value of ``ratio`` and its index: the port departs from the
    standard (at k points or more) iff this is above 1."""
    order = np.argsort(np.where(np.isnan(ratio), -np.inf, ratio))
    i = int(order[-k]) if len(order) >= k else int(order[0])
    return float(ratio[i]), i


def _reads_like(f: np.ndarray, d: np.ndarray, allow: np.ndarray, judge_max: float, what: str, port: int,
                label: str, kind: str) -> CheckResult | None:
    """FAIL when the port stays within the allowance of ``what`` (open/short) at
    all but fewer than k judged points; PASS otherwise; None if nothing judged."""
    judged = allow <= judge_max
    n = int(judged.sum())
    if n == 0:
        return None
    k = _required(n)
    ratio = d[judged] / allow[judged]
    value, i = _kth_ratio(ratio, k)
    fj = f[judged]
    top = fj[-1]
    if value <= 1.0:
        cause = ("a tip in the air (lifted, or off the pad)" if what == "open"
                 else "a tip on a shorted path")
        frac = float(np.max(d[judged]))
        return CheckResult(
            "contact", Verdict.FAIL, value, 1.0, float(fj[i]),
            f"port {port} reads like the probe {what} on a {kind}, as {cause} does: |{label} - {label}({what})| "
            f"is at most {frac:.3f} of the open-short span up to {_ghz(top)} "
            f"({value:.2f} of the allowance at most); re-land", "x allowance")
    return CheckResult(
        "contact", Verdict.PASS, value, 1.0, float(fj[i]),
        f"port {port} departs from the probe {what} ({value:.3g} x the allowance at {_ghz(fj[i])})",
        "x allowance")


def _low_side(f: np.ndarray, d_open: np.ndarray, d_short: np.ndarray, n_low: int, port: int, label: str,
              kind: str, want: str) -> CheckResult | None:
    """At the lowest points a short structure must read as ``want`` (open or short):
    FAIL when it is closer to the other standard at most of them."""
    wrong = d_open < d_short if want == "short" else d_short < d_open
    frac = float(np.mean(wrong[:n_low]))
    if frac <= 0.5:
        return None
    other = "open" if want == "short" else "short"
    dv = float(np.median((d_open if want == "short" else d_short)[:n_low]))
    return CheckResult(
        "contact", Verdict.FAIL, dv, 0.5, float(f[0]),
        f"port {port} reads like the probe {other}, not like a {want}, at the low end "
        f"(|{label} - {label}({other})| = {dv:.3f} of the open-short span near {_ghz(f[0])}) "
        f"on a {kind}: {'is the tip down?' if other == 'open' else 'wrong site or a shorted path?'}",
        "")


def _electrically_short(f0: float, expect: Mapping[str, Any]) -> bool:
    """True when a stub's round trip at f0 stays under 90 degrees (eps_eff at the
    top of the plan's window, or the on-wafer ceiling), so it reads like its end."""
    length_um = expect.get("length_um")
    if length_um is None:
        return True
    window = expect.get("eps_eff_window") or (1.0, _EPS_EFF_CEILING)
    eps_hi = float(window[1])
    return 2.0 * 360.0 * f0 * float(length_um) * 1e-6 * math.sqrt(eps_hi) / C0 < 90.0


def _stub_too_short(expect: Mapping[str, Any], limits: Limits, z0: float) -> bool:
    """An open stub whose equivalent capacitance l sqrt(eps_lo) / (c0 Z0) is under
    twice the open allowance's dC cannot be told from a tip in the air."""
    length_um = expect.get("length_um")
    if length_um is None:
        return False
    window = expect.get("eps_eff_window") or (1.0, _EPS_EFF_CEILING)
    c_eq = float(length_um) * 1e-6 * math.sqrt(max(float(window[0]), 1.0)) / (C0 * z0)
    return c_eq < 2.0 * limits.contact_open_dc_f


def _transmission(f: np.ndarray, s: np.ndarray, mask_low: np.ndarray, limits: Limits) -> CheckResult:
    t = 20.0 * np.log10(np.maximum(np.abs(np.stack([s[mask_low, 1, 0], s[mask_low, 0, 1]])), 1e-15))
    which, i = np.unravel_index(int(np.argmin(t)), t.shape)
    worst, at = float(t[which, i]), float(f[mask_low][i])
    limit = limits.raw_transmission_fail_db
    name = "S21" if which == 0 else "S12"
    if worst < limit:
        return CheckResult("contact", Verdict.FAIL, worst, limit, at,
                           f"raw |{name}| = {worst:.1f} dB at {_ghz(at)}: almost nothing gets through, "
                           "a tip is not down; re-land", "dB")
    return CheckResult("contact", Verdict.PASS, worst, limit, at,
                       f"raw transmission at least {worst:.1f} dB up to {_ghz(f[mask_low][-1])}", "dB")


def physics_contact(raw: skrf.Network, raw_open: skrf.Network, raw_short: skrf.Network,
                    kind: str, expect: Mapping[str, Any] | None, limits: Limits | None = None
                    ) -> CheckResult:
    """Contact of one raw landing judged against the calibration's raw open and short.

    raw: the landing's raw (uncorrected) sweep, 1- or 2-port, any grid (Hz);
    raw_open, raw_short: the active calibration's raw open and short (2-port
    pairs), measured with the same probes; kind: the site kind (see
    :data:`probelog.plan_types.KINDS`); expect: the plan's expectation mapping of the
    site (``length_um``, ``eps_eff_window``...) or None; limits: the check limits
    (contact_floor, contact_open_dc_f, contact_short_dl_h, contact_judge_max,
    raw_transmission_fail_db, contact_low_hz).

    Per port and kind:

    - every kind but ``open``: FAIL when the port reads like the open over the
      judged band (a lifted tip);
    - load, thru, line, device: FAIL when it reads like the short over the judged
      band (a shorted path);
    - short, short-stub (and open, open-stub): FAIL when the lowest points read
      like the other standard (stubs only while electrically short there);
    - thru, line: FAIL when raw |S21| or |S12| over f <= contact_low_hz falls
      below raw_transmission_fail_db.

    Returns the worst result (FAIL before PASS; among equals the smallest
    margin): value is the k-th largest d / allowance (``x allowance``; a port
    that departs from the standard has it above 1), at_hz where it was taken.
    """
    limits = limits or Limits()
    expect = expect or {}
    if raw_open.nports < 1 or raw_short.nports < 1:
        return _na("no raw open or short from the calibration: contact not judged from physics")
    on = standards_on(raw, raw_open, raw_short)
    if on is None:
        return _na(f"the sweep ({_ghz(raw.f[0])}..{_ghz(raw.f[-1])}) lies outside the calibration's "
                   "standards: contact not judged from physics")
    mask, s_open, s_short = on
    f = np.asarray(raw.f, dtype=float)[mask]
    s = raw.s[mask]
    z0 = float(np.real(np.asarray(raw.z0).flat[0]))
    w = 2.0 * np.pi * f
    floor = limits.contact_floor
    allow_open = floor + w * limits.contact_open_dc_f * z0
    allow_short = floor + w * limits.contact_short_dl_h / z0
    low = f <= limits.contact_low_hz
    n_low = max(1, int(low.sum()))
    nports = min(raw.nports, s_open.shape[1], s_short.shape[1])

    if kind == "open-stub" and _stub_too_short(expect, limits, z0):
        return _na(f"a {expect.get('length_um'):g} um open stub is too short to tell from a tip in the air "
                   "by physics: judged against earlier landings instead")
    results: list[CheckResult] = []
    for p in range(nports):
        label = f"S{p + 1}{p + 1}"
        d_open, d_short = distances(s[:, p, p], s_open[:, p, p], s_short[:, p, p])
        if kind != "open":
            r = _reads_like(f, d_open, allow_open, limits.contact_judge_max, "open", p + 1, label, kind)
            if r is not None:
                results.append(r)
        if kind in ("load", "thru", "line", "device"):
            r = _reads_like(f, d_short, allow_short, limits.contact_judge_max, "short", p + 1, label, kind)
            if r is not None:
                results.append(r)
        want = {"short": "short", "open": "open"}.get(kind)
        if kind in ("short-stub", "open-stub") and _electrically_short(float(f[0]), expect):
            want = "short" if kind == "short-stub" else "open"
        if want is not None:
            r = _low_side(f, d_open, d_short, n_low, p + 1, label, kind, want)
            results.append(r or CheckResult(
                "contact", Verdict.PASS, float(np.median((d_short if want == "short" else d_open)[:n_low])),
                0.5, float(f[0]), f"port {p + 1} reads like a {want} at the low end", ""))
    if kind in ("thru", "line") and nports >= 2:
        results.append(_transmission(f, s, low if low.any() else f <= f[0], limits))
    if not results:
        return _na(f"no judged point: the sweep's allowance exceeds {limits.contact_judge_max} everywhere")
    fails = [r for r in results if r.verdict is Verdict.FAIL]
    if fails:  # the port that reads most like a standard names the fault; transmission last
        ports_ = [r for r in fails if r.unit == "x allowance"] or fails
        return min(ports_, key=lambda r: r.value if r.value is not None else -np.inf)
    if kind == "open":
        base = min(results, key=lambda r: r.value if r.value is not None else np.inf)
        return CheckResult("contact", Verdict.PASS, base.value, base.limit, base.at_hz,
                           "both ports read like an open; a tip in the air would too "
                           "(judged against earlier landings of the site)", base.unit)
    margins = [r for r in results if r.unit == "x allowance"]
    worst = min(margins or results, key=lambda r: r.value if r.value is not None else np.inf)
    return CheckResult("contact", Verdict.PASS, worst.value, worst.limit, worst.at_hz,
                       f"every tip landed: {worst.message}", worst.unit)
