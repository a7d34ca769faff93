"""The contact pre-check in the engine (issue 15), on the simulated bench over
real sockets: a lifted tip is a FAIL landing of its own kind before any full
sweep, a clean wafer never fails it, and the full sweep runs with the plan's
stimulus as the instrument itself reads it back.

The judge is probelog.contact's physics (a port that reads like the active
cal's raw open is a tip in the air); the lifted tip is the simulated bench's
own fault model (drivers/simbench/faults.py: the port sees the probe in air).
"""

from __future__ import annotations

import hashlib
import io
import re
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
import pyvisa
import skrf

from probelog.bench import Bench
from probelog.drivers.prober import ScpiProber
from probelog.drivers.simbench import SimBench
from probelog.drivers.vna import ScpiVna
from probelog.engine import Engine, EngineError, Phase, StepKind, StepMeasured
from probelog.headless import run_headless
from probelog.manifest import index_session, read_journal
from probelog.plan import load_plan_text
from probelog.verdicts import Verdict

# one site of every kind (drivers/simbench/chip.toml), probed off the cal die
KINDS = {"cal-open": "open", "cal-short": "short", "cal-load": "load", "cal-thru": "thru",
         "cal-line-a": "line", "ver-ostub": "open-stub", "ver-sstub": "short-stub", "dev-ind": "device"}
DIE = (2, 1)


def plan_of(sites, dies=(DIE,), extra: str = "", site_extra: dict[str, str] | None = None):
    ref = resources.files("probelog") / "plans" / "demo.toml"
    text = ref.read_text(encoding="utf-8")
    text = re.sub(r"(?m)^points = \d+", "points = 101", text)
    text = re.sub(r"(?ms)^sites = \[.*?\]", "sites = [" + ", ".join(f'"{s}"' for s in sites) + "]", text, count=1)
    text = re.sub(r"(?ms)^dies = \[.*?\]\n", "dies = [" + ", ".join(f"[{c}, {r}]" for c, r in dies) + "]\n",
                  text, count=1)
    text = re.sub(r"(?m)^drift_every_landings = \d+", "drift_every_landings = 100000", text)
    # an absolute kit path: a resumed session rebuilds the plan from its journaled text
    text = text.replace('kit = "../kits/plx7.toml"', f'kit = "{Path(str(ref)).parent.parent / "kits" / "plx7.toml"}"')
    for name, line in (site_extra or {}).items():
        text = text.replace(f'name = "{name}"\n', f'name = "{name}"\n{line}\n', 1)
    return load_plan_text(text + extra, "demo.toml (pre-check test)", base_dir=Path(str(ref)).parent)


class Rig:
    def __init__(self, seed: int = 4, faults=()) -> None:
        self.sim = SimBench(seed=seed, faults=list(faults))
        vna_res, prober_res = self.sim.start()
        self.bench = Bench(vna=ScpiVna(vna_res, timeout_ms=5000),
                           prober=ScpiProber(prober_res, probe_ids=["GSG100-A17", "GSG100-B04"]))

    def engine(self, plan, root: Path) -> Engine:
        engine = Engine.new(plan, self.bench, root, operator="test")
        while engine.phase is Phase.CALIBRATING:
            if engine.next_step is None:
                engine.compute_calibration()
            else:
                engine.measure()
        engine.accept_calibration("test")
        while engine.next_step is not None and engine.next_step.kind is StepKind.DRIFT:
            engine.measure()
        return engine

    def close(self) -> None:
        self.bench.close()
        self.sim.stop()


@pytest.fixture
def rig():
    r = Rig()
    yield r
    r.close()


def events(engine: Engine, type_: str) -> list:
    return [e for e in engine.journal.events() if e.type == type_]


