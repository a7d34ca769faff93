"""Read-back of VNA settings (issue 13 item 2) and the contact pre-check sweep's
driver side (issue 15): a VNA that clamps, rounds or ignores a setting is caught
before it sweeps; after a pre-check the plan's stimulus is restored exactly, as
the instrument itself reports it.

References: SCPI-1999 query form (a header with '?' returns the setting); the
pre-check grid is checked against numpy's linspace of the plan's sweep.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import pyvisa

from probelog.drivers.errors import DriverError, SettingMismatch
from probelog.drivers.folder import FolderVna
from probelog.drivers.simbench import SimBench
from probelog.drivers.vna import ScpiVna
from probelog.bench import SweepSettings, precheck_settings
from tests._fake_vna import TIMEOUT_MS, FakeVnaServer, reference_network

ROOT = Path(__file__).resolve().parents[1]
SIM = f"{ROOT / 'drivers' / 'sim_yaml' / 'vna.yaml'}@sim"
SETTINGS = SweepSettings(start_hz=1e9, stop_hz=67e9, points=201, ifbw_hz=1e3, power_dbm=-10.0)


@pytest.fixture
def server():
    srv = FakeVnaServer(reference_network())
    yield srv
    srv.stop()


# --------------------------------------------------------------------------- a VNA that clamps or ignores


@pytest.mark.parametrize("header, keep, asked, setting", [
    ("SOURce:POWer", lambda v: max(v, -30.0), SweepSettings(1e9, 67e9, 201, 1e3, -40.0), "source power"),
    ("SENSe:SWEep:POINts", lambda v: min(v, 101), SETTINGS, "point count"),
    ("SENSe:FREQuency:STOP", lambda v: min(v, 50e9), SETTINGS, "stop frequency"),
    ("SENSe:FREQuency:STARt", lambda v: max(v, 2e9), SETTINGS, "start frequency"),
    ("SENSe:BANDwidth", lambda v: 1.5e3 if v > 1e3 else v, SweepSettings(1e9, 67e9, 201, 1.2e3, -10.0),
     "IF bandwidth"),
])
def test_a_clamped_or_rounded_setting_is_caught_and_the_sweep_refused(server, header, keep, asked, setting):
    vna = ScpiVna(server.resource, timeout_ms=TIMEOUT_MS)
    vna.configure(SETTINGS, power_limit_dbm=0.0)  # passes: the instrument keeps every value
    assert vna.sweep(2).nports == 2
    server.filters[header] = keep
    with pytest.raises(SettingMismatch) as info:
        vna.configure(asked, power_limit_dbm=0.0)
    err = info.value
    assert err.setting == setting and err.got == keep(getattr(asked, _field(setting)))
    assert "not sweeping" in str(err) and f"{header}?" in str(err) and "\n" not in str(err)
    with pytest.raises(DriverError, match="configure"):
        vna.sweep(2)  # nothing is swept with settings the instrument did not take
    vna.close()


def _field(setting: str) -> str:
    return {"source power": "power_dbm", "point count": "points", "stop frequency": "stop_hz",
            "start frequency": "start_hz", "IF bandwidth": "ifbw_hz"}[setting]


def test_a_vna_that_ignores_power_commands_is_caught_by_pyvisa_sim():
    vna = ScpiVna("TCPIP0::10.0.0.6::inst0::INSTR", backend=SIM)
    vna.configure(SweepSettings(10e6, 30e6, 2, 1e3, -10.0), power_limit_dbm=0.0)  # it happens to hold -10
    with pytest.raises(SettingMismatch, match=r"source power -20 dBm, the VNA reads back -10 dBm") as info:
        vna.configure(SweepSettings(10e6, 30e6, 2, 1e3, -20.0), power_limit_dbm=0.0)
    assert (info.value.asked, info.value.got, info.value.unit) == (-20.0, -10.0, "dBm")
    vna.close()


def test_pyvisa_sim_devices_answer_every_read_back():
    vna = ScpiVna("GPIB0::16::INSTR", backend=SIM)  # "+1.00000000E+007" style replies
    vna.configure(SweepSettings(10e6, 30e6, 2), power_limit_dbm=0.0)
    assert vna.settings == SweepSettings(10e6, 30e6, 2)
    vna.close()


# --------------------------------------------------------------------------- the simulated bench


@pytest.fixture(scope="module")
def bench():
    with SimBench(seed=11) as b:
        yield b


@pytest.fixture
def sim_vna(bench):
    vna = ScpiVna(bench.resources[0], timeout_ms=5000)
    vna.configure(PLAN, power_limit_dbm=-5.0)
    yield vna
    vna.close()


PLAN = SweepSettings(1e9, 110e9, 1001, 100.0, -10.0)


def _instrument_stimulus(bench) -> tuple:
    """The settings as the simulated instrument holds them, asked over its own socket."""
    rm = pyvisa.ResourceManager("@py")
    raw = rm.open_resource(bench.resources[0], read_termination="\n", write_termination="\n", timeout=2000)
    try:
        return (float(raw.query("SENSe:FREQuency:STARt?")), float(raw.query("SENSe:FREQuency:STOP?")),
                int(raw.query("SENSe:SWEep:POINts?")), float(raw.query("SENSe:BANDwidth?")),
                float(raw.query("SOURce:POWer?")))
    finally:
        raw.close()


def test_precheck_sweeps_a_few_points_then_the_plan_is_restored_as_the_instrument_reports(bench, sim_vna):
    quick = precheck_settings(PLAN)
    before = bench.instrument_seconds
    short = sim_vna.precheck_sweep(quick, ports=2)
    t_quick = bench.instrument_seconds - before
    assert short.s.shape == (11, 2, 2)
    # the short sweep's points lie on the plan's own grid (numpy's linspace of the plan)
    grid = np.linspace(PLAN.start_hz, PLAN.stop_hz, PLAN.points)
    assert np.isin(short.f, grid).all() and short.f[0] == PLAN.start_hz and short.f[-1] == PLAN.stop_hz
    assert _instrument_stimulus(bench) == (1e9, 110e9, 1001, 100.0, -10.0)
    assert sim_vna.settings == PLAN
    before = bench.instrument_seconds
    full = sim_vna.sweep(2)
    t_full = bench.instrument_seconds - before
    np.testing.assert_array_equal(full.f, grid)  # the stimulus the instrument swept is the plan's
    # 1,001 points at 100 Hz take about 10 s a direction (issue 15); the pre-check a few ms
    assert 20.0 < t_full < 20.2 and t_quick < 0.05


def test_a_power_changed_at_the_instrument_is_caught_at_the_next_precheck(bench, sim_vna):
    rm = pyvisa.ResourceManager("@py")
    raw = rm.open_resource(bench.resources[0], read_termination="\n", write_termination="\n", timeout=2000)
    raw.write("SOURce:POWer 4")  # someone at the front panel, or a stray second command
    # Each connection has its own server thread: wait until this one has taken the
    # command, or the driver's read-back on its own connection can overtake it.
    assert float(raw.query("SOURce:POWer?")) == 4.0
    raw.close()
    sweeps = bench.vna.sweeps
    with pytest.raises(SettingMismatch, match=r"reads back a source power of \+4 dBm .* above the plan's limit "
                                              r"of -5 dBm .* switch RF off"):
        sim_vna.precheck_sweep(precheck_settings(PLAN))
    assert bench.vna.sweeps == sweeps  # refused before the instrument swept
    with pytest.raises(DriverError, match="configure"):
        sim_vna.sweep(2)
    sim_vna.configure(PLAN, power_limit_dbm=-5.0)  # setting it again fixes it, read back
    assert _instrument_stimulus(bench)[-1] == -10.0


def test_a_restore_the_instrument_does_not_take_is_caught(server):
    # points: the plan's 201, the pre-check's 11, then the restore to 201 is ignored
    asked: list[float] = []

    def sticky(v):
        asked.append(v)
        return 11.0 if len(asked) >= 2 else v

    server.filters["SENSe:SWEep:POINts"] = sticky
    server.network = reference_network(11)
    vna = ScpiVna(server.resource, timeout_ms=TIMEOUT_MS)
    vna.configure(SETTINGS, power_limit_dbm=0.0)
    with pytest.raises(SettingMismatch, match=r"point count 201 points, the VNA reads back 11 points"):
        vna.precheck_sweep(precheck_settings(SETTINGS))
    assert asked == [201, 11, 201]
    with pytest.raises(DriverError, match="configure"):
        vna.sweep(2)
    vna.close()


def test_precheck_refuses_power_above_the_configured_limit(sim_vna, bench):
    sweeps = bench.vna.sweeps
    with pytest.raises(ValueError, match="above the plan's limit of -5 dBm"):
        sim_vna.precheck_sweep(SweepSettings(1e9, 110e9, 11, 1e5, 0.0))
    assert bench.vna.sweeps == sweeps and sim_vna.settings == PLAN


def test_a_folder_vna_has_no_precheck(tmp_path):
    vna = FolderVna(tmp_path)
    vna.configure(SETTINGS, power_limit_dbm=0.0)
    assert vna.precheck_sweep(precheck_settings(SETTINGS)) is None


# --------------------------------------------------------------------------- the pre-check stimulus


@pytest.mark.parametrize("plan_points, want", [(1001, 11), (201, 11), (100, 12), (41, 11), (5, 5), (2, 2), (97, 13)])
def test_precheck_points_fall_on_the_plan_grid_when_they_can(plan_points, want):
    plan = SweepSettings(1e9, 67e9, plan_points, 10.0, -12.0)
    quick = precheck_settings(plan)
    assert quick.points == want
    grid = np.linspace(plan.start_hz, plan.stop_hz, plan.points)
    assert np.isin(np.linspace(quick.start_hz, quick.stop_hz, quick.points), grid).all()
    assert (quick.ifbw_hz, quick.power_dbm) == (100e3, -12.0)


def test_precheck_never_narrows_the_bandwidth_nor_adds_points():
    plan = SweepSettings(1e9, 67e9, 7, 300e3, -10.0)
    quick = precheck_settings(plan, points=21, ifbw_hz=10e3)
    assert (quick.points, quick.ifbw_hz) == (7, 300e3)
    with pytest.raises(ValueError, match="at least 2 points"):
        precheck_settings(plan, points=1)
