"""The simulated bench's physics against outside references: closed-form CPW
formulas, Pozar's line ABCD, the two-line method, passivity / reciprocity /
Foster, scikit-rf's 8-term calibration, and trade numbers (marked as such)."""

import numpy as np
import pytest
import skrf
from scipy.special import ellipk

from probelog.drivers.simbench import SimBench
from probelog.drivers.simbench.chip import load_chip
from probelog.drivers.simbench.errorbox import error_model, raw_from_true
from probelog.drivers.simbench.faults import (
    HIGH_RC_OHM, SKATE_C_FF, SKATE_L_PH, FaultBook, FaultSpecError, apply_contact_faults, parse_fault,
)
from probelog.drivers.simbench.impairments import add_noise
from probelog.drivers.simbench.physics import NOMINAL, SiteModel, line_model

C0 = 299_792_458.0
CHIP = load_chip()
DIE = (4, 4)


def kk(k):
    """K(k)/K'(k); scipy's ellipk takes m = k^2."""
    return ellipk(k * k) / ellipk(1 - k * k)


def cpw_finite(w, s, h, er):
    """Ghione & Naldi, Electron. Lett. 20(4), 1984; Simons 2001 ch. 2 (t = 0)."""
    k1 = w / (w + 2 * s)
    k2 = np.sinh(np.pi * w / (4 * h)) / np.sinh(np.pi * (w + 2 * s) / (4 * h))
    ee = 1 + (er - 1) / 2 * kk(k2) / kk(k1)
    return 30 * np.pi / np.sqrt(ee) / kk(k1), ee


def cpw_backed(w, s, h, er):
    """Ghione & Naldi, Electron. Lett. 19(18), 1983: conductor-backed CPW."""
    k1 = w / (w + 2 * s)
    k3 = np.tanh(np.pi * w / (4 * h)) / np.tanh(np.pi * (w + 2 * s) / (4 * h))
    q1, q3 = kk(k1), kk(k3)
    ee = (q1 + er * q3) / (q1 + q3)
    return 60 * np.pi / np.sqrt(ee) / (q1 + q3), ee


def test_reference_formulas_reproduce_published_values():
    # REFERENCES.md, verified values: Si 10/6/300 um, eps_r 11.7 -> 50.439 ohm / 6.3488
    z, e = cpw_finite(10, 6, 300, 11.7)
    assert z == pytest.approx(50.439, abs=2e-3) and e == pytest.approx(6.3488, abs=2e-4)
    # GaAs 50/35/100, 12.9, conductor-backed -> 46.696 ohm / 7.2650
    z, e = cpw_backed(50, 35, 100, 12.9)
    assert z == pytest.approx(46.696, abs=2e-3) and e == pytest.approx(7.2650, abs=2e-4)


LINE_SITES = [s for s in CHIP.sites if s.kind in ("line", "thru", "open-stub", "short-stub")]


@pytest.mark.parametrize("site", [s for s in LINE_SITES if s.line_type in ("cpw", "gcpw")], ids=lambda s: s.name)
def test_line_z0_and_eps_eff_match_closed_form(site):
    f = np.array([1e9])
    m = line_model(site, CHIP, f, NOMINAL)
    p, metal = CHIP.process, CHIP.metals[site.metal]
    if site.line_type == "cpw":
        z, e = cpw_finite(site.width_um, site.gap_um, p["substrate_h_um"], p["substrate_eps_r"])
    else:
        z, e = cpw_backed(site.width_um, site.gap_um, metal["ground_height_um"], p["oxide_eps_r"])
    # skrf's CPW uses eta0/4 instead of 30 pi: 0.069 % lower Z0 (REFERENCES.md)
    assert m.z0_lossless[0] == pytest.approx(z, rel=1.5e-3)
    assert m.eps_eff_lossless[0] == pytest.approx(e, rel=5e-4)


