"""Contact checks on calibration standards while they are measured, before any
correction exists.

Raw reflection is rotated and scaled by the probes, cables and couplers, so the
kind checks of :mod:`probelog.checks` (which expect corrected data) cannot judge
a raw standard. What survives the error boxes:

- transmission: a landed thru reads |S21| within a few dB of the probes' and
  cables' loss; a lifted tip leaves it near the isolation floor (-40 dB or lower).
- distinctness: through one port's error box, the raw reflections of two
  standards differ by |e10 e01| |G_a - G_b| / |(1 - e11 G_a)(1 - e11 G_b)| (the
  one-port error model; Pozar, Microwave Engineering 4th ed., sec. 4.3 on
  signal flow graphs). An open and a short differ by about 2 |e10 e01| and a
  load sits about |e10 e01| away from both, so a standard that reads like the open
  was not landed (a tip in air looks like an open).

Only the lowest frequencies are used (up to ``Limits.contact_low_hz``), where the
probe and cable loss is smallest and the standards are closest to ideal.
Reflections are taken on every port of the sweep; the worst port decides.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import skrf

from probelog.checks import Limits
from probelog.verdicts import CheckResult, Verdict

# A landed short or load sits at least ~|e10 e01| from the raw open; half of that
# for a good GSG probe (|e10 e01| > 0.6 below 10 GHz, i.e. < 2.2 dB of two-way
# loss) is a safe floor. Common practice, no source.
DISTINCT_FAIL = 0.3
DISTINCT_WARN = 0.5


def _low(f_hz: np.ndarray, limits: Limits) -> np.ndarray:
    mask = f_hz <= limits.contact_low_hz
    return mask if mask.any() else f_hz <= f_hz[0]


def _result(verdict: Verdict, value: float, limit: float, at_hz: float, message: str, unit: str = "") -> CheckResult:
    return CheckResult("contact", verdict, float(value), float(limit), float(at_hz), message, unit)


def transmission_contact(raw: skrf.Network, limits: Limits) -> CheckResult:
    """|S21| and |S12| (dB) of a raw thru or line over the low band must stay above
    ``Limits.transmission_fail_db``; the worst of the two and its frequency are reported."""
    if raw.nports < 2:
        return CheckResult("contact", Verdict.NA, None, None, None,
                           "a thru needs a 2-port sweep to judge contact", "dB")
    f = raw.f
    low = _low(f, limits)
    with np.errstate(divide="ignore"):
        t = 20 * np.log10(np.abs(np.stack([raw.s[low, 1, 0], raw.s[low, 0, 1]])))
    i = np.unravel_index(np.argmin(t), t.shape)
    worst, at = float(t[i]), float(f[low][i[1]])
    limit = limits.transmission_fail_db
    if worst < limit:
        return _result(Verdict.FAIL, worst, limit, at,
                       f"raw |S{'21' if i[0] == 0 else '12'}| = {worst:.1f} dB at {at / 1e9:.3g} GHz: "
                       "the thru is not connected (a tip lifted or off the pad); re-land", "dB")
    return _result(Verdict.PASS, worst, limit, at, f"raw transmission {worst:.1f} dB at worst: landed", "dB")


def distinct_from(raw: skrf.Network, other: skrf.Network, role: str, other_role: str,
                  limits: Limits) -> CheckResult:
    """Smallest |Gamma_raw - Gamma_raw_other| over the low band and the ports: a
    standard that reads like another one was not landed (or is the wrong site)."""
    if raw.frequency != other.frequency:
        return CheckResult("contact", Verdict.NA, None, None, None,
                           f"the {other_role} was swept on another grid: {role} not compared", "")
    f = raw.f
    low = _low(f, limits)
    n = min(raw.nports, other.nports)
    ports = np.arange(n)
    d = np.abs(raw.s[low][:, ports, ports] - other.s[low][:, ports, ports])  # (n_low, n)
    i = np.unravel_index(np.argmin(d), d.shape)
    worst, at, port = float(d[i]), float(f[low][i[0]]), int(i[1]) + 1
    if worst < DISTINCT_FAIL:
        return _result(Verdict.FAIL, worst, DISTINCT_FAIL, at,
                       f"port {port} reads like the {other_role} (|dGamma| = {worst:.3f} at {at / 1e9:.3g} GHz): "
                       f"the {role} was not landed, or the {other_role} was not; re-land")
    if worst < DISTINCT_WARN:
        return _result(Verdict.WARN, worst, DISTINCT_WARN, at,
                       f"port {port} is close to the {other_role} (|dGamma| = {worst:.3f}): check the landing")
    return _result(Verdict.PASS, worst, DISTINCT_FAIL, at,
                   f"distinct from the {other_role} on every port (|dGamma| >= {worst:.3f})")


def raw_standard_checks(raw: skrf.Network, role: str, earlier: Mapping[str, skrf.Network],
                        limits: Limits | None = None) -> list[CheckResult]:
    """Contact of a raw standard of ``role`` (open, short, load, thru, line:<name>),
    judged against the standards measured before it in ``earlier`` (role -> raw)."""
    limits = limits or Limits()
    if role == "thru" or role.startswith("line"):
        return [transmission_contact(raw, limits)]
    if role == "open":
        ref = earlier.get("short") or earlier.get("load")
        if ref is None:
            return [CheckResult("contact", Verdict.NA, None, None, None,
                                "an open cannot be told from tips in air on its own: judged against the short", "")]
        return [distinct_from(raw, ref, "open", "short" if "short" in earlier else "load", limits)]
    if role in ("short", "load"):
        others = [r for r in ("open", "short", "load") if r != role and r in earlier]
        if not others:
            return [CheckResult("contact", Verdict.NA, None, None, None,
                                f"the {role} is judged against the open: measure the open first", "")]
        results = [distinct_from(raw, earlier[r], role, r, limits) for r in others]
        return [max(results, key=lambda c: (c.verdict.rank, -(c.value or 0.0)))]
    return [CheckResult("contact", Verdict.NA, None, None, None, f"no raw contact check for a {role}", "")]
