"""The simulated VNA: speaks drivers/dialects/generic-vna.toml exactly.

Binary data are IEEE 488.2 definite-length blocks of float64 (FORMat:DATA REAL,64;
byte order by FORMat:BORDer, NORMal = big-endian); ASCii gives comma-separated
numbers. S data: for each frequency point, for each parameter (S11 S21 S12 S22,
or S11 of the measured port for a 1-port sweep), real then imaginary.
"""

from __future__ import annotations

import threading
import time

import numpy as np
from numpy.typing import NDArray

from probelog.drivers.simbench.impairments import SimClock
from probelog.drivers.simbench.scpi import CommandTable, ErrorQueue, ScpiError, integer, number
from probelog.drivers.simbench.server import Reply, run_line
from probelog.drivers.simbench.simulator import Simulator
from probelog.drivers.simbench.state import BenchState
from probelog.drivers.simbench.sweeptime import SweepTimeModel

F_MIN, F_MAX = 10e6, 110e9  # Hz
POINTS_MAX = 20001
IFBW_MIN, IFBW_MAX = 1.0, 1e6  # Hz
POWER_MIN, POWER_MAX = -60.0, 5.0  # dBm at the test port
IDN = "probelog,SimVNA-110,PLX7-SIM-0001,0.1.0"

Stimulus = tuple[float, float, int, float, tuple[int, ...]]  # start Hz, stop Hz, points, IFBW Hz, ports


def ieee_block(payload: bytes) -> bytes:
    """IEEE 488.2 definite-length block: '#', digit count, byte count, bytes."""
    n = str(len(payload))
    return b"#" + str(len(n)).encode() + n.encode() + payload


