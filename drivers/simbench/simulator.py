"""The measurement model without any I/O: true site S, error boxes, faults, drift
and noise put together into what the simulated VNA reports.

Frequencies in Hz; S arrays (n_freq, 2, 2), 50 ohm.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from typing import Callable, Generic, Hashable, TypeVar

import numpy as np

from probelog.drivers.simbench.chip import Chip
from probelog.drivers.simbench.errorbox import ErrorModel, drifted, error_model, raw_from_true
from probelog.drivers.simbench.faults import apply_contact_faults
from probelog.drivers.simbench.impairments import add_noise, drift_factors
from probelog.drivers.simbench.physics import C128, F64, NOMINAL, SiteModel, die_variation


V = TypeVar("V")


class _Lru(Generic[V]):
    def __init__(self, size: int) -> None:
        self._d: OrderedDict[Hashable, V] = OrderedDict()
        self._size = size
        self._lock = threading.Lock()

    def get(self, key: Hashable, make: Callable[[], V]) -> V:
        with self._lock:
            if key in self._d:
                self._d.move_to_end(key)
                return self._d[key]
        value = make()
        with self._lock:
            self._d[key] = value
            while len(self._d) > self._size:
                self._d.popitem(last=False)
        return value


def _fkey(f: F64) -> tuple[int, float, float, int]:
    return (len(f), float(f[0]), float(f[-1]), hash(f.tobytes()))


class Simulator:
    """Pure model of the bench for one wafer: seeded, thread-safe, cached per grid."""

    def __init__(self, chip: Chip, seed: int = 0, variation: bool = True) -> None:
        self.chip = chip
        self.seed = seed
        self.variation = variation
        self._sites: _Lru[C128] = _Lru(64)
        self._boxes: _Lru[ErrorModel] = _Lru(8)

    def model(self, die: tuple[int, int]) -> SiteModel:
        var = die_variation(self.chip, die, self.seed) if self.variation else NOMINAL
        return SiteModel(self.chip, var)

    def true_s(self, die: tuple[int, int], site: str | None, f: F64) -> C128:
        """Error-free S of ``site`` on ``die`` (None = bare passivation, tips in air)."""
        f = np.ascontiguousarray(f, float)

        def make() -> C128:
            s = self.model(die).site_s(self.chip.site(site) if site else None, f)
            s.setflags(write=False)
            return s

        return self._sites.get((die, site, _fkey(f)), make)

    def error_model(self, f: F64) -> ErrorModel:
        f = np.ascontiguousarray(f, float)
        return self._boxes.get(_fkey(f), lambda: error_model(f, self.seed))

    def raw(self, die: tuple[int, int], site: str | None, kinds: tuple[str, ...], f: F64,
            hours: float, ifbw_hz: float, power_dbm: float, rng: np.random.Generator | None) -> C128:
        """Raw 2-port the VNA reports: faults on the true S, drifted error boxes,
        switch terms, then noise (skipped when rng is None)."""
        f = np.ascontiguousarray(f, float)
        s = self.true_s(die, site, f)
        contact = tuple(k for k in kinds if k in ("lifted-1", "lifted-2", "lifted", "high-rc", "skate", "dead-die"))
        if contact:
            s = apply_contact_faults(s, contact, self.model(die), f, die)
        em = self.error_model(f)
        if hours > 0:
            em = drifted(em, *drift_factors(f, hours, self.seed))
        raw = raw_from_true(s, em)
        return add_noise(raw, rng, ifbw_hz, power_dbm) if rng is not None else raw
