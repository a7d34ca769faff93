"""Line metrics against Pozar's telegrapher model and the two-line method."""

import numpy as np
import pytest
import skrf

from probelog.lines import (
    JSON_KEYS,
    abcd_from_s,
    gamma_two_lines,
    line_metrics,
    metrics_at,
    metrics_from_gamma,
    to_json,
)

C0 = 299_792_458.0


def rlgc_medium(f: skrf.Frequency) -> tuple[skrf.media.DefinedGammaZ0, np.ndarray, np.ndarray]:
    """The REFERENCES.md round-trip line: R = 300 sqrt(f/GHz) ohm/m, L = 400 nH/m,
    G = 1 mS/m * f/GHz, C = 160 pF/m (Pozar 4th ed. eq. 2.5, 2.6)."""
    w = 2 * np.pi * f.f
    series = 300 * np.sqrt(f.f / 1e9) + 1j * w * 400e-9
    shunt = 1e-3 * f.f / 1e9 + 1j * w * 160e-12
    z0 = np.sqrt(series / shunt)
    gamma = np.sqrt(series * shunt)
    return skrf.media.DefinedGammaZ0(f, z0_port=50, z0=z0, gamma=gamma), z0, gamma


@pytest.fixture(scope="module")
def freq():
    return skrf.Frequency(1, 110, 110, "GHz")


def test_telegrapher_round_trip_at_40_ghz(freq):
    med, z0, gamma = rlgc_medium(freq)
    m = line_metrics(med.line(2e-3, "m"), 2e-3)
    i = int(np.argmin(np.abs(freq.f - 40e9)))
    assert freq.f[i] == 40e9
    # REFERENCES.md "Line metrics", verified round trip at 40 GHz
    assert m.z0[i] == pytest.approx(50.0024 - 0.4469j, abs=1e-4)
    assert m.alpha_np_per_m[i] == pytest.approx(19.9729, abs=1e-4)
    assert m.alpha_db_per_mm[i] == pytest.approx(0.17348, abs=1e-5)
    assert m.gamma.imag[i] == pytest.approx(2010.700, abs=1e-3)
    assert m.beta_rad_per_mm[i] == pytest.approx(2.010700, abs=1e-6)
    assert m.eps_eff[i] == pytest.approx(5.75249, abs=1e-5)
    assert m.q[i] == pytest.approx(50.34, abs=0.01)
    # R, L, G, C come back as put in (Pozar 4th ed. eq. 2.5: R + jwL = g Z0, G + jwC = g / Z0)
    assert m.r_ohm_per_m[i] == pytest.approx(300 * np.sqrt(40), rel=1e-9)
    assert m.l_h_per_m[i] == pytest.approx(400e-9, rel=1e-9)
    assert m.g_s_per_m[i] == pytest.approx(40e-3, rel=1e-9)
    assert m.c_f_per_m[i] == pytest.approx(160e-12, rel=1e-9)


def test_round_trip_whole_band_keeps_a_continuous_branch(freq):
    # 2 mm at eps_eff ~5.75 passes several half wavelengths by 110 GHz, so the
    # branch must be unwrapped (REFERENCES.md: ~1e-12 relative over 1-110 GHz).
    med, z0, gamma = rlgc_medium(freq)
    m = line_metrics(med.line(2e-3, "m"), 2e-3)
    assert np.max(gamma.imag * 2e-3) > 3 * np.pi
    np.testing.assert_allclose(m.gamma, gamma, rtol=1e-10)
    np.testing.assert_allclose(m.z0, z0, rtol=1e-10)


def test_branch_from_eps_eff_guess_when_low_frequency_is_missing():
    # Starting at 60 GHz the f -> 0 extrapolation has little to go on; an eps_eff guess picks n.
    f = skrf.Frequency(60, 110, 51, "GHz")
    med, _, gamma = rlgc_medium(f)
    m = line_metrics(med.line(3e-3, "m"), 3e-3, eps_eff_guess=5.0)
    np.testing.assert_allclose(m.gamma, gamma, rtol=1e-10)
    wrong = line_metrics(med.line(3e-3, "m"), 3e-3, eps_eff_guess=12.0)
    assert not np.allclose(wrong.gamma.imag, gamma.imag, rtol=1e-3)


