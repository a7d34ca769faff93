"""The wafer view's reading of a session (probelog.tui.wafer_read): line metrics
come from the session state the real engine keeps (per-frequency lists as it
journals them), only kept landings colour a die, an accepted FAIL is flagged.
The engine is the real one, on the in-test bench of tests/_engine_fakes.py
(ideal lines with alpha = 20 Np/m, eps_eff = 6.35)."""

from __future__ import annotations

import math

import pytest

import probelog.session as S
from probelog.journal import Journal
from probelog.plan import load_plan_text
from probelog.tui.wafer_read import MetricChoice, cal_die_of, kept_despite_fail, metric_choices, metric_values
from probelog.tui.widgets.die_map import SHADES, DieMap
from tests._engine_fakes import ALPHA_NP_PER_M, C0, EPS_EFF, fake_bench, plan_text

DIES = ((1, 1), (2, 1), (3, 1))
NP_TO_DB = 20 / math.log(10)  # 8.686 dB per neper (definition of the neper)


def session(tmp_path):
    plan = load_plan_text(plan_text(dies=DIES, sites=("ln-b",)), "fake.toml")
    bench = fake_bench()
    e = S.Engine(plan, bench, Journal.create(tmp_path, "s1"), operator="tester")
    while e.next_step is not None:
        e.measure()
    e.compute_calibration()
    e.accept_calibration("test")
    return e, bench


def test_metrics_come_from_the_state_at_the_chosen_frequency(tmp_path):
    e, _ = session(tmp_path)
    assert metric_choices(e.state) == []  # nothing kept yet: nothing to colour by
    e.measure()
    assert metric_choices(e.state) == []  # measured but not decided: not kept
    e.accept()
    choices = metric_choices(e.state)
    assert ("ln-b", "alpha_db_per_mm") in choices and ("ln-b", "beta_rad_per_mm") in choices
    # the ideal line's attenuation, 20 Np/m = 0.1737 dB/mm (tests/_engine_fakes.py; 8.686 dB/Np)
    alpha = metric_values(e.state, MetricChoice("ln-b", "alpha_db_per_mm", 30e9))
    assert alpha == {(1, 1): pytest.approx(ALPHA_NP_PER_M * NP_TO_DB / 1000, rel=0.05)}
    # beta = omega sqrt(eps_eff) / c (Pozar 4th ed. ch. 2) at the journaled frequency nearest the chosen one
    f_hz = e.state.last_accepted((1, 1), "ln-b").metrics["f_hz"]
    for want_f in (f_hz[1], f_hz[-2]):
        beta = metric_values(e.state, MetricChoice("ln-b", "beta_rad_per_mm", want_f * 1.001))[(1, 1)]
        assert beta == pytest.approx(2 * math.pi * want_f * math.sqrt(EPS_EFF) / C0 / 1000, rel=0.02)
    assert metric_values(e.state, MetricChoice("ln-x", "beta_rad_per_mm", 30e9)) == {}  # no such site


def test_a_rejected_landing_never_colours_and_a_kept_fail_is_flagged(tmp_path):
    e, bench = session(tmp_path)
    bench.vna.drift_db = -1.0  # 1 dB less transmission: a sweep with line figures, and wrong ones
    rejected = e.measure()
    assert rejected.metrics["alpha_db_per_mm"][0] > 0.5  # about 0.84 dB/mm here
    e.reland()
    bench.vna.drift_db = 0.0
    e.measure()  # the good one
    e.accept()
    bench.vna.faults[((2, 1), "ln-b")] = ["landed", "lifted"]
    e.measure()
    e.skip("pads contaminated")  # only a rejected landing on this die
    bench.vna.faults[((3, 1), "ln-b")] = ["landed", "lifted"]
    e.measure()
    e.accept("kept for the record")  # a FAIL kept with a reason
    values = metric_values(e.state, MetricChoice("ln-b", "alpha_db_per_mm", 30e9))
    # the re-landed sweep's figures are not shown; the lifted ones have none, the skipped one is not kept
    assert set(values) == {(1, 1)}
    assert values[(1, 1)] == pytest.approx(ALPHA_NP_PER_M * NP_TO_DB / 1000, rel=0.05)
    assert kept_despite_fail(e.state) == {(3, 1)}
    from probelog.events import read_session

    assert cal_die_of(read_session(e.session_dir)) == (1, 1)  # the plan's calibration die
    assert cal_die_of([]) is None


def test_the_map_by_metric_shows_shades_and_no_value_for_the_rest():
    m = DieMap()
    m.update_state({(0, 0): "done", (1, 0): "done", (2, 0): "todo"}, None)
    m.colour_by({(0, 0): 1.0, (1, 0): 2.0}, "alpha")
    text = m.render().plain
    assert SHADES[0] in text and SHADES[-1] in text  # lowest and highest of the two values
    assert text.count("·") == 1  # the die without a value
    m.colour_by(None)
    assert not any(s in m.render().plain for s in SHADES)  # by status: marks, no shades
