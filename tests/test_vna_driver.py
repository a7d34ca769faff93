"""The SCPI VNA driver against pyvisa-sim (text corner cases) and against a tiny
TCP server on 127.0.0.1 reached through real pyvisa + pyvisa-py (binary blocks,
network faults).

References: SCPI-1999 error queue form and codes (-113 undefined header, -222
data out of range), IEEE Std 488.2-1992 8.7.9 block format (from memory);
series-resistor S-parameters checked against scikit-rf's media model.
"""

from __future__ import annotations

import socket
from pathlib import Path

import numpy as np
import pytest
import skrf

from probelog.drivers.dialect import load_dialect
from probelog.drivers.errors import (
    ConnectionLost,
    DriverError,
    InstrumentError,
    InstrumentTimeout,
    InstrumentUnreachable,
    MalformedBlock,
    PowerLimitError,
    ShortBlock,
)
from probelog.drivers.vna import ScpiVna
from probelog.bench import SweepSettings
from tests._fake_vna import TIMEOUT_MS, FakeVnaServer, reference_network

ROOT = Path(__file__).resolve().parents[1]
SIM = f"{ROOT / 'drivers' / 'sim_yaml' / 'vna.yaml'}@sim"


SETTINGS = SweepSettings(start_hz=1e9, stop_hz=67e9, points=201, ifbw_hz=1e6, power_dbm=-10.0)


@pytest.fixture
def server():
    srv = FakeVnaServer(reference_network())
    yield srv
    srv.stop()


@pytest.fixture
def vna(server):
    v = ScpiVna(server.resource, timeout_ms=TIMEOUT_MS)
    v.configure(SETTINGS, power_limit_dbm=0.0)
    yield v
    v.close()


# --------------------------------------------------------------------------- binary path


def test_two_port_sweep_matches_scikit_rf_series_resistor(vna, server):
    net = vna.sweep(2)
    ref = server.network
    assert net.s.shape == (201, 2, 2)
    np.testing.assert_allclose(net.f, ref.f)
    np.testing.assert_allclose(net.s, ref.s, rtol=0, atol=1e-15)
    # Pozar 4th ed. Table 4.2 (from memory): series Z alone gives S11 = Z/(Z + 2 Z0),
    # S21 = 2 Z0/(Z + 2 Z0); at 1 GHz the 100 fF shunt barely matters (|Y| Z0 = 0.03).
    assert abs(net.s[0, 1, 0] - 100 / 120) < 0.02
    assert server.log[-3:] == ["SYSTem:ERRor:NEXT?", "TRACe:DATA? STIMulus", "SYSTem:ERRor:NEXT?"]


def test_parameter_order_is_touchstone_order(server):
    # A non-reciprocal, asymmetric S catches any swap of S21/S12 or S11/S22.
    rng = np.random.default_rng(7)
    s = rng.normal(size=(5, 2, 2)) + 1j * rng.normal(size=(5, 2, 2))
    server.network = skrf.Network(frequency=skrf.Frequency(1, 5, 5, unit="GHz"), s=s)
    v = ScpiVna(server.resource, timeout_ms=TIMEOUT_MS)
    v.configure(SweepSettings(1e9, 5e9, 5, ifbw_hz=1e6), power_limit_dbm=0.0)
    np.testing.assert_array_equal(v.sweep(2).s, s)
    v.close()


def test_one_port_and_big_endian_dialect(server, tmp_path):
    text = (ROOT / "drivers/dialects/generic-vna.toml").read_text()
    big = tmp_path / "big.toml"
    big.write_text(text.replace('byte_order = "little"', 'byte_order = "big"'))
    server.network = server.network.s11
    v = ScpiVna(server.resource, dialect=big, timeout_ms=TIMEOUT_MS)
    v.configure(SETTINGS, power_limit_dbm=0.0)
    assert "FORMat:BORDer NORMal" in server.log and not server.little
    net = v.sweep(1)
    np.testing.assert_array_equal(net.s, server.network.s)
    v.close()


def test_generic_visa_read_path_gives_the_same_data(vna, server):
    vna.link.direct_socket = False
    np.testing.assert_array_equal(vna.sweep(2).s, server.network.s)


