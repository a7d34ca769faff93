"""SessionState: the reducer folded over the journal equals what the engine
had live, at every event; accepted-despite-FAIL is a state of its own; metrics
at a chosen frequency; resume trusts no file; a bad plan leaves no folder."""

from __future__ import annotations

import re
import shutil

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st_

import probelog.session as S
from probelog import events as ev
from probelog import state as st
from probelog import state_views as sv
from probelog.journal import Journal
from probelog.plan import load_plan_text
from tests._engine_fakes import fake_bench, plan_text

DIES = ((1, 1), (2, 1), (3, 1))


def start(folder, **kw):
    plan = load_plan_text(plan_text(dies=DIES, **kw), "fake.toml")
    bench = fake_bench()
    return S.Engine(plan, bench, Journal.create(folder, "s1"), operator="tester"), bench


def calibrate(e):
    while e.next_step is not None:
        e.measure()
    e.compute_calibration()
    e.accept_calibration("test")


def recording(e):
    """Every live state the engine reaches, by seq (wraps the one fold path)."""
    states = {e.state.seq: e.state}
    fold = e._fold

    def record(event):
        fold(event)
        states[e.state.seq] = e.state
    e._fold = record
    return states


ACTIONS = ["measure", "measure", "measure", "accept", "accept_fail", "reland", "skip", "give_up", "goto",
           "note", "recalibrate", "lift", "drift", "skip_die"]


def act(e, bench, action, die):
    """One operator action; EngineError (not allowed now) is part of the game."""
    try:
        if action == "measure":
            if e.phase is S.Phase.VERIFYING:
                e.accept_calibration("ok")
            elif e.phase is S.Phase.CALIBRATING and e.next_step is None:
                e.compute_calibration()
            else:
                e.measure()
        elif action == "accept":
            e.accept()
        elif action == "accept_fail":
            e.accept("kept for the failure analysis")
        elif action in ("reland",):
            e.reland("again")
        elif action == "skip":
            e.skip("not needed")
        elif action == "give_up":
            e.give_up("broken")
        elif action == "goto":
            e.goto(die)
        elif action == "note":
            e.note("a note")
        elif action == "recalibrate":
            e.recalibrate("tips cleaned")
        elif action == "lift":
            step = e.next_step
            if step is not None:
                bench.vna.faults[(step.die, step.site)] = ["lifted"]
        elif action == "drift":
            e.request_drift()
        elif action == "skip_die":
            e.skip_die(die, "cracked")
    except S.EngineError:
        pass


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(actions=st_.lists(st_.tuples(st_.sampled_from(ACTIONS), st_.sampled_from(DIES)), min_size=5, max_size=40),
       cut=st_.floats(0, 1))
def test_folding_any_prefix_equals_the_live_state_there(tmp_path_factory, actions, cut):
    folder = tmp_path_factory.mktemp("prop")
    e, bench = start(folder, drift_every=3)
    states = recording(e)
    calibrate(e)
    for action, die in actions:
        act(e, bench, action, die)
    e.journal.close()
    events = ev.read_session(folder / "s1")
    assert [x.seq for x in events] == sorted(states) == list(range(1, len(events) + 1))
    s = st.SessionState()
    for x in events:  # every prefix, incrementally
        s = st.apply(s, x)
        assert s == states[x.seq], f"state differs after event {x.seq} ({x.type})"
    k = max(1, int(cut * len(events)))  # and one prefix folded from scratch
    assert st.fold(events[:k]) == states[k]


def test_an_accepted_fail_is_its_own_state(tmp_path):
    e, bench = start(tmp_path, sites=("ln-a",))
    calibrate(e)
    # the contact pre-check sweeps first and sees the tip down; the full sweep lands lifted
    # (a FAIL with a sweep to keep: a failed pre-check has none, tests/test_precheck_engine.py)
    bench.vna.faults[((1, 1), "ln-a")] = ["landed", "lifted"]
    out = e.measure()
    assert out.verdict.value == "fail"
    with pytest.raises(S.EngineError, match="reason is required to accept a FAIL landing on die 1,1 site ln-a"):
        e.accept()
    e.accept("kept: the pad is scratched, analyst wants the sweep")
    e.measure()
    e.accept()  # die 2,1 passes
    e.measure()
    e.give_up("probe slipped")
    s = e.state
    assert s.site((1, 1), "ln-a").decision.action == ev.ACCEPT_DESPITE_FAIL
    assert s.site((1, 1), "ln-a").decision.reason.startswith("kept: the pad")
    assert s.last_accepted((1, 1), "ln-a").verdict.value == "fail"
    assert e.wafer_status == {(1, 1): st.ACCEPTED_DESPITE_FAIL, (2, 1): st.DONE, (3, 1): st.FAILED}
    summary = e.summary()
    assert (summary["accepted"], summary["accepted_despite_fail"], summary["failed"]) == (1, 1, 1)
    assert [d for d, _ in s.accepted_across_dies("ln-a")] == [(1, 1), (2, 1)]


