"""Engine.goto(die): jump the walk to a die, refuse what makes no sense, survive a crash.

The expected walk is the plan's own order (docs/engine.md: after the jump the walk
goes on in the plan's order from that die, wrapping round, skipping what is
finished); the plan here lists three dies of two sites each.
"""

from __future__ import annotations

import json

import pytest

import probelog.session as S
from probelog.journal import Journal, verify
from probelog.plan import load_plan_text
from tests._engine_fakes import fake_bench, plan_text

DIES = ((1, 1), (2, 1), (1, 2))
SITES = ("ln-a", "ln-b")


def start(tmp_path, **kw):
    plan = load_plan_text(plan_text(dies=DIES, sites=SITES, **kw), "fake.toml")
    engine = S.Engine(plan, fake_bench(), Journal.create(tmp_path, "s1"), operator="tester")
    events: list = []
    engine.subscribe(events.append)
    return engine, events


def calibrate(engine):
    while engine.next_step is not None:
        engine.measure()
    engine.compute_calibration()
    engine.accept_calibration()


def where(engine):
    step = engine.next_step
    return (step.die, step.site) if step else None


def land_and_accept(engine):
    out = engine.measure()
    engine.accept()
    return out.step.die, out.step.site


def test_goto_moves_the_walk_and_keeps_the_plan_order_after_it(tmp_path):
    engine, events = start(tmp_path)
    with pytest.raises(S.EngineError, match="expected phase probing"):
        engine.goto((2, 1))  # not while calibrating
    calibrate(engine)
    assert where(engine) == ((1, 1), "ln-a")
    engine.goto((2, 1), "neighbour of a bad die")
    assert where(engine) == ((2, 1), "ln-a")
    jumped = [e for e in events if isinstance(e, S.JumpedToDie)]
    assert [(e.die, e.reason) for e in jumped] == [((2, 1), "neighbour of a bad die")]
    assert land_and_accept(engine) == ((2, 1), "ln-a")
    engine.measure()
    with pytest.raises(S.EngineError, match="expected phase probing"):
        engine.goto((1, 1))  # a landing waits for its decision
    engine.accept()
    # die (2,1) is finished: the walk goes on to the next die of the plan, then wraps
    with pytest.raises(S.EngineError, match="nothing left"):
        engine.goto((2, 1))
    with pytest.raises(S.EngineError, match="not in the plan"):
        engine.goto((3, 3))
    walked = [land_and_accept(engine) for _ in range(4)]
    assert walked == [((1, 2), "ln-a"), ((1, 2), "ln-b"), ((1, 1), "ln-a"), ((1, 1), "ln-b")]
    assert engine.phase is S.Phase.DONE
    engine.close()
    assert verify(engine.session_dir).ok


def test_goto_lands_on_the_first_unfinished_site_of_the_die(tmp_path):
    engine, _ = start(tmp_path)
    calibrate(engine)
    engine.goto((1, 2))
    engine.skip("pads contaminated")  # skip the first site of (1,2) before landing
    engine.goto((1, 1))
    engine.goto((1, 2))  # back: ln-a is decided, so ln-b
    assert where(engine) == ((1, 2), "ln-b")
    engine.close()


def test_goto_survives_a_crash(tmp_path):
    engine, _ = start(tmp_path)
    calibrate(engine)
    engine.goto((1, 2))
    assert land_and_accept(engine) == ((1, 2), "ln-a")
    engine.journal.close()  # killed: no session-closed
    lines = [json.loads(x) for x in (tmp_path / "s1" / "journal.jsonl").read_bytes().splitlines()]
    assert [e["payload"] for e in lines if e["type"] == "goto"] == [{"die": [1, 2]}]  # no reason given: none written

    resumed = S.Engine.resume(tmp_path / "s1", fake_bench())
    assert where(resumed) == ((1, 2), "ln-b")
    walked = [land_and_accept(resumed) for _ in range(5)]
    assert walked == [((1, 2), "ln-b"), ((1, 1), "ln-a"), ((1, 1), "ln-b"),
                      ((2, 1), "ln-a"), ((2, 1), "ln-b")]
    resumed.close()