def test_a_lifted_tip_on_every_site_kind_is_caught_by_the_precheck(rig, tmp_path):
    engine = rig.engine(plan_of(list(KINDS)), tmp_path)
    seen: list = []
    engine.subscribe(seen.append)
    lifts = ["lifted-1", "lifted-2", "lifted"]
    for i, (site, kind) in enumerate(KINDS.items()):
        step = engine.next_step
        assert step is not None and step.site == site
        rig.sim.inject(f"{lifts[i % 3]}@{DIE[0]},{DIE[1]}:{site}")
        sweeps = rig.sim.vna.sweeps
        out = engine.measure()
        if kind == "open":
            # physics cannot tell a tip in the air from a landed open pad (probelog.contact):
            # the pre-check lets it through and the full sweep's checks decide
            assert not out.precheck and rig.sim.vna.sweeps == sweeps + 2
            engine.accept("" if out.verdict is not Verdict.FAIL else "judged by the full sweep")
            continue
        assert out.precheck and out.verdict is Verdict.FAIL, (site, out.checks)
        assert rig.sim.vna.sweeps == sweeps + 1  # the short sweep only: no full sweep was paid for
        assert out.raw.f.size == 11 and out.checks[0].name == "contact" and "pre-check" in out.checks[0].message
        shown = [m for m in seen if isinstance(m, StepMeasured)][-1]
        assert shown.outcome is out and shown.seq == out.seq
        pre = events(engine, "precheck")[-1]
        assert (pre.payload["site"], pre.payload["verdict"], pre.payload["settings"]["points"]) == (site, "fail", 11)
        raw = engine.session_dir / pre.payload["raw"]["path"]
        assert hashlib.sha256(raw.read_bytes()).hexdigest() == pre.payload["raw"]["sha256"]
        assert skrf.Network(str(raw)).f.size == 11
        assert engine.phase is Phase.DECIDING
        with pytest.raises(EngineError, match="pre-check failed and no sweep was taken"):
            engine.accept("the tip looked fine")
        engine.reland("test")
        again = engine.measure()  # the fault was for one landing
        assert not again.precheck and again.step.landing == 2 and again.raw.f.size == 101
        assert rig.sim.vna.sweeps == sweeps + 3
        engine.accept("" if again.verdict is not Verdict.FAIL else "judged by the full sweep")
    assert len(events(engine, "precheck")) == len(KINDS) - 1
    engine.close(completed=True)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_no_precheck_fail_on_a_clean_wafer(tmp_path, seed):
    rig = Rig(seed=seed)
    try:
        engine = rig.engine(plan_of(list(KINDS), dies=((2, 1), (6, 7))), tmp_path)
        landings = 0
        while engine.next_step is not None:
            sweeps = rig.sim.vna.sweeps
            out = engine.measure()
            landings += 1
            assert not out.precheck, (seed, out.step.site, out.checks)
            assert rig.sim.vna.sweeps == sweeps + 2  # pre-check and full sweep
            engine.accept("" if out.verdict is not Verdict.FAIL else "not the pre-check's business")
        assert landings == 2 * len(KINDS) and not events(engine, "precheck")
        engine.close(completed=True)
    finally:
        rig.close()


def _instrument(rig: Rig) -> tuple:
    """What the simulated VNA holds, asked over a socket of its own (not the driver)."""
    rm = pyvisa.ResourceManager("@py")
    raw = rm.open_resource(rig.sim.resources[0], read_termination="\n", write_termination="\n", timeout=2000)
    try:
        return (float(raw.query("SENSe:FREQuency:STARt?")), float(raw.query("SENSe:FREQuency:STOP?")),
                int(raw.query("SENSe:SWEep:POINts?")), float(raw.query("SENSe:BANDwidth?")),
                float(raw.query("SOURce:POWer?")))
    finally:
        raw.close()