@pytest.mark.parametrize("site", [s for s in LINE_SITES if s.line_type == "swl"], ids=lambda s: s.name)
def test_slow_wave_line_combines_air_inductance_with_shield_capacitance(site):
    p, metal = CHIP.process, CHIP.metals[site.metal]
    # L from the CPW in air, Z0_air = 30 pi K'/K (Wen, IEEE T-MTT 17(12), 1969): L = Z0_air / c
    k1 = site.width_um / (site.width_um + 2 * site.gap_um)
    L = 30 * np.pi / kk(k1) / C0
    zb, eb = cpw_backed(site.width_um, site.gap_um, metal["shield_height_um"], p["oxide_eps_r"])
    C = np.sqrt(eb) / (C0 * zb)
    m = line_model(site, CHIP, np.array([1e9]), NOMINAL)
    assert m.z0_lossless[0] == pytest.approx(np.sqrt(L / C), rel=2e-3)
    assert m.eps_eff_lossless[0] == pytest.approx(C0**2 * L * C, rel=2e-3)
    # slow wave: slower than the same strip over a plain ground at the metal's ground height
    _, e_plain = cpw_backed(site.width_um, site.gap_um, metal["ground_height_um"], p["oxide_eps_r"])
    assert m.eps_eff_lossless[0] > 1.5 * e_plain


def test_metal_level_changes_gcpw_and_swl_but_loss_for_all():
    f = np.array([5e9])
    m6 = {t: line_model(CHIP.site(f"ln-{t}-m6-r2-l500"), CHIP, f) for t in ("cpw", "gcpw", "swl")}
    m9 = {t: line_model(CHIP.site(f"ln-{t}-m9-r2-l500"), CHIP, f) for t in ("cpw", "gcpw", "swl")}
    for t in ("gcpw", "swl"):  # nearer the ground / shield: lower Z0, slower
        assert m6[t].z0_lossless[0] < 0.9 * m9[t].z0_lossless[0]
        assert m6[t].eps_eff_lossless[0] > m9[t].eps_eff_lossless[0]
    # thin M6 has more series resistance than thick M9 (R_dc = 1 / (sigma W t))
    z6, z9 = m6["cpw"].series_z(f), m9["cpw"].series_z(f)
    assert z6.real[0] > 1.5 * z9.real[0]


def test_line_abcd_is_pozars():
    site = CHIP.site("ln-swl-m9-r2-l1500")
    f = np.linspace(1e9, 110e9, 57)
    model = SiteModel(CHIP)
    a = model.line_abcd(site, f)
    g, z = line_model(site, CHIP, f).gamma_zc(f)
    gl = g * site.length_um * 1e-6
    # Pozar 4th ed. Table 4.1: [[cosh gl, Z0 sinh gl], [sinh gl / Z0, cosh gl]]
    ref = np.stack([np.stack([np.cosh(gl), z * np.sinh(gl)], -1), np.stack([np.sinh(gl) / z, np.cosh(gl)], -1)], -2)
    assert np.allclose(a, ref, rtol=1e-12, atol=1e-12)
    # causal gamma (not skrf's default 1j): beta grows with f, alpha > 0
    assert np.all(np.diff(g.imag) > 0) and np.all(g.real > 0)


def test_two_line_method_recovers_slow_wave_and_loss_through_the_pads():
    """Engen & Hoer 1979 / Marks 1991: eigenvalues of T2 inv(T1) are e^{-+ gamma dl}."""
    f = np.linspace(2e9, 110e9, 109)
    with_pads = {}
    for name in ("ln-cpw-m9-r2-l500", "ln-cpw-m9-r2-l1500"):
        sm = SiteModel(CHIP)
        with_pads[name] = skrf.network.s2t(sm.site_s(CHIP.site(name), f))
    ev = np.linalg.eigvals(with_pads["ln-cpw-m9-r2-l1500"] @ np.linalg.inv(with_pads["ln-cpw-m9-r2-l500"]))
    e = ev[np.arange(len(f)), np.argmax(np.abs(ev), axis=1)]  # e^{+gamma dl}, |.| > 1
    dl = 1e-3
    alpha = np.log(np.abs(e)) / dl
    beta = np.unwrap(np.angle(e)) / dl
    eps = (beta * C0 / (2 * np.pi * f)) ** 2
    model = line_model(CHIP.site("ln-cpw-m9-r2-l500"), CHIP, f)
    gamma, _ = model.gamma_zc(f)
    # the pads drop out: what the sites hold is pad + line + pad
    assert np.allclose(alpha + 1j * beta, gamma, rtol=1e-6)
    # above quasi-static by the skin-effect internal inductance, which fades as 1/sqrt(f)
    excess = eps / model.eps_eff_lossless - 1
    assert np.all(excess > 0) and np.all(np.diff(excess) < 0) and excess[-1] < 0.05
    # skin effect: conductor loss grows roughly as sqrt(f) (plus a flat substrate part)
    ratio = alpha[-1] / alpha[26]  # 110 GHz over 28 GHz
    assert 1.2 < ratio < 2.0


