"""Quick checks: each passes on a physically right sweep and fails for the right reason.

Sweeps are built with scikit-rf media from circuit physics (Pozar, Microwave
Engineering, 4th ed.); limits are probelog's defaults unless a test says otherwise.
"""

import numpy as np
import pytest
import skrf

from probelog.checks import (
    CHECK_NAMES,
    Limits,
    contact,
    drift,
    line_window,
    passivity,
    reciprocity,
    repeatability,
    rotation,
    run_checks,
    symmetry,
)
from probelog.verdicts import Verdict

C0 = 299_792_458.0
LIM = Limits()


def medium(f: skrf.Frequency, eps_eff: float = 6.0, alpha_np_per_m: float = 20.0, z0: float = 50.0):
    # causal gamma = alpha + j w sqrt(eps_eff)/c (REFERENCES.md: DefinedGammaZ0's default gamma breaks Foster)
    gamma = alpha_np_per_m + 1j * 2 * np.pi * f.f * np.sqrt(eps_eff) / C0
    return skrf.media.DefinedGammaZ0(f, z0_port=50, z0=z0, gamma=gamma)


def pair(a: skrf.Network, b: skrf.Network | None = None) -> skrf.Network:
    """A reflect-type site as measured: each port on its own copy, S21 = 0 (isolation)."""
    return skrf.network.two_port_reflect(a, a if b is None else b)


@pytest.fixture(scope="module")
def f():
    return skrf.Frequency(1, 110, 1091, "GHz")


@pytest.fixture(scope="module")
def med(f):
    return medium(f)


def lifted(med) -> skrf.Network:
    """Tip in air: an open with a few fF (REFERENCES.md trade numbers, common practice)."""
    return med.shunt_capacitor(5e-15) ** med.open()


def check(result, verdict, name):
    assert result.name == name
    assert result.verdict is verdict, result.message
    assert result.message


# ---------------------------------------------------------------- limits


def test_limits_override_and_reject_unknown_keys():
    lim = Limits.from_mapping({"passivity_fail": 0.05, "short_r_fail_ohm": 2}, "plan.toml [limits]")
    assert lim.passivity_fail == 0.05 and lim.short_r_fail_ohm == 2.0
    assert lim.passivity_warn == Limits().passivity_warn
    with pytest.raises(ValueError, match=r"plan.toml \[limits\]: unknown limit 'pasivity_fail'"):
        Limits.from_mapping({"pasivity_fail": 0.05}, "plan.toml [limits]")
    with pytest.raises(ValueError, match="'rotation_fail_deg' must be a finite number"):
        Limits.from_mapping({"rotation_fail_deg": "two"}, "plan.toml [limits]")


# ---------------------------------------------------------------- contact


def test_contact_on_open_tip_in_air_not_told_a_short_checked_as_open_fails(f, med):
    r = contact(f.f, pair(med.open()).s, "open", LIM)
    check(r, Verdict.NA, "contact")
    assert "tip in the air would too" in r.message
    r = contact(f.f, pair(med.short()).s, "open", LIM)  # skrf media short: S = -1
    check(r, Verdict.FAIL, "contact")
    assert "should read as a open" in r.message or "reads as a short" in r.message
    check(contact(f.f, med.line(1e-3, "m").s, "device", LIM), Verdict.NA, "contact")


def test_contact_resistance_of_a_short(f, med):
    # a series R before an ideal short has Z = R (Pozar 4th ed. Table 4.1), so Re(Z) reads R
    good = pair(med.inductor(5e-12) ** med.short())
    r = contact(f.f, good.s, "short", LIM)
    check(r, Verdict.PASS, "contact")
    assert r.value == pytest.approx(0.0, abs=1e-9)
    warm = pair(med.short(), med.resistor(0.7) ** med.short())
    check(contact(f.f, warm.s, "short", LIM), Verdict.WARN, "contact")
    bad = contact(f.f, pair(med.short(), med.resistor(2.0) ** med.short()).s, "short", LIM)
    check(bad, Verdict.FAIL, "contact")
    assert bad.value == pytest.approx(2.0, rel=1e-9) and "port 2" in bad.message and bad.unit == "ohm"