# --------------------------------------------------------------------------- safety


def test_power_above_limit_is_refused_before_anything_is_sent(vna, server):
    before = list(server.log)
    too_hot = SweepSettings(1e9, 67e9, 201, power_dbm=5.0)
    with pytest.raises(PowerLimitError, match=r"5 dBm is above the plan's limit of 0 dBm"):
        vna.configure(too_hot, power_limit_dbm=0.0)
    assert server.log == before


def test_instrument_error_quotes_the_instrument(vna, server):
    # Plan limit allows +20 dBm, the instrument does not: its -222 must reach the user.
    with pytest.raises(InstrumentError) as info:
        vna.configure(SweepSettings(1e9, 67e9, 201, power_dbm=20.0), power_limit_dbm=30.0)
    assert info.value.errors == [(-222, "Data out of range; source power above +10 dBm")]
    assert "SOURce:POWer 20" in str(info.value) and "-222" in str(info.value)


# --------------------------------------------------------------------------- faults


def test_refused_connection_is_unreachable_with_os_error_named():
    probe = socket.create_server(("127.0.0.1", 0))
    port = probe.getsockname()[1]
    probe.close()  # nothing listens there now
    with pytest.raises(InstrumentUnreachable) as info:
        ScpiVna(f"TCPIP::127.0.0.1::{port}::SOCKET", timeout_ms=TIMEOUT_MS)
    assert "ConnectionRefusedError" in str(info.value) and info.value.cause == "OSError"


def test_close_mid_block_is_connection_lost_then_reopen_works(vna, server):
    server.mode = "close-mid-block"
    with pytest.raises(ConnectionLost, match=r"closed the connection after \d+ of 12864 bytes"):
        vna.sweep(2)
    server.mode = "ok"
    n_before = len(server.log)
    vna.reopen()
    # reopen re-applies the last settings on the new connection
    assert "SENSe:SWEep:POINts 201" in server.log[n_before:]
    np.testing.assert_array_equal(vna.sweep(2).s, server.network.s)


def test_short_block_reports_announced_and_received(vna, server):
    server.mode = "short-block"
    with pytest.raises(ShortBlock) as info:
        vna.sweep(2)
    assert info.value.expected == 201 * 4 * 2 * 8  # points x S-params x re/im x float64
    assert 0 < info.value.received < 12864


def test_garbled_header_is_malformed_on_both_read_paths(vna, server):
    server.mode = "garbled-header"
    with pytest.raises(MalformedBlock, match="ASCII digits"):
        vna.sweep(2)
    vna.reopen()
    vna.link.direct_socket = False
    with pytest.raises(MalformedBlock, match="ASCII digits"):
        vna.sweep(2)


def test_block_longer_than_announced_is_malformed(vna, server):
    server.mode = "long-block"
    with pytest.raises(MalformedBlock, match="not the terminator"):
        vna.sweep(2)


def test_slow_reply_is_a_timeout_and_the_link_recovers(vna, server):
    server.mode = "slow-opc"
    with pytest.raises(InstrumentTimeout) as info:
        vna.sweep(2)
    assert info.value.cause == "VisaIOError" and "*OPC?" in str(info.value)
    server.mode = "ok"
    vna.reopen()
    assert vna.sweep(2).nports == 2


def test_closed_driver_says_so(vna):
    vna.close()
    with pytest.raises(ConnectionLost, match="closed; reopen"):
        vna.identify()
    vna.reopen()
    assert vna.identify().startswith("QF-Labs,FakeVNA")


def test_sweep_before_configure_is_refused(server):
    v = ScpiVna(server.resource, timeout_ms=TIMEOUT_MS)
    with pytest.raises(DriverError, match="configure"):
        v.sweep(2)
    v.close()


# --------------------------------------------------------------------------- pyvisa-sim


def test_sim_out_of_range_setting_quotes_minus_222():
    v = ScpiVna("TCPIP0::10.0.0.5::inst0::INSTR", backend=SIM)
    # 80 GHz is above the simulated instrument's 67 GHz stop limit.
    with pytest.raises(InstrumentError) as info:
        v.configure(SweepSettings(10e6, 80e9, 3), power_limit_dbm=0.0)
    assert info.value.errors == [(-222, "Data out of range")]
    assert info.value.command == "SENSe:FREQuency:STOP 80000000000"
    v.close()


