"""Quasi-static closed forms for coplanar waveguide (zero metal thickness).

Geometry: centre strip width ``w_m``, gap ``s_m`` to each ground, substrate
height ``h_m`` and relative permittivity ``eps_r``; lengths in metres, Z0 in
ohm. K(k) is the complete elliptic integral of the first kind; scipy's
``ellipk`` takes the parameter m = k^2, and K'(k) = K(sqrt(1 - k^2)).

- finite substrate, no backside metal: Ghione & Naldi, Electron. Lett. 20(4),
  1984; Simons, Coplanar Waveguide Circuits, Components, and Systems, 2001, ch. 2.
- conductor-backed: Ghione & Naldi, Electron. Lett. 19(18), 1983.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import ellipk


@dataclass(frozen=True)
class CpwQuasiStatic:
    """Quasi-static line parameters: z0 (ohm), eps_eff (dimensionless)."""

    z0: float
    eps_eff: float


def k_ratio(k: ArrayLike) -> np.float64 | NDArray[np.float64]:
    """K(k) / K'(k), with k the modulus (not the parameter m = k^2)."""
    m = np.asarray(k, dtype=float) ** 2
    q: np.float64 | NDArray[np.float64] = ellipk(m) / ellipk(1.0 - m)  # scipy is untyped; a scalar k gives a scalar
    return q


def _check(w_m: float, s_m: float, h_m: float, eps_r: float) -> None:
    if min(w_m, s_m, h_m) <= 0:
        raise ValueError(f"CPW dimensions must be positive: w={w_m}, s={s_m}, h={h_m} m")
    if eps_r < 1:
        raise ValueError(f"relative permittivity must be >= 1, got {eps_r}")


def cpw(w_m: float, s_m: float, h_m: float, eps_r: float) -> CpwQuasiStatic:
    """CPW on a substrate of finite height ``h_m`` with nothing underneath.

    k1 = W/(W + 2S), k2 = sinh(pi W/4h) / sinh(pi (W + 2S)/4h);
    eps_eff = 1 + (eps_r - 1)/2 * q(k2)/q(k1); Z0 = 30 pi / sqrt(eps_eff) / q(k1)
    with q = K/K'.
    """
    _check(w_m, s_m, h_m, eps_r)
    k1 = w_m / (w_m + 2 * s_m)
    k2 = np.sinh(np.pi * w_m / (4 * h_m)) / np.sinh(np.pi * (w_m + 2 * s_m) / (4 * h_m))
    q1 = k_ratio(k1)
    eps_eff = 1.0 + 0.5 * (eps_r - 1.0) * k_ratio(k2) / q1
    z0 = 30.0 * np.pi / np.sqrt(eps_eff) / q1
    return CpwQuasiStatic(z0=float(z0), eps_eff=float(eps_eff))


def cpw_backed(w_m: float, s_m: float, h_m: float, eps_r: float) -> CpwQuasiStatic:
    """Conductor-backed CPW (ground plane under a substrate of height ``h_m``).

    k3 = tanh(pi W/4h) / tanh(pi (W + 2S)/4h), q1 = q(k1), q3 = q(k3);
    eps_eff = (q1 + eps_r q3) / (q1 + q3); Z0 = 60 pi / sqrt(eps_eff) / (q1 + q3).
    """
    _check(w_m, s_m, h_m, eps_r)
    k1 = w_m / (w_m + 2 * s_m)
    k3 = np.tanh(np.pi * w_m / (4 * h_m)) / np.tanh(np.pi * (w_m + 2 * s_m) / (4 * h_m))
    q1 = k_ratio(k1)
    q3 = k_ratio(k3)
    eps_eff = (q1 + eps_r * q3) / (q1 + q3)
    z0 = 60.0 * np.pi / np.sqrt(eps_eff) / (q1 + q3)
    return CpwQuasiStatic(z0=float(z0), eps_eff=float(eps_eff))
