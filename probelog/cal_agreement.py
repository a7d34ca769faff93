"""Worst-case agreement of two calibrations over all passive devices.

After Williams, Marks & Davidson, "Comparison of on-wafer calibrations", 38th ARFTG,
1991 (from memory). Cal A and cal B see the same raw data through error boxes
(X_A, Y_A) and (X_B, Y_B); correcting with B what A would have corrected gives,
in cascading (T) parameters, T_B = D1 T_A D2 with D1 = inv(X_B) X_A and
D2 = Y_A inv(Y_B). The figure is, per S-parameter and frequency,

    B_ij(f) = sup over passive S of |S'_ij - S_ij|,   S' = D1 ** S ** D2,

where ** is the cascade. S'_ij is analytic in the entries of S, so the supremum
over the passive set (the unit ball of the spectral norm) is reached on its
distinguished boundary, the lossless (unitary) S. We search all unitary 2x2 S,
U = e^{j psi} [[cos t e^{j a}, sin t e^{j b}], [-sin t e^{-j b}, cos t e^{-j a}]],
on a dense grid, then refine each maximum locally; all frequencies at once.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Sequence, cast

import numpy as np
from numpy.typing import NDArray

if TYPE_CHECKING:  # calibration imports this module
    import skrf

    from probelog.calibration import CalSet

C128 = NDArray[np.complex128]  # S and T matrices (..., 2, 2)
F64 = NDArray[np.float64]

_IJ = ((0, 0), (0, 1), (1, 0), (1, 1))


def _s2t(s: C128) -> C128:
    """S (..., 2, 2) -> cascading T with [a1, b1]^T = T [b2, a2]^T."""
    s11, s12, s21, s22 = s[..., 0, 0], s[..., 0, 1], s[..., 1, 0], s[..., 1, 1]
    det = s11 * s22 - s12 * s21
    t = np.empty_like(s)
    t[..., 0, 0], t[..., 0, 1] = 1 / s21, -s22 / s21
    t[..., 1, 0], t[..., 1, 1] = s11 / s21, -det / s21
    return t


def _t2s(t: C128) -> C128:
    s = np.empty_like(t)
    s[..., 0, 0] = t[..., 1, 0] / t[..., 0, 0]
    s[..., 0, 1] = np.linalg.det(t) / t[..., 0, 0]
    s[..., 1, 0] = 1 / t[..., 0, 0]
    s[..., 1, 1] = -t[..., 0, 1] / t[..., 0, 0]
    return s


def error_boxes(terms8: dict[str, C128]) -> tuple[C128, C128]:
    """Port error boxes X, Y (n_freq, 2, 2) from scikit-rf 8-term coefficients.

    Raw (switch-corrected) M = X ** S ** Y; X = [[e00, e01], [e10, e11]],
    Y = [[e22, e23], [e32, e33]] with port 1 of Y facing the device. Only the
    products e01 e10, e23 e32 and k = e10 / e23 are fixed; we take e10 = 1.
    """
    n = len(terms8["k"])
    x = np.empty((n, 2, 2), dtype=complex)
    y = np.empty((n, 2, 2), dtype=complex)
    k = terms8["k"]
    x[:, 0, 0] = terms8["forward directivity"]
    x[:, 1, 1] = terms8["forward source match"]
    x[:, 1, 0] = 1.0
    x[:, 0, 1] = terms8["forward reflection tracking"]
    y[:, 0, 0] = terms8["reverse source match"]
    y[:, 1, 1] = terms8["reverse directivity"]
    y[:, 0, 1] = 1.0 / k
    y[:, 1, 0] = terms8["reverse reflection tracking"] * k
    return x, y


def difference_boxes(terms_a: dict[str, C128], terms_b: dict[str, C128]) -> tuple[C128, C128]:
    """D1 = inv(X_B) X_A and D2 = Y_A inv(Y_B) as S-matrices (n_freq, 2, 2)."""
    xa, ya = error_boxes(terms_a)
    xb, yb = error_boxes(terms_b)
    d1 = cast(C128, np.linalg.solve(_s2t(xb), _s2t(xa)))  # numpy's stubs widen it to complexfloating
    d2 = _s2t(ya) @ np.linalg.inv(_s2t(yb))
    return _t2s(d1), _t2s(d2)


def cascade(a: C128, b: C128) -> C128:
    """A ** B (port 2 of A to port 1 of B) of S-matrices (..., 2, 2), Redheffer star."""
    den = 1 - a[..., 1, 1] * b[..., 0, 0]
    out = np.empty(np.broadcast_shapes(a.shape, b.shape), dtype=complex)
    out[..., 0, 0] = a[..., 0, 0] + a[..., 0, 1] * b[..., 0, 0] * a[..., 1, 0] / den
    out[..., 0, 1] = a[..., 0, 1] * b[..., 0, 1] / den
    out[..., 1, 0] = b[..., 1, 0] * a[..., 1, 0] / den
    out[..., 1, 1] = b[..., 1, 1] + b[..., 1, 0] * a[..., 1, 1] * b[..., 0, 1] / den
    return out


def _unitary(p: F64) -> C128:
    """Unitary 2x2 S from parameters p[..., (t, a, b, psi)] in radians."""
    t, a, b, psi = p[..., 0], p[..., 1], p[..., 2], p[..., 3]
    c, s, e = np.cos(t), np.sin(t), np.exp(1j * psi)
    u = np.empty(p.shape[:-1] + (2, 2), dtype=complex)
    u[..., 0, 0] = e * c * np.exp(1j * a)
    u[..., 0, 1] = e * s * np.exp(1j * b)
    u[..., 1, 0] = -e * s * np.exp(-1j * b)
    u[..., 1, 1] = e * c * np.exp(-1j * a)
    return u


def _err(d1: C128, d2: C128, p: F64) -> F64:
    """|S'_ij - S_ij| for unitary S(p): d1, d2 (n, 1, 2, 2), p (n, K, 4) -> (n, K, 2, 2)."""
    s = _unitary(p)
    return np.abs(cascade(cascade(d1, s), d2) - s)


