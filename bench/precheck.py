"""The contact pre-check's two figures (issue 15), side by side in one run.

A 1,001-point 2-port sweep at 100 Hz IF bandwidth takes about 20 s on the
simulated VNA's time model (10 s a direction; drivers/simbench/sweeptime.py).
Measured on the simulated bench with the real drivers over loopback TCP, the
whole engine step (move, touchdown, sweep(s), checks, data files and journal
fsync'ed, verdict):

- time from touchdown to a lifted-tip verdict without and with the pre-check
  (target: with it, under 5 % of the full sweep time);
- what the pre-check adds to a good landing (target: under 2 % of it).

Clock: the instrument's sweeps are not slept through; the simulated VNA adds
the modelled time of every sweep it runs to its own clock, and each figure is
the measured wall time of the software plus that modelled instrument time. A
cross-check runs the short paths again with the instrument really waiting the
modelled time (scale 1) and compares; without --quick the good landings are
also run for real (about 20 s each).
"""

from __future__ import annotations

import re
import statistics
import tempfile
import time
from importlib import resources
from pathlib import Path
from typing import Any, Callable

SITE = "ln-cpw-m9-r2-l500"
DIE = (4, 3)
POINTS, IFBW_HZ = 1001, 100.0


def _plan(precheck: bool):
    from probelog.plan import load_plan_text

    ref = resources.files("probelog") / "plans" / "demo.toml"
    text = ref.read_text(encoding="utf-8")
    text = re.sub(r"(?m)^points = \d+", f"points = {POINTS}", text)
    text = re.sub(r"(?m)^ifbw_hz = [0-9.e]+", f"ifbw_hz = {IFBW_HZ}", text, count=1)
    text = re.sub(r"(?ms)^sites = \[.*?\]", f'sites = ["{SITE}"]', text, count=1)
    text = re.sub(r"(?ms)^dies = \[.*?\]\n", f"dies = [[{DIE[0]}, {DIE[1]}]]\n", text, count=1)
    text = re.sub(r"(?m)^drift_every_landings = \d+", "drift_every_landings = 100000", text)
    text += f"\n[precheck]\nenabled = {'true' if precheck else 'false'}\n"
    return load_plan_text(text, f"demo.toml (bench, pre-check {'on' if precheck else 'off'})",
                          base_dir=Path(str(ref)).parent)


class _Rig:
    def __init__(self, seed: int = 5) -> None:
        from probelog.bench import Bench
        from probelog.drivers.prober import ScpiProber
        from probelog.drivers.simbench import SimBench
        from probelog.drivers.vna import ScpiVna

        self.sim = SimBench(seed=seed, fault_rate=0.0, sweep_time_scale="off")
        vna_res, prober_res = self.sim.start()
        self.bench = Bench(vna=ScpiVna(vna_res), prober=ScpiProber(prober_res, probe_ids=["GSG100-A17", "GSG100-B04"]),
                           description="pre-check bench rig")

    def close(self) -> None:
        self.bench.close()
        self.sim.stop()


def _landing(engine: Any, rig: _Rig, lifted: bool) -> tuple[float, float, Any]:
    """One engine step on SITE: (wall s, modelled instrument s, outcome); re-lands after."""
    if lifted:
        rig.sim.inject(f"lifted-1@{DIE[0]},{DIE[1]}:{SITE}")
    t0, i0 = time.perf_counter(), rig.sim.instrument_seconds
    out = engine.measure()
    wall, inst = time.perf_counter() - t0, rig.sim.instrument_seconds - i0
    engine.reland("bench")
    return wall, inst, out


def _estimate(wall: float, inst: float, scale: float) -> float:
    # the instrument really waited scale * inst of its modelled time inside wall
    return wall + (1.0 - scale) * inst


def measure_precheck(report: Callable[..., None], quick: bool,
                     calibrated_engine: Callable[[Any, Any, Path], Any]) -> None:
    from probelog.drivers.simbench.sweeptime import SweepTimeModel
    from probelog.verdicts import Verdict

    n = 3 if quick else 7
    full_s = SweepTimeModel().seconds(POINTS, IFBW_HZ, 2, changed=False)  # one full 2-port sweep
    times: dict[tuple[bool, bool], list[float]] = {}
    real: dict[tuple[bool, bool], float] = {}
    # (pre-check, lifted) run again for real: the short path always, the ~20 s ones without --quick
    real_keys = {(True, True)} if quick else {(True, True), (False, True), (True, False), (False, False)}
    rig = _Rig()
    try:
        with tempfile.TemporaryDirectory() as tmp:
            for precheck in (False, True):
                engine = calibrated_engine(rig, _plan(precheck), Path(tmp) / f"pre-{precheck}")
                _landing(engine, rig, lifted=False)  # warm caches
                for lifted in (True, False):
                    got = []
                    for _ in range(n):
                        wall, inst, out = _landing(engine, rig, lifted)
                        if lifted and out.verdict is not Verdict.FAIL:
                            raise AssertionError(f"a lifted tip was not caught (pre-check {precheck}): {out.checks}")
                        if lifted and precheck and out.raw.f.size == POINTS:
                            raise AssertionError("the lifted tip was caught by the full sweep, not the pre-check")
                        got.append(_estimate(wall, inst, 0.0))
                    times[(precheck, lifted)] = got
                # cross-check with the instrument really waiting its modelled time
                rig.sim.vna.sweep_time_scale = 1.0
                try:
                    for lifted in (True, False):
                        if (precheck, lifted) in real_keys:
                            # the short path: a median like the modelled figure; a 20 s one: once
                            runs = n if (precheck and lifted) else 1
                            real[(precheck, lifted)] = statistics.median(
                                _landing(engine, rig, lifted)[0] for _ in range(runs))
                finally:
                    rig.sim.vna.sweep_time_scale = 0.0
                engine.close(completed=False)
    finally:
        rig.close()

    med = {k: statistics.median(v) for k, v in times.items()}
    lifted_with, lifted_without = med[(True, True)], med[(False, True)]
    cost = med[(True, False)] - med[(False, False)]
    clock = "wall time of the software + the simulated VNA's modelled sweep time"
    print(f"  full 2-port sweep: {full_s:.2f} s ({POINTS} points at {IFBW_HZ:g} Hz, two directions); "
          f"clock: {clock}; median of {n}")
    report(f"lifted tip: touchdown to verdict, {POINTS} pts at {IFBW_HZ:g} Hz, pre-check on vs off",
           f"{lifted_with * 1e3:.0f} ms ({lifted_with / full_s:.2%} of the sweep)",
           f"{lifted_without:.2f} s without ({lifted_without / full_s:.0%})", lifted_with / full_s,
           "< 5 % of the full sweep", lifted_with / full_s < 0.05)
    report("good landing: what the pre-check adds", f"{cost * 1e3:+.0f} ms ({cost / full_s:.2%} of the sweep)",
           f"{med[(False, False)]:.2f} s landing without it", cost / full_s, "< 2 % of the full sweep",
           cost / full_s < 0.02)
    for key, wall in sorted(real.items()):
        est = med[key]
        what = f"{'lifted' if key[1] else 'good'} landing, pre-check {'on' if key[0] else 'off'}"
        report(f"clock cross-check: {what}, instrument really waiting", f"{wall * 1e3:.0f} ms real",
               f"{est * 1e3:.0f} ms modelled clock", wall / est, "0.8x .. 1.25x", 0.8 <= wall / est <= 1.25)
