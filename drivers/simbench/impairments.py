"""Trace noise, noise floor, tracking drift and the simulated clock.

Numbers are trade figures (common practice, no source): trace noise ~0.002 dB and
0.02 deg rms at 1 kHz IF bandwidth, growing as sqrt(IFBW); a noise floor of
-90 dBc at -10 dBm source power and 1 kHz; tracking drift of 0.02 dB and 0.3 deg
per hour at 110 GHz, proportional to frequency. Frequencies in Hz, time in s.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

TRACE_NOISE_DB = 0.002  # rms at 1 kHz IFBW
TRACE_NOISE_DEG = 0.02
NOISE_FLOOR_DBC = -90.0  # at -10 dBm, 1 kHz IFBW
DRIFT_DB_PER_H = 0.02  # |S21| tracking at 110 GHz
DRIFT_DEG_PER_H = 0.3


def add_noise(s: NDArray[np.complex128], rng: np.random.Generator, ifbw_hz: float, power_dbm: float) -> NDArray[np.complex128]:
    """Return s with multiplicative trace noise and an additive noise floor.

    Trace noise: log-amplitude and phase independent Gaussians of rms
    TRACE_NOISE_DB (dB = 20 log10|S|) and TRACE_NOISE_DEG, times sqrt(IFBW / 1 kHz).
    Floor: complex Gaussian of rms NOISE_FLOOR_DBC, +1 dB per dB less power.
    """
    k = np.sqrt(ifbw_hz / 1e3)
    sig_a = TRACE_NOISE_DB / (20 / np.log(10)) * k
    sig_p = np.deg2rad(TRACE_NOISE_DEG) * k
    n = rng.standard_normal((4,) + s.shape)
    # exp(a + j p) to first order: the terms are ~1e-4, the error ~1e-8
    trace: NDArray[np.complex128] = (1 + sig_a * n[0]) + 1j * (sig_p * n[1])  # n[i]: numpy types it Any
    floor = 10 ** ((NOISE_FLOOR_DBC + (-10.0 - power_dbm)) / 20) * k / np.sqrt(2)
    added: NDArray[np.complex128] = floor * (n[2] + 1j * n[3])
    return s * trace + added


def drift_factors(f: NDArray[np.float64], hours: float, seed: int) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
    """Multipliers d1, d2 of each port's tracking e10 e01 after ``hours``.

    A thru's S21 moves by sqrt(d1 d2): DRIFT_DB_PER_H and DRIFT_DEG_PER_H per hour
    at 110 GHz, linear in frequency and in time (slow thermal drift of cables and
    probes); the two ports share it in seeded proportions.
    """
    share = np.random.default_rng([seed, 202]).uniform(0.3, 0.7)
    scale = np.asarray(f, float) / 110e9 * hours
    db = -DRIFT_DB_PER_H * scale
    ph = -np.deg2rad(DRIFT_DEG_PER_H) * scale
    a, b = 2 * share, 2 * (1 - share)
    d1 = 10 ** (a * db / 20) * np.exp(1j * a * ph)
    d2 = 10 ** (b * db / 20) * np.exp(1j * b * ph)
    return d1, d2


@dataclass
class SimClock:
    """Simulated time: real elapsed time times ``acceleration``, plus manual advances.

    ``acceleration`` = 60 makes one real minute an hour of drift.
    """

    acceleration: float = 1.0

    def __post_init__(self) -> None:
        self._t0 = time.monotonic()
        self._offset = 0.0
        self._lock = threading.Lock()

    def advance(self, seconds: float) -> None:
        with self._lock:
            self._offset += seconds

    def reset(self) -> None:
        with self._lock:
            self._t0 = time.monotonic()
            self._offset = 0.0

    @property
    def hours(self) -> float:
        """Simulated hours since start (or the last reset)."""
        with self._lock:
            return ((time.monotonic() - self._t0) * self.acceleration + self._offset) / 3600.0
