"""Contact checks on raw calibration standards, through the simulated bench's
error boxes (probe + cable loss and delay, directivity, switch terms).

Outside references: the one-port error model (Pozar, Microwave Engineering, 4th
ed., sec. 4.3): raw reflections of two standards differ by |e10 e01| |G_a - G_b|
/ |(1 - e11 G_a)(1 - e11 G_b)|, so an open and a short stay about 2 |e10 e01|
apart whatever the error box; a tip in air reads like an open and leaves |S21|
near the isolation floor (REFERENCES.md trade numbers: below -40 dB; common
practice, no source).
"""

import numpy as np
import pytest

from probelog.drivers.simbench import SimBench
from probelog.checks import Limits
from probelog.standard_checks import raw_standard_checks
from probelog.verdicts import Verdict

F = np.linspace(1e9, 110e9, 201)
DIE = (4, 4)


@pytest.fixture(scope="module")
def sim():
    return SimBench(seed=21)


def raw(sim, site, *faults):
    return sim.raw_network(DIE, site, F, kinds=faults, rng=np.random.default_rng(1))


def test_landed_standards_pass_in_measurement_order(sim):
    earlier = {}
    for role, site in (("open", "cal-open"), ("short", "cal-short"), ("load", "cal-load"), ("thru", "cal-thru")):
        net = raw(sim, site)
        (check,) = raw_standard_checks(net, role, earlier, Limits())
        expected = Verdict.NA if role == "open" else Verdict.PASS
        assert check.verdict is expected, (role, check.message)
        earlier[role] = net


def test_open_and_short_stay_two_trackings_apart(sim):
    # |e10 e01| of the sim's port-1 box at the lowest frequency, from its S-parameters
    x = sim.sim.error_model(F).x[0]
    tracking = abs(x[1, 0] * x[0, 1])
    (check,) = raw_standard_checks(raw(sim, "cal-short"), "short", {"open": raw(sim, "cal-open")})
    assert check.verdict is Verdict.PASS
    assert check.value == pytest.approx(2 * tracking, rel=0.15)


@pytest.mark.parametrize("fault", ["lifted-1", "lifted-2", "lifted"])
def test_a_lifted_short_reads_like_the_open_and_fails(sim, fault):
    earlier = {"open": raw(sim, "cal-open")}
    (check,) = raw_standard_checks(raw(sim, "cal-short", fault), "short", earlier)
    assert check.verdict is Verdict.FAIL
    assert "reads like the open" in check.message


def test_a_lifted_load_fails_against_the_open(sim):
    earlier = {"open": raw(sim, "cal-open"), "short": raw(sim, "cal-short")}
    (check,) = raw_standard_checks(raw(sim, "cal-load", "lifted-2"), "load", earlier)
    assert check.verdict is Verdict.FAIL
    assert "port 2" in check.message


@pytest.mark.parametrize("fault", ["lifted-1", "lifted-2"])
def test_a_lifted_thru_fails_on_transmission(sim, fault):
    (check,) = raw_standard_checks(raw(sim, "cal-thru", fault), "thru", {})
    assert check.verdict is Verdict.FAIL
    assert check.value < Limits().transmission_fail_db
    (good,) = raw_standard_checks(raw(sim, "cal-thru"), "thru", {})
    assert good.verdict is Verdict.PASS and good.value > -6.0
