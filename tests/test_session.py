"""The session engine on a fake bench of ideal structures (tests/_engine_fakes.py)."""

from __future__ import annotations

import dataclasses
import hashlib

import numpy as np
import pytest

import probelog.session as S
from probelog.plan import load_plan_text
from probelog.verdicts import Verdict
from probelog.journal import Journal, verify
from tests._engine_fakes import fake_bench, ideal, plan_text


def make(tmp_path, **kw):
    plan = load_plan_text(plan_text(**kw), "fake.toml")
    bench = fake_bench()
    journal = Journal.create(tmp_path, "s1")
    events: list = []
    engine = S.Engine(plan, bench, journal, operator="tester")
    engine.subscribe(events.append)
    return engine, bench, journal, events


def calibrate(engine):
    while engine.next_step is not None:
        assert engine.next_step.kind is S.StepKind.CAL_STANDARD
        engine.measure()
    cal = engine.compute_calibration()
    engine.accept_calibration()
    return cal


def test_walk_calibrates_checks_and_journals_in_order(tmp_path):
    engine, bench, journal, events = make(tmp_path)
    assert engine.phase is S.Phase.CALIBRATING
    assert [s.name for s in engine.cal_standards] == ["open", "short", "load", "thru"]
    cal = calibrate(engine)
    assert cal.ok and cal.verdict is Verdict.PASS
    # LRRM and SOLT from exactly modelled standards agree (REFERENCES.md: each
    # calibration recovers a DUT to ~1e-11 when the standards are exact).
    assert cal.agreement["worst"] < 1e-6
    assert engine.phase is S.Phase.PROBING
    while engine.phase is not S.Phase.DONE:
        out = engine.measure()
        assert engine.phase is S.Phase.DECIDING and out.verdict is Verdict.PASS
        # corrected line equals the ideal one: skrf calibration with exact standards
        ref = ideal(*{"ln-a": ("line", {"length_um": 500.0}), "ln-b": ("line", {"length_um": 1500.0}),
                      "dev-ind": ("device", {})}[out.step.site], out.raw.frequency)
        assert np.abs(out.corrected.s - ref.s).max() < 1e-8
        engine.accept()
    assert engine.progress == (6, 6)
    assert set(engine.wafer_status.values()) == {"done"}
    # one touchdown per landing and probe: 4 standards + 2 verification + 6 sites
    assert engine.touchdowns == {"P1": 12, "P2": 12} == bench.prober.td
    assert bench.prober.moves_in_contact == 0
    types = [e.type for e in journal.events()]
    assert types[:2] == ["session-opened", "cal-standard"]
    assert types.count("landing") == 6 and types.count("decision") == 6
    assert types.index("cal-accepted") < types.index("landing")
    landing = next(e for e in journal.events() if e.type == "landing")
    raw = landing.payload["raw"]
    assert hashlib.sha256((journal.root / raw["path"]).read_bytes()).hexdigest() == raw["sha256"]
    assert raw["path"] == "data/d1_1/ln-a/L1-raw.s2p"
    assert landing.payload["metrics"]["eps_eff"][0] == pytest.approx(6.35, rel=1e-6)  # fake's eps_eff
    engine.close()
    assert journal.events()[-1].type == "session-closed" and journal.events()[-1].payload["completed"]
    assert verify(journal.root).ok  # every hash in the chain and every data file checks out
    kinds = [type(e).__name__ for e in events]
    assert "CalibrationComputed" in kinds and kinds[-1] == "SessionClosed"


def test_power_above_the_limit_is_refused(tmp_path):
    plan = load_plan_text(plan_text(), "fake.toml")
    hot = dataclasses.replace(plan, vna=dataclasses.replace(plan.vna, power_dbm=0.0))
    with pytest.raises(S.EngineError, match="above the plan's limit"):
        S.Engine(hot, fake_bench(), Journal.create(tmp_path, "s"), "t")


def test_decisions_need_reasons_and_the_right_phase(tmp_path):
    engine, *_ = make(tmp_path)
    with pytest.raises(S.EngineError, match="expected phase deciding"):
        engine.accept()
    with pytest.raises(S.EngineError, match="standards not measured"):
        engine.compute_calibration()
    calibrate(engine)
    engine.measure()
    with pytest.raises(S.EngineError, match="reason is required"):
        engine.skip("  ")
    engine.reland("looked skated")
    assert engine.next_step.landing == 2
    out = engine.measure()
    assert out.files["raw"].endswith("L2-raw.s2p")
    engine.skip("pad damaged")
    assert engine.next_step.site == "ln-b"


def test_instrument_error_is_journaled_and_measure_can_be_retried(tmp_path):
    engine, bench, journal, events = make(tmp_path)
    calibrate(engine)
    bench.vna.faults[((1, 1), "ln-a")] = ["error"]
    step = engine.next_step
    with pytest.raises(S.InstrumentError) as exc:
        engine.measure()
    assert exc.value.where == "vna"
    last = journal.events()[-1]
    assert last.type == "instrument-error" and last.payload["error"] == "TimeoutError"
    assert not bench.prober.in_contact  # separated after the failure
    assert engine.next_step == step and engine.phase is S.Phase.PROBING
    assert bench.vna.reopens == 0  # nothing reopened until the next command
    assert engine.measure().step.landing == 1
    assert bench.vna.reopens == 1  # the link is reset before the VNA is used again
    assert any(isinstance(e, S.InstrumentFailed) for e in events)


