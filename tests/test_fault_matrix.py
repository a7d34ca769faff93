"""Every contact fault on every site kind of the demo plan, on the simulated bench
(drivers/simbench/faults.py), through the headless engine: lifted tips caught on
the first die (physics: a tip in the air reads like the probe open), high contact
resistance and a skating ground from the second (population); clean runs with no
FAIL; a calibration whose standards did not land is never accepted.

The full matrix over 10 clean seeds is `bench/fault_matrix.py`; the suite runs
one seed of faults and two clean seeds (marked slow)."""

from __future__ import annotations

import pytest

import probelog.session as S
from probelog.journal import Journal
from probelog.plan import load_plan_text
from probelog.verdicts import Verdict
from tests._engine_fakes import fake_bench, plan_text
from tests._fault_matrix import FIRST_DIE_FAULTS, SECOND_DIE_FAULTS, fault_matrix, plan_text as demo_text


@pytest.mark.slow
def test_fault_matrix_every_fault_on_every_site_kind_is_caught_clean_runs_never_fail():
    _, _, sites = demo_text(2)
    m = fault_matrix(seed=3, clean_seeds=(0, 1), clean_dies=3)
    missed = [f"{k}: {m.messages[k]}" for k, caught in m.caught.items() if not caught]
    assert not missed, missed
    assert set(m.caught) == {(f, s) for f in FIRST_DIE_FAULTS + SECOND_DIE_FAULTS for s in sites}
    assert m.clean_landings == 2 * 3 * len(sites)
    assert m.clean_fails == []
    assert m.clean_cals_accepted == m.clean_cals == 2


@pytest.mark.slow
def test_headless_never_accepts_a_cal_whose_thru_did_not_land(tmp_path, capsys):
    from probelog.tui.cli import main

    text, _, _ = demo_text(1)
    plan = tmp_path / "p.toml"
    plan.write_text(text, encoding="utf-8")
    code = main(["run", str(plan), "--headless", "--dir", str(tmp_path / "s"), "--seed", "2",
                 "--fault-rate", "0", "--retries", "1", "--fault", "lifted@4,4:cal-thru#all"])
    out = capsys.readouterr().out.splitlines()
    stopped = [ln for ln in out if ln.startswith("stopped:")]
    assert code == 1 and len(stopped) == 1 and "standard thru (cal-thru) failed contact" in stopped[0]
    events = list(Journal.open(next((tmp_path / "s").iterdir())).events())
    assert not any(e.type == "cal-accepted" for e in events)
    assert not any(e.type == "landing" for e in events)


def test_engine_refuses_to_accept_a_cal_with_a_failed_standard(tmp_path):
    plan = load_plan_text(plan_text(), "fake.toml")
    bench = fake_bench()
    bench.vna.faults[((1, 1), "cal-thru")] = ["lifted"] * 3
    engine = S.Engine(plan, bench, Journal.create(tmp_path, "r1"), "t")
    while engine.next_step is not None:
        engine.measure()
    cal = engine.compute_calibration()
    assert cal.verdict is Verdict.FAIL
    why = engine.cal_refusal(cal)
    assert why is not None and "thru" in why and "\n" not in why
    with pytest.raises(S.EngineError, match="cannot be accepted"):
        engine.accept_calibration("trying anyway")
    engine.redo_calibration("thru did not land")  # the way out stays open
    assert engine.phase is S.Phase.CALIBRATING