def _every_site():
    return [s.name for s in CHIP.sites] + [None]


@pytest.mark.parametrize("die", [(4, 4), (1, 1), (7, 2)])
def test_every_true_site_is_passive_and_reciprocal(die):
    f = np.linspace(10e6, 110e9, 301)
    bench = SimBench(seed=11)
    for name in _every_site():
        s = bench.site_network(die, name, f).s
        # passive iff sigma_max(S) <= 1 (REFERENCES.md, passivity)
        assert np.linalg.svd(s, compute_uv=False)[:, 0].max() <= 1 + 1e-12, name
        assert np.abs(s - s.transpose(0, 2, 1)).max() < 1e-12, name


@pytest.mark.parametrize("name", ["cal-open", "cal-short", "ver-ostub", "ver-sstub", None])
def test_reflects_rotate_clockwise(name):
    """Foster (Bell Syst. Tech. J. 3, 1924): Gamma of a (nearly) lossless one-port turns clockwise."""
    f = np.linspace(10e6, 110e9, 2001)
    s = SimBench(seed=5).site_network(DIE, name, f).s
    for port in (0, 1):
        phase = np.unwrap(np.angle(s[:, port, port]))
        assert np.all(np.diff(phase) < 0), (name, port)


def test_reflect_pairs_are_isolated():
    f = np.linspace(10e6, 110e9, 201)
    for name in ("cal-open", "cal-short", "cal-load", "ver-ostub", "ver-sstub"):
        s = SimBench(seed=5).site_network(DIE, name, f).s
        # two copies, one per port: crosstalk only (-60 dB-ish, common practice, no source)
        assert 20 * np.log10(np.abs(s[:, 1, 0]).max()) < -55, name


def test_load_trim_within_half_percent_and_open_capacitance_a_few_ff():
    f = np.array([100e6])
    bench = SimBench(seed=2)
    for die in CHIP.dies():
        g = bench.site_network(die, "cal-load", f).s[0, 0, 0]
        r = (50 * (1 + g) / (1 - g)).real
        # load trimmed to 50 ohm +-0.5 % (common practice, no source), plus pad R
        assert abs(r - 50.0) < 0.26 + CHIP.process["pad_r_ohm"]
    w = 2 * np.pi * 1e9
    g = bench.site_network(DIE, None, np.array([1e9])).s[0, 0, 0]
    c_air = (((1 - g) / (1 + g)) / 50).imag / w
    # tips in air: open-like with a few fF (REFERENCES.md, trade numbers)
    assert 1e-15 < c_air < 10e-15


def test_error_box_insertion_loss_near_one_db_at_60ghz():
    em = error_model(np.array([40e9, 60e9, 110e9]), seed=0)
    for box in (em.x, em.y):
        il = -20 * np.log10(np.abs(box[:, 1, 0]))
        # GSG probe ~0.5-0.8 dB at 40 GHz, ~1 dB at 60-67 GHz, 1.5-2.5 dB at 110 GHz (common practice, no source)
        assert 0.5 <= il[0] <= 0.9
        assert 0.8 <= il[1] <= 1.3
        assert 1.3 <= il[2] <= 2.5
        assert np.allclose(box[:, 0, 1], box[:, 1, 0])  # reciprocal


