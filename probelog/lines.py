"""Transmission-line metrics from measured 2-ports.

Conventions: time dependence e^{+j omega t}; a line of length l has
ABCD = [[cosh(gl), Z0 sinh(gl)], [sinh(gl)/Z0, cosh(gl)]] (Pozar, Microwave
Engineering, 4th ed., ch. 2 and Table 4.1) with gamma = alpha + j beta, alpha in
Np/m, beta in rad/m; Z0 in ohm with Re Z0 > 0. Frequencies in Hz, lengths in
metres unless a name says otherwise. Everything is vectorised over frequency;
S arrays are shaped (n_freq, 2, 2) like ``skrf.Network.s``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import skrf
from numpy.typing import ArrayLike, NDArray

C0 = 299_792_458.0
"""Speed of light in vacuum, m/s."""

DB_PER_NP: float = 20.0 / np.log(10.0)
"""dB per neper (20 log10 e = 8.6859)."""

F64 = NDArray[np.float64]
C128 = NDArray[np.complex128]


@dataclass(frozen=True)
class LineMetrics:
    """Per-frequency line metrics; every array has shape (n_freq,).

    z0 is complex (ohm); gamma complex (1/m). Derived real figures:
    alpha in Np/m and dB/mm, beta in rad/mm, eps_eff (dimensionless),
    R (ohm/m), L (H/m), G (S/m), C (F/m) per unit length, and Q = beta / (2 alpha).
    When z0 is unknown (two-line gamma alone) z0 and R, L, G, C are NaN.
    """

    f_hz: F64
    z0: C128
    gamma: C128

    @property
    def alpha_np_per_m(self) -> F64:
        return self.gamma.real

    @property
    def alpha_db_per_mm(self) -> F64:
        return DB_PER_NP * self.gamma.real / 1000.0

    @property
    def beta_rad_per_mm(self) -> F64:
        return self.gamma.imag / 1000.0

    @property
    def eps_eff(self) -> F64:
        return (self.gamma.imag * C0 / (2.0 * np.pi * self.f_hz)) ** 2

    @property
    def _series(self) -> C128:
        with np.errstate(invalid="ignore"):
            return self.gamma * self.z0  # R + j omega L

    @property
    def _shunt(self) -> C128:
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.gamma / self.z0  # G + j omega C

    @property
    def r_ohm_per_m(self) -> F64:
        return self._series.real

    @property
    def l_h_per_m(self) -> F64:
        return self._series.imag / (2.0 * np.pi * self.f_hz)

    @property
    def g_s_per_m(self) -> F64:
        return self._shunt.real

    @property
    def c_f_per_m(self) -> F64:
        return self._shunt.imag / (2.0 * np.pi * self.f_hz)

    @property
    def q(self) -> F64:
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.gamma.imag / (2.0 * self.gamma.real)


JSON_KEYS = (
    "f_hz",
    "z0_re",
    "z0_im",
    "alpha_db_per_mm",
    "beta_rad_per_mm",
    "eps_eff",
    "r_ohm_per_m",
    "l_h_per_m",
    "g_s_per_m",
    "c_f_per_m",
    "q",
)


def abcd_from_s(s: C128, z0: float = 50.0) -> C128:
    """ABCD matrices of 2-ports from S referenced to a real ``z0`` (ohm).

    Pozar 4th ed. Table 4.2. ``s`` has shape (n, 2, 2); returns (n, 2, 2), B in
    ohm and C in siemens.
    """
    s11, s12, s21, s22 = s[:, 0, 0], s[:, 0, 1], s[:, 1, 0], s[:, 1, 1]
    d = 2.0 * s21
    a = ((1 + s11) * (1 - s22) + s12 * s21) / d
    b = z0 * ((1 + s11) * (1 + s22) - s12 * s21) / d
    c = ((1 - s11) * (1 - s22) - s12 * s21) / (d * z0)
    dd = ((1 - s11) * (1 + s22) + s12 * s21) / d
    return np.stack([np.stack([a, b], -1), np.stack([c, dd], -1)], -2)


def t_from_s(s: C128) -> C128:
    """Wave-cascading (T) matrices of 2-ports, cascading as T1 @ T2 (scikit-rf's
    convention), vectorised over the first axis."""
    s11, s12, s21, s22 = s[:, 0, 0], s[:, 0, 1], s[:, 1, 0], s[:, 1, 1]
    t11 = s12 - s11 * s22 / s21
    t12 = s11 / s21
    t21 = -s22 / s21
    t22 = 1.0 / s21
    return np.stack([np.stack([t11, t12], -1), np.stack([t21, t22], -1)], -2)


def _branch(gl: C128, f_hz: F64, length_m: float, eps_eff_guess: float | None) -> C128:
    """Put beta*l (imaginary part of principal-valued gl) on a continuous branch.

    The phase is unwrapped over frequency, then offset by 2 pi n: with an
    ``eps_eff_guess`` n is chosen so that the lowest point is nearest the guess;
    without one, so that the straight line through the first two points passes
    nearest to beta*l = 0 at f = 0. Unwrapping needs a frequency step below
    c / (2 l sqrt(eps_eff)).
    """
    phase = np.unwrap(gl.imag)
    if eps_eff_guess is not None:
        target = 2.0 * np.pi * f_hz[0] * np.sqrt(eps_eff_guess) * length_m / C0
        offset = target - phase[0]
    elif phase.size >= 2 and f_hz[1] > f_hz[0]:
        slope = (phase[1] - phase[0]) / (f_hz[1] - f_hz[0])
        offset = -(phase[0] - slope * f_hz[0])
    else:
        offset = 0.0 if phase[0] >= 0 else 2.0 * np.pi
    n = np.round(offset / (2.0 * np.pi))
    branch: C128 = gl.real + 1j * (phase + 2.0 * np.pi * n)  # offset is float or numpy scalar: the stubs say Any
    return branch


def _network_s_50(ntwk: skrf.Network) -> tuple[C128, float]:
    if ntwk.nports != 2:
        raise ValueError(f"line metrics need a 2-port, got {ntwk.nports} port(s)")
    z0 = np.asarray(ntwk.z0)
    ref = complex(z0.flat[0])
    if not np.allclose(z0, ref) or abs(ref.imag) > 1e-12:
        ntwk = ntwk.copy()
        ntwk.renormalize(50.0)
        ref = 50.0
    return ntwk.s, float(ref.real)


def metrics_from_s(
    f_hz: ArrayLike, s: C128, length_m: float, eps_eff_guess: float | None = None, z0_ref: float = 50.0
) -> LineMetrics:
    """Z0, gamma and RLGC of a uniform line from its S (n_freq, 2, 2) referenced
    to a real ``z0_ref`` (ohm); ``length_m`` in metres. See :func:`line_metrics`."""
    if length_m <= 0:
        raise ValueError(f"line length must be positive, got {length_m} m")
    f_hz = np.asarray(f_hz, dtype=float)
    # A landing with no transmission (a lifted tip, S21 = 0) has no line metrics:
    # its points come out inf/NaN, which the checks and the figures treat as
    # missing; numpy's warnings would only print noise into the operator's terminal.
    with np.errstate(divide="ignore", invalid="ignore"):
        abcd = abcd_from_s(s, z0_ref)
        a_mean = 0.5 * (abcd[:, 0, 0] + abcd[:, 1, 1])
        root = np.sqrt(a_mean**2 - 1.0)
        egl = np.where(np.abs(a_mean + root) >= np.abs(a_mean - root), a_mean + root, a_mean - root)
        gl = _branch(np.log(egl), f_hz, length_m, eps_eff_guess)
        z0 = np.sqrt(abcd[:, 0, 1] / abcd[:, 1, 0])
    z0 = np.where(z0.real < 0, -z0, z0)
    return LineMetrics(f_hz=f_hz, z0=z0, gamma=gl / length_m)


def line_metrics(ntwk: skrf.Network, length_m: float, eps_eff_guess: float | None = None) -> LineMetrics:
    """Z0, gamma and RLGC of a uniform line measured as a 2-port of ``length_m``.

    Assumes the measured 2-port is the line itself (reference planes at its
    ends, e.g. after multiline TRL); pads left in bias the result (use
    :func:`gamma_two_lines` then). A' = (A + D)/2, e^{gl} = A' +- sqrt(A'^2 - 1)
    with |e^{gl}| > 1; Z0 = sqrt(B / C) with Re Z0 > 0 (Pozar 4th ed. ch. 2).
    """
    s, ref = _network_s_50(ntwk)
    return metrics_from_s(ntwk.f, s, length_m, eps_eff_guess, ref)


def gamma_two_lines(
    ntwk_a: skrf.Network,
    len_a_m: float,
    ntwk_b: skrf.Network,
    len_b_m: float,
    eps_eff_guess: float | None = None,
) -> C128:
    """Propagation constant gamma (1/m) from two lines that differ only in length.

    The eigenvalues of T_b inv(T_a) are e^{+-gamma (l_b - l_a)}, free of the
    pads and of the line's own Z0 (Engen & Hoer, IEEE T-MTT 27(12), 1979;
    Marks, IEEE T-MTT 39(7), 1991). The eigenvalue of larger magnitude is taken
    as e^{+gamma dl}, which assumes a lossy line (alpha dl well above the noise).
    """
    if len_a_m == len_b_m:
        raise ValueError("the two lines must differ in length")
    if len_b_m < len_a_m:
        ntwk_a, len_a_m, ntwk_b, len_b_m = ntwk_b, len_b_m, ntwk_a, len_a_m
    if ntwk_a.frequency != ntwk_b.frequency:
        raise ValueError("the two lines were measured on different frequency grids")
    s_a, _ = _network_s_50(ntwk_a)
    s_b, _ = _network_s_50(ntwk_b)
    m = t_from_s(s_b) @ np.linalg.inv(t_from_s(s_a))
    lam = np.linalg.eigvals(m)
    big = np.abs(lam[:, 0]) >= np.abs(lam[:, 1])
    l1 = np.where(big, lam[:, 0], lam[:, 1])
    l2 = np.where(big, lam[:, 1], lam[:, 0])
    # log(l1) - log(l1 l2)/2 averages both eigenvalues; l1 l2 ~ 1 keeps its phase off the branch cut.
    gdl = np.log(l1) - 0.5 * np.log(l1 * l2)
    dl = len_b_m - len_a_m
    return _branch(gdl, ntwk_a.f, dl, eps_eff_guess) / dl


def metrics_from_gamma(f_hz: ArrayLike, gamma: ArrayLike, z0: ArrayLike | None = None) -> LineMetrics:
    """Wrap a gamma (1/m) and optional Z0 (ohm) into :class:`LineMetrics`; an
    unknown Z0 becomes NaN, and so do R, L, G, C."""
    f_hz = np.asarray(f_hz, dtype=float)
    z0_arr = np.full(f_hz.shape, np.nan + 1j * np.nan) if z0 is None else np.asarray(z0, dtype=complex)
    return LineMetrics(f_hz=f_hz, z0=z0_arr, gamma=np.asarray(gamma, dtype=complex))


def _columns(m: LineMetrics, idx: NDArray[np.intp] | slice) -> dict[str, F64]:
    return {
        "f_hz": m.f_hz[idx],
        "z0_re": m.z0.real[idx],
        "z0_im": m.z0.imag[idx],
        "alpha_db_per_mm": m.alpha_db_per_mm[idx],
        "beta_rad_per_mm": m.beta_rad_per_mm[idx],
        "eps_eff": m.eps_eff[idx],
        "r_ohm_per_m": m.r_ohm_per_m[idx],
        "l_h_per_m": m.l_h_per_m[idx],
        "g_s_per_m": m.g_s_per_m[idx],
        "c_f_per_m": m.c_f_per_m[idx],
        "q": m.q[idx],
    }


def _jsonable(a: F64) -> list[float | None]:
    return [float(x) if np.isfinite(x) else None for x in np.asarray(a, dtype=float)]


def metrics_at(metrics: LineMetrics, freqs_hz: ArrayLike) -> dict[str, list[float | None]]:
    """Metrics at the measured points nearest to ``freqs_hz`` (Hz), as small
    lists keyed like :data:`JSON_KEYS`; ``f_hz`` holds the measured frequencies
    actually used. NaN and infinities become None (JSON null)."""
    targets = np.atleast_1d(np.asarray(freqs_hz, dtype=float))
    idx = np.abs(metrics.f_hz[None, :] - targets[:, None]).argmin(axis=1)
    return {k: _jsonable(v) for k, v in _columns(metrics, idx).items()}


def to_json(metrics: LineMetrics) -> dict[str, list[float | None]]:
    """All points of ``metrics`` as lists keyed like :data:`JSON_KEYS`."""
    return {k: _jsonable(v) for k, v in _columns(metrics, slice(None)).items()}


def valid_points(metrics: LineMetrics, length_m: float, min_sinh: float = 0.1, min_deg: float = 30.0) -> np.ndarray:
    """Points where single-line figures mean something (bool, (n_freq,)): the
    electrical length beta l is at least ``min_deg`` degrees (below it the phase
    is too small to give eps_eff and loss; common practice, no source) and the
    line is away from a half-wavelength, |sinh(gamma l)| >= ``min_sinh`` (where
    Z0 = sqrt(B / C) is 0/0). Two-line gamma has no Z0, so only the first rule
    applies to it (pass ``min_sinh=0``)."""
    gl = metrics.gamma * length_m
    with np.errstate(invalid="ignore"):
        ok = np.degrees(np.abs(gl.imag)) >= min_deg
        if min_sinh > 0:
            ok &= np.abs(np.sinh(gl)) >= min_sinh
    out: np.ndarray = ok & np.isfinite(metrics.gamma)
    return out


# Round frequencies engineers quote line figures at (Hz); common practice, no source.
ROUND_HZ = np.array([1, 5, 10, 20, 40, 67, 110, 170, 220, 325, 500]) * 1e9


def default_frequencies(f_hz: F64, count: int = 5, prefer_round: bool = False) -> F64:
    """Where to report line figures (Hz): ``count`` frequencies spread evenly from
    the first to the last point; with ``prefer_round``, the round frequencies
    inside the sweep (``ROUND_HZ``) when at least ``count`` of them fall there
    (the journal and the bundle use these, so sessions compare column by column)."""
    f0, f1 = float(f_hz[0]), float(f_hz[-1])
    inside = ROUND_HZ[(ROUND_HZ >= f0) & (ROUND_HZ <= f1)]
    return inside if prefer_round and inside.size >= count else np.linspace(f0, f1, count)
