"""The headless policy: accept passes, re-land failures, give up after N, go on."""

from __future__ import annotations

import io

import pytest

import probelog.session as S
from probelog.headless import run_headless
from probelog.journal import Journal
from probelog.plan import load_plan_text
from tests._engine_fakes import fake_bench, plan_text


def test_lifted_tip_is_relanded_then_given_up_and_the_run_goes_on(tmp_path):
    plan = load_plan_text(plan_text(), "fake.toml")
    bench = fake_bench()
    # die (1,1) ln-a: lifted twice then fine -> accepted on L3 with 2 retries;
    # die (2,1) ln-b: lifted every time -> given up after 2 re-landings
    bench.vna.faults[((1, 1), "ln-a")] = ["lifted", "lifted"]
    bench.vna.faults[((2, 1), "ln-b")] = ["lifted"] * 5
    bench.vna.faults[((2, 1), "dev-ind")] = ["error"]
    engine = S.Engine(plan, bench, Journal.create(tmp_path, "h1"), "t")
    out = io.StringIO()
    summary = run_headless(engine, retries=2, out=out)
    lines = out.getvalue().splitlines()
    assert summary.completed and summary.exit_code == 0
    assert (summary.accepted, summary.failed, summary.relands, summary.instrument_errors) == (5, 1, 4, 1)
    assert lines[-1] == str(tmp_path / "h1")
    assert any("ln-a L3 pass" in ln for ln in lines)
    assert any("ln-b L3 fail -> given up" in ln and "contact" in ln for ln in lines)
    decisions = [e.payload for e in Journal.open(tmp_path / "h1").events() if e.type == "decision"]
    assert [d["action"] for d in decisions if d["site"] == "ln-b" and d["die"] == [2, 1]] == \
        ["reland", "reland", "give-up"]
    assert engine.wafer_status[(2, 1)] == "failed" and engine.wafer_status[(1, 1)] == "done"


def test_retries_must_not_be_negative(tmp_path):
    plan = load_plan_text(plan_text(), "fake.toml")
    engine = S.Engine(plan, fake_bench(), Journal.create(tmp_path, "h2"), "t")
    with pytest.raises(ValueError, match="retries"):
        run_headless(engine, retries=-1, out=io.StringIO())


def test_headless_relands_before_a_drift_re_measure_that_fell_due(tmp_path):
    """With a re-measure due after every landing, each re-land of a FAIL still
    comes straight after it; the drift re-measure waits for the next new site."""
    plan = load_plan_text(plan_text(drift_every=1), "fake.toml")
    bench = fake_bench()
    bench.vna.faults[((1, 1), "ln-b")] = ["lifted", "lifted"]
    engine = S.Engine(plan, bench, Journal.create(tmp_path, "h3"), "t")
    summary = run_headless(engine, retries=2, out=io.StringIO())
    assert summary.completed and summary.relands == 2
    # the lifted tip is caught by the contact pre-check (a FAIL of its own kind)
    measured = [(e.type, e.payload["site"], e.payload["landing"]) for e in Journal.open(tmp_path / "h3").events()
                if e.type in ("landing", "precheck", "drift") and e.payload["die"] == [1, 1]]
    at = measured.index(("precheck", "ln-b", 1))
    assert measured[at:at + 4] == [("precheck", "ln-b", 1), ("precheck", "ln-b", 2), ("landing", "ln-b", 3),
                                   ("drift", "cal-thru", measured[at + 3][2])], measured
