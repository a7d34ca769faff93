"""Wafer state shared by the simulated prober and VNA: where the chuck is, whether
the probes touch, and the faults of the current landing. Offsets in um."""

from __future__ import annotations

import threading
from dataclasses import dataclass

from probelog.drivers.simbench.chip import Chip
from probelog.drivers.simbench.faults import PROTOCOL_KINDS, FaultBook
from probelog.drivers.simbench.scpi import ScpiError


@dataclass(frozen=True)
class UnderTips:
    """What the VNA sees at one instant. site None = bare passivation or tips up."""

    die: tuple[int, int]
    site: str | None
    in_contact: bool
    landing: int
    kinds: tuple[str, ...]


class BenchState:
    def __init__(self, chip: Chip, faults: FaultBook) -> None:
        self.chip = chip
        self.faults = faults
        self._lock = threading.Lock()
        dies = chip.dies()
        self.die = dies[len(dies) // 2]
        self.offset_um = (0.0, 0.0)
        self.in_contact = False
        self.landing = 0
        self.touchdowns = 0
        self._kinds: tuple[str, ...] = ()
        self._protocol_left: set[str] = set()

    def move(self, die: tuple[int, int], x_um: float, y_um: float) -> None:
        with self._lock:
            if self.in_contact:
                raise ScpiError(-221, "XY move refused while the probes are in contact; separate first")
            if not self.chip.on_map(die):
                raise ScpiError(-222, f"die {die[0]},{die[1]} is not on the wafer map")
            if not (0 <= x_um <= self.chip.die_width_um and 0 <= y_um <= self.chip.die_height_um):
                raise ScpiError(-222, f"offset {x_um:.1f},{y_um:.1f} um is outside the "
                                      f"{self.chip.die_width_um:.0f} x {self.chip.die_height_um:.0f} um die")
            self.die = die
            self.offset_um = (x_um, y_um)

    def contact(self) -> None:
        with self._lock:
            if self.in_contact:
                return
            site = self.chip.site_at(self.offset_um)
            self.in_contact = True
            self.landing += 1
            self.touchdowns += 1
            self._kinds = self.faults.landing(self.die, site.name if site else None)
            self._protocol_left = {k for k in self._kinds if k in PROTOCOL_KINDS}

    def separate(self) -> None:
        with self._lock:
            self.in_contact = False
            self._kinds = ()
            self._protocol_left = set()

    def under_tips(self) -> UnderTips:
        with self._lock:
            site = self.chip.site_at(self.offset_um) if self.in_contact else None
            return UnderTips(self.die, site.name if site else None, self.in_contact, self.landing, self._kinds)

    def take_protocol_fault(self) -> str | None:
        """The protocol fault of this landing, used up by the first data fetch."""
        with self._lock:
            for k in PROTOCOL_KINDS:
                if k in self._protocol_left:
                    self._protocol_left.discard(k)
                    return k
            return None

    def position_reply(self) -> str:
        with self._lock:
            return f"{self.die[0]},{self.die[1]},{self.offset_um[0]:.3f},{self.offset_um[1]:.3f}"
