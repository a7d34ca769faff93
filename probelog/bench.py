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


PRECHECK_POINTS = 11
"""Default point count of a contact pre-check sweep: a handful spread over the band."""
PRECHECK_IFBW_HZ = 100e3
"""Default IF bandwidth of a pre-check sweep (Hz): wide, so it takes milliseconds.
Trace noise grows as sqrt(IFBW), about 10x that of 1 kHz (common practice, no
source): far below what tells a tip in the air from a landed one."""


def precheck_settings(plan: SweepSettings, points: int = PRECHECK_POINTS,
                      ifbw_hz: float = PRECHECK_IFBW_HZ) -> SweepSettings:
    """The stimulus of a contact pre-check for a plan's sweep.

    The plan's band (start_hz .. stop_hz, Hz) and source power (dBm), ``points``
    points (never more than the plan's) and an IF bandwidth of ``ifbw_hz`` Hz
    (never narrower than the plan's). When a count between ``points`` and twice
    that puts every pre-check point on the plan's own grid (``(plan.points - 1)``
    divisible by ``(n - 1)``), the smallest such count is taken, so the
    calibration's raw standards are known at exactly those frequencies.
    """
    if points < 2:
        raise ValueError(f"a pre-check sweep needs at least 2 points, got {points}")
    if not ifbw_hz > 0:
        raise ValueError(f"pre-check IF bandwidth must be > 0 Hz, got {ifbw_hz:g}")
    n = min(points, plan.points)
    on_grid = [k for k in range(n, min(2 * n, plan.points) + 1) if (plan.points - 1) % (k - 1) == 0]
    if on_grid:
        n = on_grid[0]
    return SweepSettings(plan.start_hz, plan.stop_hz, n, max(ifbw_hz, plan.ifbw_hz), plan.power_dbm)


@runtime_checkable
class Vna(Protocol):
    """A vector network analyzer that returns raw (uncorrected by us) sweeps."""

    def identify(self) -> str: ...

    def configure(self, settings: SweepSettings, power_limit_dbm: float) -> None:
        """Apply settings; must refuse power above ``power_limit_dbm``."""

    def sweep(self, ports: int = 2) -> skrf.Network:
        """One triggered sweep, waited for, fetched as a Network (1 or 2 ports)."""

    def precheck_sweep(self, settings: SweepSettings, ports: int = 2) -> skrf.Network | None:
        """A short contact pre-check sweep with ``settings`` (see
        :func:`precheck_settings`), then the settings last given to
        :meth:`configure` restored exactly and read back, ready for the full
        sweep. Must refuse power above the configured limit. None when this VNA
        cannot sweep on its own (the operator saves each file): no pre-check."""

    def switch_terms(self) -> tuple[skrf.Network, skrf.Network] | None:
        """Switch terms (gamma_f = a2/b2 with port 1 driving, gamma_r = a1/b1 with
        port 2 driving) of the last 2-port sweep, as two 1-port Networks on its
        frequencies (Hz). The engine asks right after a thru or line standard.
        None when this VNA cannot report them (the calibration then solves
        without them)."""

    def reopen(self) -> None:
        """Make the instrument usable again after a failure (timeout, dropped
        link, garbled reply): open the connection anew and re-apply the settings
        last given to :meth:`configure`. The engine calls it before the first
        command after a VNA error."""

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
    """The instruments of one session, wired by the command line or a test.

    ``kind`` is the command line's ``--bench`` word (``sim`` or ``visa``; empty
    for a bench a test or a script wires), journaled with ``session-opened``."""

    vna: Vna
    prober: Prober
    description: str = ""
    on_close: list[Callable[[], None]] = field(default_factory=list)
    kind: str = ""

    def close(self) -> None:
        for closer in (self.vna.close, self.prober.close, *self.on_close):
            try:
                closer()
            except Exception:  # closing must not mask the error that got us here
                pass
