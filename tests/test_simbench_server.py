"""The simulated bench through real pyvisa + pyvisa-py over loopback TCP.

References: IEEE 488.2 definite-length blocks and SCPI-1999 error codes (-113
undefined header, -221 settings conflict, -222 data out of range); the dialect
files drivers/dialects/generic-vna.toml and generic-prober.toml.
"""

import signal
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import numpy as np
import pytest
import pyvisa
import skrf
from skrf.calibration import unterminate

from probelog.drivers.simbench import SimBench

ROOT = Path(__file__).resolve().parents[1]
VNA = tomllib.loads((ROOT / "drivers/dialects/generic-vna.toml").read_text())["commands"]
PROBER = tomllib.loads((ROOT / "drivers/dialects/generic-prober.toml").read_text())["commands"]
LINE = "ln-cpw-m9-r2-l500"
LINE_XY = (200.0, 1640.0)


@pytest.fixture(scope="module")
def rm():
    manager = pyvisa.ResourceManager("@py")
    yield manager
    manager.close()


def open_pair(rm, bench, timeout_ms=5000):
    vr, pr = bench.resources
    out = []
    for r in (vr, pr):
        inst = rm.open_resource(r, read_termination="\n", write_termination="\n", timeout=timeout_ms)
        out.append(inst)
    return out


def read_block(inst) -> bytes:
    """IEEE 488.2 definite-length block, read header then exact count, then the terminator."""
    head = inst.read_bytes(2)
    assert head[:1] == b"#", head
    n = int(head[1:2])
    count = int(inst.read_bytes(n))
    data = inst.read_bytes(count + 1)
    assert data[-1:] == b"\n"
    return data[:-1]


def land(prober, die, xy):
    prober.write(PROBER["separate"])
    prober.write(PROBER["move_site"].format(col=die[0], row=die[1], x_um=xy[0], y_um=xy[1]))
    prober.write(PROBER["contact"])
    assert prober.query(PROBER["query_z"]) == "CONT"


def sweep(vna, n=201, ports="1,2", little=True, binary=True, start=1e9, stop=110e9):
    vna.write(VNA["set_start_hz"].format(hz=start))
    vna.write(VNA["set_stop_hz"].format(hz=stop))
    vna.write(VNA["set_points"].format(n=n))
    vna.write(VNA["set_ports"].format(ports=ports))
    vna.write(VNA["format_binary"] if binary else VNA["format_ascii"])
    vna.write(VNA["byte_order_little"] if little else VNA["byte_order_big"])
    vna.write(VNA["trigger_single"])
    assert vna.query(VNA["wait_complete"]) == "1"
    np_ = 1 if "," not in ports else 2
    if binary:
        vna.write(VNA["fetch_sparams"])
        v = np.frombuffer(read_block(vna), "<f8" if little else ">f8")
        vna.write(VNA["fetch_frequencies"])
        f = np.frombuffer(read_block(vna), "<f8" if little else ">f8")
    else:
        v = np.array(vna.query(VNA["fetch_sparams"]).split(","), float)
        f = np.array(vna.query(VNA["fetch_frequencies"]).split(","), float)
    c = v[0::2] + 1j * v[1::2]
    # Touchstone order S11 S21 S12 S22 (dialect [data] order_2port)
    s = c.reshape(n, np_, np_).transpose(0, 2, 1)
    return f, s


def corrected(bench, f, raw):
    """De-embed the bench's own error boxes and switch terms with skrf."""
    eb = bench.error_boxes(f)
    freq = skrf.Frequency.from_f(f, unit="Hz")
    m = unterminate(skrf.Network(frequency=freq, s=raw), eb.gamma_f, eb.gamma_r)
    return (eb.x.inv ** m ** eb.y.inv).s


def test_every_kind_of_sweep_comes_through_pyvisa(rm):
    with SimBench(seed=1) as bench:
        vna, prober = open_pair(rm, bench)
        assert vna.query(VNA["identify"]).startswith("probelog,")
        land(prober, (4, 4), LINE_XY)
        expected = bench.raw_network((4, 4), LINE, np.linspace(1e9, 110e9, 201), noise=False).s
        for little in (True, False):
            f, s = sweep(vna, little=little)
            assert np.allclose(f, np.linspace(1e9, 110e9, 201), rtol=0, atol=1e-3)
            assert np.abs(s - expected).max() < 2e-3  # trace noise only
        f, s = sweep(vna, binary=False)
        assert np.abs(s - expected).max() < 2e-3
        f, s1 = sweep(vna, ports="1")
        f, s2 = sweep(vna, ports="2")
        assert s1.shape == (201, 1, 1)
        assert np.abs(s1[:, 0, 0] - expected[:, 0, 0]).max() < 2e-3
        assert np.abs(s2[:, 0, 0] - expected[:, 1, 1]).max() < 2e-3
        f, s = sweep(vna, n=10001)
        assert s.shape == (10001, 2, 2)
        assert vna.query(VNA["next_error"]) == '0,"No error"'
        # de-embedding the error boxes gives back the true line (within the noise)
        f, s = sweep(vna, n=101)
        true = bench.site_network((4, 4), LINE, f).s
        assert np.abs(corrected(bench, f, s) - true).max() < 5e-3
        vna.close()
        prober.close()


