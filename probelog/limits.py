"""Limits that know the measurement, and a grade one noisy point cannot flip.

Per-frequency allowances
------------------------
A check's figure at frequency f is compared with

    limit(f) = base + m * u(f)

- ``base`` is the trace-noise / landing-repeatability figure of
  :class:`probelog.checks.Limits` (trade numbers, common practice, no source);
- ``u(f)`` is the calibration's own uncertainty at f, linear |S|: the larger of
  the cal-agreement bound (:mod:`probelog.cal_agreement`, the worst-case
  difference between two algorithms solved on the same standards, max over
  S_ij) and the verification residual (how far the corrected verification thru
  is from its ideal, max over S_ij, widened to its neighbours);
- ``m`` is how many cal errors the figure can collect: a difference of two
  S-parameters (|S21 - S12|, |S11 - S22|) can be off by u in each, so m = 2;
  the largest singular value moves by at most the spectral norm of the error,
  which for a 2-port is at most its Frobenius norm, <= 2 max |dS_ij|
  (Horn & Johnson, Matrix Analysis, ch. 5, from memory), so m = 2; a
  comparison of two landings corrected with the same cal (repeatability,
  population) keeps only what does not cancel, m = 1.

The grade
---------
``grade(values, warn, fail)`` over frequency:

- FAIL when the figure is over the fail limit at a run of ``k`` adjacent points
  (k = 3 on a dense sweep, fewer on a coarse one: min(3, max(1, n // 20))), or
  over ``gross`` (4) times the fail limit at any point, or not finite: a lifted
  tip or a broken cal is over the limit everywhere and fails by a wide margin;
- WARN when it is over the fail limit at isolated points (shorter runs), or over
  the warn limit at a run of k points;
- PASS otherwise. So one noisy point can make a WARN but never a FAIL unless it
  is grossly out.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from probelog.verdicts import Verdict

GROSS_FACTOR = 4.0
RUN_POINTS = 3


def run_points(n: int) -> int:
    """Adjacent points over the limit that make a FAIL on an n-point sweep."""
    return int(min(RUN_POINTS, max(1, n // 20)))


def longest_run(mask: np.ndarray) -> int:
    """Length of the longest run of True in a 1-D boolean array (vectorised)."""
    m = np.concatenate([[False], np.asarray(mask, bool), [False]])
    edges = np.flatnonzero(np.diff(m.astype(np.int8)))
    if edges.size == 0:
        return 0
    return int(np.max(edges[1::2] - edges[0::2]))


def grade(values: np.ndarray, warn: Any, fail: Any, k: int | None = None,
          gross: float = GROSS_FACTOR) -> tuple[Verdict, int]:
    """Verdict of a per-frequency figure (higher is worse) and the index of its
    worst point relative to the fail limit. ``warn`` may be None (no WARN band)."""
    v = np.asarray(values, dtype=float)
    fail = np.broadcast_to(np.asarray(fail, dtype=float), v.shape)
    bad = ~np.isfinite(v)
    ratio = np.where(bad, np.inf, v / np.where(fail > 0, fail, 1e-300))
    worst = int(np.argmax(ratio))
    k = run_points(len(v)) if k is None else k
    over_fail = bad | (v > fail)
    if bad.any() or longest_run(over_fail) >= k or np.any(v > gross * fail):
        return Verdict.FAIL, worst
    if over_fail.any():
        return Verdict.WARN, worst
    if warn is not None:
        warn = np.broadcast_to(np.asarray(warn, dtype=float), v.shape)
        if longest_run(v > warn) >= k:
            return Verdict.WARN, worst
    return Verdict.PASS, worst


def widen(u: np.ndarray, width: int = 1) -> np.ndarray:
    """Running maximum over +-width neighbours: an uncertainty known at a point
    holds for its neighbours too (a resonance in a standard is a few points wide)."""
    u = np.asarray(u, dtype=float)
    if width <= 0 or len(u) < 2:
        return u
    padded = np.pad(u, width, mode="edge")
    windows = np.lib.stride_tricks.sliding_window_view(padded, 2 * width + 1)
    out: np.ndarray = windows.max(axis=1)
    return out


def verification_residual(corrected: np.ndarray, ideal: np.ndarray) -> np.ndarray:
    """max over S_ij of |S_corrected - S_ideal| per frequency (n,), linear, widened
    to the neighbouring points: how far the cal misses a standard it should reproduce."""
    d = np.abs(np.asarray(corrected) - np.asarray(ideal)).reshape(len(corrected), -1)
    return widen(np.nanmax(d, axis=1))


def cal_uncertainty(n: int, agreement_bound: np.ndarray | None = None,
                    residual: np.ndarray | None = None) -> np.ndarray:
    """u(f) (n,), linear |S|: the larger of the agreement bound (max over S_ij)
    and the verification residual; zeros when neither is known."""
    u = np.zeros(n)
    if agreement_bound is not None:
        b = np.asarray(agreement_bound, dtype=float).reshape(n, -1)
        u = np.maximum(u, np.nanmax(b, axis=1))
    if residual is not None:
        u = np.maximum(u, np.asarray(residual, dtype=float).reshape(n))
    return np.where(np.isfinite(u), u, 0.0)


def describe(base: float, m: int, u: np.ndarray | None) -> str:
    """Short text of how a limit was built, for messages and docs."""
    if u is None or not np.any(u > 0):
        return f"{base:g}"
    return f"{base:g} + {m} x cal uncertainty (up to {float(np.max(u)):.3g})"
