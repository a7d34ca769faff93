"""A calibration that cannot be right is refused: the continuity guard.

Run after every solve on the corrected standards (and on corrected
verification structures): a cal set that fails it is never used.

- Phase continuity. A passive structure's S_ij turns smoothly with frequency:
  between adjacent points its phase steps by about -2 pi df tau (tau its delay),
  the same from one step to the next. A multiline TRL that picks the other root
  of the reflect (Marks, IEEE T-MTT 39(7), 1991: the root choice needs the
  reflect's sign and position, ``reflect_offset_um`` in the kit) flips the sign
  of every corrected reflection from some frequency on: one step jumps by
  ~180 degrees against its neighbours. The figure is, for every S_ij where
  |S| > ``min_mag`` on both sides, the step minus the median of the steps
  around it, wrapped to (-180, 180] degrees; above ``jump_deg`` (default 120)
  the cal set is refused at that frequency.
- Passivity. A corrected passive standard with sigma_max far above 1 (more than
  ``blowup`` = 0.3 at a run of points, graded with :func:`probelog.limits.grade`)
  means the solve went wrong there (a singular line pair, a standard not landed).

Both are pure functions of arrays; :func:`guard` returns CheckResults and
:func:`refusal` turns the first failure into one line for a CalibrationError.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import skrf

from probelog.limits import grade
from probelog.verdicts import CheckResult, Verdict

JUMP_DEG = 120.0      # a root flip is ~180 deg; smooth data steps alike from point to point
MIN_MAG = 0.1         # phase of |S| < 0.1 is noise-dominated on a poor cal; common practice, no source
# sigma_max - 1 of a corrected passive standard: the real probed kit's open
# (tests/data/realdata, 150 GHz) reads up to 1.12 at its own plane at 134 GHz after
# multiline TRL (an honest mm-wave cal residual); a solve gone wrong reads far more
BLOWUP = 0.3


def _ghz(f_hz: float) -> str:
    return f"{f_hz / 1e9:.6g} GHz"


def phase_jumps(s: np.ndarray, min_mag: float = MIN_MAG, window: int = 2) -> np.ndarray:
    """Jump (degrees, >= 0) of every step between adjacent points against the
    median of the +-``window`` steps around it, shape (n - 1, p, p); 0 where
    |S| <= min_mag on either side."""
    s = np.asarray(s)
    n = s.shape[0]
    if n < 3:
        return np.zeros((max(n - 1, 0),) + s.shape[1:])
    step = np.angle(s[1:] / np.where(s[:-1] == 0, 1, s[:-1]))          # (n-1, p, p) radians
    padded = np.pad(step, [(window, window), (0, 0), (0, 0)], mode="edge")
    local = np.median(np.lib.stride_tricks.sliding_window_view(padded, 2 * window + 1, axis=0), axis=-1)
    jump = np.abs(np.angle(np.exp(1j * (step - local))))
    big = (np.abs(s[1:]) > min_mag) & (np.abs(s[:-1]) > min_mag)
    return np.degrees(np.where(big, jump, 0.0))


def continuity(f_hz: np.ndarray, s: np.ndarray, what: str, jump_deg: float = JUMP_DEG) -> CheckResult:
    """FAIL when any S_ij of ``s`` (n, p, p) jumps by more than ``jump_deg``
    between two adjacent points against its neighbours' steps."""
    j = phase_jumps(s)
    if j.size == 0:
        return CheckResult("cal-continuity", Verdict.NA, None, None, None, f"{what}: too few points to judge")
    k, a, b = np.unravel_index(int(np.argmax(j)), j.shape)
    value = float(j[k, a, b])
    f_lo, f_hi = float(f_hz[k]), float(f_hz[k + 1])
    if value > jump_deg:
        return CheckResult(
            "cal-continuity", Verdict.FAIL, value, jump_deg, f_hi,
            f"corrected {what} S{a + 1}{b + 1} jumps by {value:.0f} deg between {_ghz(f_lo)} and {_ghz(f_hi)}: "
            "the solve flipped a root there (reflect position or sign in the kit?)", "deg")
    return CheckResult("cal-continuity", Verdict.PASS, value, jump_deg, f_hi,
                       f"corrected {what} turns smoothly (largest jump {value:.1f} deg)", "deg")


def blowup(f_hz: np.ndarray, s: np.ndarray, what: str, limit: float = BLOWUP) -> CheckResult:
    """FAIL when the corrected passive ``what`` has sigma_max - 1 above ``limit``
    at a run of points (or grossly at one)."""
    from probelog.checks import largest_singular_value  # checks -> limits; no cycle at import time

    sigma = largest_singular_value(np.asarray(s))
    verdict, i = grade(sigma - 1.0, None, limit)
    value = float(sigma[i])
    if verdict is Verdict.FAIL:
        return CheckResult("cal-passivity", Verdict.FAIL, value, 1.0 + limit, float(f_hz[i]),
                           f"corrected {what} gives out more than it takes in: largest singular value "
                           f"{value:.3f} at {_ghz(float(f_hz[i]))}: the solve went wrong there", "")
    return CheckResult("cal-passivity", Verdict.PASS, value, 1.0 + limit, float(f_hz[i]),
                       f"corrected {what} stays passive (largest singular value {value:.4f})", "")


def guard(corrected: Mapping[str, skrf.Network]) -> list[CheckResult]:
    """Continuity and passivity of every corrected standard / verification
    structure, keyed by a name for the message (role or site)."""
    out: list[CheckResult] = []
    for what, ntwk in corrected.items():
        f = np.asarray(ntwk.f, dtype=float)
        out.append(continuity(f, ntwk.s, what))
        out.append(blowup(f, ntwk.s, what))
    return out


def refusal(results: list[CheckResult]) -> str | None:
    """One line for the first failed guard (lowest frequency first), or None."""
    bad = [r for r in results if r.verdict is Verdict.FAIL]
    if not bad:
        return None
    first = min(bad, key=lambda r: r.at_hz if r.at_hz is not None else np.inf)
    return f"cal set refused: {first.message}"