def test_drift_failure_advises_recalibration(tmp_path):
    engine, bench, journal, events = make(tmp_path, drift_every=2)
    calibrate(engine)
    assert engine.next_step.kind is S.StepKind.DRIFT
    ref = engine.measure()  # the reference right after calibration
    assert ref.verdict is Verdict.PASS and journal.events()[-1].payload["reference_seq"] is None
    for _ in range(2):
        engine.measure()
        engine.accept()
    assert engine.next_step.kind is S.StepKind.DRIFT
    bench.vna.drift_db = 0.5  # a 0.5 dB tracking change: far beyond trade-number drift (0.01-0.05 dB)
    out = engine.measure()
    assert out.verdict is Verdict.FAIL
    assert journal.events()[-1].type == "recal-requested"
    assert any(isinstance(e, S.RecalibrationAdvised) for e in events)
    engine.recalibrate("drift")
    assert engine.phase is S.Phase.CALIBRATING and engine.next_step.kind is S.StepKind.CAL_STANDARD
    bench.vna.drift_db = 0.0
    cal2 = calibrate(engine)
    assert cal2.cal_id == "cal2" and engine.active_cal.cal_id == "cal2"
    assert engine.next_step.kind is S.StepKind.DRIFT  # a new reference for the new cal


def test_a_note_goes_to_the_site_the_operator_names_else_where_the_engine_stands(tmp_path):
    """With the probes up after a decision the next site is ln-b, but the operator
    is still looking at ln-a's landing: the note names ln-a. Without a place, the
    note goes to the landing waiting for a decision, else the next site."""
    engine, _, journal, _ = make(tmp_path)
    calibrate(engine)
    out = engine.measure()
    engine.skip("pad damaged")
    assert engine.next_step.site == "ln-b"
    engine.note("scratch across the pad", out.step.die, out.step.site)
    engine.note("about the next one")
    with pytest.raises(S.EngineError, match="no site named"):
        engine.note("nowhere", out.step.die, "no-such-site")
    notes = [e.payload for e in journal.events() if e.type == "note"]
    assert [(n["site"], n["text"]) for n in notes] == [(out.step.site, "scratch across the pad"),
                                                       ("ln-b", "about the next one")]
    assert notes[0]["die"] == list(out.step.die)


def test_a_reland_goes_before_a_drift_re_measure_that_fell_due(tmp_path):
    """``r`` after a FAIL lands on the same site again; the re-measure the cadence
    asks for comes before the next new site (issue #12: it came first and the
    operator saw a drift PASS for another site)."""
    engine, bench, journal, _ = make(tmp_path, drift_every=2)
    calibrate(engine)
    engine.measure()  # the drift reference right after the cal
    engine.measure()
    engine.accept()
    bench.vna.faults[((1, 1), "ln-b")] = ["lifted"]
    out = engine.measure()  # second landing since the reference: a re-measure is due
    assert out.verdict is Verdict.FAIL and out.step.site == "ln-b"
    engine.reland("tip lifted")
    step = engine.next_step
    assert (step.kind, step.site, step.landing) == (S.StepKind.SITE, "ln-b", 2)
    again = engine.measure()
    assert again.step.site == "ln-b" and again.verdict is Verdict.PASS
    engine.accept()
    assert engine.next_step.kind is S.StepKind.DRIFT  # the due re-measure, before dev-ind
    engine.measure()
    assert engine.next_step.site == "dev-ind"


def test_a_requested_drift_re_measure_still_goes_before_a_reland(tmp_path):
    """The operator's own ``request_drift()`` is not postponed: only the cadence waits."""
    engine, bench, journal, _ = make(tmp_path, drift_every=50)
    calibrate(engine)
    engine.measure()  # the reference
    engine.measure()
    engine.reland()
    assert engine.next_step.kind is S.StepKind.SITE
    engine.request_drift()
    assert engine.next_step.kind is S.StepKind.DRIFT
    engine.measure()
    assert (engine.next_step.site, engine.next_step.landing) == ("ln-a", 2)


def test_a_pending_reland_survives_a_resume_before_the_due_drift_re_measure(tmp_path):
    """The re-land is read from the state (the site's last decision re-lands its
    latest landing), so a session quit right after ``r`` resumes on that site."""
    engine, bench, journal, _ = make(tmp_path, drift_every=1)
    calibrate(engine)
    engine.measure()  # the reference
    bench.vna.faults[((1, 1), "ln-a")] = ["lifted"]
    assert engine.measure().verdict is Verdict.FAIL  # a re-measure is due after every landing
    engine.reland("tip lifted")
    engine.close(completed=False)
    again = S.Engine.resume(journal.root, fake_bench())
    step = again.next_step
    assert (step.kind, step.site, step.landing) == (S.StepKind.SITE, "ln-a", 2)
    again.measure()
    again.accept()
    assert again.next_step.kind is S.StepKind.DRIFT
