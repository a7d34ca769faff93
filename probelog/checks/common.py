"""Small shared pieces of the checks: units in messages, dB, the scalar grade,
the reflection diagonal and the :class:`probelog.verdicts.CheckResult` builders."""

from __future__ import annotations

import numpy as np

from probelog.checks.thresholds import Limits
from probelog.verdicts import CheckResult, Verdict


def ghz(f_hz: float) -> str:
    """A frequency for a message, e.g. "110 GHz"."""
    return f"{f_hz / 1e9:.4g} GHz"


def db20(x: np.ndarray) -> np.ndarray:
    """20 log10 |x| (dB)."""
    db: np.ndarray = 20.0 * np.log10(np.maximum(np.abs(x), 1e-15))  # floor at -300 dB keeps exact zeros finite
    return db


def grade_scalar(value: float, warn: float | None, fail: float) -> Verdict:
    """PASS, WARN or FAIL of one figure; higher is worse, NaN fails."""
    if np.isnan(value) or value > fail:
        return Verdict.FAIL
    if warn is not None and value > warn:
        return Verdict.WARN
    return Verdict.PASS


def diag(s: np.ndarray) -> np.ndarray:
    """Reflection of each port, shape (n_freq, n_ports)."""
    d: np.ndarray = np.diagonal(s, axis1=1, axis2=2)
    return d


def make_result(name: str, verdict: Verdict, value: float | None, limit: float | None, at_hz: float | None,
                message: str, unit: str = "") -> CheckResult:
    """A result whose numbers are plain floats, None where not finite (JSON has no NaN)."""
    def num(x: float | None) -> float | None:
        return None if x is None or not np.isfinite(x) else float(x)

    return CheckResult(name, verdict, num(value), num(limit), num(at_hz), message, unit)


def not_applicable(name: str, message: str) -> CheckResult:
    """An N/A result: the check does not apply, ``message`` says why."""
    return CheckResult(name, Verdict.NA, None, None, None, message)


def worst_of(results: list[CheckResult]) -> CheckResult:
    """The result with the worst verdict."""
    return max(results, key=lambda r: r.verdict.rank)  # first of the worst on ties


def low_band(f_hz: np.ndarray, limits: Limits) -> np.ndarray:
    """Mask of the points up to ``contact_low_hz`` (Hz); the first point when none is."""
    mask = f_hz <= limits.contact_low_hz
    if not mask.any():
        mask = f_hz <= f_hz[0]
    return mask

