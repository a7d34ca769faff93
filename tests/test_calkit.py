"""Cal kit TOML parsing and the ideal standards (probelog.calkit)."""

from pathlib import Path

import numpy as np
import pytest
import skrf

from probelog.calkit import C0, KitError, ideal_reflects, ideals, kit_from_mapping, load_kit

KIT = Path(__file__).resolve().parents[1] / "probelog" / "kits" / "plx7.toml"
CHIP = Path(__file__).resolve().parents[1] / "drivers" / "simbench" / "chip.toml"


def _base() -> dict:
    return {
        "name": "t", "reference_impedance_ohm": 50.0, "eps_eff": 6.5, "open_c_f": 10e-15,
        "short_l_h": [0.0], "load_r_ohm": 50.0, "load_l_h": 0.0, "thru_length_um": 100.0,
        "sites": {"open": "o", "short": "s", "load": "l", "thru": "t"},
        "lines": {"a": {"length_um": 450.0, "site": "la"}},
    }


def test_plx7_kit_sites_exist_on_the_chip():
    import tomllib

    kit = load_kit(KIT)
    chip_sites = {s["name"]: s for s in tomllib.loads(CHIP.read_text())["site"]}
    for site in list(kit.sites.values()) + [line.site for line in kit.lines]:
        assert site in chip_sites, site
    for line in kit.lines:  # lengths agree with the chip description
        assert line.length_um == chip_sites[line.site]["length_um"]
    assert kit.thru_length_um == chip_sites["cal-thru"]["length_um"]
    # delay of a quasi-TEM line: tau = l sqrt(eps_eff) / c (Pozar 4th ed., ch. 2)
    assert kit.thru_delay_s == pytest.approx(100e-6 * np.sqrt(6.35) / 299_792_458.0, rel=1e-12)


def test_open_ideal_turns_clockwise_by_the_textbook_angle():
    # Open with +10 fF at 50 GHz: arg Gamma = -2 atan(w C Z0) = -17.854 deg
    # (REFERENCES.md "Passivity, reciprocity, rotation", verified; Foster 1924)
    kit = kit_from_mapping(_base())
    f = skrf.Frequency(50, 50, 1, "GHz")
    g = ideal_reflects(kit, f)
    assert np.degrees(np.angle(g["open"][0])) == pytest.approx(-17.854, abs=1e-3)
    assert abs(g["open"][0]) == pytest.approx(1.0, abs=1e-15)      # lossless
    assert g["short"][0] == pytest.approx(-1.0)                    # L = 0: ideal short
    assert abs(g["load"][0]) < 1e-15                               # 50 ohm in 50 ohm


def test_ideal_pairs_and_thru():
    kit = load_kit(KIT)
    f = skrf.Frequency(1, 110, 23, "GHz")
    ide = ideals(kit, f)
    for role in ("open", "short", "load"):
        assert np.all(ide[role].s[:, 1, 0] == 0) and np.all(ide[role].s[:, 0, 1] == 0)
        assert np.allclose(ide[role].s[:, 0, 0], ide[role].s[:, 1, 1])
    # thru phase: -360 f tau degrees (e^{+jwt} convention), for the matched lossless
    # thru (the demo kit's own thru is lossy and 51 ohm: tests/test_realdata_verdicts.py)
    from dataclasses import replace

    ide = ideals(replace(kit, thru_z0_ohm=None, thru_loss_db=0.0), f)
    tau = kit.thru_length_um * 1e-6 * np.sqrt(kit.eps_eff) / C0
    assert np.allclose(np.angle(ide["thru"].s[:, 1, 0]), np.angle(np.exp(-2j * np.pi * f.f * tau)))
    assert np.allclose(ide["thru"].s[:, 0, 0], 0)


def test_polynomial_open_capacitance():
    d = _base()
    d["open_c_f"] = [10e-15, 1e-26, 0.0]  # C(f) = 10 fF + 1e-26 F/Hz * f -> 11 fF at 100 GHz
    kit = kit_from_mapping(d)
    g = ideal_reflects(kit, skrf.Frequency(100, 100, 1, "GHz"))["open"][0]
    x = 2 * np.pi * 100e9 * 11e-15 * 50
    assert g == pytest.approx((1 - 1j * x) / (1 + 1j * x), abs=1e-14)


@pytest.mark.parametrize(
    "edit, words",
    [
        (lambda d: d.update(colour="red"), ["unknown key 'colour'"]),
        (lambda d: d.pop("load_r_ohm"), ["missing key 'load_r_ohm'"]),
        (lambda d: d.update(load_r_ohm="fifty"), ["'load_r_ohm'", "expected number", "str"]),
        (lambda d: d.update(thru_length_um=-5.0), ["'thru_length_um'", "zero or more", "-5.0"]),
        (lambda d: d["lines"]["a"].update(length_um=-450.0), ["'lines.a.length_um'", "more than zero"]),
        (lambda d: d["lines"]["a"].update(length_um=80.0), ["'lines.a.length_um'", "longer than the thru"]),
        (lambda d: d["sites"].update(reflect="x"), ["unknown key 'sites.reflect'"]),
        (lambda d: d.update(open_c_f=[1e-15, "x"]), ["'open_c_f'[1]", "expected number"]),
        (lambda d: d.update(eps_eff=0.5), ["'eps_eff'", "1 or more"]),
        (lambda d: d.update(load_r_ohm=True), ["'load_r_ohm'", "bool"]),
        (lambda d: d.update(mtrl_reflect="load"), ["'mtrl_reflect'"]),
    ],
)
def test_kit_errors_name_source_and_key(edit, words):
    d = _base()
    edit(d)
    with pytest.raises(KitError) as err:
        kit_from_mapping(d, source="kits/bad.toml")
    msg = str(err.value)
    assert msg.startswith("kits/bad.toml: ")
    for w in words:
        assert w in msg


def test_kit_file_errors(tmp_path):
    bad = tmp_path / "broken.toml"
    bad.write_text('name = "x"\nload_r_ohm = = 5\n')
    with pytest.raises(KitError, match=r"broken\.toml: not valid TOML.*line 2"):
        load_kit(bad)
    with pytest.raises(KitError, match=r"missing\.toml: cannot read"):
        load_kit(tmp_path / "missing.toml")
