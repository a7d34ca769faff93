"""Faults of the simulated bench: what goes wrong at a landing, on purpose or by chance.

A fault spec is ``KIND[@DIE[:SITE]][#N]``: DIE is ``COL,ROW`` or ``*``, SITE a site
name or ``*``; N is how many landings it applies to (default 1, ``all`` = every
landing), so a re-land can succeed. Examples: ``lifted-1@4,4:ln-cpw-m9-r2-l500``,
``dead-die@2,3#all``, ``drop`` (the next landing anywhere).

Contact faults change what the VNA sees (true S, 50 ohm, (n, 2, 2)); protocol
faults change how the VNA answers the first data fetch of the landing.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from probelog.drivers.simbench.errorbox import cascade
from probelog.drivers.simbench.physics import C128, F64, Z_REF, ZY, SiteModel, abcd_to_s, pair_s, series

CONTACT_KINDS = ("lifted-1", "lifted-2", "lifted", "high-rc", "skate", "dead-die")
PROTOCOL_KINDS = ("slow", "garbled", "drop")
KINDS = CONTACT_KINDS + PROTOCOL_KINDS

HIGH_RC_OHM = 2.0  # contact resistance of a bad landing, per tip (bad is > 1 ohm, common practice)
SKATE_L_PH = 80.0  # ground return of a skated ground tip
SKATE_C_FF = 40.0  # its gap to the pad: resonance near 89 GHz
SKATE_R_OHM = 300.0

# Weights of faults drawn by chance at a landing (demo mode).
CHANCE_WEIGHTS = {
    "lifted-1": 0.25, "lifted-2": 0.25, "lifted": 0.08, "high-rc": 0.15, "skate": 0.15,
    "slow": 0.03, "garbled": 0.05, "drop": 0.04,
}


class FaultSpecError(ValueError):
    """A fault spec string could not be parsed; the message says which part and why."""


@dataclass(frozen=True)
class Fault:
    """One fault. die/site None mean any; count None means every landing."""

    kind: str
    die: tuple[int, int] | None = None
    site: str | None = None
    count: int | None = 1

    def matches(self, die: tuple[int, int], site: str | None) -> bool:
        return (self.die is None or self.die == die) and (self.site is None or self.site == site)

    def __str__(self) -> str:
        d = "*" if self.die is None else f"{self.die[0]},{self.die[1]}"
        s = "*" if self.site is None else self.site
        n = "all" if self.count is None else str(self.count)
        return f"{self.kind}@{d}:{s}#{n}"


def parse_fault(spec: str, site_names: set[str] | None = None) -> Fault:
    """Parse ``KIND[@DIE[:SITE]][#N]``; raise FaultSpecError naming the bad part."""
    text = spec.strip()
    if not text:
        raise FaultSpecError("empty fault spec; expected KIND@COL,ROW:SITE, e.g. lifted-1@4,4:cal-thru")
    count: int | None = 1
    if "#" in text:
        text, n = text.rsplit("#", 1)
        if n.strip().lower() == "all":
            count = None
        else:
            try:
                count = int(n)
            except ValueError:
                raise FaultSpecError(f"fault {spec!r}: count {n!r} after '#' is not a whole number or 'all'") from None
            if count < 1:
                raise FaultSpecError(f"fault {spec!r}: count must be at least 1, got {count}")
    kind, _, where = text.partition("@")
    kind = kind.strip().lower()
    if kind not in KINDS:
        raise FaultSpecError(f"fault {spec!r}: unknown kind {kind!r}; known: {', '.join(KINDS)}")
    die_part, _, site_part = where.partition(":")
    die: tuple[int, int] | None = None
    die_part = die_part.strip()
    if die_part not in ("", "*"):
        bits = die_part.split(",")
        try:
            if len(bits) != 2:
                raise ValueError
            die = (int(bits[0]), int(bits[1]))
        except ValueError:
            raise FaultSpecError(f"fault {spec!r}: die {die_part!r} is not COL,ROW (two whole numbers) or *") from None
    site_part = site_part.strip()
    site = None if site_part in ("", "*") else site_part
    if site is not None and site_names is not None and site not in site_names:
        raise FaultSpecError(f"fault {spec!r}: no site named {site!r} on the chip")
    return Fault(kind, die, site, count)


@dataclass
class _Pending:
    fault: Fault
    left: int | None  # landings it still applies to; None: every landing


class FaultBook:
    """Pending faults and faults drawn by chance; thread-safe.

    ``landing(die, site)`` is called once per touchdown and returns the fault kinds
    that apply to it, using up one count of each matching fault.
    """

    def __init__(self, faults: list[Fault] | None = None, rate: float = 0.0, seed: int = 0) -> None:
        if not 0.0 <= rate <= 1.0:
            raise ValueError(f"fault rate must be within 0..1, got {rate}")
        self._pending: list[_Pending] = [_Pending(f, f.count) for f in faults or []]
        self._rate = rate
        self._rng = np.random.default_rng([seed, 303])
        self._lock = threading.Lock()

    def add(self, fault: Fault) -> None:
        with self._lock:
            self._pending.append(_Pending(fault, fault.count))

    def pending(self) -> list[Fault]:
        with self._lock:
            return [e.fault for e in self._pending]

    def landing(self, die: tuple[int, int], site: str | None) -> tuple[str, ...]:
        kinds: list[str] = []
        with self._lock:
            for entry in self._pending:
                fault = entry.fault
                if fault.matches(die, site) and fault.kind not in kinds:
                    kinds.append(fault.kind)
                    if entry.left is not None:
                        entry.left -= 1
            self._pending = [e for e in self._pending if e.left is None or e.left > 0]
            if self._rate > 0 and self._rng.random() < self._rate:
                names = list(CHANCE_WEIGHTS)
                p = np.array([CHANCE_WEIGHTS[n] for n in names])
                kind = names[self._rng.choice(len(names), p=p / p.sum())]
                if kind not in kinds:
                    kinds.append(kind)
        return tuple(kinds)


def _y_of(gamma: C128) -> ZY:
    return (1 - gamma) / (1 + gamma) / Z_REF


def _series_s(z: ArrayLike) -> C128:
    return abcd_to_s(series(z))


def apply_contact_faults(s: C128, kinds: tuple[str, ...], model: SiteModel, f: F64,
                         die: tuple[int, int]) -> C128:
    """True S of a landing with contact faults applied (vectorised, (n, 2, 2))."""
    f = np.asarray(f, float)
    w = 2 * np.pi * f
    if "dead-die" in kinds:
        # a dead die is open everywhere or shorted everywhere; which one is fixed per die
        s = model.dead_s(f, shorted=(die[0] + die[1]) % 2 == 1)
    lift1 = "lifted-1" in kinds or "lifted" in kinds
    lift2 = "lifted-2" in kinds or "lifted" in kinds
    if lift1 or lift2:
        air = model.air_y(f)
        # a port still landed sees the structure with the far pad left floating (open)
        g2 = s[:, 1, 1] + s[:, 1, 0] * s[:, 0, 1] / (1 - s[:, 0, 0])
        g1 = s[:, 0, 0] + s[:, 0, 1] * s[:, 1, 0] / (1 - s[:, 1, 1])
        y1 = air if lift1 else _y_of(g1)
        y2 = air if lift2 else _y_of(g2)
        s = pair_s(y1, y2, model.crosstalk_y(f) / 3)
    if "high-rc" in kinds:
        r = _series_s(np.full(len(f), HIGH_RC_OHM, complex))
        s = cascade(cascade(r, s), r)
    if "skate" in kinds:
        z = 1 / (1 / (1j * w * SKATE_L_PH * 1e-12) + 1j * w * SKATE_C_FF * 1e-15 + 1 / SKATE_R_OHM)
        s = cascade(_series_s(z), s)
    return s
