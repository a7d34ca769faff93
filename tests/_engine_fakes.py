"""In-test bench for the session engine: a fake prober and a fake VNA that returns
ideal structures (no error boxes, no noise) built with scikit-rf media, so the
engine's walk, journal and checks can be tested without the simulated bench.

Physics of the ideal structures (Pozar, Microwave Engineering, 4th ed., ch. 2):
a line of length l is exp(-gamma l) with gamma = alpha + j omega sqrt(eps_eff)/c.
Standard values are read from the PLX-7 kit (probelog/kits/plx7.toml), so the
fake's standards are exactly what the kit defines.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import skrf
from skrf.media import DefinedGammaZ0

from probelog.bench import Bench, SweepSettings
from probelog.calkit import load_kit

ROOT = Path(__file__).resolve().parents[1]
KIT = ROOT / "probelog" / "kits" / "plx7.toml"
C0 = 299_792_458.0
EPS_EFF = 6.35
_KIT = load_kit(KIT)
ALPHA_NP_PER_M = 20.0  # about 0.17 dB/mm: a lossy on-chip CPW (REFERENCES.md, verified example)

# site name -> (kind, offset_um, extra)
SITES = {
    "cal-open": ("open", (200.0, 200.0), {}),
    "cal-short": ("short", (700.0, 200.0), {}),
    "cal-load": ("load", (1200.0, 200.0), {}),
    "cal-thru": ("thru", (1700.0, 200.0), {"length_um": 100.0}),
    "ver-ostub": ("open-stub", (1700.0, 600.0), {"length_um": 800.0}),
    "ln-a": ("line", (200.0, 1000.0), {"length_um": 500.0}),
    "ln-b": ("line", (2100.0, 1000.0), {"length_um": 1500.0}),
    "dev-ind": ("device", (2700.0, 600.0), {}),
}


def plan_text(dies=((1, 1), (2, 1)), sites=("ln-a", "ln-b", "dev-ind"), drift_every=0,
              points=41, power_dbm=-10.0, method="lrrm", compare="solt") -> str:
    """A small plan over the fake chip (TOML text)."""
    die_list = ", ".join(f"[{c}, {r}]" for c, r in dies)
    seq = ", ".join(f'"{s}"' for s in sites)
    drift = f'drift_site = "cal-thru"\ndrift_die = [1, 1]\ndrift_every_landings = {drift_every}\n' \
        if drift_every else ""
    out = [f"""
[plan]
name = "fake-small"
description = "engine tests"

[wafer]
id = "QF2611-W07"
lot = "QF2611"
chip = "PLX-7"
cols = 4
rows = 4
die_pitch_um = [4000.0, 4000.0]
dies = [{die_list}]
order = "listed"

[sequence]
sites = [{seq}]
{drift}
[calibration]
method = "{method}"
compare_with = "{compare}"
kit = "{KIT}"
die = [1, 1]
standards = ["cal-open", "cal-short", "cal-load", "cal-thru"]
verification = ["ver-ostub", "cal-thru"]

[vna]
start_hz = 1.0e9
stop_hz = 67.0e9
points = {points}
ifbw_hz = 1.0e3
power_dbm = {power_dbm}
power_limit_dbm = -5.0