def test_short_that_reads_as_an_open(f, med):
    r = contact(f.f, pair(lifted(med), med.short()).s, "short", LIM)
    check(r, Verdict.FAIL, "contact")
    assert "port 1" in r.message and "reads as an open" in r.message


def test_lifted_tip_on_a_load(f, med):
    # load trimmed within 0.5 % plus 10 pH (trade numbers, common practice): return loss well above 15 dB
    load = med.resistor(50.2) ** med.inductor(10e-12) ** med.short()
    check(contact(f.f, pair(load).s, "load", LIM), Verdict.PASS, "contact")
    # 80 ohm: |Gamma| = 30/130 -> -12.7 dB, worse than 15 dB return loss (Pozar eq. 2.35)
    poor = contact(f.f, pair(load, med.resistor(80) ** med.short()).s, "load", LIM)
    check(poor, Verdict.WARN, "contact")
    assert poor.value == pytest.approx(20 * np.log10(30 / 130), abs=1e-9)
    r = contact(f.f, pair(load, lifted(med)).s, "load", LIM)
    check(r, Verdict.FAIL, "contact")
    assert "port 2" in r.message and r.value > -0.01


def test_lifted_tip_on_a_thru_and_a_line(f, med):
    thru = med.line(100e-6, "m")
    check(contact(f.f, thru.s, "thru", LIM), Verdict.PASS, "contact")
    check(contact(f.f, med.line(1.5e-3, "m").s, "line", LIM), Verdict.PASS, "contact")
    # port 2 in air: nothing gets through and both ports see a reflection
    broken = skrf.network.connect(thru, 1, skrf.network.two_port_reflect(lifted(med), med.match()), 0)
    r = contact(f.f, broken.s, "line", LIM)
    check(r, Verdict.FAIL, "contact")
    check(contact(f.f, broken.s, "thru", LIM), Verdict.FAIL, "contact")


def test_open_stub_needs_its_rotation(f):
    med = medium(f, eps_eff=6.0)
    stub = med.line(800e-6, "m") ** med.open()
    exp = {"length_um": 800.0, "eps_eff_window": [5.0, 7.0]}
    r = contact(f.f, pair(stub).s, "open-stub", LIM, exp)
    check(r, Verdict.PASS, "contact")
    # a landed stub turns by 2 beta l over the sweep: 2*360*df*l*sqrt(eps)/c degrees (Pozar eq. 2.42)
    assert r.value == pytest.approx(2 * 360 * 109e9 * 800e-6 * np.sqrt(6.0) / C0, rel=1e-9)
    bad = contact(f.f, pair(stub, lifted(med)).s, "open-stub", LIM, exp)
    check(bad, Verdict.FAIL, "contact")
    assert "too little rotation" in bad.message and "port 2" in bad.message
    check(contact(f.f, pair(stub).s, "open-stub", LIM, {}), Verdict.NA, "contact")


def test_stub_swept_from_high_frequency_is_not_misread():
    # from 50 GHz an 800 um stub at eps_eff 6 has turned 2*360*50e9*0.8e-3*sqrt(6)/c = 235 deg already
    # (Pozar eq. 2.42), so Re(S11) < 0 there is right for an open stub
    f = skrf.Frequency(50, 110, 601, "GHz")
    med = medium(f)
    stub = med.line(800e-6, "m") ** med.open()
    assert stub.s[0, 0, 0].real < 0
    exp = {"length_um": 800.0, "eps_eff_window": [5.0, 7.0]}
    check(contact(f.f, pair(stub).s, "open-stub", LIM, exp), Verdict.PASS, "contact")


