"""Calibration and verdicts on real measured data (tests/data/realdata, BSD 3-Clause;
source, figures and licences in tests/data/realdata/README.md and licences/).

Outside references: scikit-rf 2.2.0's NISTMultilineTRL on the same inputs; the
figures of the README ("scikit-rf results" and "Reference figures in the
sources": eps_eff, loss in dB/mm, the DUT's |S11| nulls read from the published
figure of github.com/ZiadHatab/thru-free-multiline-calibration Images/result_1.png
and github.com/ZiadHatab/srm-calibration Images/ms_dut_srm_vs_trl.png).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import skrf
from skrf.calibration import NISTMultilineTRL

from probelog import calibration as cal
from probelog.cal_guard import continuity
from probelog.calkit import ideal_thru, kit_from_mapping
from probelog.checks import Limits, run_checks
from probelog.limits import cal_uncertainty, verification_residual
from probelog.verdicts import Verdict

DATA = Path(__file__).parent / "data" / "realdata"
P150 = DATA / "mstrip_probed_150ghz" / "switch_corrected"
P50 = DATA / "mstrip_pcb_50ghz" / "mtrl"
LINES150 = {"line_0500um": 500.0, "line_1000um": 1000.0, "line_1500um": 1500.0, "line_2000um": 2000.0,
            "line_3000um": 3000.0, "line_5000um": 5000.0, "line_6500um": 6500.0}
LINES50 = {"line_0500um": 500.0, "line_4000um": 4000.0, "line_5500um": 5500.0, "line_6500um": 6500.0,
           "line_8500um": 8500.0}


def _net(p: Path) -> skrf.Network:
    return skrf.Network(str(p))


def _kit(lines: dict[str, float], reflect: str, offset_um: float):
    # thru length 0: the sources give line lengths as the extra over the thru (README)
    return kit_from_mapping({
        "name": "realdata", "reference_impedance_ohm": 50.0, "eps_eff": 2.5, "open_c_f": [0.0],
        "short_l_h": [0.0], "load_r_ohm": 50.0, "load_l_h": 0.0, "thru_length_um": 0.0,
        "mtrl_reflect": reflect, "reflect_offset_um": offset_um,
        "sites": {"thru": "thru", reflect: reflect},
        "lines": {n: {"length_um": length, "site": n} for n, length in lines.items()},
    }, "realdata kit")


@pytest.fixture(scope="module")
def m150():
    return {n: _net(P150 / f"{n}.s2p") for n in ["thru", "open", "short", "dut_stepped_30ohm", *LINES150]}


@pytest.fixture(scope="module")
def cal150(m150):
    return cal.solve("mtrl", m150, _kit(LINES150, "open", -2650.0))


@pytest.fixture(scope="module")
def m50():
    out = {n: _net(P50 / f"{n}.s2p") for n in ["thru", "open", *LINES50]}
    out["dut"] = _net(DATA / "mstrip_pcb_50ghz" / "dut" / "stepped_line.s2p")
    return out


@pytest.fixture(scope="module")
def cal50(m50):
    return cal.solve("mtrl", m50, _kit(LINES50, "open", 0.0))


def test_our_multiline_trl_matches_scikit_rf_on_the_same_inputs(m150, cal150):
    ref = NISTMultilineTRL([m150["thru"], m150["open"]] + [m150[n] for n in LINES150], Grefls=[1],
                           l=[0.0] + [v * 1e-6 for v in LINES150.values()], er_est=2.5, refl_offset=[-2.65e-3])
    ref.run()
    dut = m150["dut_stepped_30ohm"]
    assert np.max(np.abs(cal150.apply(dut).s - ref.apply_cal(dut).s)) < 1e-9


@pytest.mark.parametrize("ghz,eps,loss", [(10, 2.387, 0.025), (40, 2.372, 0.057), (90, 2.387, 0.113),
                                          (150, 2.415, 0.191)])
def test_eps_eff_and_loss_150ghz_match_the_readme(cal150, ghz, eps, loss):
    # README "scikit-rf results", probed kit table
    i = int(np.argmin(np.abs(cal150.frequency.f - ghz * 1e9)))
    assert np.real(cal150.cal.er_eff[i]) == pytest.approx(eps, abs=0.002)
    assert 8.685889638 * np.real(cal150.cal.gamma[i]) / 1000 == pytest.approx(loss, abs=0.002)


@pytest.mark.parametrize("ghz,eps,loss", [(5, 2.404, 0.0054), (20, 2.394, 0.0198), (50, 2.413, 0.0482)])
def test_eps_eff_and_loss_50ghz_match_the_readme(cal50, ghz, eps, loss):
    i = int(np.argmin(np.abs(cal50.frequency.f - ghz * 1e9)))
    assert np.real(cal50.cal.er_eff[i]) == pytest.approx(eps, abs=0.002)
    assert 8.685889638 * np.real(cal50.cal.gamma[i]) / 1000 == pytest.approx(loss, abs=0.001)


def _nulls(f, s11_db, below_db=-15.0):
    """Local minima of |S11| deeper than below_db (GHz)."""
    m = (s11_db[1:-1] < s11_db[:-2]) & (s11_db[1:-1] < s11_db[2:]) & (s11_db[1:-1] < below_db)
    return f[1:-1][m] / 1e9


def test_dut_s11_nulls_at_the_published_positions(m150, cal150, m50, cal50):
    d = cal150.apply(m150["dut_stepped_30ohm"])
    nulls = _nulls(d.f, 20 * np.log10(np.abs(d.s[:, 0, 0])))
    for pub in (15.5, 31.0, 46.0, 61.5, 77.0):  # Images/result_1.png, read from the figure
        assert np.min(np.abs(nulls - pub)) <= 1.0, (pub, nulls)
    d = cal50.apply(m50["dut"])
    nulls = _nulls(d.f, 20 * np.log10(np.abs(d.s[:, 0, 0])))
    for pub in (11.7, 23.7, 35.7, 47.5):  # Images/ms_dut_srm_vs_trl.png
        assert np.min(np.abs(nulls - pub)) <= 0.5, (pub, nulls)


def test_wrong_reflect_offset_is_refused_right_ones_accepted(m150):
    # README "Reflect position": the short at 0 flips the root from 51.5 GHz up;
    # at +0.5 mm (or the open at -2.65 mm) the roots are right at every point
    with pytest.raises(cal.CalibrationError, match=r"51\.5 GHz") as err:
        cal.solve("mtrl", m150, _kit(LINES150, "short", 0.0))
    assert "\n" not in str(err.value)
    with pytest.raises(cal.CalibrationError, match="jumps by 180 deg"):
        cal.solve("mtrl", m150, _kit(LINES150, "open", 0.0))  # flips over 9-136 GHz
    ok = cal.solve("mtrl", m150, _kit(LINES150, "short", 500.0))
    assert ok.method == "mtrl"


def test_continuity_passes_a_smooth_reflect_fails_a_flipped_one():
    f = np.linspace(1e9, 150e9, 299)
    s = np.zeros((299, 1, 1), complex)
    s[:, 0, 0] = np.exp(-2j * np.pi * f * 20e-12)  # an open 10 ps away: smooth
    assert continuity(f, s, "open").verdict is Verdict.PASS
    s[150:] *= -1  # the other root from 75.5 GHz up
    r = continuity(f, s, "open")
    assert r.verdict is Verdict.FAIL and "75.5 GHz" in r.message


def _unc(corrected_thru, bound=None):
    """u(f): the verification residual of the corrected thru and, where two valid
    cal sets exist, their agreement bound (probelog.limits)."""
    ideal = np.zeros_like(corrected_thru.s)
    ideal[:, 0, 1] = ideal[:, 1, 0] = 1.0  # a zero-length thru at the thru centre
    return cal_uncertainty(len(corrected_thru.f), agreement_bound=bound,
                           residual=verification_residual(corrected_thru.s, ideal))


@pytest.fixture(scope="module")
def bound150(m150, cal150):
    # the probed kit has two reflects whose positions the README gives (open at -2.65 mm,
    # short at +0.5 mm): the two cal sets' worst-case difference is the cal's uncertainty
    other = cal.solve("mtrl", m150, _kit(LINES150, "short", 500.0))
    return cal.agreement(cal150, other).bound


@pytest.mark.parametrize("which", ["m150", "m50"])
def test_no_fail_on_good_corrected_lines_thrus_and_reflects(request, which):
    meas = request.getfixturevalue(which)
    calset = request.getfixturevalue("cal150" if which == "m150" else "cal50")
    lines = LINES150 if which == "m150" else LINES50
    bound = request.getfixturevalue("bound150") if which == "m150" else None
    unc = _unc(calset.apply(meas["thru"]), bound)
    verdicts = {}
    for name in ["thru", *lines]:
        out = run_checks(calset.apply(meas[name]), "line", Limits(), {"symmetric": True}, unc=unc)
        verdicts[name] = {r.name: r.verdict for r in out}
        assert all(r.verdict is not Verdict.FAIL for r in out), (name, [r.message for r in out if r.verdict is Verdict.FAIL])
    # the reflects. The 50 GHz open sits at the thru centre: an open there. The 150 GHz
    # open sits 2.65 mm towards the probes (README), behind the reference plane, so it is
    # not a passive structure at the thru centre; its short sits 0.5 mm away from the
    # probes: a 500 um short stub at the centre, judged as one.
    if which == "m50":
        out = run_checks(calset.apply(meas["open"]), "open", Limits(), unc=unc)
    else:
        out = run_checks(calset.apply(meas["short"]), "short-stub", Limits(),
                         {"length_um": 500.0, "eps_eff_window": [2.3, 2.5]}, unc=unc)
    assert all(r.verdict is not Verdict.FAIL for r in out), [r.message for r in out]


def test_fail_on_derived_bad_landings_port_reflection_replaced_by_the_measured_open(m150, cal150, bound150):
    raw_open, raw_short = m150["open"], m150["short"]
    unc = _unc(cal150.apply(m150["thru"]), bound150)
    for name in ("line_1000um", "dut_stepped_30ohm"):
        for port in (0, 1):
            bad = m150[name].copy()
            bad.s[:, port, port] = raw_open.s[:, port, port]
            out = run_checks(cal150.apply(bad), "line" if name != "dut_stepped_30ohm" else "device", Limits(),
                             {"symmetric": name != "dut_stepped_30ohm"}, unc=unc, raw=bad,
                             raw_open=raw_open, raw_short=raw_short)
            contact = next(r for r in out if r.name == "contact")
            assert contact.verdict is Verdict.FAIL and f"port {port + 1}" in contact.message, contact.message


def test_ideal_thru_with_loss_and_impedance_matches_scikit_rf_media():
    kit = kit_from_mapping({
        "name": "k", "reference_impedance_ohm": 50.0, "eps_eff": 6.35, "open_c_f": [0.0], "short_l_h": [0.0],
        "load_r_ohm": 50.0, "load_l_h": 0.0, "thru_length_um": 100.0, "sites": {},
        "thru_loss_db": 0.082, "thru_loss_ref_hz": 110e9, "thru_z0_ohm": 51.0}, "k")
    freq = skrf.Frequency.from_f(np.linspace(1e9, 110e9, 11), unit="Hz")
    alpha = 0.082 / 8.685889638 * np.sqrt(freq.f / 110e9) / 100e-6          # Np/m
    beta = 2 * np.pi * freq.f * kit.thru_delay_s / 100e-6
    media = skrf.media.DefinedGammaZ0(freq, z0_port=50.0, z0=51.0, gamma=alpha + 1j * beta)
    assert np.max(np.abs(ideal_thru(kit, freq).s - media.line(100e-6, "m").s)) < 1e-12


@pytest.mark.parametrize("key,value", [("thru_z0_ohm", 0.0), ("thru_loss_db", -0.1), ("reflect_offset_um", float("nan"))])
def test_new_kit_keys_refuse_non_physical_values(key, value):
    from probelog.calkit import KitError

    base = {"name": "k", "reference_impedance_ohm": 50.0, "eps_eff": 6.35, "open_c_f": [0.0], "short_l_h": [0.0],
            "load_r_ohm": 50.0, "load_l_h": 0.0, "thru_length_um": 100.0, "sites": {}}
    with pytest.raises(KitError, match=key):
        kit_from_mapping({**base, key: value}, "k.toml")