# Frequencies refined at once: ~60 MB of working arrays (10,001 points at once
# took 1 GB).
_FREQ_CHUNK = 256


def agreement_bound(d1: C128, d2: C128, grid: int = 12, refine: int = 30) -> F64:
    """B_ij = sup over passive S of |(D1 ** S ** D2)_ij - S_ij|, shape (n_freq, 2, 2).

    d1, d2: S-matrices of the difference boxes, (n_freq, 2, 2) or (2, 2).
    ``grid`` points per angle for the global search, ``refine`` local halvings.
    """
    d1 = np.asarray(d1, dtype=complex).reshape(-1, 2, 2)
    d2 = np.asarray(d2, dtype=complex).reshape(-1, 2, 2)
    n = d1.shape[0]
    if n > _FREQ_CHUNK:  # the refinement holds (n, 4, 81) candidate matrices: bound it
        return np.concatenate([agreement_bound(d1[i:i + _FREQ_CHUNK], d2[i:i + _FREQ_CHUNK], grid, refine)
                               for i in range(0, n, _FREQ_CHUNK)])
    h = 2 * np.pi / grid
    ang = np.arange(grid) * h
    tt = np.linspace(0, np.pi / 2, grid // 2 + 1)
    g = np.stack(np.meshgrid(tt, ang, ang, ang, indexing="ij"), axis=-1).reshape(-1, 4)
    best = np.empty((n, 4, 4))            # (freq, ij, params)
    chunk = max(1, 400_000 // len(g))     # bound the working memory, not a per-point loop
    for lo in range(0, n, chunk):
        sl = slice(lo, lo + chunk)
        e = _err(d1[sl, None], d2[sl, None], g[None])           # (m, G, 2, 2)
        idx = np.argmax(e.reshape(e.shape[0], len(g), 4), axis=1)  # (m, 4)
        best[sl] = g[idx]
    steps = np.stack(np.meshgrid(*[[-1.0, 0.0, 1.0]] * 4, indexing="ij"), axis=-1).reshape(-1, 4)
    d1r, d2r = d1[:, None, None], d2[:, None, None]              # (n, 1, 1, 2, 2)
    flat = np.arange(4)
    step = np.array([np.pi / 2 / (grid // 2), h, h, h])
    value = np.zeros((n, 4))
    for _ in range(refine):
        cand = best[:, :, None, :] + steps * step                # (n, 4, 81, 4)
        e = _err(d1r, d2r, cand).reshape(n, 4, len(steps), 4)   # (n, ij, 81, ij')
        e = e[:, flat, :, flat].transpose(1, 0, 2)               # component ij of row ij
        k = np.argmax(e, axis=-1)                                # (n, 4)
        best = np.take_along_axis(cand, k[..., None, None], axis=2)[:, :, 0]
        value = np.take_along_axis(e, k[..., None], axis=-1)[..., 0]
        step = step * 0.6
    return value.reshape(n, 2, 2)


@dataclass(frozen=True)
class Agreement:
    """Worst-case difference of two cal sets over passive devices.

    bound[f, i, j] is the bound on |S_ij| difference (linear, not dB) at f_hz[f];
    worst is its maximum over frequency and S_ij, reached at at_hz on ``worst_sij``.
    residual is the largest misfit of the error-box model on the raw standards
    (None when no standards were given). A 12-term cal set (SOLT) enters through
    scikit-rf's 12-to-8-term conversion (Marks, 50th ARFTG 1997), which is exact
    only when its terms are consistent; a residual far above the trace noise
    means the bound rests on that approximation (noise, leakage, a wrong standard).
    """

    cal_a: str
    cal_b: str
    f_hz: F64
    bound: F64
    worst: float
    at_hz: float
    worst_sij: str
    residual: float | None = None

    def summary(self) -> dict[str, Any]:
        return {"cal_a": self.cal_a, "cal_b": self.cal_b, "worst": self.worst,
                "at_hz": self.at_hz, "worst_sij": self.worst_sij, "residual": self.residual}

    def write_csv(self, path: str | Path) -> Path:
        """Per-frequency bounds: f_hz, S11, S12, S21, S22 (linear)."""
        path = Path(path)
        with path.open("w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["f_hz", "bound_s11", "bound_s12", "bound_s21", "bound_s22"])
            for f, b in zip(self.f_hz, self.bound.reshape(-1, 4), strict=False):
                w.writerow([repr(float(f))] + [f"{x:.9g}" for x in b])
        return path


def agreement(cal_a: CalSet, cal_b: CalSet, raw_standards: Sequence[skrf.Network] | None = None) -> Agreement:
    """Compare two cal sets (probelog.calibration.CalSet) solved on the same sweep.

    The difference boxes come from both cal sets' 8-term error terms; when raw
    standards (skrf Networks) are given, the error-box model is also checked on
    them: D1 ** (A-corrected) ** D2 must equal the B-corrected data.
    """
    fa, fb = cal_a.frequency, cal_b.frequency
    if fa != fb:
        raise ValueError(f"cal sets '{cal_a.cal_id}' and '{cal_b.cal_id}' cover different "
                         f"frequencies; compare cal sets solved on the same sweep")
    d1, d2 = difference_boxes(cal_a.error_terms_8, cal_b.error_terms_8)
    bound = agreement_bound(d1, d2)
    i, p = np.unravel_index(np.argmax(bound.reshape(len(bound), 4)), (len(bound), 4))
    residual = None
    if raw_standards:
        residual = 0.0
        for raw in raw_standards:
            sa = cal_a.apply(raw).s
            sb = cal_b.apply(raw).s
            residual = max(residual, float(np.max(np.abs(cascade(cascade(d1, sa), d2) - sb))))
    r, c = _IJ[p]
    return Agreement(cal_a=cal_a.cal_id, cal_b=cal_b.cal_id, f_hz=fa.f.copy(), bound=bound,
                     worst=float(bound[i, r, c]), at_hz=float(fa.f[i]),
                     worst_sij=f"S{r + 1}{c + 1}", residual=residual)
