"""`probelog check` / `probelog lines`: the options of issue 10 and the bad input
they refuse with one line (exit 2). Lines from scikit-rf's media (reference model,
causal gamma as in REFERENCES.md); the 30 degree / half-wavelength band rule is
common practice, no source."""

from __future__ import annotations

import json
import os

import numpy as np
import pytest
import skrf

from probelog import touchstone_input
from probelog.touchstone_out import network_to_touchstone
from probelog.tui.cli import main

C0 = 299_792_458.0


def medium(f, eps_eff=6.0, alpha=20.0, z0=50.0):
    return skrf.media.DefinedGammaZ0(f, z0_port=50, z0=z0, gamma=alpha + 1j * 2 * np.pi * f.f * np.sqrt(eps_eff) / C0)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("ts10")
    f = skrf.Frequency(1, 110, 219, "GHz")
    med = medium(f)
    med.line(1.5e-3, "m", name="ln").write_touchstone(str(d / "ln"))
    short = skrf.network.two_port_reflect(med.short(), med.short())
    short.write_touchstone(str(d / "shortpair"))
    (d / "tagged.s2p").write_bytes(network_to_touchstone(short, {"kind": "short", "site": "cal-short"}))
    (d / "tagged-open.s2p").write_bytes(network_to_touchstone(short, {"kind": "open", "site": "x"}))
    return d


def run(argv, capsys):
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def test_header_kind_is_honoured_when_kind_is_absent(files, capsys):
    code, out, _ = run(["check", str(files / "tagged.s2p"), "--json"], capsys)
    assert json.loads(out)["kind"] == "short" and code == 0
    # the same short pair, tagged as an open: contact fails (a short checked as an open)
    code, out, _ = run(["check", str(files / "tagged-open.s2p"), "--json"], capsys)
    doc = json.loads(out)
    contact = next(c for c in doc["checks"] if c["name"] == "contact")
    assert doc["kind"] == "open" and contact["verdict"] == "fail" and code == 1
    code, out, _ = run(["check", str(files / "tagged.s2p"), "--kind", "open", "--json"], capsys)
    assert json.loads(out)["kind"] == "open" and code == 1


def test_window_band_and_length_um_name_every_quantity(files, capsys):
    argv = ["check", str(files / "ln.s2p"), "--kind", "line", "--length-um", "1500", "--json",
            "--z0-window", "45", "55", "--eps-eff-window", "5.5", "6.5", "--alpha-max", "0.3",
            "--window-band", "10e9", "60e9"]
    code, out, _ = run(argv, capsys)
    doc = json.loads(out)
    win = doc["line_window"]
    assert set(win) == {"z0_re_ohm", "alpha_db_per_mm", "eps_eff"}
    assert win["z0_re_ohm"]["unit"] == "ohm" and win["z0_re_ohm"]["lo"] == 45 and win["z0_re_ohm"]["hi"] == 55
    assert win["alpha_db_per_mm"]["unit"] == "dB/mm" and win["alpha_db_per_mm"]["lo"] == 0
    assert all(10e9 <= d["at_hz"] <= 60e9 for d in win.values())
    # 20 Np/m = 0.1737 dB/mm (Pozar eq. 2.50): inside 0..0.3; eps_eff 6.0 inside 5.5..6.5
    assert win["eps_eff"]["value"] == pytest.approx(6.0, abs=1e-6) and code == 0
    msg = next(c for c in doc["checks"] if c["name"] == "line-window")["message"]
    assert "Re Z0" in msg and "dB/mm" in msg and "eps_eff" in msg
    argv[argv.index("0.3")] = "0.1"  # a loss window the line misses
    code, out, _ = run(argv, capsys)
    assert json.loads(out)["line_window"]["alpha_db_per_mm"]["inside"] is False and code == 1


def test_lines_refuses_a_structure_that_does_not_transmit(files, capsys):
    code, out, err = run(["lines", str(files / "shortpair.s2p"), "--length", "1.5"], capsys)
    assert code == 2 and "does not transmit" in err and err.count("\n") == 1 and out == ""


