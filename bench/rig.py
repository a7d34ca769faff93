"""What every benchmark shares: the result rows, best-of timing, the demo plan at
another point count, the simulated bench wired as `probelog run --bench sim`
wires it, a calibrated engine, and the bare-script landing the engine is
measured against (bench/run.py runs them)."""

from __future__ import annotations

import re
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import skrf


@dataclass
class Row:
    name: str
    figure: str
    reference: str
    ratio: float | None
    target: str
    met: bool | None


ROWS: list[Row] = []


def report(name, figure, reference, ratio, target, met):
    ROWS.append(Row(name, figure, reference, ratio, target, met))
    flag = "" if met is None else ("  ok" if met else "  MISSED")
    r = "" if ratio is None else f"  ratio {ratio:.2f}"
    print(f"- {name}: {figure} vs {reference}{r}  (target {target}){flag}", flush=True)


def best_of(fn: Callable[[], object], repeat: int = 7, number: int = 1) -> float:
    """Best wall time of ``repeat`` runs of ``number`` calls, seconds per call."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        times.append((time.perf_counter() - t0) / number)
    return min(times)


# ---------------------------------------------------------------- shared set-up


def demo_plan(points: int, sites: list[str] | None = None, dies: str | None = None,
              drift_every: int | None = None, precheck: bool = True):
    """The built-in demo plan with another point count (and optionally other sites/dies)."""
    from importlib import resources

    from probelog.plan import load_plan_text

    ref = resources.files("probelog") / "plans" / "demo.toml"
    text = ref.read_text(encoding="utf-8")
    text = re.sub(r"(?m)^points = \d+", f"points = {points}", text)
    if sites is not None:
        body = ",\n".join(f'    "{s}"' for s in sites)
        text = re.sub(r"(?ms)^sites = \[.*?\]", f"sites = [\n{body},\n]", text, count=1)
    if dies is not None:
        text = re.sub(r"(?ms)^dies = \[.*?\]\n", f"dies = {dies}\n", text, count=1)
    if drift_every is not None:
        text = re.sub(r"(?m)^drift_every_landings = \d+", f"drift_every_landings = {drift_every}", text)
    if not precheck:
        text += "\n[precheck]\nenabled = false\n"
    return load_plan_text(text, "demo.toml (bench)", base_dir=Path(str(ref)).parent)


class SimRig:
    """The simulated bench with the real drivers, as `probelog run --bench sim` wires it."""

    def __init__(self, seed: int = 5):
        from probelog.drivers.prober import ScpiProber
        from probelog.drivers.simbench import SimBench
        from probelog.drivers.vna import ScpiVna
        from probelog.bench import Bench

        self.sim = SimBench(seed=seed, fault_rate=0.0, sweep_time_scale=0.0)
        self.vna_res, self.prober_res = self.sim.start()
        self.vna = ScpiVna(self.vna_res)
        self.prober = ScpiProber(self.prober_res, probe_ids=["GSG100-A17", "GSG100-B04"])
        self.bench = Bench(vna=self.vna, prober=self.prober, description="bench rig")

    def close(self):
        self.bench.close()
        self.sim.stop()


def calibrated_engine(rig: SimRig, plan, root: Path):
    from probelog.session import Engine, Phase

    engine = Engine.new(plan, rig.bench, root, operator="bench")
    while engine.phase is Phase.CALIBRATING:
        if engine.next_step is None:
            engine.compute_calibration()
        else:
            engine.measure()
    if engine.phase is Phase.VERIFYING:
        engine.accept_calibration("bench")
    from probelog.session import StepKind

    while engine.next_step is not None and engine.next_step.kind is StepKind.DRIFT:
        engine.measure()  # the drift reference is taken right after the calibration
    return engine


# ---------------------------------------------------------------- 1. landing overhead


def bare_landing(rig: SimRig, points: int, out: Path) -> Callable[[], None]:
    """What a careful bare script does per landing: move, contact, trigger, wait,
    fetch with pyvisa's stock query_binary_values, save Touchstone with scikit-rf."""
    import pyvisa

    rm = pyvisa.ResourceManager("@py")
    vna = rm.open_resource(rig.vna_res, read_termination="\n", write_termination="\n", timeout=20000)
    prb = rm.open_resource(rig.prober_res, read_termination="\n", write_termination="\n", timeout=20000)
    for cmd in ("SENSe:FREQuency:STARt 1e9", "SENSe:FREQuency:STOP 110e9", f"SENSe:SWEep:POINts {points}",
                "SENSe:BANDwidth 1000", "SOURce:POWer -10", "SENSe:SWEep:PORTs 1,2",
                "FORMat:DATA REAL,64", "FORMat:BORDer SWAPped"):
        vna.write(cmd)
    freq = skrf.Frequency.from_f(np.linspace(1e9, 110e9, points), unit="Hz")
    site = rig.sim.chip.site("ln-cpw-m9-r2-l500")
    x, y = site.offset_um
    count = [0]

    def landing():
        prb.write("STAGe:Z:SEParate")
        prb.query("*OPC?")
        prb.write(f"STAGe:MOVE 4,4,{x:.3f},{y:.3f}")
        prb.query("*OPC?")
        prb.write("STAGe:Z:CONTact")
        prb.query("*OPC?")
        vna.write("INITiate:IMMediate")
        vna.query("*OPC?")
        v = vna.query_binary_values("TRACe:DATA? SPARameters", datatype="d", is_big_endian=False,
                                    container=np.array)
        c = (v[0::2] + 1j * v[1::2]).reshape(points, 2, 2).transpose(0, 2, 1)
        n = skrf.Network(frequency=freq, s=c)
        count[0] += 1
        n.write_touchstone(f"bare{count[0] % 4}", dir=str(out))

    landing.close = lambda: (vna.close(), prb.close())  # type: ignore[attr-defined]
    return landing