def test_abcd_of_a_series_resistor():
    # Pozar 4th ed. Table 4.1: series impedance Z has ABCD [[1, Z], [0, 1]].
    f = skrf.Frequency(1, 2, 2, "GHz")
    med = skrf.media.DefinedGammaZ0(f, z0_port=50, z0=50, gamma=1j * 2 * np.pi * f.f / C0)
    abcd = abcd_from_s(med.resistor(12.5).s, 50.0)
    np.testing.assert_allclose(abcd, np.broadcast_to([[1, 12.5], [0, 1]], abcd.shape), atol=1e-12)
    # agrees with scikit-rf's own conversion
    np.testing.assert_allclose(abcd, skrf.network.s2a(med.resistor(12.5).s, 50.0), atol=1e-12)


def pads(f: skrf.Frequency) -> skrf.Network:
    air = skrf.media.DefinedGammaZ0(f, z0_port=50, z0=50, gamma=1j * 2 * np.pi * f.f / C0)
    return air.shunt_capacitor(20e-15) ** air.inductor(15e-12)


def test_two_line_gamma_is_free_of_pads(freq):
    # REFERENCES.md verified case: pads 20 fF shunt + 15 pH series, lines 0.5 and 2.5 mm
    # (Engen & Hoer, IEEE T-MTT 27(12), 1979; Marks, IEEE T-MTT 39(7), 1991).
    med, _, gamma = rlgc_medium(freq)
    p = pads(freq)
    short = p ** med.line(0.5e-3, "m") ** p.flipped()
    long_ = p ** med.line(2.5e-3, "m") ** p.flipped()
    g = gamma_two_lines(short, 0.5e-3, long_, 2.5e-3)
    np.testing.assert_allclose(g, gamma, rtol=1e-11)
    # order of the two lines does not matter
    np.testing.assert_allclose(gamma_two_lines(long_, 2.5e-3, short, 0.5e-3), gamma, rtol=1e-11)
    # the naive single-line extraction with pads in is badly off (REFERENCES.md: 10.03 vs 5.752 at 40 GHz)
    i = int(np.argmin(np.abs(freq.f - 40e9)))
    naive = line_metrics(short, 0.5e-3)
    assert naive.eps_eff[i] == pytest.approx(10.03, abs=0.01)
    assert metrics_from_gamma(freq.f, g).eps_eff[i] == pytest.approx(5.75249, abs=1e-5)


def test_two_lines_need_different_lengths(freq):
    med, _, _ = rlgc_medium(freq)
    line = med.line(1e-3, "m")
    with pytest.raises(ValueError, match="differ in length"):
        gamma_two_lines(line, 1e-3, line, 1e-3)


def test_line_metrics_reject_a_one_port(freq):
    med, _, _ = rlgc_medium(freq)
    with pytest.raises(ValueError, match="2-port"):
        line_metrics(med.open(), 1e-3)


def test_json_shapes_and_nearest_points(freq):
    med, _, _ = rlgc_medium(freq)
    m = line_metrics(med.line(2e-3, "m"), 2e-3)
    small = metrics_at(m, [10.2e9, 40e9, 200e9])
    assert tuple(small) == JSON_KEYS
    assert small["f_hz"] == [10e9, 40e9, 110e9]
    assert all(len(v) == 3 for v in small.values())
    full = to_json(m)
    assert len(full["eps_eff"]) == len(freq.f)
    # unknown Z0 becomes null, not NaN
    only_gamma = metrics_at(metrics_from_gamma(m.f_hz, m.gamma), [40e9])
    assert only_gamma["z0_re"] == [None] and only_gamma["c_f_per_m"] == [None]
    assert only_gamma["eps_eff"][0] == pytest.approx(5.75249, abs=1e-5)


def test_report_frequencies_are_round_inside_the_sweep():
    # common practice, no source: line figures are quoted at round frequencies
    from probelog.lines import default_frequencies

    f = np.linspace(1e9, 110e9, 201)
    assert list(default_frequencies(f, prefer_round=True) / 1e9) == [1, 5, 10, 20, 40, 67, 110]
    assert np.allclose(default_frequencies(f), np.linspace(1e9, 110e9, 5))
    narrow = np.linspace(50e9, 75e9, 101)  # only 67 GHz inside: fall back to an even spread
    assert np.allclose(default_frequencies(narrow, prefer_round=True), np.linspace(50e9, 75e9, 5))