[probes]
ids = ["P1", "P2"]
"""]
    for name, (kind, off, extra) in SITES.items():
        out.append(f'[[site]]\nname = "{name}"\nkind = "{kind}"\noffset_um = [{off[0]}, {off[1]}]\nports = 2\n')
        if "length_um" in extra:
            out.append(f"length_um = {extra['length_um']}\n")
        if kind in ("line", "thru"):
            out.append("symmetric = true\nz0_window_ohm = [40.0, 60.0]\neps_eff_window = [4.0, 9.0]\n"
                       "alpha_db_per_mm_max = 2.5\n")
        out.append("\n")
    return "".join(out)


def ideal(kind: str, extra: dict, freq: skrf.Frequency) -> skrf.Network:
    """The ideal 2-port of a site kind (reflect kinds as pairs, S21 = 0)."""
    w = 2 * np.pi * freq.f
    gamma = ALPHA_NP_PER_M + 1j * w * np.sqrt(EPS_EFF) / C0
    media = DefinedGammaZ0(frequency=freq, z0=50.0, gamma=gamma)
    if kind in ("open", "short", "load", "open-stub", "air"):
        if kind == "open":
            z = 1 / (1j * w * np.polyval(_KIT.open_c_f[::-1], freq.f))
        elif kind == "short":
            z = 1j * w * np.polyval(_KIT.short_l_h[::-1], freq.f)
        elif kind == "load":
            z = _KIT.load_r_ohm + 1j * w * _KIT.load_l_h
        elif kind == "air":
            z = 1 / (1j * w * 2e-15)  # tips in air: a small capacitance (trade numbers)
        else:
            stub = media.line(extra["length_um"], "um") ** media.open()
            g = stub.s[:, 0, 0]
            z = 50 * (1 + g) / (1 - g)
        g = (z - 50) / (z + 50)
        s = np.zeros((len(w), 2, 2), complex)
        s[:, 0, 0] = s[:, 1, 1] = g
        return skrf.Network(frequency=freq, s=s, z0=50)
    if kind == "thru":  # exactly the kit's thru (a lossy 51-ohm line since issue 10)
        from probelog.calkit import ideal_thru

        return ideal_thru(_KIT, freq)
    if kind == "line":
        return media.line(extra["length_um"], "um")
    if kind == "device":
        return media.inductor(300e-12)
    raise ValueError(kind)


class FakeProber:
    def __init__(self):
        self._pos = None
        self._contact = False
        self.td = {"P1": 0, "P2": 0}
        self.moves_in_contact = 0
        self.fail_next: list[str] = []

    def identify(self):
        return "fake prober"

    def move_to(self, die, offset_um):
        if self._contact:
            self.moves_in_contact += 1
            raise RuntimeError("XY move while in contact")
        self._pos = (tuple(die), tuple(offset_um))

    def contact(self):
        if self.fail_next:
            raise ConnectionError(self.fail_next.pop(0))
        self._contact = True
        for k in self.td:
            self.td[k] += 1

    def separate(self):
        self._contact = False

    @property
    def in_contact(self):
        return self._contact

    @property
    def position(self):
        return self._pos

    @property
    def touchdowns(self):
        return dict(self.td)

    def close(self):
        pass


class FakeVna:
    """Returns the ideal structure under the fake prober; ``faults`` maps a
    (die, site) to a list of fault words consumed one per sweep ("lifted",
    "error"; any other word is a good sweep). The contact pre-check is a sweep too."""

    def __init__(self, prober: FakeProber):
        self.prober = prober
        self.settings: SweepSettings | None = None
        self.faults: dict[tuple, list[str]] = {}
        self.sweeps = 0
        self.prechecks = 0
        self.reopens = 0
        self.drift_db = 0.0

    def identify(self):
        return "fake vna"

    def configure(self, settings, power_limit_dbm):
        if settings.power_dbm > power_limit_dbm:
            raise ValueError("power above limit")
        self.settings = settings

    def sweep(self, ports=2):
        s = self.settings
        freq = skrf.Frequency(s.start_hz, s.stop_hz, s.points, unit="Hz")
        die, off = self.prober.position
        name = next(n for n, (_, o, _) in SITES.items() if o == off)
        kind, _, extra = SITES[name]
        fault = self.faults.get((die, name), [])
        f = fault.pop(0) if fault else None
        if f == "error":
            raise TimeoutError("fake VNA timed out")
        if not self.prober.in_contact or f == "lifted":
            kind = "air"
        self.sweeps += 1
        ntwk = ideal(kind, extra, freq)
        if self.drift_db:
            ntwk.s = ntwk.s * 10 ** (self.drift_db / 20)
        return ntwk

    def precheck_sweep(self, settings, ports=2):
        """The contact pre-check: one sweep with ``settings``, then the plan's back
        (a fault word is consumed by it like by any sweep)."""
        if self.settings is None or settings.power_dbm > self.settings.power_dbm:
            raise ValueError("pre-check before configure, or above the configured power")
        base, self.settings = self.settings, settings
        self.prechecks += 1
        try:
            return self.sweep(ports)
        finally:
            self.settings = base

    def switch_terms(self):
        """None: the fake's sweeps are ideal structures without an error model."""
        return None

    def reopen(self):
        """Counted: the engine reopens the VNA after a VNA error, before the next command."""
        self.reopens += 1

    def close(self):
        pass


def fake_bench() -> Bench:
    prober = FakeProber()
    return Bench(vna=FakeVna(prober), prober=prober, description="fake bench")


# ---- stand-ins for modules still being written (replaced as they land) ----

class FakeFileRef:
    def __init__(self, path, sha256):
        self.path, self.sha256 = path, sha256


class FakeEvent:
    def __init__(self, seq, type_, payload):
        self.seq, self.type, self.payload = seq, type_, payload


class FakeJournal:
    """In-memory journal with the real one's surface (append, write_file, events)."""

    def __init__(self, root: Path):
        self.root = Path(root)
        self.root.mkdir(parents=True, exist_ok=True)
        self._events: list[FakeEvent] = []
        self.closed = False

    @property
    def last_seq(self):
        return len(self._events)

    def append(self, type_, payload):
        import json

        for v in payload.values():  # data files must exist before the event naming them
            if isinstance(v, dict) and "sha256" in v:
                assert (self.root / v["path"]).is_file(), v

        json.dumps(payload, allow_nan=False)  # payloads must be JSON as the real journal writes them
        ev = FakeEvent(len(self._events) + 1, type_, payload)
        self._events.append(ev)
        return ev

    def write_file(self, relpath, data: bytes):
        import hashlib

        p = self.root / relpath
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(data)
        return FakeFileRef(relpath, hashlib.sha256(data).hexdigest())

    def events(self):
        return list(self._events)

    def close(self):
        self.closed = True

