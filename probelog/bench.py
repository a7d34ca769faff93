"""What the session engine needs from instruments, as small protocols.

The engine never imports ``drivers``; the command line wires a concrete VNA and
prober (simulated, VISA, manual, watched folder) into a :class:`Bench`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Protocol, runtime_checkable

import skrf

Die = tuple[int, int]
"""A die address (column, row), counted from 0 at the wafer map's top-left."""


@dataclass(frozen=True)
class SweepSettings:
    """Stimulus of one sweep: linear frequency sweep.

    start_hz, stop_hz in Hz; ifbw_hz in Hz; power_dbm at the port in dBm.
    """

    start_hz: float
    stop_hz: float
    points: int
    ifbw_hz: float = 1e3
    power_dbm: float = -10.0


@runtime_checkable
class Vna(Protocol):
    """A vector network analyzer that returns raw (uncorrected by us) sweeps."""

    def identify(self) -> str: ...

    def configure(self, settings: SweepSettings, power_limit_dbm: float) -> None:
        """Apply settings; must refuse power above ``power_limit_dbm``."""

    def sweep(self, ports: int = 2) -> skrf.Network:
        """One triggered sweep, waited for, fetched as a Network (1 or 2 ports)."""

    def close(self) -> None: ...


@runtime_checkable
class Prober(Protocol):
    """A wafer prober. Implementations enforce the interlock: no XY move while
    in contact."""

    def identify(self) -> str: ...

    def move_to(self, die: Die, offset_um: tuple[float, float]) -> None:
        """Move at separation height to a site at ``offset_um`` (x, y in um) on ``die``."""

    def contact(self) -> None: ...

    def separate(self) -> None: ...

    @property
    def in_contact(self) -> bool: ...

    @property
    def position(self) -> tuple[Die, tuple[float, float]] | None: ...

    @property
    def touchdowns(self) -> dict[str, int]:
        """Touchdowns per probe id since the probe was mounted."""

    def close(self) -> None: ...


@dataclass
class Bench:
    """The instruments of one session, wired by the command line or a test."""

    vna: Vna
    prober: Prober
    description: str = ""
    on_close: list[Callable[[], None]] = field(default_factory=list)

    def close(self) -> None:
        for closer in (self.vna.close, self.prober.close, *self.on_close):
            try:
                closer()
            except Exception:  # closing must not mask the error that got us here
                pass