def test_raw_data_follow_skrf_eight_term_model_with_switch_terms():
    """skrf's EightTerm, given raw standards from our model, must recover a DUT."""
    f = np.linspace(1e9, 110e9, 41)
    freq = skrf.Frequency.from_f(f, unit="Hz")
    em = error_model(f, seed=4)
    n = len(f)

    def pair(g):
        s = np.zeros((n, 2, 2), complex)
        s[:, 0, 0] = s[:, 1, 1] = g
        return s

    thru = np.zeros((n, 2, 2), complex)
    thru[:, 0, 1] = thru[:, 1, 0] = 1
    ideals = [pair(-1), pair(1), pair(0), thru]
    net = lambda s: skrf.Network(frequency=freq, s=s)  # noqa: E731
    measured = [net(raw_from_true(s, em)) for s in ideals]
    cal = skrf.calibration.EightTerm(
        ideals=[net(s) for s in ideals], measured=measured,
        switch_terms=(net(em.gamma_f.reshape(-1, 1, 1)), net(em.gamma_r.reshape(-1, 1, 1))),
    )
    dut = SimBench(seed=4).site_network(DIE, "dev-ind", f)
    corrected = cal.apply_cal(net(raw_from_true(dut.s, em)))
    assert np.abs(corrected.s - dut.s).max() < 1e-9


def test_trace_noise_level_and_ifbw_scaling():
    rng = np.random.default_rng(1)
    s = np.full((20001, 2, 2), 0.8 * np.exp(0.3j))
    for ifbw, k in ((1e3, 1.0), (10e3, np.sqrt(10))):
        noisy = add_noise(s, rng, ifbw, -10.0)
        ddb = 20 * np.log10(np.abs(noisy / s))
        dph = np.degrees(np.angle(noisy / s))
        # 0.002 dB / 0.02 deg rms at 1 kHz, x sqrt(IFBW) (common practice, no source)
        assert np.sqrt(np.mean(ddb**2)) == pytest.approx(0.002 * k, rel=0.05)
        assert np.sqrt(np.mean(dph**2)) == pytest.approx(0.02 * k, rel=0.05)


def test_noise_floor_follows_power():
    rng = np.random.default_rng(2)
    zero = np.zeros((20001, 2, 2), complex)
    for p, floor_dbc in ((-10.0, -90.0), (-30.0, -70.0)):
        rms = np.sqrt(np.mean(np.abs(add_noise(zero, rng, 1e3, p)) ** 2))
        assert 20 * np.log10(rms) == pytest.approx(floor_dbc, abs=0.2)


def test_drift_grows_with_time_at_the_stated_rate():
    f = np.array([55e9, 110e9])
    bench = SimBench(seed=3)
    before = bench.raw_network(DIE, "cal-thru", f, noise=False).s[:, 1, 0]
    steps = []
    for _ in range(2):
        bench.advance_clock(3600.0)
        after = bench.raw_network(DIE, "cal-thru", f, noise=False).s[:, 1, 0]
        steps.append((20 * np.log10(np.abs(after / before)), np.degrees(np.angle(after / before))))
    (db1, ph1), (db2, ph2) = steps
    # 0.02 dB and 0.3 deg per hour at 110 GHz (common practice, no source), proportional to f
    assert abs(db1[1]) == pytest.approx(0.02, rel=0.05) and abs(ph1[1]) == pytest.approx(0.3, rel=0.05)
    assert abs(db1[0]) == pytest.approx(0.01, rel=0.05)
    assert abs(db2[1]) == pytest.approx(2 * abs(db1[1]), rel=0.02)
    assert abs(ph2[1]) == pytest.approx(2 * abs(ph1[1]), rel=0.02)


def test_process_variation_is_small_and_seeded():
    f = np.array([20e9])
    site = "ln-cpw-m9-r2-l1500"
    s21 = lambda seed: np.array([SimBench(seed=seed).site_network(d, site, f).s[0, 1, 0] for d in CHIP.dies()])  # noqa: E731
    a, b, c = s21(1), s21(1), s21(2)
    assert np.array_equal(a, b) and not np.array_equal(a, c)
    db = 20 * np.log10(np.abs(a))
    assert 0.005 < np.ptp(db) < 0.2  # visible on a wafer map, small against the loss


