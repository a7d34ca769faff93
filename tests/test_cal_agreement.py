"""Worst-case agreement of two cal sets (probelog.cal_agreement).

Method: Williams, Marks & Davidson, "Comparison of on-wafer calibrations", 38th ARFTG,
1991 (from memory). Check values from REFERENCES.md "Calibration agreement" (verified).
"""

import numpy as np
import pytest
import skrf

from probelog.cal_agreement import agreement_bound, cascade, difference_boxes
from probelog.calibration import agreement, solve
from test_calibration import KIT, Bench, dut, measure_kit_standards, measure_lines

D1 = np.array([[0.010 + 0.004j, 0.997 + 0.006j], [0.997 + 0.006j, -0.008 + 0.012j]])
D2 = np.array([[0.006 - 0.009j, 1.002 - 0.004j], [1.002 - 0.004j, 0.011 + 0.003j]])


def test_hand_computed_case():
    # REFERENCES.md (verified): bounds S11 0.036124, S21 0.014181, S22 0.029584
    b = agreement_bound(D1, D2)[0]
    assert b[0, 0] == pytest.approx(0.036124, abs=1e-6)
    assert b[1, 0] == pytest.approx(0.014181, abs=1e-6)
    assert b[1, 1] == pytest.approx(0.029584, abs=1e-6)
    assert b[0, 1] == pytest.approx(b[1, 0], abs=1e-9)  # reciprocal D1, D2


def test_one_port_bound_matches_the_closed_form():
    # with D2 = identity, S11's bound is the one-port figure
    # max_theta |d00 + d01 d10 G / (1 - d11 G) - G|, G = e^{j theta} (REFERENCES.md)
    th = np.linspace(0, 2 * np.pi, 400_001)
    g = np.exp(1j * th)
    one_port = np.max(np.abs(D1[0, 0] + D1[0, 1] * D1[1, 0] * g / (1 - D1[1, 1] * g) - g))
    b = agreement_bound(D1, np.array([[0, 1], [1, 0]], dtype=complex))[0]
    assert b[0, 0] == pytest.approx(one_port, rel=1e-6)


def _random_passive(rng, n):
    """Random 2-ports with largest singular value <= 1 (passive), half of them lossless."""
    a = rng.normal(size=(n, 2, 2)) + 1j * rng.normal(size=(n, 2, 2))
    u, _, vh = np.linalg.svd(a)
    sv = rng.uniform(0, 1, size=(n, 2))
    sv[: n // 2] = 1.0
    return u @ (sv[..., None] * vh)


def test_monte_carlo_never_exceeds_the_bound():
    rng = np.random.default_rng(2611)
    s = _random_passive(rng, 5000)
    assert np.all(np.linalg.svd(s, compute_uv=False)[:, 0] <= 1 + 1e-12)
    diff = np.abs(cascade(cascade(D1, s), D2) - s)
    b = agreement_bound(D1, D2)[0]
    assert np.all(diff <= b + 1e-12)
    # and the bound is tight: the random lossless set gets close to it
    assert np.all(diff.max(axis=0) > 0.8 * b)


def test_identical_cal_sets_agree_to_rounding():
    b = Bench(seed=3)
    std = measure_kit_standards(b)
    cal = solve("lrrm", std, KIT, switch_terms=b.switch_terms, cal_id="a")
    a = agreement(cal, cal, list(std.values()))
    assert a.worst < 1e-12
    assert a.residual < 1e-12


def test_difference_boxes_reproduce_correct_b_of_embed_a():
    # D1 ** S_A ** D2 must be what cal B makes of the raw data cal A explains as S_A
    # (two 8-term cal sets; a 12-term SOLT is only approximately 8-term, see below)
    b = Bench(seed=5, noise=True)
    ca = solve("lrrm", measure_kit_standards(b), KIT, switch_terms=b.switch_terms, cal_id="lrrm")
    cb = solve("mtrl", measure_lines(b), KIT, switch_terms=b.switch_terms, cal_id="mtrl")
    d1, d2 = difference_boxes(ca.error_terms_8, cb.error_terms_8)
    s = dut()
    raw = ca.cal.embed(s)  # skrf's own embedding with cal A's error terms
    assert np.max(np.abs(cascade(cascade(d1, s.s), d2) - cb.apply(raw).s)) < 1e-10


def test_solt_and_lrrm_on_exact_standards_agree_and_a_wrong_kit_does_not():
    b = Bench(seed=9)
    std = measure_kit_standards(b)
    lrrm = solve("lrrm", std, KIT, switch_terms=b.switch_terms, cal_id="lrrm")
    solt = solve("solt", std, KIT, cal_id="solt")
    good = agreement(lrrm, solt, list(std.values()))
    assert good.worst < 1e-9
    assert good.bound.shape == (len(KIT_FREQ(std)), 2, 2)
    # SOLT with the open C sign wrong: 2 w C Z0 = 0.38 at 100 GHz for 6 fF, so the
    # cal sets must disagree by several percent somewhere at high frequency
    from dataclasses import replace

    bad = solve("solt", std, replace(KIT, open_c_f=(-6e-15,)), cal_id="solt-bad")
    worse = agreement(lrrm, bad, list(std.values()))
    assert worse.worst > 0.05
    assert worse.at_hz > 50e9
    assert worse.worst_sij in ("S11", "S22", "S12", "S21")
    # a SOLT solved with a wrong standard is a 12-term model no error-box pair
    # explains (Marks, 50th ARFTG 1997): the residual on the standards says so
    assert good.residual < 1e-9
    assert worse.residual > 0.05
    assert worse.summary()["cal_b"] == "solt-bad"


def KIT_FREQ(std):
    return next(iter(std.values())).f


def test_csv_has_one_row_per_frequency(tmp_path):
    b = Bench(seed=4, freq=skrf.Frequency(1, 67, 12, "GHz"), noise=True)
    std = measure_kit_standards(b)
    a = agreement(solve("solt", std, KIT, cal_id="a"),
                  solve("lrrm", std, KIT, switch_terms=b.switch_terms, cal_id="b"), None)
    assert a.residual is None
    rows = a.write_csv(tmp_path / "agree.csv").read_text().splitlines()
    assert rows[0] == "f_hz,bound_s11,bound_s12,bound_s21,bound_s22"
    assert len(rows) == 13
    assert float(rows[1].split(",")[0]) == 1e9
    # noise 0.002 dB / 0.02 deg: the two cals differ, but by far less than 1 %
    assert 1e-6 < a.worst < 0.01


def test_bound_in_frequency_chunks_equals_one_frequency_at_a_time():
    # Each frequency's bound depends only on that frequency's difference boxes,
    # so long sweeps may be cut into chunks without changing any value.
    from probelog.cal_agreement import _FREQ_CHUNK, agreement_bound

    rng = np.random.default_rng(3)
    n = _FREQ_CHUNK + 7
    eye = np.array([[0, 1], [1, 0]], complex)
    d1 = eye + 0.01 * (rng.normal(size=(n, 2, 2)) + 1j * rng.normal(size=(n, 2, 2)))
    d2 = eye + 0.01 * (rng.normal(size=(n, 2, 2)) + 1j * rng.normal(size=(n, 2, 2)))
    whole = agreement_bound(d1, d2)
    for i in (0, _FREQ_CHUNK - 1, _FREQ_CHUNK, n - 1):
        np.testing.assert_allclose(whole[i], agreement_bound(d1[i], d2[i])[0], rtol=1e-12)
