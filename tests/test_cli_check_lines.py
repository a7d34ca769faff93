"""`probelog check` and `probelog lines` on good and bad Touchstone files."""

import json

import numpy as np
import pytest
import skrf

from probelog.checks import KINDS
from probelog.touchstone_input import TouchstoneInputError, load_touchstone, require_ports
from probelog.tui.cli import main
from probelog.tui.commands import check as check_cmd

C0 = 299_792_458.0
GOOD_2P = "# GHz S RI R 50\n1 0.1 0 0.9 0 0.9 0 0.1 0\n2 0.1 0 0.9 0 0.9 0 0.1 0\n"


def medium(f, eps_eff=6.0, alpha=20.0, z0=50.0):
    # causal gamma (REFERENCES.md); 20 Np/m = 0.17372 dB/mm (20 log10 e / 1000 * alpha, Pozar eq. 2.50)
    return skrf.media.DefinedGammaZ0(f, z0_port=50, z0=z0, gamma=alpha + 1j * 2 * np.pi * f.f * np.sqrt(eps_eff) / C0)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("ts")
    f = skrf.Frequency(1, 110, 219, "GHz")
    med = medium(f)
    med.line(1.5e-3, "m", name="ln-1500").write_touchstone(str(d / "ln-1500"))
    med.line(0.5e-3, "m", name="ln-500").write_touchstone(str(d / "ln-500"))
    medium(f, z0=70.0).line(1.5e-3, "m", name="ln-70").write_touchstone(str(d / "ln-70"))
    load = med.resistor(50.1) ** med.short()
    open_ = med.shunt_capacitor(5e-15) ** med.open()
    skrf.network.two_port_reflect(load, open_).write_touchstone(str(d / "load-lifted"))
    (med.shunt_capacitor(10e-15) ** med.open()).write_touchstone(str(d / "open1"))
    return d