def test_short_stub_that_reads_as_an_open(f, med):
    sstub = med.line(800e-6, "m") ** med.short()
    exp = {"length_um": 800.0}
    check(contact(f.f, pair(sstub).s, "short-stub", LIM, exp), Verdict.PASS, "contact")
    r = contact(f.f, pair(sstub, lifted(med)).s, "short-stub", LIM, exp)
    check(r, Verdict.FAIL, "contact")
    assert "reads as an open" in r.message


# ---------------------------------------------------------------- passivity, reciprocity, symmetry


def test_passivity_counterexample_and_skrf_cross_check(f, med):
    # REFERENCES.md: S = [[.6,.6],[.6,.6]] has column norms 0.849 but sigma_max = 1.2
    s = np.tile(np.array([[0.6, 0.6], [0.6, 0.6]], complex), (3, 1, 1))
    ntwk = skrf.Network(frequency=skrf.Frequency(1, 3, 3, "GHz"), s=s)
    r = passivity(ntwk.f, s, LIM)
    check(r, Verdict.FAIL, "passivity")
    assert r.value == pytest.approx(1.2, abs=1e-12)
    assert not ntwk.is_passive(tol=1e-9)
    # sigma_max^2 is the largest eigenvalue of S^H S, which scikit-rf's passivity squares back to
    lossy = med.line(2e-3, "m") ** med.resistor(10)
    r2 = passivity(f.f, lossy.s, LIM)
    check(r2, Verdict.PASS, "passivity")
    shs = np.square(lossy.passivity)
    assert r2.value**2 == pytest.approx(np.linalg.eigvalsh(shs).max(), rel=1e-9)
    assert lossy.is_passive(tol=1e-9)


def test_passivity_warns_on_a_slight_excess(f, med):
    s = medium(f, alpha_np_per_m=0.0).line(1e-3, "m").s * 1.01  # 0.086 dB gain: beyond noise, short of a broken cal
    check(passivity(f.f, s, LIM), Verdict.WARN, "passivity")


def test_reciprocity_against_skrf(f, med):
    thru = med.line(500e-6, "m")
    r = reciprocity(f.f, thru.s, LIM)
    check(r, Verdict.PASS, "reciprocity")
    assert thru.is_reciprocal(tol=1e-9)
    s = thru.s.copy()
    s[:, 0, 1] *= 0.95  # S12 5 % low, as with a switch-term error
    bad = reciprocity(f.f, s, LIM)
    check(bad, Verdict.FAIL, "reciprocity")
    assert bad.value == pytest.approx(np.max(0.05 * np.abs(thru.s[:, 0, 1])), rel=1e-9)
    assert not skrf.Network(frequency=f, s=s).is_reciprocal(tol=1e-3)
    check(reciprocity(f.f, med.open().s, LIM), Verdict.NA, "reciprocity")


def test_symmetry_finds_one_bad_tip(f, med):
    check(symmetry(f.f, med.line(1e-3, "m").s, LIM), Verdict.PASS, "symmetry")
    # 8 ohm more on port 2 of a load pair: |dGamma| = |8/108| (Pozar eq. 2.35)
    s = pair(med.match(), med.resistor(8) ** med.match()).s
    r = symmetry(f.f, s, LIM)
    check(r, Verdict.FAIL, "symmetry")
    assert r.value == pytest.approx(8 / 108, rel=1e-9)


# ---------------------------------------------------------------- rotation


def test_foster_rotation_of_an_open():
    f = skrf.Frequency(0, 50, 501, "GHz")
    air = skrf.media.DefinedGammaZ0(f, z0_port=50, z0=50, gamma=1j * 2 * np.pi * f.f / C0)
    good = air.shunt_capacitor(10e-15) ** air.open()
    # REFERENCES.md (verified): open + 10 fF at 50 GHz -> -17.854 deg, clockwise
    assert np.degrees(np.angle(good.s[-1, 0, 0])) == pytest.approx(-17.854, abs=1e-3)
    check(rotation(f.f, good.s, LIM), Verdict.PASS, "rotation")
    # -10 fF (over-de-embedded): +17.854 deg, counter-clockwise (Foster, BSTJ 3, 1924)
    bad = air.shunt_capacitor(-10e-15) ** air.open()
    r = rotation(f.f, pair(good, bad).s, LIM)
    check(r, Verdict.FAIL, "rotation")
    assert r.value == pytest.approx(17.854, abs=1e-3)
    assert r.at_hz == 50e9
    assert "port 2" in r.message and "from 0 GHz to 50 GHz" in r.message