# ---- faults ---------------------------------------------------------------------------------


def _faulted(kinds, site, f, die=DIE):
    model = SiteModel(CHIP)
    return apply_contact_faults(model.site_s(CHIP.site(site) if site else None, f), kinds, model, f, die)


def test_lifted_tip_looks_like_an_open_on_a_line():
    f = np.linspace(1e9, 110e9, 201)
    s = _faulted(("lifted-1",), "ln-cpw-m9-r2-l500", f)
    # REFERENCES.md trade numbers: tips in air |S11| within 0.1-0.3 dB of 0 dB, |S21| < -40 dB
    assert np.all(20 * np.log10(np.abs(s[:, 0, 0])) > -0.3)
    assert np.all(20 * np.log10(np.abs(s[:, 1, 0])) < -40)
    assert np.all(np.diff(np.unwrap(np.angle(s[:, 0, 0]))) < 0)  # capacitive, clockwise
    both = _faulted(("lifted",), "ln-cpw-m9-r2-l500", f)
    assert np.all(20 * np.log10(np.abs(both[:, 1, 1])) > -0.3)


def test_high_contact_resistance_shows_in_a_short():
    f = np.array([100e6])
    s = _faulted(("high-rc",), "cal-short", f)[0, 0, 0]
    good = _faulted((), "cal-short", f)[0, 0, 0]
    r = lambda g: (50 * (1 + g) / (1 - g)).real  # noqa: E731
    assert r(s) - r(good) == pytest.approx(HIGH_RC_OHM, rel=0.01)


def test_skated_ground_tip_resonates_in_band():
    f = np.linspace(1e9, 110e9, 2001)
    s = _faulted(("skate",), "cal-thru", f)
    f_res = 1 / (2 * np.pi * np.sqrt(SKATE_L_PH * 1e-12 * SKATE_C_FF * 1e-15))  # LC resonance
    i = np.argmin(np.abs(s[:, 1, 0]))
    assert f[i] == pytest.approx(f_res, rel=0.1)
    assert 20 * np.log10(np.abs(s[i, 1, 0])) < -6


def test_dead_die_is_open_or_short_everywhere():
    f = np.linspace(1e9, 67e9, 67)
    for die in ((4, 4), (4, 5)):
        s = _faulted(("dead-die",), "ln-gcpw-m9-r2-l500", f, die)
        assert np.all(20 * np.log10(np.abs(s[:, 1, 0])) < -40)
        assert np.all(20 * np.log10(np.abs(s[:, 0, 0])) > -0.5)


def test_fault_spec_parsing_and_counts():
    names = {s.name for s in CHIP.sites}
    f = parse_fault("lifted-1@4,4:ln-cpw-m9-r2-l500", names)
    assert (f.kind, f.die, f.site, f.count) == ("lifted-1", (4, 4), "ln-cpw-m9-r2-l500", 1)
    assert parse_fault("drop").die is None and parse_fault("dead-die@2,3#all").count is None
    assert parse_fault("skate@*:cal-thru#3").count == 3
    for bad, words in (("lifted-7@4,4", "unknown kind"), ("lifted-1@4:cal-thru", "COL,ROW"),
                       ("lifted-1@4,4:nowhere", "no site named"), ("drop#x", "count"), ("", "empty")):
        with pytest.raises(FaultSpecError, match=words):
            parse_fault(bad, names)
    book = FaultBook([parse_fault("lifted-1@4,4:cal-thru#2"), parse_fault("skate")])
    assert book.landing((4, 4), "cal-thru") == ("lifted-1", "skate")
    assert book.landing((3, 3), "cal-thru") == ()
    assert book.landing((4, 4), "cal-thru") == ("lifted-1",)
    assert book.landing((4, 4), "cal-thru") == ()