def run_cli(argv, capsys):
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def test_check_json_on_a_good_line(files, capsys):
    code, out, err = run_cli(["check", str(files / "ln-1500.s2p"), "--kind", "line", "--length-mm", "1.5",
                              "--z0-window", "45", "55", "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["file"].endswith("ln-1500.s2p") and doc["kind"] == "line" and doc["verdict"] == "pass"
    names = [c["name"] for c in doc["checks"]]
    # line-z0: the windowed quantity on its own (one manifest column each, issue 10)
    assert names == ["contact", "passivity", "reciprocity", "symmetry", "line-window", "line-z0"]
    for c in doc["checks"]:
        assert {"name", "verdict", "value", "limit", "at_hz", "message"} <= set(c)
    window = doc["checks"][-1]
    assert window["verdict"] == "pass" and window["value"] == pytest.approx(50.0, rel=1e-9)


def test_check_fails_a_line_outside_its_window(files, capsys):
    code, out, _ = run_cli(["check", str(files / "ln-70.s2p"), "--kind", "line", "--length-mm", "1.5",
                            "--z0-window", "45", "55", "--json"], capsys)
    assert code == 1
    doc = json.loads(out)
    assert doc["verdict"] == "fail"
    window = {c["name"]: c for c in doc["checks"]}["line-window"]
    assert window["verdict"] == "fail" and window["value"] == pytest.approx(70.0, rel=1e-9)


def test_check_table_names_a_lifted_tip(files, capsys):
    code, out, _ = run_cli(["check", str(files / "load-lifted.s2p"), "--kind", "load"], capsys)
    assert code == 1
    assert "contact" in out and "fail" in out and "port 2" in out


def test_check_one_port_open_and_repeatability(files, capsys):
    f1 = str(files / "open1.s1p")
    code, out, _ = run_cli(["check", f1, "--kind", "open", "--previous", f1, "--json"], capsys)
    assert code == 0
    doc = json.loads(out)
    assert [c["name"] for c in doc["checks"]] == ["contact", "passivity", "rotation", "repeatability"]
    assert doc["checks"][0]["verdict"] == "n/a"


def test_lines_json_single_and_two_line(files, capsys):
    code, out, _ = run_cli(["lines", str(files / "ln-1500.s2p"), "--length", "1.5", "--json", "--at", "40"], capsys)
    assert code == 0
    doc = json.loads(out)
    assert doc["method"] == "single-line" and doc["f_hz"] == [40e9]
    assert doc["eps_eff"][0] == pytest.approx(6.0, rel=1e-9)
    assert doc["alpha_db_per_mm"][0] == pytest.approx(20 * 20 / np.log(10) / 1000, rel=1e-9)
    assert doc["z0_re"][0] == pytest.approx(50.0, rel=1e-9)
    code, out, _ = run_cli(["lines", str(files / "ln-1500.s2p"), "--length", "1.5", "--second",
                            str(files / "ln-500.s2p"), "--second-length", "0.5", "--json"], capsys)
    assert code == 0
    doc = json.loads(out)
    assert doc["method"] == "two-line" and len(doc["f_hz"]) == 5
    assert doc["z0_re"] == [None] * 5
    np.testing.assert_allclose(doc["eps_eff"], 6.0, rtol=1e-9)


def test_lines_table(files, capsys):
    code, out, _ = run_cli(["lines", str(files / "ln-1500.s2p"), "--length", "1.5"], capsys)
    assert code == 0
    assert "eps_eff" in out and "6.0000" in out and "110 GHz" in out


BAD = {
    "nan.s2p": ("# GHz S RI R 50\n1 0.1 0 0.9 0 0.9 0 0.1 0\n2 0.1 0 nan 0 0.9 0 0.1 0\n", "line 3: data value 'nan' is not finite"),
    "back.s2p": ("# GHz S RI R 50\n2 0.1 0 0.9 0 0.9 0 0.1 0\n1 0.1 0 0.9 0 0.9 0 0.1 0\n", "line 3: frequency 1 is not above the previous 2"),
    "word.s2p": ("# GHz S RI R 50\n1 0.1 0 0.9 0 zero 0 0.1 0\n", "line 2: 'zero' is not a number"),
    "cut.s2p": ("# GHz S RI R 50\n1 0.1 0 0.9 0 0.9 0\n", "line 2: data ends mid-record"),
    "option.s2p": ("# GHz Q RI R 50\n" + GOOD_2P.split("\n", 1)[1], "malformed Touchstone data"),
    "empty.s2p": ("! nothing here\n", "no data lines"),
    "notes.txt": (GOOD_2P, "not a Touchstone file name"),
}


@pytest.mark.parametrize("name", sorted(BAD))
@pytest.mark.parametrize("command", ["check", "lines"])
def test_bad_files_give_one_line_and_exit_2(tmp_path, capsys, name, command):
    text, problem = BAD[name]
    path = tmp_path / name
    path.write_text(text)
    argv = [command, str(path)] + (["--length", "1"] if command == "lines" else [])
    code, out, err = run_cli(argv, capsys)
    assert code == 2
    assert out == ""
    assert err.count("\n") == 1 and "Traceback" not in err
    assert str(path) in err and problem in err


def test_missing_file_and_wrong_port_count(tmp_path, files, capsys):
    code, _, err = run_cli(["check", str(tmp_path / "gone.s2p")], capsys)
    assert code == 2 and "gone.s2p: no such file" in err
    code, _, err = run_cli(["check", str(files / "open1.s1p"), "--kind", "thru"], capsys)
    assert code == 2 and "a thru site needs a 2-port sweep, the file has 1 port(s)" in err
    code, _, err = run_cli(["lines", str(files / "open1.s1p"), "--length", "1"], capsys)
    assert code == 2 and "open1.s1p" in err


def test_bad_options(files, capsys):
    f = str(files / "ln-1500.s2p")
    for argv, words in [
        (["check", f, "--kind", "stub"], "unknown kind 'stub'"),
        (["check", f, "--z0-window", "55", "45"], "--z0-window needs LO < HI"),
        (["check", f, "--length-mm", "-1"], "--length-mm must be positive"),
        (["lines", f, "--length", "0"], "--length must be positive"),
        (["lines", f, "--length", "1.5", "--second", f], "--second and --second-length go together"),
        (["lines", f, "--length", "1.5", "--second", f, "--second-length", "1.5"], "differ in length"),
    ]:
        code, _, err = run_cli(argv, capsys)
        assert code == 2 and words in err and err.count("\n") == 1


def test_kind_help_lists_every_kind():
    for kind in KINDS:
        assert kind in check_cmd.KIND_WORDS


def test_loader_directly(tmp_path):
    p = tmp_path / "ok.s2p"
    p.write_text(GOOD_2P)
    ntwk = load_touchstone(p)
    assert ntwk.nports == 2 and list(ntwk.f) == [1e9, 2e9]
    require_ports(ntwk, "open", p)  # reflect pairs come as 2-ports
    with pytest.raises(TouchstoneInputError, match="is a folder"):
        load_touchstone(tmp_path)
    bin_file = tmp_path / "bin.s2p"
    bin_file.write_bytes(b"\x00\x01\x02")
    with pytest.raises(TouchstoneInputError, match="binary content"):
        load_touchstone(bin_file)