def test_lines_marks_points_outside_the_valid_band(files, capsys):
    # 1.5 mm at eps_eff 6: 30 deg of beta l at 6.8 GHz; half-wavelength at 40.8 GHz
    code, out, _ = run(["lines", str(files / "ln.s2p"), "--length", "1.5", "--json", "--at", "2", "20", "40.8", "60"],
                       capsys)
    doc = json.loads(out)
    assert code == 0 and doc["valid"] == [False, True, False, True]
    code, out, _ = run(["lines", str(files / "ln.s2p"), "--length", "1.5", "--at", "2", "20"], capsys)
    flat = " ".join(out.split())  # rich wraps to the terminal width
    assert "GHz *" in flat and "outside the valid band" in flat


@pytest.mark.parametrize("argv,words", [
    (["lines", "{ln}", "--length", "nan"], "--length must be a finite number"),
    (["lines", "{ln}", "--length", "inf"], "--length must be a finite number"),
    (["check", "{ln}", "--kind", "line", "--length-um", "inf"], "--length-um must be positive and finite"),
    (["check", "{ln}", "--window-band", "60e9", "10e9"], "--window-band needs 0 < LO_HZ < HI_HZ"),
    (["check", "{ln}", "--cal-open", "{ln}"], "--cal-open and --cal-short go together"),
])
def test_bad_options_one_line(files, capsys, argv, words):
    argv = [a.format(ln=files / "ln.s2p") for a in argv]
    code, _, err = run(argv, capsys)
    assert code == 2 and words in err and err.count("\n") == 1, err


GOOD = "# GHz S RI R 50\n1 0.1 0 0.9 0 0.9 0 0.1 0\n2 0.1 0 0.9 0 0.9 0 0.1 0\n"


@pytest.mark.parametrize("name,content,words", [
    ("one.s2p", "# GHz S RI R 50\n1 0.1 0 0.9 0 0.9 0 0.1 0\n", "one frequency point"),
    ("zero.s2p", "# GHz S RI R 50\n0 0.1 0 0.9 0 0.9 0 0.1 0\n2 0.1 0 0.9 0 0.9 0 0.1 0\n", "not above 0 Hz"),
    ("r0.s2p", GOOD.replace("R 50", "R 0"), "reference impedance"),
    ("rneg.s2p", GOOD.replace("R 50", "R -50"), "reference impedance"),
    ("bom.s2p", "\ufeff" + GOOD, "byte-order mark"),
    ("v2.ts", "[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 2\n[Two-Port Data Order] 12_21\n"
              "[Number of Frequencies] 3\n[Network Data]\n1 0.1 0 0.9 0 0.9 0 0.1 0\n2 0.1 0 0.9 0 0.9 0 0.1 0\n"
              "[End]\n", "[Number of Frequencies] says 3"),
])
def test_bad_files_one_line(tmp_path, capsys, name, content, words):
    p = tmp_path / name
    p.write_text(content, encoding="utf-8")
    with pytest.raises(touchstone_input.TouchstoneInputError, match="^" + str(p).replace("\\", "\\\\")):
        touchstone_input.load_touchstone(p)
    code, _, err = run(["check", str(p), "--kind", "device"], capsys)
    assert code == 2 and words in err and err.count("\n") == 1, err
    good = tmp_path / "good.s2p"
    good.write_text(GOOD, encoding="utf-8")
    assert touchstone_input.load_touchstone(good).nports == 2  # the same reader takes a good file


def test_fifo_and_oversize_refused_without_reading(tmp_path, capsys, monkeypatch):
    fifo = tmp_path / "pipe.s2p"
    os.mkfifo(fifo)  # reading it would block forever
    code, _, err = run(["check", str(fifo)], capsys)
    assert code == 2 and "not a regular file" in err and err.count("\n") == 1
    big = tmp_path / "big.s2p"
    big.write_text(GOOD, encoding="utf-8")
    monkeypatch.setattr(touchstone_input, "MAX_BYTES", 10)
    code, _, err = run(["check", str(big)], capsys)
    assert code == 2 and "past the" in err and err.count("\n") == 1
