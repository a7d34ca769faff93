"""The golden-file check (probelog.checks.golden) and the plan keys that name a
golden file (probelog.plan_layout).

Outside references:
- a series impedance Z between two Z0 ports has S21 = 2 Z0 / (2 Z0 + Z) (Pozar,
  Microwave Engineering, 4th ed., table 4.2, from memory); for an inductor the
  phase of S21 is -atan(omega L / (2 Z0));
- a matched line of length l has S21 = exp(-j beta l), beta = 2 pi f sqrt(eps_eff) / c
  (Pozar ch. 2), a phase exactly linear in f;
- real measured data: tests/data/realdata (BSD 3-Clause; source, figures and
  licences in tests/data/realdata/README.md and licences/): the PCB microstrip kit
  to 50 GHz, corrected with scikit-rf 2.2.0's NISTMultilineTRL and
  TUGMultilineTRL (the README: the two agree on the DUT within 0.002) and its
  eps_eff 2.404 at 5 GHz ("scikit-rf results" table).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
import skrf

from probelog.checks import Limits, run_checks
from probelog.checks.golden import deviations, golden_match, golden_on_grid
from probelog.golden import FLOOR_DB, TOL_DB, TOL_DEG
from probelog.plan import PlanError, load_plan_text
from probelog.verdicts import Verdict
from tests._engine_fakes import plan_text

C0 = 299_792_458.0
Z0 = 50.0
REAL = Path(__file__).parent / "data" / "realdata" / "mstrip_pcb_50ghz"
LINES50 = {"line_0500um": 500.0, "line_4000um": 4000.0, "line_5500um": 5500.0, "line_6500um": 6500.0,
           "line_8500um": 8500.0}


def series_l(f_hz: np.ndarray, l_h: float) -> np.ndarray:
    """S of a series inductor between two 50-ohm ports (Pozar table 4.2)."""
    z = 1j * 2 * np.pi * f_hz * l_h
    s = np.empty((len(f_hz), 2, 2), complex)
    s[:, 0, 0] = s[:, 1, 1] = z / (z + 2 * Z0)
    s[:, 1, 0] = s[:, 0, 1] = 2 * Z0 / (z + 2 * Z0)
    return s


def spec(f_hz: np.ndarray, s: np.ndarray, **kw: float) -> dict:
    """The fields of plan_types.Golden, defaults as a plan without tolerances gets them."""
    return {"file": "/lab/golden/dev.s2p", "sha256": "0" * 64, "tol_db": kw.get("tol_db", TOL_DB),
            "tol_deg": kw.get("tol_deg", TOL_DEG), "floor_db": kw.get("floor_db", FLOOR_DB),
            "z0_ohm": kw.get("z0_ohm", Z0), "f_hz": f_hz, "s": s}


F = np.linspace(1e9, 67e9, 201)
F_COARSE = np.linspace(1e9, 67e9, 34)  # the golden file on a grid 6x coarser than the sweep


# ---------------------------------------------------------------- the pure pieces


def test_interpolation_onto_the_sweep_follows_a_line_phase_exactly():
    # a matched 1 mm line, eps_eff 6.35: S21 phase is linear in f (Pozar ch. 2); the golden
    # on 34 points, interpolated onto 201, reproduces it to well under the 5 degree tolerance
    beta = 2 * np.pi * F * np.sqrt(6.35) / C0
    s = np.zeros((len(F), 2, 2), complex)
    s[:, 1, 0] = s[:, 0, 1] = np.exp(-1j * beta * 1e-3)
    bc = 2 * np.pi * F_COARSE * np.sqrt(6.35) / C0
    sc = np.zeros((len(F_COARSE), 2, 2), complex)
    sc[:, 1, 0] = sc[:, 0, 1] = np.exp(-1j * bc * 1e-3)
    inside, g = golden_on_grid(F, Z0, spec(F_COARSE, sc))
    assert inside.all()
    err_deg = np.degrees(np.abs(np.angle(g[:, 1, 0] * np.conj(s[:, 1, 0]))))
    assert err_deg.max() < 0.05  # 0.01 of the tolerance
    assert np.abs(np.abs(g[:, 1, 0]) - 1).max() < 1e-3


def test_deviations_are_db_and_degrees_by_definition():
    g = series_l(F, 300e-12)
    m = g * 10 ** (-1.0 / 20) * np.exp(1j * np.radians(10.0))  # 1 dB less, 10 degrees more
    d_db, d_deg, judged = deviations(m, g, FLOOR_DB)
    big = judged[:, 1, 0]
    assert np.allclose(d_db[:, 1, 0], -1.0)
    assert np.allclose(d_deg[big, 1, 0], 10.0)
    # where both reflections are under the floor, they count as the floor: no deviation
    small = (np.abs(g[:, 0, 0]) < 10 ** (FLOOR_DB / 20)) & (np.abs(m[:, 0, 0]) < 10 ** (FLOOR_DB / 20))
    assert small.any() and np.all(d_db[small, 0, 0] == 0) and not judged[small, 0, 0].any()


def test_the_right_device_passes_and_a_larger_inductor_fails_named_by_port_pair():
    good = golden_match(F, series_l(F, 300e-12), Z0, spec(F_COARSE, series_l(F_COARSE, 300e-12)))
    assert good.verdict is Verdict.PASS and good.value is not None and good.value < 0.05
    # 400 pH instead of 300 pH: |S11| = wL / |j wL + 2 Z0| (Pozar table 4.2) rises by up to
    # 20 log10(4/3) = 2.5 dB where it is small; the check clamps both at the -15 dB floor,
    # so the worst is where the 300 pH |S11| crosses it (9.6 GHz): 2.39 dB there
    bad = golden_match(F, series_l(F, 400e-12), Z0, spec(F_COARSE, series_l(F_COARSE, 300e-12)))
    w = 2 * np.pi * F
    fl = 10 ** (FLOOR_DB / 20)

    def s11_db(l_h: float) -> np.ndarray:
        return 20 * np.log10(np.maximum(w * l_h / np.abs(1j * w * l_h + 2 * Z0), fl))

    dev = s11_db(400e-12) - s11_db(300e-12)
    k = int(np.argmax(dev))
    assert bad.verdict is Verdict.FAIL, bad.message
    assert bad.unit == "dB" and bad.value == pytest.approx(dev[k], abs=0.02) and bad.limit == TOL_DB
    assert bad.at_hz == pytest.approx(F[k], abs=F[1] - F[0])
    assert f"S11 |S| +{dev[k]:.3g} dB" in bad.message and "dev.s2p" in bad.message
    # S21's phase -atan(wL / 2 Z0) there, listed with the other port pairs
    s21_deg = -np.degrees(np.arctan(w[k] * 400e-12 / (2 * Z0)) - np.arctan(w[k] * 300e-12 / (2 * Z0)))
    assert f"S21 -0.105 dB {s21_deg:+.2g} deg" in bad.message, bad.message


def test_a_lifted_tip_fails_by_a_wide_margin_and_one_noisy_point_only_warns():
    g = series_l(F, 300e-12)
    lifted = g.copy()
    lifted[:, 1, 0] = lifted[:, 0, 1] = 1e-5  # the isolation floor, -100 dB
    lifted[:, 0, 0] = 0.99  # port 1 sees the open tip
    r = golden_match(F, lifted, Z0, spec(F_COARSE, series_l(F_COARSE, 300e-12)))
    assert r.verdict is Verdict.FAIL and r.value is not None and r.value > 4 * r.limit
    assert "S21" in r.message and "landing -100 dB" in r.message
    spike = g.copy()
    spike[100, 1, 0] *= 10 ** (-1.0 / 20)  # one point 1 dB low: limits.grade needs a run to FAIL
    w = golden_match(F, spike, Z0, spec(F_COARSE, series_l(F_COARSE, 300e-12)))
    assert w.verdict is Verdict.WARN and "S21 |S| -1 dB" in w.message and ghz_of(F[100]) in w.message


def ghz_of(f_hz: float) -> str:
    return f"{f_hz / 1e9:.4g} GHz"


def test_the_calibration_uncertainty_widens_the_tolerance():
    g = series_l(F, 300e-12)
    m = g.copy()
    m[:, 1, 0] *= 10 ** (-0.7 / 20)  # 0.7 dB low everywhere: over 0.5 dB
    tight = golden_match(F, m, Z0, spec(F, g))
    assert tight.verdict is Verdict.FAIL
    # u = 0.05 (linear) at |S21| ~0.9 widens 0.5 dB by 20 log10(1 + 0.05 / 0.9) = 0.47 dB
    loose = golden_match(F, m, Z0, spec(F, g), unc=np.full(len(F), 0.05))
    assert loose.verdict is Verdict.PASS, loose.message


def test_only_the_common_span_is_compared_and_no_overlap_is_not_applicable():
    g_lo = np.linspace(1e9, 30e9, 30)
    r = golden_match(F, series_l(F, 300e-12), Z0, spec(g_lo, series_l(g_lo, 300e-12)))
    assert r.verdict is Verdict.PASS and "compared over 1-29.71 GHz, 88 points" in r.message
    g_far = np.linspace(70e9, 110e9, 9)
    na = golden_match(F, series_l(F, 300e-12), Z0, spec(g_far, series_l(g_far, 300e-12)))
    assert na.verdict is Verdict.NA and "70-110 GHz" in na.message


def test_a_golden_file_at_another_reference_impedance_is_renormalised():
    net = skrf.Network(frequency=skrf.Frequency.from_f(F_COARSE, unit="Hz"), s=series_l(F_COARSE, 300e-12), z0=50)
    net.renormalize(25.0)  # the same device, written at 25 ohm
    r = golden_match(F, series_l(F, 300e-12), Z0, spec(F_COARSE, net.s, z0_ohm=25.0))
    assert r.verdict is Verdict.PASS and r.value is not None and r.value < 0.05


def test_run_checks_adds_the_golden_check_after_the_line_windows():
    ntwk = skrf.Network(frequency=skrf.Frequency.from_f(F, unit="Hz"), s=series_l(F, 300e-12), z0=50)
    names = [r.name for r in run_checks(ntwk, "device", Limits(), {"golden": spec(F_COARSE, series_l(F_COARSE, 300e-12))})]
    assert "golden" in names
    assert "golden" not in [r.name for r in run_checks(ntwk, "device", Limits(), {})]


# ---------------------------------------------------------------- real measured data


@pytest.fixture(scope="module")
def pcb50():
    from skrf.calibration import NISTMultilineTRL, TUGMultilineTRL

    def net(p: Path) -> skrf.Network:
        return skrf.Network(str(p))

    thru, opn = net(REAL / "mtrl" / "thru.s2p"), net(REAL / "mtrl" / "open.s2p")
    lines = {n: net(REAL / "mtrl" / f"{n}.s2p") for n in LINES50}
    lengths = [0.0] + [v * 1e-6 for v in LINES50.values()]  # extra over the thru (README)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # "no switch terms": the source's files have none
        nist = NISTMultilineTRL([thru, opn, *lines.values()], Grefls=[1], l=lengths, er_est=2.5, refl_offset=[0.0])
        nist.run()
        tug = TUGMultilineTRL(line_meas=[thru, *lines.values()], line_lengths=lengths, er_est=2.5,
                              reflect_meas=[opn], reflect_est=[1], reflect_offset=[0.0])
        tug.run()
    dut = net(REAL / "dut" / "stepped_line.s2p")
    return {"nist_dut": nist.apply_cal(dut), "tug_dut": tug.apply_cal(dut),
            "l4000": nist.apply_cal(lines["line_4000um"]), "l5500": nist.apply_cal(lines["line_5500um"])}


def test_real_dut_corrected_by_another_algorithm_matches_its_golden(pcb50):
    # golden: the stepped-line DUT after NIST multiline TRL, every 2nd point (0.5 GHz steps);
    # landing: the same raw DUT after TUG multiline TRL (README: within 0.002 of each other).
    # |S11| has four deep nulls in the band: the clamp at -15 dB and the cubic interpolation
    # must not turn them into deviations
    g, m = pcb50["nist_dut"][::2], pcb50["tug_dut"]
    r = golden_match(m.f, m.s, 50.0, spec(g.f, g.s))
    assert r.verdict is Verdict.PASS, r.message


def test_a_real_line_longer_than_its_golden_fails_on_s21_phase_by_beta_times_the_extra_length(pcb50):
    # golden: the line thru + 4.0 mm; landing: thru + 5.5 mm, corrected by the same cal.
    # Extra phase of S21 = 360 f sqrt(eps_eff) 1.5 mm / c: 13.96 degrees at 5 GHz with the
    # README's eps_eff 2.404. The board's 5.5 mm line reads 4 % long against the TRL fit
    # (its S21 phase is 1 % more than beta x 5.5 mm): allow 5 %.
    g, m = pcb50["l4000"], pcb50["l5500"]
    r = golden_match(m.f, m.s, 50.0, spec(g.f, g.s))
    assert r.verdict is Verdict.FAIL and r.unit == "deg" and "S21 phase" in r.message, r.message
    _, d_deg, _ = deviations(m.s, g.s, FLOOR_DB)
    k = int(np.argmin(np.abs(m.f - 5e9)))
    expected = -360 * 5e9 * np.sqrt(2.404) * 1.5e-3 / C0
    assert d_deg[k, 1, 0] == pytest.approx(expected, rel=0.05)


# ---------------------------------------------------------------- the plan keys


def write_golden(path: Path, f_hz: np.ndarray, s: np.ndarray) -> Path:
    net = skrf.Network(frequency=skrf.Frequency.from_f(f_hz, unit="Hz"), s=s, z0=50)
    net.write_touchstone(str(path.with_suffix("")), skrf_comment=False)
    return path


def golden_plan(extra: str) -> str:
    """The fake plan with ``extra`` keys added to its device site dev-ind."""
    text = plan_text()
    marker = 'name = "dev-ind"\n'
    assert marker in text
    return text.replace(marker, marker + extra)


def test_a_plan_reads_the_golden_file_with_default_tolerances(tmp_path):
    (tmp_path / "golden").mkdir()
    write_golden(tmp_path / "golden" / "dev-ind.s2p", F_COARSE, series_l(F_COARSE, 300e-12))
    plan = load_plan_text(golden_plan('golden_file = "golden/dev-ind.s2p"\n'), "p.toml", base_dir=tmp_path)
    gd = plan.site("dev-ind").golden
    assert gd is not None and Path(gd.file) == (tmp_path / "golden" / "dev-ind.s2p").resolve()
    assert (gd.tol_db, gd.tol_deg, gd.floor_db) == (TOL_DB, TOL_DEG, FLOOR_DB)
    import hashlib

    assert gd.sha256 == hashlib.sha256((tmp_path / "golden" / "dev-ind.s2p").read_bytes()).hexdigest()
    assert gd.s.shape == (34, 2, 2) and np.allclose(gd.s, series_l(F_COARSE, 300e-12))
    tuned = load_plan_text(golden_plan('golden_file = "golden/dev-ind.s2p"\ngolden_tol_db = 0.3\n'
                                       "golden_tol_deg = 3\ngolden_floor_db = -25\n"), "p.toml", base_dir=tmp_path)
    g2 = tuned.site("dev-ind").golden
    assert g2 is not None and (g2.tol_db, g2.tol_deg, g2.floor_db) == (0.3, 3.0, -25.0)


@pytest.mark.parametrize("extra, files, expect", [
    ('golden_file = "nothere.s2p"\n', {}, "nothere.s2p: no such file"),
    ('golden_file = "one.s1p"\n', {"one.s1p": "# GHz S RI R 50\n1 0.1 0\n2 0.1 0\n"}, "must be a 2-port"),
    ('golden_file = "bad.s2p"\n', {"bad.s2p": "# GHz S RI R 50\n1 0 0 1 0 1 0 0 0\n2 x 0 1 0 1 0 0 0\n"},
     "line 3: 'x' is not a number"),
    ('golden_file = "folder.s2p"\n', {"folder.s2p/": ""}, "is a folder"),
    ('golden_tol_db = 0.3\n', {}, "golden_tol_db: needs golden_file"),
    ('golden_file = "ok.s2p"\ngolden_tol_deg = 0\n', {"ok.s2p": None}, "golden_tol_deg: expected a number > 0"),
    ('golden_file = "ok.s2p"\ngolden_floor_db = 3\n', {"ok.s2p": None}, "golden_floor_db: expected a level below 0 dB"),
    ('golden_file = "high.s2p"\n', {"high.s2p": "# GHz S RI R 50\n70 0 0 1 0 1 0 0 0\n80 0 0 1 0 1 0 0 0\n"},
     "no common span"),
])
def test_a_bad_golden_key_or_file_is_one_line_naming_plan_line_and_key(tmp_path, extra, files, expect):
    for name, content in files.items():
        p = tmp_path / name.rstrip("/")
        if name.endswith("/"):
            p.mkdir()
        elif content is None:
            write_golden(p, F_COARSE, series_l(F_COARSE, 300e-12))
        else:
            p.write_text(content)
    text = golden_plan(extra)
    with pytest.raises(PlanError) as info:
        load_plan_text(text, "p.toml", base_dir=tmp_path)
    msg = str(info.value)
    assert "\n" not in msg and expect in msg
    key = expect.split(":")[0] if expect.startswith("golden_") else "golden_file"
    line = next(n for n, x in enumerate(text.splitlines(), start=1) if x.startswith(key))
    assert msg.startswith(f"p.toml, line {line}: site[8].{key}"), msg


# ---------------------------------------------------------------- the check command


def test_check_command_judges_a_file_against_a_golden_file(tmp_path, pcb50, capsys):
    import json

    from probelog.tui.cli import main

    def save(name: str, net: skrf.Network) -> str:
        net.write_touchstone(str(tmp_path / name), skrf_comment=False)
        return str(tmp_path / f"{name}.s2p")

    golden_dut, dut = save("nist_dut", pcb50["nist_dut"]), save("tug_dut", pcb50["tug_dut"])
    code = main(["check", dut, "--kind", "device", "--golden", golden_dut, "--json"])
    out = json.loads(capsys.readouterr().out)
    g = next(c for c in out["checks"] if c["name"] == "golden")
    assert g["verdict"] == "pass", g["message"]
    # the 5.5 mm line against the 4 mm line as golden: S21 phase, beta x 1.5 mm (as above)
    golden_line, line = save("l4000", pcb50["l4000"]), save("l5500", pcb50["l5500"])
    code = main(["check", line, "--kind", "device", "--golden", golden_line, "--golden-tol-deg", "20", "--json"])
    out = json.loads(capsys.readouterr().out)
    g = next(c for c in out["checks"] if c["name"] == "golden")
    assert code == 1 and g["verdict"] == "fail" and "S21 phase" in g["message"] and g["limit"] == 20.0
    code = main(["check", line, "--golden", str(tmp_path / "none.s2p")])
    assert code == 2 and "none.s2p: no such file" in capsys.readouterr().err
    code = main(["check", line, "--golden-tol-db", "0.3"])
    assert code == 2 and "--golden-tol-db needs --golden" in capsys.readouterr().err