class SimVna:
    """The simulated VNA. ``sweep_time_scale``: how much of the modelled sweep time
    (:mod:`probelog.drivers.simbench.sweeptime`) ``*OPC?`` really waits; ``modelled_s`` and
    ``sweeps`` count the full modelled time and the sweeps, whatever the scale."""

    def __init__(self, sim: Simulator, state: BenchState, clock: SimClock, seed: int = 0,
                 sweep_time_scale: float = 0.0, slow_reply_s: float = 12.0,
                 stopping: threading.Event | None = None, time_model: SweepTimeModel | None = None) -> None:
        self.sim, self.state, self.clock = sim, state, clock
        self.sweep_time_scale = sweep_time_scale
        self.time_model = time_model or SweepTimeModel()
        self.modelled_s = 0.0
        self.sweeps = 0
        self._armed: Stimulus | None = None  # stimulus of the last sweep
        self.slow_reply_s = slow_reply_s
        self.errors = ErrorQueue()
        self._rng = np.random.default_rng([seed, 404])
        self._seed = seed
        # one noise stream per stimulus: extra sweeps at other settings (a contact
        # pre-check) leave the noise of the plan's sweeps as it was, seed for seed
        self._noise: dict[tuple[float, float, int, float], np.random.Generator] = {}
        self._lock = threading.Lock()
        self._stopping = stopping or threading.Event()
        self._reset()
        t = CommandTable()
        t.add("*IDN?", lambda a: IDN)
        t.add("*RST", self._cmd_rst)
        t.add("*CLS", lambda a: self.errors.clear())
        t.add("*OPC?", self._opc)
        t.add("*WAI", lambda a: self._wait_sweep())
        t.add("*ESR?", lambda a: "0" if len(self.errors) == 0 else "32")
        t.add("SYSTem:ERRor[:NEXT]?", lambda a: self.errors.pop())
        t.add("[SENSe:]FREQuency:STARt", lambda a: self._set("start", self._freq(a, "start frequency")))
        t.add("[SENSe:]FREQuency:STARt?", lambda a: f"{self.start:.12g}")
        t.add("[SENSe:]FREQuency:STOP", lambda a: self._set("stop", self._freq(a, "stop frequency")))
        t.add("[SENSe:]FREQuency:STOP?", lambda a: f"{self.stop:.12g}")
        t.add("[SENSe:]SWEep:POINts", self._cmd_points)
        t.add("[SENSe:]SWEep:POINts?", lambda a: str(self.points))
        t.add("[SENSe:]BANDwidth[:RESolution]", self._cmd_ifbw)
        t.add("[SENSe:]BANDwidth[:RESolution]?", lambda a: f"{self.ifbw:.12g}")
        t.add("SOURce:POWer[:LEVel][:IMMediate][:AMPLitude]", self._cmd_power)
        t.add("SOURce:POWer[:LEVel][:IMMediate][:AMPLitude]?", lambda a: f"{self.power:.4g}")
        t.add("[SENSe:]SWEep:PORTs", self._cmd_ports)
        t.add("[SENSe:]SWEep:PORTs?", lambda a: ",".join(map(str, self.ports)))
        t.add("[SENSe:]SWEep:TIME?", lambda a: f"{self._sweep_time():.6g}")
        t.add("INITiate[:IMMediate]", self._cmd_init)
        t.add("FORMat[:DATA]", self._cmd_format)
        t.add("FORMat[:DATA]?", lambda a: "REAL,64" if self.binary else "ASC,0")
        t.add("FORMat:BORDer", self._cmd_border)
        t.add("FORMat:BORDer?", lambda a: "SWAP" if self.little else "NORM")
        t.add("TRACe[:DATA]?", self._cmd_data)
        self.table = t

    # ---- state ---------------------------------------------------------------------------
    def _reset(self) -> None:
        self.start, self.stop, self.points = 10e6, 110e9, 201
        self.ifbw, self.power = 1e3, -10.0
        self.ports: tuple[int, ...] = (1, 2)
        self.binary, self.little = False, False
        self._data: tuple[NDArray[np.float64], NDArray[np.complex128]] | None = None
        self._done_at = 0.0

    def _cmd_rst(self, args: list[str]) -> None:
        self._reset()

    def _set(self, name: str, value: float) -> None:
        setattr(self, name, value)

    def _freq(self, args: list[str], what: str) -> float:
        v = number(args, what)
        if not F_MIN <= v <= F_MAX:
            raise ScpiError(-222, f"{what} {v:.6g} Hz outside {F_MIN:.6g}..{F_MAX:.6g} Hz")
        return v

    def _cmd_points(self, args: list[str]) -> None:
        n = integer(args, "points")
        if not 2 <= n <= POINTS_MAX:
            raise ScpiError(-222, f"points {n} outside 2..{POINTS_MAX}")
        self.points = n

    def _cmd_ifbw(self, args: list[str]) -> None:
        v = number(args, "IF bandwidth")
        if not IFBW_MIN <= v <= IFBW_MAX:
            raise ScpiError(-222, f"IF bandwidth {v:.6g} Hz outside {IFBW_MIN:g}..{IFBW_MAX:g} Hz")
        self.ifbw = v

    def _cmd_power(self, args: list[str]) -> None:
        v = number(args, "source power")
        if v > POWER_MAX:
            raise ScpiError(-222, f"source power {v:.4g} dBm above the instrument maximum {POWER_MAX:+.4g} dBm")
        if v < POWER_MIN:
            raise ScpiError(-222, f"source power {v:.4g} dBm below the minimum {POWER_MIN:.4g} dBm")
        self.power = v

    def _cmd_ports(self, args: list[str]) -> None:
        try:
            ports = tuple(int(a) for a in args)
        except ValueError:
            raise ScpiError(-104, f"ports {','.join(args)!r}: expected 1, 2 or 1,2") from None
        if ports not in ((1,), (2,), (1, 2)):
            raise ScpiError(-224, f"ports {','.join(args)!r}: expected 1, 2 or 1,2")
        self.ports = ports

    def _cmd_format(self, args: list[str]) -> None:
        word = ",".join(a.upper() for a in args)
        if word in ("ASC", "ASCII", "ASC,0", "ASCII,0"):
            self.binary = False
        elif word in ("REAL,64", "REAL"):
            self.binary = True
        else:
            raise ScpiError(-224, f"format {','.join(args)!r}: this instrument serves ASCii or REAL,64")

    def _cmd_border(self, args: list[str]) -> None:
        word = args[0].upper() if len(args) == 1 else ""
        if word in ("SWAP", "SWAPPED"):
            self.little = True
        elif word in ("NORM", "NORMAL"):
            self.little = False
        else:
            raise ScpiError(-224, f"byte order {','.join(args)!r}: NORMal or SWAPped")

    # ---- sweeping --------------------------------------------------------------------------
    def _stimulus(self) -> Stimulus:
        return (self.start, self.stop, self.points, self.ifbw, self.ports)

    def _modelled_time(self) -> float:
        """Seconds the next sweep takes on the model (unscaled)."""
        return self.time_model.seconds(self.points, self.ifbw, len(self.ports), self._stimulus() != self._armed)

    def _sweep_time(self) -> float:
        """Seconds the next sweep really holds ``*OPC?``: the model times the scale."""
        return self.sweep_time_scale * self._modelled_time()

    def _cmd_init(self, args: list[str]) -> None:
        if self.start >= self.stop:
            raise ScpiError(-221, f"start {self.start:.6g} Hz is not below stop {self.stop:.6g} Hz")
        f = np.linspace(self.start, self.stop, self.points)
        tips = self.state.under_tips()
        kinds = tips.kinds if tips.in_contact else ()
        key = (self.start, self.stop, self.points, self.ifbw)
        noise = self._noise.get(key)
        if noise is None:  # the first stimulus swept draws from the bench's first stream
            noise = self._noise[key] = self._rng if not self._noise else np.random.default_rng(
                [self._seed, 404, len(self._noise)])
        s = self.sim.raw(tips.die, tips.site, kinds, f, self.clock.hours, self.ifbw, self.power, noise)
        if self.ports == (1,):
            s = s[:, :1, :1]
        elif self.ports == (2,):
            s = s[:, 1:, 1:]
        self._data = (f, s)
        modelled = self._modelled_time()
        self.modelled_s += modelled
        self.sweeps += 1
        self._armed = self._stimulus()
        self._done_at = time.monotonic() + self.sweep_time_scale * modelled

    def _wait_sweep(self) -> None:
        left = self._done_at - time.monotonic()
        if left > 0:
            self._stopping.wait(left)

    def _opc(self, args: list[str]) -> str:
        self._wait_sweep()
        return "1"

    def _encode(self, values: NDArray[np.float64]) -> bytes:
        if self.binary:
            return ieee_block(values.astype("<f8" if self.little else ">f8").tobytes())
        return ",".join(f"{v:.15g}" for v in values).encode("ascii")

    def _cmd_data(self, args: list[str]) -> Reply:
        what = args[0].upper() if len(args) == 1 else ""
        if what not in ("SPAR", "SPARAMETERS", "STIM", "STIMULUS", "SWIT", "SWITCH"):
            raise ScpiError(-224, f"TRACe:DATA? {','.join(args)!r}: SPARameters, STIMulus or SWITch")
        self._wait_sweep()
        if self._data is None:
            self.errors.push(ScpiError(-230, "no sweep yet; send INITiate:IMMediate first"))
            return Reply(b"#10" if self.binary else b"")
        f, s = self._data
        if what.startswith("STIM"):
            return Reply(self._encode(f))
        if what.startswith("SWIT"):
            if s.shape[1] != 2:
                self.errors.push(ScpiError(-230, "switch terms need a 2-port sweep (SENSe:SWEep:PORTs 1,2)"))
                return Reply(b"#10" if self.binary else b"")
            em = self.sim.error_model(f)
            g = np.stack([em.gamma_f, em.gamma_r], axis=1)  # per point: gamma_f, gamma_r
            values = np.empty((len(f), 4))
            values[:, 0::2], values[:, 1::2] = g.real, g.imag
            return Reply(self._encode(values.ravel()))
        # Touchstone order S11 S21 S12 S22 = column-major walk of each (p, p) matrix
        flat = s.transpose(0, 2, 1).reshape(len(f), -1)
        values = np.empty((len(f), flat.shape[1] * 2))
        values[:, 0::2], values[:, 1::2] = flat.real, flat.imag
        data = self._encode(values.ravel())
        fault = self.state.take_protocol_fault()
        if fault == "slow":
            return Reply(data, "slow", self.slow_reply_s)
        if fault == "garbled":
            junk = self._rng.integers(33, 126, 12, dtype=np.uint8).tobytes()
            return Reply(b"#9" + junk + data[len(junk) + 2:], "garbled")
        if fault == "drop":
            return Reply(data, "drop")
        return Reply(data)

    # ---- dispatch --------------------------------------------------------------------------
    def handle_line(self, line: str) -> Reply | None:
        """Run every command of one line; queries' answers are joined with ';'."""
        return run_line(line, self.table, self.errors, self._lock)
