"""Quasi-static CPW closed forms against verified values and scikit-rf."""

import numpy as np
import pytest
import skrf

from probelog.cpw import cpw, cpw_backed

UM = 1e-6

# (W, S, h in um, eps_r) -> (Z0, eps_eff), finite substrate and conductor-backed.
# REFERENCES.md "Coplanar waveguide", verified with scipy (Ghione & Naldi 1983, 1984; Simons 2001 ch. 2)
CASES = [
    ((50, 35, 100, 12.9), (51.640, 6.6230), (46.696, 7.2650)),  # GaAs
    ((50, 25, 254, 9.9), (51.789, 5.4197), (51.155, 5.4801)),  # alumina
]


@pytest.mark.parametrize("geom, free, backed", CASES)
def test_published_cases(geom, free, backed):
    w, s, h, er = geom
    a = cpw(w * UM, s * UM, h * UM, er)
    assert a.z0 == pytest.approx(free[0], abs=1e-3)
    assert a.eps_eff == pytest.approx(free[1], abs=1e-4)
    b = cpw_backed(w * UM, s * UM, h * UM, er)
    assert b.z0 == pytest.approx(backed[0], abs=1e-3)
    assert b.eps_eff == pytest.approx(backed[1], abs=1e-4)


def test_fused_silica_and_silicon():
    # REFERENCES.md verified values
    a = cpw(40 * UM, 25 * UM, 500 * UM, 3.8)
    assert (a.z0, a.eps_eff) == pytest.approx((83.045, 2.3981), abs=1e-3)
    b = cpw(10 * UM, 6 * UM, 300 * UM, 11.7)
    assert (b.z0, b.eps_eff) == pytest.approx((50.439, 6.3488), abs=1e-3)


def test_air_cpw_with_k_one_over_root_two():
    # Wen, IEEE T-MTT 17(12), 1969: K(k) = K'(k) at k = 1/sqrt(2) gives Z0 = 30 pi
    w = 10 * UM
    s = (np.sqrt(2) - 1) * w / 2  # W / (W + 2S) = 1/sqrt(2)
    a = cpw(w, s, 1.0, 1.0)
    assert a.z0 == pytest.approx(30 * np.pi, rel=1e-12)
    assert a.eps_eff == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("backed", [False, True])
def test_against_scikit_rf_quasi_static(backed):
    # scikit-rf media.CPW (compatibility_mode='ads', no dispersion) agrees on eps_eff and
    # is 0.069% lower on Z0 (eta0/4 instead of 30 pi) -- REFERENCES.md
    f = skrf.Frequency(1, 1, 1, "GHz")
    for w, s, h, er in [(50, 35, 100, 12.9), (10, 6, 300, 11.7), (20, 4, 150, 9.9)]:
        ref = skrf.media.CPW(f, w=w * UM, s=s * UM, h=h * UM, ep_r=er, has_metal_backside=backed,
                             compatibility_mode="ads", rho=None)
        ours = (cpw_backed if backed else cpw)(w * UM, s * UM, h * UM, er)
        assert ours.eps_eff == pytest.approx(float(ref.ep_reff[0].real), rel=1e-6)
        eta0_over_4 = 376.730313 / 4
        ratio = float(ref.z0_characteristic[0].real) / ours.z0
        assert ratio == pytest.approx(eta0_over_4 / (30 * np.pi), rel=1e-5)
        assert 1 - ratio == pytest.approx(0.00069, abs=0.00001)


def test_bad_geometry_is_refused():
    with pytest.raises(ValueError, match="positive"):
        cpw(0.0, 5 * UM, 100 * UM, 9.9)
    with pytest.raises(ValueError, match="permittivity"):
        cpw_backed(10 * UM, 5 * UM, 100 * UM, 0.5)
