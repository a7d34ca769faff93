"""Per-frequency limits, the run-based grade, and the population check.

References: passivity (sigma_max <= 1) and reciprocity (S = S^T) are physical
laws for passive reciprocal networks (Pozar, Microwave Engineering 4th ed.,
sec. 4.3); lines from scikit-rf's media (CPW / DefinedGammaZ0) as the reference
model; faults from the simulated bench (drivers/simbench/faults.py).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import skrf

from probelog.checks import Limits, passivity, reciprocity, run_checks
from probelog.limits import cal_uncertainty, grade, longest_run, run_points, verification_residual, widen
from probelog.population import population
from probelog.verdicts import Verdict


def test_longest_run_and_run_points():
    assert longest_run(np.array([0, 1, 1, 0, 1, 1, 1, 0], bool)) == 3
    assert longest_run(np.zeros(5, bool)) == 0
    assert run_points(201) == 3 and run_points(11) == 1 and run_points(41) == 2


def test_grade_one_noisy_point_warns_a_run_fails_a_gross_point_fails():
    v = np.full(201, 0.001)
    v[100] = 0.03  # 1.5 x the fail limit at one point
    assert grade(v, 0.005, 0.02)[0] is Verdict.WARN
    v[99:102] = 0.03
    assert grade(v, 0.005, 0.02)[0] is Verdict.FAIL
    v = np.full(201, 0.001)
    v[50] = 0.2  # 10 x the limit: gross, fails outright
    assert grade(v, 0.005, 0.02) == (Verdict.FAIL, 50)
    v[50] = np.nan
    assert grade(v, 0.005, 0.02)[0] is Verdict.FAIL
    assert grade(np.full(201, 0.001), 0.005, 0.02)[0] is Verdict.PASS


def test_widen_and_uncertainty():
    assert list(widen(np.array([0, 0, 1.0, 0, 0]))) == [0, 1, 1, 1, 0]
    u = cal_uncertainty(3, agreement_bound=np.full((3, 2, 2), 0.01), residual=np.array([0.0, 0.05, 0.0]))
    assert list(u) == [0.01, 0.05, 0.01]
    ideal = np.zeros((3, 2, 2), complex)
    corr = ideal.copy()
    corr[1, 0, 0] = 0.1
    assert np.allclose(verification_residual(corr, ideal), [0.1, 0.1, 0.1])


def _line(f):
    freq = skrf.Frequency.from_f(f, unit="Hz")
    return skrf.media.DefinedGammaZ0(freq, z0=50, gamma=1j * 2 * np.pi * f / 1.2e8 + 2.0).line(500e-6, "m")


def test_passivity_single_point_over_is_a_warn_and_cal_uncertainty_widens_the_limit():
    f = np.linspace(1e9, 150e9, 299)
    ntwk = _line(f)
    s = ntwk.s.copy()
    s[190, 1, 0] *= 1.027 / np.abs(s[190, 1, 0])  # the realdata issue: sigma 1.027 at one point
    assert passivity(f, s, Limits()).verdict is Verdict.WARN
    s[185:195, 1, 0] *= 1.03 / np.abs(s[185:195, 1, 0])
    s[185:195, 0, 1] = s[185:195, 1, 0]
    assert passivity(f, s, Limits()).verdict is Verdict.FAIL
    assert passivity(f, s, Limits(), unc=np.full(len(f), 0.01)).verdict is Verdict.WARN  # 0.03 < 0.02 + 2 x 0.01
    gain = ntwk.s * 1.5  # an active "line": fails by a wide margin even with 0.01 uncertainty
    r = passivity(f, gain, Limits(), unc=np.full(len(f), 0.01))
    assert r.verdict is Verdict.FAIL and r.value > 1.4


def test_reciprocity_limit_is_per_frequency():
    f = np.linspace(1e9, 150e9, 299)
    s = _line(f).s.copy()
    s[260:275, 0, 1] += 0.04  # 130-137 GHz: 0.04 over a good line
    assert reciprocity(f, s, Limits()).verdict is Verdict.FAIL
    u = np.where(f > 120e9, 0.02, 0.0)  # a cal that is that uncertain up there
    r = reciprocity(f, s, Limits(), unc=u)
    assert r.verdict is Verdict.PASS, r.message


# ---------------------------------------------------------------- population


@pytest.fixture(scope="module")
def dies():
    from probelog.drivers.simbench.chip import load_chip
    from probelog.drivers.simbench.faults import apply_contact_faults
    from probelog.drivers.simbench.simulator import Simulator

    sim = Simulator(load_chip(), seed=4)
    f = np.linspace(1e9, 110e9, 201)
    rng = np.random.default_rng(0)
    die_list = [(2, 1), (4, 1), (6, 1), (1, 3), (4, 3), (7, 3)]

    def landing(die, site, fault=None):
        s = sim.true_s(die, site, f) + 7e-4 * (rng.normal(size=(201, 2, 2)) + 1j * rng.normal(size=(201, 2, 2)))
        if fault:
            s = apply_contact_faults(s, (fault,), sim.model(die), f, die)
        return s

    return f, die_list, landing


@pytest.mark.parametrize("site", ["dev-ind", "dev-mim", "ln-swl-m6-r2-l1500", "ver-sstub"])
def test_population_passes_clean_dies_and_fails_contact_faults_from_the_second_die(dies, site):
    f, die_list, landing = dies
    history = [(f"die {die_list[0]}", f, landing(die_list[0], site))]
    for die in die_list[1:]:
        clean = population(f, landing(die, site), history, Limits())
        assert clean.verdict is Verdict.PASS, (die, clean.message)
        for fault in ("high-rc", "skate"):
            bad = population(f, landing(die, site, fault), history, Limits())
            assert bad.verdict is Verdict.FAIL, (die, fault, bad.message)
            assert "port" in bad.message and "dS" in bad.message
        history.append((f"die {die}", f, landing(die, site)))


def test_population_needs_history_and_is_robust_to_one_bad_landing(dies):
    f, die_list, landing = dies
    assert population(f, landing(die_list[0], "dev-mim"), [], Limits()).verdict is Verdict.NA
    history = [(f"die {d}", f, landing(d, "dev-mim")) for d in die_list[:4]]
    history.append(("die bad", f, landing(die_list[4], "dev-mim", "high-rc")))
    r = population(f, landing(die_list[5], "dev-mim"), history, Limits())
    assert r.verdict is Verdict.PASS, r.message


def test_run_checks_carries_population_and_names_the_landing_compared_with(dies):
    f, die_list, landing = dies
    freq = skrf.Frequency.from_f(f, unit="Hz")
    now = skrf.Network(frequency=freq, s=landing(die_list[1], "dev-ind", "high-rc"), z0=50)
    prev = skrf.Network(frequency=freq, s=landing(die_list[1], "dev-ind"), z0=50)
    history = [("die (2, 1)", f, landing(die_list[0], "dev-ind"))]
    out = {r.name: r for r in run_checks(now, "device", Limits(), {}, previous=prev, history=history,
                                         previous_label="landing 2 of die 4,1")}
    assert out["population"].verdict is Verdict.FAIL
    assert "landing 2 of die 4,1" in out["repeatability"].message


# ---------------------------------------------------------------- a device's plan-level statement


def test_device_transmission_window_passes_landed_fails_lifted(dies):
    from probelog.checks import contact
    from probelog.drivers.simbench.chip import load_chip
    from probelog.drivers.simbench.faults import apply_contact_faults
    from probelog.drivers.simbench.simulator import Simulator
    from probelog.engine.planview import expectation
    from probelog.plan import load_plan

    plan = load_plan(Path(__file__).parents[1] / "probelog" / "plans" / "demo.toml")
    sim = Simulator(load_chip(), seed=9)
    f = np.linspace(1e9, 110e9, 201)
    for name in ("dev-ind", "dev-mim"):
        exp = expectation(plan.site(name))
        for die in ((2, 1), (7, 5)):
            s = sim.true_s(die, name, f)
            assert contact(f, s, "device", Limits(), exp).verdict is Verdict.PASS
            for fault in ("lifted-1", "lifted-2", "lifted"):
                bad = apply_contact_faults(s, (fault,), sim.model(die), f, die)
                r = contact(f, bad, "device", Limits(), exp)
                assert r.verdict is Verdict.FAIL and "the plan expects" in r.message, (name, fault, r.message)


@pytest.mark.parametrize("extra,words", [
    ('s21_db_window = [-3.0, 0.0]\n', "does not transmit"),        # on an open site
    ('s21_band_hz = [1e9, 2e9]\n', "needs s21_db_window"),
])
def test_device_window_plan_keys_are_validated(extra, words):
    from probelog.plan import PlanError, load_plan_text

    text = (Path(__file__).parents[1] / "probelog" / "plans" / "demo.toml").read_text(encoding="utf-8")
    text = text.replace('kit = "../kits/plx7.toml"', f'kit = "{(Path(__file__).parents[1] / "probelog" / "kits" / "plx7.toml").as_posix()}"')
    text = text.replace('note = "open pad pair with fringing capacitance"\n',
                        'note = "open pad pair with fringing capacitance"\n' + extra)
    with pytest.raises(PlanError, match=words):
        load_plan_text(text, "demo-edited.toml")