def test_sim_ascii_reply_without_block_is_accepted():
    v = ScpiVna("TCPIP0::10.0.0.5::inst0::INSTR", backend=SIM)
    v.configure(SweepSettings(10e6, 30e6, 3), power_limit_dbm=0.0)
    net = v.sweep(1)
    np.testing.assert_array_equal(net.s[:, 0, 0], [0.5, 0.1 + 0.2j, -0.3j])
    np.testing.assert_array_equal(net.f, [10e6, 20e6, 30e6])
    v.close()


def test_sim_undefined_header_falls_back_to_ascii():
    v = ScpiVna("GPIB0::16::INSTR", backend=SIM)
    v.configure(SweepSettings(10e6, 30e6, 2), power_limit_dbm=0.0)
    assert v.ascii_data
    net = v.sweep(2)
    assert net.s[1, 0, 1] == 0.8 - 0.2j and net.s[1, 1, 1] == 0.2 + 0.1j
    with pytest.raises(InstrumentError, match=r'-113,"Undefined header"'):
        v.link.command("SENSe:AVERage:COUNt 4")
    v.close()


def test_bad_resource_string_is_named():
    with pytest.raises(ValueError, match="not a VISA resource string"):
        ScpiVna("TCPIP::10.0.0.5::port::SOCKET", backend=SIM)


def test_generic_dialect_loads():
    d = load_dialect("generic-vna", "vna")
    assert d.command("set_start_hz", hz=1e9) == "SENSe:FREQuency:STARt 1000000000"


# --------------------------------------------------------------------------- dialect files


def _variant(tmp_path, old: str, new: str, name: str = "my-vna.toml") -> Path:
    text = (ROOT / "drivers/dialects/generic-vna.toml").read_text()
    assert old in text
    p = tmp_path / name
    p.write_text(text.replace(old, new))
    return p


@pytest.mark.parametrize(
    "old, new, match",
    [
        ('fetch_sparams = "TRACe:DATA? SPARameters"\n', "", r"my-vna\.toml: \[commands\] is missing 'fetch_sparams'"),
        ('reset = "*RST"', 'reset = "*RST"\nrest = "*RST"', r"my-vna\.toml: \[commands\] has unknown operation 'rest' \(line \d+\)"),
        ("{hz:.12g}", "{freq:.12g}", r"set_start_hz \(line \d+\) must use placeholders \['hz'\], found \['freq'\]"),
        ("{n:d}", "{n:s}", r"set_points \(line \d+\): placeholder format does not fit"),
        ('byte_order = "little"', 'byte_order = "middle"', r"byte_order \(line \d+\) must be \"little\" or \"big\""),
        ('timeout_ms = 10000', 'timeout_ms = "10 s"', r"timeout_ms \(line \d+\) must be a positive integer"),
        ('order_1port = ["S11"]', 'order_1port = ["S22"]', r"\[data\] order_1port \(line \d+\) must list each of \['S11'\]"),
        ("[commands]", "[commands]\n[extras]", r"unknown section \[extras\]"),
        ('name = "generic-scpi"', 'name = ', r"my-vna\.toml: not valid TOML"),
    ],
)
def test_bad_dialects_are_named_with_file_and_key(tmp_path, old, new, match):
    with pytest.raises(ValueError, match=match):
        load_dialect(_variant(tmp_path, old, new), "vna")


def test_missing_dialect_file_is_named(tmp_path):
    with pytest.raises(ValueError, match=r"nope\.toml: cannot read dialect file"):
        load_dialect(tmp_path / "nope.toml", "vna")


def test_prober_dialect_loads_and_rejects_vna_keys():
    d = load_dialect("generic-prober", "prober")
    assert d.command("move_site", col=3, row=4, x_um=200, y_um=600) == "STAGe:MOVE 3,4,200.000,600.000"
    assert d.replies == {"contact": "CONT", "separated": "SEP"}
    with pytest.raises(ValueError, match=r"generic-vna\.toml: unknown section \[data\]"):
        load_dialect("generic-vna", "prober")