def test_scpi_errors_go_to_the_queue(rm):
    with SimBench(seed=1) as bench:
        vna, prober = open_pair(rm, bench)
        vna.write("FROBnicate 3")
        assert vna.query(VNA["next_error"]).startswith("-113,")
        vna.write(VNA["set_power_dbm"].format(dbm=12.0))
        err = vna.query(VNA["next_error"])
        assert err.startswith("-222,") and "maximum" in err
        vna.write(VNA["set_stop_hz"].format(hz=200e9))
        assert vna.query(VNA["next_error"]).startswith("-222,")
        vna.write(VNA["set_ifbw_hz"].format(hz=10e3))
        assert float(vna.query("SENSe:BANDwidth?")) == 10e3
        assert vna.query(VNA["next_error"]) == '0,"No error"'
        vna.close()
        prober.close()


def test_prober_refuses_xy_moves_in_contact_and_off_map(rm):
    with SimBench(seed=1) as bench:
        vna, prober = open_pair(rm, bench)
        land(prober, (4, 4), LINE_XY)
        prober.write(PROBER["move_site"].format(col=5, row=4, x_um=200.0, y_um=200.0))
        assert prober.query(PROBER["next_error"]).startswith("-221,")
        assert prober.query(PROBER["query_position"]) == "4,4,200.000,1640.000"
        prober.write(PROBER["separate"])
        assert prober.query(PROBER["query_z"]) == "SEP"
        prober.write(PROBER["move_site"].format(col=0, row=0, x_um=200.0, y_um=200.0))  # a corner off the round wafer
        assert prober.query(PROBER["next_error"]).startswith("-222,")
        assert prober.query(PROBER["next_error"]) == '0,"No error"'
        vna.close()
        prober.close()


def test_tips_up_or_on_passivation_look_like_air(rm):
    with SimBench(seed=1) as bench:
        vna, prober = open_pair(rm, bench)
        land(prober, (4, 4), (1000.0, 3900.0))  # no structure there
        f, s = sweep(vna, n=51)
        c = corrected(bench, f, s)
        # tips in air: |S11| within ~0.3 dB of 0 dB, |S21| < -40 dB (REFERENCES.md trade numbers)
        assert np.all(20 * np.log10(np.abs(c[:, 0, 0])) > -0.35)
        assert np.all(20 * np.log10(np.abs(c[:, 1, 0])) < -40)
        vna.close()
        prober.close()


def test_lifted_tip_fault_then_a_reland_succeeds(rm):
    with SimBench(seed=1, faults=[f"lifted-1@4,4:{LINE}"]) as bench:
        vna, prober = open_pair(rm, bench)
        land(prober, (4, 4), LINE_XY)
        f, s = sweep(vna, n=51)
        c = corrected(bench, f, s)
        assert np.all(20 * np.log10(np.abs(c[:, 0, 0])) > -0.35)  # an open where a line should match
        assert np.all(20 * np.log10(np.abs(c[:, 1, 0])) < -40)
        land(prober, (4, 4), LINE_XY)  # separate + contact again: the next landing
        f, s = sweep(vna, n=51)
        c = corrected(bench, f, s)
        assert np.all(20 * np.log10(np.abs(c[:, 1, 0])) > -3)
        vna.close()
        prober.close()


def test_drop_closes_the_connection_mid_block(rm):
    with SimBench(seed=1) as bench:
        vna, prober = open_pair(rm, bench, timeout_ms=500)
        bench.inject(f"drop@4,4:{LINE}")
        land(prober, (4, 4), LINE_XY)
        vna.write(VNA["format_binary"])
        vna.write(VNA["trigger_single"])
        vna.write(VNA["fetch_sparams"])
        head = vna.read_bytes(2)
        count = int(vna.read_bytes(int(head[1:2])))
        with pytest.raises((pyvisa.errors.VisaIOError, OSError)):
            vna.read_bytes(count + 1)
        vna.close()
        prober.close()