def test_a_schema_1_plain_accept_of_a_fail_reads_as_accepted_despite_fail():
    """Journals written before the distinct action: the landing's verdict tells."""
    land = ev.Event(2, "t", ev.Landing(die=(1, 1), site="a", landing=1, verdict=ev.Verdict.FAIL))
    ok = ev.Event(2, "t", ev.Landing(die=(1, 1), site="a", landing=1, verdict=ev.Verdict.PASS))
    accept = ev.Event(3, "t", ev.Decision(die=(1, 1), site="a", action=ev.ACCEPT, landing=1))
    assert st.fold([land, accept]).site((1, 1), "a").decision.action == ev.ACCEPT_DESPITE_FAIL
    assert st.fold([ok, accept]).site((1, 1), "a").decision.action == ev.ACCEPT
    assert st.fold([land, accept]).n_accepted_despite_fail == 1 and st.fold([ok, accept]).n_accepted == 1


def test_line_figures_are_read_into_the_state_by_die_and_family():
    """``line-figures`` events (the die's pad-free figures) were read and dropped;
    the state keeps each die's figures by line family, the later one winning."""
    def figs(die, family, eps):
        return ev.LineFigures(die=die, family=family, site_a="ln-a", site_b="ln-b", length_a_um=500.0,
                              length_b_um=1500.0, metrics={"f_hz": [4e10], "eps_eff": [eps]})

    a, b, c = figs((1, 1), "cpw/M9/10x6um", 6.6), figs((1, 1), "ms/M1/8um", 3.1), figs((2, 1), "cpw/M9/10x6um", 6.7)
    s = st.fold(ev.Event(i + 1, "t", d) for i, d in enumerate((a, b, c)))
    assert s.line_figures == {(1, 1): {"cpw/M9/10x6um": a, "ms/M1/8um": b}, (2, 1): {"cpw/M9/10x6um": c}}
    assert s.unknown == 0
    again = figs((1, 1), "cpw/M9/10x6um", 6.5)
    s2 = st.apply(s, ev.Event(4, "t", again))
    assert s2.line_figures[(1, 1)]["cpw/M9/10x6um"].metrics["eps_eff"] == [6.5]
    assert s.line_figures[(1, 1)]["cpw/M9/10x6um"] is a  # copy-on-write: the earlier state is unchanged
    assert st.fold([]).line_figures == {}


def test_metric_at_a_chosen_frequency_from_the_journaled_lists(tmp_path):
    """The engine journals line metrics as per-frequency lists; the map reads one value."""
    e, _ = start(tmp_path, sites=("ln-b",))
    calibrate(e)
    e.measure()
    e.accept()
    kept = e.state.last_accepted((1, 1), "ln-b")
    freqs = kept.metrics["f_hz"]
    assert len(freqs) >= 2 and "alpha_db_per_mm" in sv.metric_names(e.state)
    # nearest journaled point: just above the second frequency picks the second value
    want = kept.metrics["alpha_db_per_mm"][1]
    assert sv.kept_metric_at(e.state, (1, 1), "ln-b", "alpha_db_per_mm", freqs[1] * 1.01) == pytest.approx(want)
    # the fake line has alpha = 20 Np/m = 0.1737 dB/mm (8.686 dB/Np; tests/_engine_fakes.py)
    assert want == pytest.approx(20.0 * 8.686 / 1000, rel=0.05)
    assert sv.kept_metric_at(e.state, (2, 1), "ln-b", "alpha_db_per_mm", freqs[1]) is None  # not landed