def test_rotation_of_a_stub_and_a_small_ccw_span(f, med):
    stub = med.line(1e-3, "m") ** med.open()
    check(rotation(f.f, pair(stub).s, LIM), Verdict.PASS, "rotation")
    # a 1 deg counter-clockwise bump over part of the band: warn, not fail
    s = pair(stub).s.copy()
    bump = np.exp(1j * np.radians(1.0) * np.clip((f.f - 40e9) / 1e9, 0, 1) * (f.f < 60e9))
    s[:, 0, 0] = np.abs(s[:, 0, 0]) * np.exp(1j * np.radians(-0.01) * np.arange(len(f))) * bump
    r = rotation(f.f, s, LIM)
    check(r, Verdict.WARN, "rotation")


# ---------------------------------------------------------------- line window


def test_line_window(f):
    # 1.5 mm, 50 ohm, eps_eff 6, 20 Np/m = 0.1737 dB/mm (alpha dB = 8.686 alpha Np, Pozar eq. 2.50)
    line = medium(f).line(1.5e-3, "m")
    exp = {"length_um": 1500.0, "z0_window_ohm": [45.0, 55.0], "eps_eff_window": [5.0, 7.0], "alpha_db_per_mm_max": 0.3}
    check(line_window(f.f, line.s, exp, LIM), Verdict.PASS, "line-window")
    wrong_z0 = medium(f, z0=70.0).line(1.5e-3, "m")
    r = line_window(f.f, wrong_z0.s, exp, LIM)
    check(r, Verdict.FAIL, "line-window")
    assert "Re Z0" in r.message and r.value == pytest.approx(70.0, rel=1e-6) and r.limit == 55.0
    lossy = medium(f, alpha_np_per_m=50.0).line(1.5e-3, "m")
    r = line_window(f.f, lossy.s, exp, LIM)
    check(r, Verdict.FAIL, "line-window")
    assert r.unit == "dB/mm" and r.value == pytest.approx(50 * 20 / np.log(10) / 1000, rel=1e-6)
    check(line_window(f.f, line.s, {"z0_window_ohm": [45, 55]}, LIM), Verdict.NA, "line-window")
    check(line_window(f.f, line.s, {"length_um": 1500.0}, LIM), Verdict.NA, "line-window")


# ---------------------------------------------------------------- repeatability and drift


def test_repeatability(f, med):
    rng = np.random.default_rng(7)
    thru = med.line(100e-6, "m")
    # trace noise ~0.001 in |S| (trade numbers, common practice)
    noisy = thru.s + 0.001 * (rng.standard_normal(thru.s.shape) + 1j * rng.standard_normal(thru.s.shape)) / np.sqrt(2)
    check(repeatability(f.f, noisy, f.f, thru.s, LIM), Verdict.PASS, "repeatability")
    skated = thru.s.copy()
    skated[:, 1, 0] *= np.exp(-1j * np.radians(3.0))
    r = repeatability(f.f, skated, f.f, thru.s, LIM)
    check(r, Verdict.FAIL, "repeatability")
    # |S21| ~1 turned by 3 deg: |dS| = 2 sin(1.5 deg) = 0.052 (law of cosines) leads the 3 deg
    assert r.value == pytest.approx(2 * np.sin(np.radians(1.5)) * np.abs(thru.s[:, 1, 0]).max(), rel=1e-6)
    assert "phase 3 deg (S21" in r.message
    other = skrf.Frequency(1, 110, 101, "GHz")
    check(repeatability(f.f, thru.s, other.f, medium(other).line(100e-6, "m").s, LIM), Verdict.NA, "repeatability")


