"""A landing judged against the accepted landings of the same site on earlier dies.

What physics cannot tell (a few ohm of contact resistance on a device, a
skating ground tip), the population can: the same structure on other dies
reads the same to within process spread and landing repeatability.

Per frequency and S_ij, with x_k the accepted landings (complex):

    centre(f) = median_k Re x_k + j median_k Im x_k         (outlier-robust)
    spread(f) = max(1.4826 * median_k |x_k - centre|, floor + u(f))

1.4826 * MAD estimates a standard deviation robustly (Rousseeuw & Croux, JASA
88(424), 1993, from memory); it needs about five landings to mean something,
so until then the spread is the floor: ``Limits.population_floor`` +
``population_floor_per_hz`` * f (landing repeatability plus die-to-die process
spread, which grows with electrical length; linear |S|; common practice, no
source) plus u(f), the calibration's uncertainty. The figure is the distance
in spreads, z(f) = |S - centre| / spread, worst S_ij at each point, graded with
:func:`probelog.limits.grade` (a run of adjacent points over the limit fails,
one noisy point does not). Fewer than ``Limits.population_min`` accepted
landings: n/a.

A limit of this check: when the only earlier landings are themselves bad (a
high contact resistance accepted on the first die, where nothing could tell),
a clean landing disagrees with them; the message names the landings compared
with so the operator can judge, and the median settles once three or more
are accepted.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from probelog.checks import Limits
from probelog.limits import grade
from probelog.verdicts import CheckResult, Verdict

MAD_TO_SIGMA = 1.4826  # for normally distributed data (Rousseeuw & Croux 1993, from memory)


def centre_and_spread(stack: np.ndarray, floor: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Complex median and robust spread of ``stack`` (k, n, p, p) over its first
    axis; ``floor`` (n,) is broadcast over S_ij."""
    centre = np.median(stack.real, axis=0) + 1j * np.median(stack.imag, axis=0)
    mad = np.median(np.abs(stack - centre), axis=0)
    spread = np.maximum(MAD_TO_SIGMA * mad, floor[:, None, None])
    return centre, spread


def _ghz(f_hz: float) -> str:
    return f"{f_hz / 1e9:.4g} GHz"


def population(f_hz: np.ndarray, s: np.ndarray, history: Sequence[tuple[str, np.ndarray, np.ndarray]],
               limits: Limits | None = None, unc: np.ndarray | None = None) -> CheckResult:
    """Judge ``s`` (n, p, p) at ``f_hz`` (Hz) against ``history``: (label, f_hz, s)
    of the accepted landings of the same site on earlier dies (label, e.g.
    "die 2,1 landing 1", goes into the message). Landings on another grid or
    port count are left out. ``unc`` (n,) is the cal's uncertainty, linear."""
    limits = limits or Limits()
    f_hz = np.asarray(f_hz, dtype=float)
    usable = [(lab, x) for lab, f, x in history  # same grid: equal arrays first, the cheap test
              if x.shape == s.shape and (np.array_equal(f, f_hz) or np.allclose(f, f_hz, rtol=1e-9, atol=0.0))]
    need = max(1, int(limits.population_min))
    if len(usable) < need:
        return CheckResult("population", Verdict.NA, None, None, None,
                           f"{len(usable)} accepted landing(s) of this site on the same grid, "
                           f"{need} needed to judge against earlier dies")
    stack = np.stack([x for _, x in usable])
    u = np.zeros(len(f_hz)) if unc is None else np.asarray(unc, float)
    centre, spread = centre_and_spread(stack, limits.population_floor + limits.population_floor_per_hz * f_hz + u)
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.abs(s - centre) / spread
    flat = np.where(np.isnan(z), np.inf, z).reshape(len(f_hz), -1)
    per_f = flat.max(axis=1)
    verdict, k = grade(per_f, limits.population_warn_sigma, limits.population_fail_sigma)
    i, j = divmod(int(flat[k].argmax()), s.shape[2])
    d = float(np.abs(s[k, i, j] - centre[k, i, j]))
    labels = [lab for lab, _ in usable]
    who = labels[0] if len(labels) == 1 else f"the median of {len(labels)} accepted landings ({labels[0]} .. {labels[-1]})"
    port = f"port {i + 1}" if i == j else f"the path port {j + 1} to port {i + 1}"
    if verdict is Verdict.PASS:
        msg = (f"like the site on earlier dies: largest |dS{i + 1}{j + 1}| {d:.4f} at {_ghz(f_hz[k])}, "
               f"{per_f[k]:.2g} spreads from {who}")
    else:
        word = "differs from" if verdict is Verdict.FAIL else "drifts from"
        msg = (f"{port} {word} the site on earlier dies: |dS{i + 1}{j + 1}| = {d:.4f} at {_ghz(f_hz[k])}, "
               f"{per_f[k]:.2g} spreads ({float(spread[k, i, j]):.4f}) from {who}: "
               "high contact resistance, a skating ground or a worn tip? re-land")
    return CheckResult("population", verdict, float(per_f[k]), float(limits.population_fail_sigma),
                       float(f_hz[k]), msg, "spreads")