def test_recalibrating_from_probing_goes_on_where_the_walk_stopped(tmp_path):
    e, _ = start(tmp_path)
    calibrate(e)
    e.goto((2, 1))
    for _ in range(2):
        e.measure()
        e.accept()
    before = e.next_step
    e.recalibrate("tips cleaned")
    assert e.phase is S.Phase.CALIBRATING and e.state.cal_id == "cal2"
    calibrate(e)
    assert e.state.active.cal_id == "cal2"
    e.measure()  # drift reference or site: the walk's position is kept
    step = e.next_step if e.phase is S.Phase.PROBING else e.last_outcome.step
    assert (step.die, step.site) == (before.die, before.site)


def test_skip_die_skips_every_undecided_site_with_one_reason(tmp_path):
    e, _ = start(tmp_path)
    calibrate(e)
    e.measure()
    e.accept()  # (1,1) ln-a decided
    assert e.skip_die((1, 1), "cracked corner") == ["ln-b", "dev-ind"]
    assert e.state.decisions()[((1, 1), "ln-b")] == ev.SKIP
    assert e.state.site((1, 1), "dev-ind").decision.reason == "cracked corner"
    assert e.wafer_status[(1, 1)] == st.DONE  # one accepted site: not all skipped
    with pytest.raises(S.EngineError, match="every site is already decided"):
        e.skip_die((1, 1), "again")
    e.skip_die((2, 1), "cracked")
    assert e.wafer_status[(2, 1)] == st.SKIPPED
    events = [x for x in ev.read_session(tmp_path / "s1") if x.type == "die-skipped"]
    assert len(events) == 2 and events[0].data.sites == ["ln-b", "dev-ind"]


def _crashed_probing_session(tmp_path):
    e, _ = start(tmp_path, drift_every=2)
    calibrate(e)
    e.measure()  # drift reference
    e.measure()
    e.accept()
    e.journal.close()
    return tmp_path / "s1"


def test_resume_refuses_a_tampered_cal_set_naming_the_file(tmp_path):
    folder = _crashed_probing_session(tmp_path)
    good = tmp_path / "copy"
    shutil.copytree(folder, good)
    calset = next((folder / "data" / "cal" / "cal1").glob("calset*/calset.json"))
    calset.write_text(calset.read_text().replace("cal1", "calX", 1))
    with pytest.raises(S.EngineError, match=rf"cannot resume: {calset}: cal set of cal1 differs"):
        S.Engine.resume(folder, fake_bench())
    lines_before = (folder / "journal.jsonl").read_bytes()
    assert b"session-resumed" not in lines_before  # refused before anything was written
    e = S.Engine.resume(good, fake_bench(), operator="night shift")  # the untouched copy resumes
    resumed = e.state.resumes[-1]
    assert resumed.operator == "night shift" and resumed.probelog_version and e.phase is S.Phase.PROBING
    e.close(False)


def test_resume_refuses_a_tampered_drift_reference(tmp_path):
    folder = _crashed_probing_session(tmp_path)
    ref = next((folder / "data" / "d1_1" / "cal-thru").glob("L*-cor.s2p"))
    ref.write_bytes(ref.read_bytes() + b"! edited\n")
    with pytest.raises(S.EngineError, match=rf"{ref}: drift reference differs"):
        S.Engine.resume(folder, fake_bench())


@pytest.mark.parametrize("edit, message", [
    (('[vna]', '[limits]\ncontact_dbb = 3.0\n\n[vna]'), r"unknown limit 'contact_dbb'"),
    (('plx7.toml', 'missing-kit.toml'), r"missing-kit\.toml"),
])
def test_a_bad_plan_is_refused_before_any_folder_exists(tmp_path, edit, message):
    plan = load_plan_text(plan_text().replace(*edit), "bad.toml")
    with pytest.raises(S.EngineError, match=message):
        S.Engine.new(plan, fake_bench(), tmp_path / "sessions")
    assert not (tmp_path / "sessions").exists() or not any((tmp_path / "sessions").iterdir())
    good = load_plan_text(plan_text(), "good.toml")  # the same call with a good plan makes the folder
    S.Engine.new(good, fake_bench(), tmp_path / "sessions").close(False)
    assert len(list((tmp_path / "sessions").iterdir())) == 1