def test_repeatability_phase_allowance_grows_with_frequency(f, med):
    """A placement error dx turns a phase by beta*dx, in proportion to f, so the
    phase limit (0.5 deg warn up to 55 GHz) widens as f / 55 GHz above it: ~1 deg at
    110 GHz (trade numbers, common practice, no source: +-0.2-0.5 deg at 40-67 GHz,
    ~1 deg at 110 GHz)."""
    from probelog.checks import PHASE_REF_HZ

    thru = med.line(100e-6, "m")
    f_hz = f.f
    moved = thru.s.copy()
    # a length error: 0.005 deg per GHz, 0.55 deg at 110 GHz (|dS| 0.0096, under 0.01)
    moved[:, 1, 0] *= np.exp(-1j * np.radians(0.005 * f_hz / 1e9))
    moved[:, 0, 1] = moved[:, 1, 0]
    check(repeatability(f_hz, moved, f_hz, thru.s, LIM), Verdict.PASS, "repeatability")
    # 0.55 deg at every frequency (not a length error) is over 0.5 deg below 55 GHz
    flat = thru.s.copy()
    flat[:, 1, 0] *= np.exp(-1j * np.radians(0.55))
    r = repeatability(f_hz, flat, f_hz, thru.s, LIM)
    check(r, Verdict.WARN, "repeatability")
    assert r.at_hz <= PHASE_REF_HZ


def test_drift(f, med):
    ref = med.line(100e-6, "m").s
    moved = ref.copy()
    moved[:, 1, 0] *= 10 ** (-0.1 / 20)  # 0.1 dB: between warn 0.05 and fail 0.15 dB
    r = drift(f.f, moved, f.f, ref, LIM)
    check(r, Verdict.WARN, "drift")
    assert r.unit == "dB" and r.value == pytest.approx(0.1, rel=1e-9)
    moved[:, 1, 0] *= 10 ** (-0.2 / 20)
    check(drift(f.f, moved, f.f, ref, LIM), Verdict.FAIL, "drift")
    check(drift(f.f, ref, f.f, ref, LIM), Verdict.PASS, "drift")


# ---------------------------------------------------------------- run_checks


def test_run_checks_picks_by_kind(f, med):
    line = med.line(1.5e-3, "m")
    exp = {"length_um": 1500.0, "z0_window_ohm": [45.0, 55.0], "symmetric": True}
    names = [r.name for r in run_checks(line, "line", LIM, exp, previous=line, reference=line)]
    assert names == ["contact", "passivity", "reciprocity", "symmetry", "line-window", "line-z0", "repeatability",
                     "drift"]
    assert set(names) <= set(CHECK_NAMES)
    # every windowed quantity is its own check, named with its unit and both bounds
    full = dict(exp, eps_eff_window=[5.5, 6.5], alpha_db_per_mm_max=0.3)
    by = {r.name: r for r in run_checks(line, "line", LIM, full)}
    assert {"line-z0", "line-loss", "line-eps-eff"} <= set(by)
    assert by["line-z0"].unit == "ohm" and "45..55 ohm" in by["line-z0"].message
    assert by["line-loss"].unit == "dB/mm" and "0..0.3 dB/mm" in by["line-loss"].message
    narrow = dict(full, eps_eff_window=[6.5, 7.0])  # the line's eps_eff (6, REFERENCES.md) is below it
    assert {r.name: r for r in run_checks(line, "line", LIM, narrow)}["line-eps-eff"].verdict is Verdict.FAIL
    opens = [r.name for r in run_checks(pair(med.open()), "open", LIM)]
    assert opens == ["contact", "passivity", "reciprocity", "symmetry", "rotation"]
    one_port = run_checks(med.shunt_capacitor(10e-15) ** med.open(), "open", LIM)
    assert [r.name for r in one_port] == ["contact", "passivity", "rotation"]
    assert [r.verdict for r in one_port] == [Verdict.NA, Verdict.PASS, Verdict.PASS]
    dev = [r.name for r in run_checks(line, "device", LIM)]
    assert dev == ["contact", "passivity", "reciprocity"]
    with pytest.raises(ValueError, match="unknown site kind 'stub'"):
        run_checks(line, "stub", LIM)


