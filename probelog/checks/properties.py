"""What any passive, reciprocal, symmetric or lossless site must satisfy,
whatever its kind: passivity (sigma_max of S <= 1), reciprocity (S = S^T),
symmetry (S11 = S22) and Foster's clockwise rotation of reflections.

Differences are linear |S|; each limit widens by the cal's uncertainty u(f)
(:mod:`probelog.limits`) and is graded per frequency with
:func:`probelog.limits.grade`.
"""

from __future__ import annotations

import numpy as np

from probelog.checks.common import diag, ghz, make_result, not_applicable
from probelog.checks.thresholds import Limits
from probelog.limits import describe, grade
from probelog.verdicts import CheckResult, Verdict


def largest_singular_value(s: np.ndarray) -> np.ndarray:
    """sigma_max of each (n, n) matrix of ``s`` (n_freq, n, n).

    For 2-ports in closed form: sigma_max^2 = (F + sqrt(F^2 - 4 |det S|^2)) / 2
    with F the squared Frobenius norm (the eigenvalues of S^H S; Horn & Johnson,
    Matrix Analysis, ch. 7, from memory); ~10x faster than a batched SVD. Other
    sizes use numpy's SVD."""
    if s.shape[1:] == (1, 1):
        one: np.ndarray = np.abs(s[:, 0, 0])
        return one
    if s.shape[1:] != (2, 2):
        svd: np.ndarray = np.linalg.svd(s, compute_uv=False)[:, 0]
        return svd
    fro = np.einsum("fij,fij->f", s.real, s.real) + np.einsum("fij,fij->f", s.imag, s.imag)
    det = s[:, 0, 0] * s[:, 1, 1] - s[:, 0, 1] * s[:, 1, 0]
    disc = np.maximum(fro * fro - 4.0 * (det.real ** 2 + det.imag ** 2), 0.0)
    sigma: np.ndarray = np.sqrt(0.5 * (fro + np.sqrt(disc)))
    return sigma


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
        msg = f"passive: largest singular value {value:.4f} at {ghz(f_hz[i])} (allowed 1 + {how})"
    elif verdict is Verdict.WARN:
        msg = (f"slightly active at isolated points: largest singular value {value:.4f} at {ghz(f_hz[i])} "
               f"(allowed 1 + {fail[i]:.4g} there)")
    else:
        msg = (f"gives out more power than it takes in: largest singular value {value:.4f} at {ghz(f_hz[i])}, "
               f"allowed 1 + {fail[i]:.4g} there (calibration, port mapping or instrument problem)")
    return make_result("passivity", verdict, value, 1.0 + float(fail[i]), f_hz[i], msg)


def _pair_difference(name: str, f_hz: np.ndarray, a: np.ndarray, b: np.ndarray, warn: float, fail: float,
                     unc: np.ndarray | None, ok_msg: str, bad_msg: str) -> CheckResult:
    """|a - b| (linear) per frequency against ``fail`` + 2 u(f); messages are format
    strings with {v} (figure), {f} (frequency), {lim} (limit there) and {how} (the rule)."""
    d = np.abs(a - b)
    u = np.zeros(len(d)) if unc is None else np.asarray(unc, float)
    fail_f = fail + 2.0 * u
    verdict, i = grade(d, warn + 2.0 * u, fail_f)
    value = float(d[i])
    msg = (ok_msg if verdict is Verdict.PASS else bad_msg).format(
        v=value, f=ghz(f_hz[i]), lim=float(fail_f[i]), how=describe(fail, 2, unc))
    return make_result(name, verdict, value, float(fail_f[i]), f_hz[i], msg)


def reciprocity(f_hz: np.ndarray, s: np.ndarray, limits: Limits, unc: np.ndarray | None = None) -> CheckResult:
    """|S21 - S12| (linear) per frequency against ``reciprocity_fail`` + 2 u(f);
    a passive site is reciprocal (S = S^T)."""
    if s.shape[1] < 2:
        return not_applicable("reciprocity", "a 1-port has nothing to compare")
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
        return not_applicable("symmetry", "a 1-port has nothing to compare")
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
    g = diag(s)
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
        msg = (f"port {port + 1} turns counter-clockwise by {value:.3f} deg from {ghz(f_hz[start])} to "
               f"{ghz(f_hz[end])} (allowed {fail_at:.3g} deg there): reference plane beyond the standard, "
               "over-specified open C / short L, or a coarse frequency step")
    return make_result("rotation", verdict, value, fail_at, f_hz[end], msg, "deg")

