"""Resume: state rebuilt from the journal alone, then the plan goes on."""

from __future__ import annotations

import io

import numpy as np
import pytest

import probelog.session as S
from probelog.headless import run_headless
from probelog.journal import Journal, verify
from probelog.plan import load_plan_text
from tests._engine_fakes import fake_bench, plan_text


def start(tmp_path, **kw):
    plan = load_plan_text(plan_text(**kw), "fake.toml")
    return S.Engine(plan, fake_bench(), Journal.create(tmp_path, "s1"), operator="tester")


def crash(engine):
    """Stop without session-closed, as a killed process would."""
    engine.journal.close()


def test_resume_after_probing_rebuilds_state_and_finishes(tmp_path):
    e = start(tmp_path, drift_every=4)
    while e.next_step is not None:
        e.measure()
    e.compute_calibration()
    e.accept_calibration()
    e.measure()  # drift reference
    for _ in range(2):
        e.measure()
        e.accept()
    undecided = e.measure()  # landed, no decision yet
    before = dict(e.touchdowns), e.progress, e.active_cal.cal_id
    crash(e)

    reads = []
    real = S.skrf.Network

    def counting(*a, **k):
        if a and isinstance(a[0], str):
            reads.append(a[0])
        return real(*a, **k)

    S.skrf.Network = counting
    try:
        r = S.Engine.resume(tmp_path / "s1", fake_bench())
    finally:
        S.skrf.Network = real
    # Touchstone read back: the active cal set's terms and the drift reference, no landing
    others = [p for p in reads if "/calset/" not in p]
    assert len(others) == 1 and "cal-thru" in others[0]
    assert any("/calset/" in p for p in reads)
    assert (dict(r.touchdowns), r.progress, r.active_cal.cal_id) == before
    assert r.phase is S.Phase.PROBING
    step = r.next_step
    assert (step.die, step.site, step.landing) == (undecided.step.die, undecided.step.site, 2)
    out = r.measure()
    # the reloaded cal set corrects exactly as the one solved before the crash
    assert np.abs(out.corrected.s - undecided.corrected.s).max() < 1e-9
    r.accept()
    summary = run_headless(r, retries=1, out=io.StringIO())
    assert summary.completed and summary.exit_code == 0
    assert r.progress == (6, 6)
    report = verify(tmp_path / "s1")
    assert report.ok, report.problems
    with pytest.raises(S.EngineError, match="already completed"):
        S.Engine.resume(tmp_path / "s1", fake_bench())


def test_resume_mid_calibration_continues_with_the_next_standard(tmp_path):
    e = start(tmp_path)
    e.measure()
    e.measure()
    crash(e)
    r = S.Engine.resume(tmp_path / "s1", fake_bench())
    assert r.phase is S.Phase.CALIBRATING
    assert [s.measured for s in r.cal_standards] == [True, True, False, False]
    assert r.next_step.standard == "load"
    r.measure()
    r.measure()
    cal = r.compute_calibration()  # reads the two standards measured before the crash
    assert cal.ok and cal.cal_id == "cal1"


def test_resume_of_a_folder_without_journal_is_a_clear_error(tmp_path):
    with pytest.raises(S.EngineError, match="not a session folder"):
        S.Engine.resume(tmp_path, fake_bench())