def test_line_window_band_keeps_pad_effects_out_of_the_judgement():
    # A 500 um lossless 50 ohm line, eps_eff 6.35, with 12 fF shunt pads at both
    # ends (ABCD cascade, Pozar 4th ed. Table 4.1): the pads add capacitance, so
    # the single-line Z0 reads about 44 ohm at low frequency (sqrt(L / (C + 2 Cpad / l)))
    # and swings far off near the half-wavelength (~75 GHz). Over 1-20 GHz it stays
    # within 40-50 ohm; over the whole 1-110 GHz it does not.
    import skrf
    from skrf.media import DefinedGammaZ0

    freq = skrf.Frequency(1, 110, 219, "GHz")
    w = 2 * np.pi * freq.f
    media = DefinedGammaZ0(freq, z0=50.0, gamma=1j * w * np.sqrt(6.35) / 299_792_458.0)
    pad = media.shunt_capacitor(12e-15)
    ntwk = pad ** media.line(500, "um") ** pad
    exp = {"length_um": 500.0, "z0_window_ohm": [40.0, 50.0]}
    whole = line_window(ntwk.f, ntwk.s, exp, Limits())
    banded = line_window(ntwk.f, ntwk.s, dict(exp, window_band_hz=[1e9, 20e9]), Limits())
    assert whole.verdict is Verdict.FAIL and whole.at_hz > 20e9
    assert banded.verdict is Verdict.PASS and banded.at_hz <= 20e9


def test_closed_form_singular_value_matches_numpy_svd():
    # numpy's LAPACK SVD is the reference; includes the REFERENCES.md counterexample
    # [[.6,.6],[.6,.6]] (sigma_max 1.2) and random complex 2x2 and 1x1 stacks.
    from probelog.checks import largest_singular_value

    rng = np.random.default_rng(7)
    s = rng.normal(size=(500, 2, 2)) + 1j * rng.normal(size=(500, 2, 2))
    s[0] = [[0.6, 0.6], [0.6, 0.6]]
    ref = np.linalg.svd(s, compute_uv=False)[:, 0]
    np.testing.assert_allclose(largest_singular_value(s), ref, rtol=1e-12)
    assert largest_singular_value(s)[0] == pytest.approx(1.2, rel=1e-12)
    one = s[:, :1, :1]
    np.testing.assert_allclose(largest_singular_value(one), np.abs(one[:, 0, 0]), rtol=1e-15)


def test_repeatability_against_another_die_leaves_the_spread_to_the_population(f, med):
    """Against the same die the re-landing limits apply as they are; against an
    accepted landing on another die, a difference in the re-landing WARN band
    (0.05-0.15 dB, Limits defaults) is process spread and passes, one past the
    FAIL band only warns (the population check judges die-to-die differences)."""
    from probelog.checks import run_checks

    line = med.line(100e-6, "m")
    exp = {"length_um": 100.0}

    def moved(db: float) -> skrf.Network:
        n = line.copy()
        n.s[:, 1, 0] *= 10 ** (-db / 20)
        n.s[:, 0, 1] = n.s[:, 1, 0]
        return n

    def rep(db: float, other_die: bool) -> Verdict:
        out = run_checks(moved(db), "thru", LIM, exp, previous=line, previous_other_die=other_die)
        return next(c for c in out if c.name == "repeatability").verdict

    assert (rep(0.1, False), rep(0.1, True)) == (Verdict.WARN, Verdict.PASS)
    assert (rep(0.3, False), rep(0.3, True)) == (Verdict.FAIL, Verdict.WARN)
    assert rep(0.01, True) is Verdict.PASS