def test_the_full_sweep_runs_with_the_plans_stimulus_read_back_from_the_instrument(rig, tmp_path):
    plan = plan_of(["cal-line-a"])
    engine = rig.engine(plan, tmp_path)
    sweeps = rig.sim.vna.sweeps
    out = engine.measure()
    assert not out.precheck and rig.sim.vna.sweeps == sweeps + 2
    s = plan.settings
    assert _instrument(rig) == (s.start_hz, s.stop_hz, s.points, s.ifbw_hz, s.power_dbm)
    np.testing.assert_array_equal(out.raw.f, np.linspace(s.start_hz, s.stop_hz, s.points))
    landing = events(engine, "landing")[-1].payload
    stored = skrf.Network(str(engine.session_dir / landing["raw"]["path"]))
    np.testing.assert_allclose(stored.f, np.linspace(s.start_hz, s.stop_hz, s.points), rtol=1e-12)
    engine.close(completed=False)


def test_a_site_with_the_precheck_off_pays_only_the_full_sweep(rig, tmp_path):
    plan = plan_of(["cal-line-a"], site_extra={"cal-line-a": "precheck = false"})
    engine = rig.engine(plan, tmp_path)
    rig.sim.inject(f"lifted-1@{DIE[0]},{DIE[1]}:cal-line-a")
    sweeps = rig.sim.vna.sweeps
    out = engine.measure()
    assert not out.precheck and rig.sim.vna.sweeps == sweeps + 1 and out.raw.f.size == 101
    assert out.verdict is Verdict.FAIL  # the full sweep's own contact check still catches it
    engine.close(completed=False)


def test_headless_relands_a_failed_precheck_within_retries_then_gives_up(tmp_path):
    rig = Rig(faults=[f"lifted-1@{DIE[0]},{DIE[1]}:cal-thru#2", f"lifted-2@{DIE[0]},{DIE[1]}:cal-load#all"])
    try:
        engine = rig.engine(plan_of(["cal-thru", "cal-load"]), tmp_path)
        out = io.StringIO()
        summary = run_headless(engine, retries=2, out=out)
        text = out.getvalue()
        assert (summary.accepted, summary.failed, summary.relands) == (1, 1, 4), text
        assert "cal-thru L3 pass" in text and "cal-load L3 fail -> given up" in text and "pre-check" in text
        state = engine.state
        assert [x.what for x in state.site(DIE, "cal-thru").landings] == ["precheck", "precheck", "landing"]
        assert [x.what for x in state.site(DIE, "cal-load").landings] == ["precheck"] * 3
        # the analyst's manifest counts the failed pre-checks as the retries they were
        rows = index_session(read_journal(engine.session_dir)).rows
        assert [(r["site"], r["landing"], r["retries"]) for r in rows] == [("cal-thru", 3, 2)]
    finally:
        rig.close()


def test_a_session_resumed_after_a_failed_precheck_lands_the_site_again(rig, tmp_path):
    engine = rig.engine(plan_of(["cal-thru"]), tmp_path)
    rig.sim.inject(f"lifted-1@{DIE[0]},{DIE[1]}:cal-thru")
    assert engine.measure().precheck
    folder = engine.session_dir
    engine.close(completed=False)
    again = Engine.resume(folder, rig.bench)
    # like any undecided landing on resume: the site is landed again, with the next number
    step = again.next_step
    assert again.phase is Phase.PROBING and step is not None and (step.site, step.landing) == ("cal-thru", 2)
    out = again.measure()
    assert not out.precheck and out.step.landing == 2
    assert [x.what for x in again.state.site(DIE, "cal-thru").landings] == ["precheck", "landing"]
    again.close(completed=False)


def test_standards_are_sliced_onto_the_precheck_grid_not_interpolated():
    from probelog.engine.precheck import on_grid

    f = np.linspace(1e9, 110e9, 1001)
    s = (np.arange(1001) + 1j).reshape(-1, 1, 1) * np.ones((1, 2, 2))
    std = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=s, z0=50)
    sub = np.linspace(1e9, 110e9, 11)  # every 100th point of the plan's grid
    got = on_grid(std, sub)
    np.testing.assert_array_equal(got.s[:, 0, 0], s[::100, 0, 0])
    off = np.linspace(1.5e9, 100e9, 7)  # not on the grid: left for probelog.contact to interpolate
    assert on_grid(std, off) is std