def test_garbled_block_header(rm):
    with SimBench(seed=1) as bench:
        vna, prober = open_pair(rm, bench, timeout_ms=500)
        bench.inject("garbled")
        land(prober, (4, 4), LINE_XY)
        vna.write(VNA["format_binary"])
        vna.write(VNA["trigger_single"])
        vna.write(VNA["fetch_sparams"])
        head = vna.read_bytes(2)
        with pytest.raises(ValueError):  # IEEE 488.2: '#', digit n, n digits of count
            int(vna.read_bytes(int(head[1:2])))
        vna.close()
        prober.close()


def test_slow_reply_times_out(rm):
    with SimBench(seed=1, slow_reply_s=1.0) as bench:
        vna, prober = open_pair(rm, bench, timeout_ms=300)
        bench.inject("slow@*:*")
        land(prober, (4, 4), LINE_XY)
        vna.write(VNA["format_binary"])
        vna.write(VNA["trigger_single"])
        vna.write(VNA["fetch_sparams"])
        with pytest.raises(pyvisa.errors.VisaIOError):
            read_block(vna)
        vna.close()
        prober.close()


def test_simulated_sweep_time_holds_opc(rm):
    with SimBench(seed=1, sweep_time_scale=1.0) as bench:
        vna, prober = open_pair(rm, bench)
        vna.write(VNA["set_points"].format(n=201))
        vna.write(VNA["set_ifbw_hz"].format(hz=5e3))
        t = time.monotonic()
        vna.write(VNA["trigger_single"])
        vna.query(VNA["wait_complete"])
        # two directions of 201 points / 5 kHz = 80 ms at least
        assert time.monotonic() - t >= 0.08
        vna.close()
        prober.close()


def test_stop_is_clean_and_frees_the_ports(rm):
    bench = SimBench(seed=1)
    vr, pr = bench.start()
    vna = rm.open_resource(vr, read_termination="\n", write_termination="\n", timeout=500)
    assert vna.query("*OPC?") == "1"
    bench.stop()
    with pytest.raises((pyvisa.errors.VisaIOError, OSError)):
        vna.query("*IDN?")
    vna.close()
    port = int(vr.split("::")[2])
    again = SimBench(seed=1, vna_port=port)
    assert again.start()[0] == vr
    again.stop()


def test_cli_prints_resources_and_stops_on_ctrl_c():
    proc = subprocess.Popen([sys.executable, "-m", "tui", "simbench", "--seed", "3"], cwd=ROOT,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        lines = [proc.stdout.readline() for _ in range(2)]
        assert lines[0].startswith("vna") and "::SOCKET" in lines[0]
        assert lines[1].startswith("prober") and "TCPIP::127.0.0.1::" in lines[1]
        proc.send_signal(signal.SIGINT)
        try:  # generous: a loaded CI machine once took longer than 10 s here
            code = proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
            raise AssertionError(f"simbench did not stop on Ctrl-C; stderr: {proc.communicate()[1][-2000:]}") from None
        assert code == 0, proc.communicate()[1][-2000:]
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def test_cli_bad_fault_spec_is_one_clear_line():
    proc = subprocess.run([sys.executable, "-m", "tui", "simbench", "--fault", "lifted-1@4,4:nowhere"],
                          cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert proc.stderr.strip().count("\n") == 0 and "no site named 'nowhere'" in proc.stderr


def test_sweep_time_setting_presets_and_the_instrument_clock():
    # issue 15: 1,001 points at 100 Hz IF bandwidth take about 10 s a direction
    assert SimBench(seed=1, sweep_time_scale="realistic").vna.sweep_time_scale == 1.0
    assert SimBench(seed=1, sweep_time_scale="off").vna.sweep_time_scale == 0.0
    with pytest.raises(ValueError, match="expected a scale >= 0, 'off' or 'realistic'"):
        SimBench(seed=1, sweep_time_scale="fast")
    with SimBench(seed=1) as bench:  # off: instant, yet every sweep's modelled time is counted
        rm = pyvisa.ResourceManager("@py")
        vna = rm.open_resource(bench.resources[0], read_termination="\n", write_termination="\n", timeout=2000)
        vna.write(VNA["set_points"].format(n=1001))
        vna.write(VNA["set_ifbw_hz"].format(hz=100))
        vna.write(VNA["set_ports"].format(ports="1"))
        t = time.monotonic()
        vna.write(VNA["trigger_single"])
        assert vna.query(VNA["wait_complete"]) == "1"
        first = bench.instrument_seconds
        vna.write(VNA["trigger_single"])
        assert vna.query(VNA["wait_complete"]) == "1"
        waited = time.monotonic() - t
        vna.close()
    assert 10.0 < first < 10.1  # including the re-arm after the stimulus change
    assert bench.instrument_seconds - first < first  # the same stimulus again: no re-arm
    assert waited < first  # nothing near 10 s was really waited