def test_the_kit_text_and_hash_are_journaled_with_the_cal(tmp_path):
    import hashlib

    from tests._engine_fakes import KIT

    e, _ = start(tmp_path)
    calibrate(e)
    computed = next(x.data for x in ev.read_session(tmp_path / "s1") if x.type == "cal-computed")
    assert computed.kit_text == KIT.read_text(encoding="utf-8")
    assert computed.kit_sha256 == hashlib.sha256(KIT.read_bytes()).hexdigest()
    assert e.state.active.kit_sha256 == computed.kit_sha256


def test_an_accepted_fail_shows_in_manifest_report_history_map_and_verify(tmp_path, capsys):
    """The reader bug of issue 11: a FAIL kept with a reason vanished from the
    summary, the die history and the map; every reader now shows it."""
    from probelog.export import export_bundle
    from probelog.manifest import read_manifest_csv
    from probelog.tui.cli import main as cli_main
    from probelog.tui.screens.probe import die_history

    e, bench = start(tmp_path, sites=("ln-b",))
    calibrate(e)
    bench.vna.faults[((1, 1), "ln-b")] = ["landed", "lifted"]  # pre-check passes, the full sweep is lifted
    e.measure()
    e.accept("lifted tip kept: analyst wants the open-circuit sweep")
    for _ in range(2):
        e.measure()
        e.accept()
    history = die_history(e.state, (1, 1))
    assert history[-1] == "ln-b L1: accept-despite-fail (lifted tip kept: analyst wants the open-circuit sweep)"
    metrics = sv.die_metrics(e.state)
    assert set(metrics) == {(2, 1), (3, 1)}  # the lifted landing has no line metrics; the others do
    assert all("ln-b.z0_re" in m for m in metrics.values())
    folder = e.session_dir
    e.close()
    out = export_bundle(folder, tmp_path / "bundle", progress=False)
    rows = {(r["die_col"], r["die_row"]): r for r in read_manifest_csv(out / "manifest.csv")}
    assert rows[(1, 1)]["decision"] == "accept-despite-fail" and rows[(1, 1)]["verdict"] == "fail"
    assert rows[(1, 1)]["decision_reason"].startswith("lifted tip kept")
    assert rows[(2, 1)]["decision"] == "accept"
    page = (out / "report.html").read_text(encoding="utf-8")
    assert re.search(r"Accepted despite FAIL</td><td>1<", page), "report summary row missing"
    assert "accept-despite-fail: lifted tip kept" in page
    assert cli_main(["verify", str(folder)]) == 0
    assert "2 accepted, 1 accepted despite FAIL, 0 skipped, 0 given up" in capsys.readouterr().out


def test_resume_uses_the_journaled_kit_when_the_kit_file_is_gone(tmp_path):
    """A plan given by a relative path, or a session folder moved to another
    machine: the kit file is not where the plan says; the kit text journaled with
    the cal lets the session resume (and recalibrate) all the same."""
    kit = tmp_path / "kit.toml"
    from tests._engine_fakes import KIT

    kit.write_bytes(KIT.read_bytes())
    plan = load_plan_text(plan_text().replace(str(KIT), str(kit)), "moved.toml")
    e = S.Engine(plan, fake_bench(), Journal.create(tmp_path, "s1"), "t")
    calibrate(e)
    e.journal.close()
    kit.unlink()
    r = S.Engine.resume(tmp_path / "s1", fake_bench())
    r.recalibrate("tips cleaned")
    assert r.next_step.kind is S.StepKind.CAL_STANDARD  # the kit's standards, from the journal
    r.journal.close()
    fresh = load_plan_text(plan_text().replace(str(KIT), str(kit)), "moved.toml")
    with pytest.raises(S.EngineError, match="kit.toml"):  # a new session still needs the file
        S.Engine.new(fresh, fake_bench(), tmp_path / "sessions")


def test_run_refuses_a_plan_with_an_unknown_limit_in_one_line_and_no_folder(tmp_path, capsys):
    from probelog.tui.cli import main as cli_main

    plan = tmp_path / "bad.toml"
    plan.write_text(plan_text().replace("[vna]", "[limits]\ncontact_dbb = 3.0\n\n[vna]"), encoding="utf-8")
    assert cli_main(["run", str(plan), "--headless", "--dir", str(tmp_path / "sessions")]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "unknown limit 'contact_dbb'" in err and "Traceback" not in err
    assert not (tmp_path / "sessions").exists()
