"""SimBench: the simulated VNA and prober on loopback TCP, sharing one wafer.

    with SimBench(seed=7) as bench:
        vna_resource, prober_resource = bench.resources
        # "TCPIP::127.0.0.1::<port>::SOCKET" for pyvisa-py

Frequencies in Hz; S referenced to 50 ohm; networks as skrf.Network.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import skrf
from numpy.typing import NDArray

from probelog.drivers.simbench.chip import CHIP_FILE, load_chip
from probelog.drivers.simbench.errorbox import drifted
from probelog.drivers.simbench.faults import Fault, FaultBook, FaultSpecError, parse_fault
from probelog.drivers.simbench.impairments import SimClock, drift_factors
from probelog.drivers.simbench.prober_instrument import SimProber
from probelog.drivers.simbench.server import InstrumentServer
from probelog.drivers.simbench.simulator import Simulator
from probelog.drivers.simbench.state import BenchState
from probelog.drivers.simbench.sweeptime import sweep_time_scale as sweep_time_scale_of
from probelog.drivers.simbench.vna_instrument import SimVna


@dataclass(frozen=True)
class ErrorBoxes:
    """The 8-term error model as skrf's EightTerm sees it: ``x`` (port 1 at the VNA,
    port 2 at the tip), ``y`` (port 1 at the tip, port 2 at the VNA), and the switch
    terms ``gamma_f`` = a2/b2 (port 1 driving), ``gamma_r`` = a1/b1 (port 2 driving)."""

    x: skrf.Network
    y: skrf.Network
    gamma_f: skrf.Network
    gamma_r: skrf.Network


def resource(port: int) -> str:
    return f"TCPIP::127.0.0.1::{port}::SOCKET"


class SimBench:
    """The simulated bench. Ports 0 pick free ports; ``start()`` returns the VISA
    resource strings (VNA, prober).

    ``sweep_time_scale`` is the bench's sweep-time setting
    (:mod:`probelog.drivers.simbench.sweeptime`): "off" / 0 (default: sweeps are instant,
    for tests and the demo), "realistic" / 1 (``*OPC?`` waits the modelled time,
    e.g. 10 s a direction for 1,001 points at 100 Hz IF bandwidth), or a scale
    between. :attr:`instrument_seconds` is the modelled time of all sweeps so far.
    """

    def __init__(self, seed: int = 0, sweep_time_scale: float | str = 0.0, fault_rate: float = 0.0,
                 faults: list[Fault | str] | tuple[Fault | str, ...] = (), drift_acceleration: float = 1.0,
                 vna_port: int = 0, prober_port: int = 0, slow_reply_s: float = 12.0,
                 variation: bool = True, chip_file: Path | str = CHIP_FILE) -> None:
        self.chip = load_chip(chip_file)
        self.seed = seed
        self._names = {s.name for s in self.chip.sites}
        parsed = [self._checked(f if isinstance(f, Fault) else parse_fault(f, self._names)) for f in faults]
        if fault_rate > 0:
            # by chance, one die of the wafer is dead
            dies = self.chip.dies()
            dead = dies[int(np.random.default_rng([seed, 505]).integers(len(dies)))]
            parsed.append(Fault("dead-die", dead, None, None))
        self.faults = FaultBook(parsed, rate=fault_rate, seed=seed)
        self.clock = SimClock(drift_acceleration)
        self.sim = Simulator(self.chip, seed, variation)
        self.state = BenchState(self.chip, self.faults)
        self.vna = SimVna(self.sim, self.state, self.clock, seed, sweep_time_scale_of(sweep_time_scale), slow_reply_s)
        self.prober = SimProber(self.state)
        self._ports = (vna_port, prober_port)
        self._servers: list[InstrumentServer] = []

    # ---- serving -------------------------------------------------------------------------
    def start(self) -> tuple[str, str]:
        if not self._servers:
            vna = InstrumentServer(self.vna, self._ports[0])
            try:
                prober = InstrumentServer(self.prober, self._ports[1])
            except OSError:
                vna.server_close()
                raise
            self.vna._stopping = vna.stopping  # wake a waiting *OPC? on stop
            self._servers = [vna, prober]
            for s in self._servers:
                s.start()
            self.clock.reset()
        return self.resources

    @property
    def resources(self) -> tuple[str, str]:
        if not self._servers:
            raise RuntimeError("SimBench is not started")
        return resource(self._servers[0].port), resource(self._servers[1].port)

    def stop(self) -> None:
        for s in self._servers:
            s.stop()
        self._servers = []

    def __enter__(self) -> "SimBench":
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    # ---- control and inspection ------------------------------------------------------------
    @property
    def instrument_seconds(self) -> float:
        """Modelled sweep time (s) of every sweep so far, at full scale: the simulated
        instrument clock (wall time of the software around it is not included)."""
        return self.vna.modelled_s

    def _checked(self, fault: Fault) -> Fault:
        if fault.die is not None and not self.chip.on_map(fault.die):
            raise FaultSpecError(f"fault {fault}: die {fault.die[0]},{fault.die[1]} is not on the "
                                 f"{self.chip.cols}x{self.chip.rows} wafer map of {self.chip.wafer_id}")
        return fault

    def inject(self, fault: Fault | str) -> Fault:
        """Queue a fault (a Fault or a spec string) for the next matching landing(s)."""
        f = self._checked(fault if isinstance(fault, Fault) else parse_fault(fault, self._names))
        self.faults.add(f)
        return f

    def advance_clock(self, seconds: float) -> None:
        """Move simulated time forward (drift grows with it)."""
        self.clock.advance(seconds)

    def site_network(self, die: tuple[int, int], site: str | None, f: np.ndarray) -> skrf.Network:
        """True, error-free S of a site on a die (None = bare passivation)."""
        if site is not None and site not in self._names:
            raise KeyError(f"no site named {site!r} on chip {self.chip.name}")
        if not self.chip.on_map(die):
            raise KeyError(f"die {die} is not on the wafer map")
        f = np.asarray(f, float)
        return skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=np.array(self.sim.true_s(die, site, f)),
                            name=f"{site or 'passivation'}@{die[0]},{die[1]}")

    def error_boxes(self, f: np.ndarray) -> ErrorBoxes:
        """The error boxes and switch terms at the present simulated time."""
        f = np.asarray(f, float)
        em = drifted(self.sim.error_model(f), *drift_factors(f, self.clock.hours, self.seed))
        freq = skrf.Frequency.from_f(f, unit="Hz")

        def net(s: NDArray[np.complex128]) -> skrf.Network:
            return skrf.Network(frequency=freq, s=s)

        return ErrorBoxes(net(em.x), net(em.y), net(em.gamma_f.reshape(-1, 1, 1)), net(em.gamma_r.reshape(-1, 1, 1)))

    def raw_network(self, die: tuple[int, int], site: str | None, f: np.ndarray, kinds: tuple[str, ...] = (),
                    ifbw_hz: float = 1e3, power_dbm: float = -10.0, noise: bool = True,
                    rng: np.random.Generator | None = None) -> skrf.Network:
        """What the VNA would report for a landing with fault ``kinds``, without TCP."""
        f = np.asarray(f, float)
        g = (rng or np.random.default_rng()) if noise else None
        s = self.sim.raw(die, site, tuple(kinds), f, self.clock.hours, ifbw_hz, power_dbm, g)
        return skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=s)
