"""The operator's decision flow (issue #12) through the Pilot on the fake engine:
recalibrate mid-wafer and come back to the walk, FAIL then re-land, FAIL then keep
with a reason (and see it on the wafer), an instrument error held on the board
then recovered, a dead die skipped whole, the 300 ms key guard of dialogs, the
journal view, the keys overlay, the palette's quit. Each asserts on the screen,
then on the journal the engine wrote."""

from __future__ import annotations

import asyncio
import json

import probelog.tui.screens.dialogs as dialogs
from probelog.tui.app import build_app
from probelog.tui.screens.calibrate import Calibrate
from probelog.tui.screens.dialogs import AskReason, Confirm, Failure, KeysHelp
from probelog.tui.screens.journal_view import JournalView
from probelog.tui.screens.probe import Probe
from probelog.tui.screens.wafer import WaferView
from probelog.tui.widgets.die_map import DieMap, legend
from tests.tui.fake_engine import SITES, FakeEngine
from tests.tui.helpers import press, quit_session, settle
from tests.tui.test_flow import board_text, calibrate, screen_text

FAULT = ((0, 0), "line-a", 1)  # lifted tip on the very first site landing


def journal(session_dir):
    return [json.loads(x) for x in (session_dir / "journal.jsonl").read_bytes().splitlines()]


def decisions(session_dir):
    return [(tuple(p["die"]), p["site"], p["landing"], p["action"], p["reason"])
            for p in (e["payload"] for e in journal(session_dir) if e["type"] == "decision")]


async def probing(pilot):
    """Calibrate, accept the cal set: the probe screen, probes up."""
    await settle(pilot, "open")
    await calibrate(pilot)
    await press(pilot, "a")
    assert isinstance(pilot.app.screen, Probe)


def drive(session, scenario, size=(120, 40), **engine_kw):
    async def go():
        app = build_app(lambda: FakeEngine(session, **engine_kw), show_cautions=False)
        async with app.run_test(size=size) as pilot:
            await probing(pilot)
            await scenario(pilot, app)
            await quit_session(pilot)
    asyncio.run(go())


def test_recalibrate_mid_wafer_then_back_to_the_walk_where_it_left_off(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "space", "a")  # die 0,0 line-a kept
        assert app.engine.next_step.site == "line-b"
        await press(pilot, "c")
        assert isinstance(app.screen, AskReason)
        await press(pilot, "2")  # probes re-planarised
        assert isinstance(app.screen, Calibrate)  # not a dead end: the calibration screen
        assert "standard 1 of 4" in screen_text(app)
        await calibrate(pilot)
        await press(pilot, "a")
        assert isinstance(app.screen, Probe)
        assert "die 0,0 · line-b (line) · landing 1" in screen_text(app)  # where it left off
        await press(pilot, "space")
        assert "die 0,0 · line-b (line) · landing 1" in board_text(app)

    drive(session, scenario)
    types = [e["type"] for e in journal(session)]
    assert types.count("cal-accepted") == 2 and "recal-requested" in types
    recal = next(e["payload"] for e in journal(session) if e["type"] == "recal-requested")
    assert recal["reason"] == "probes re-planarised"


def test_fail_then_enter_relands_and_a_keeps_nothing(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "space")
        assert "✖ FAIL" in board_text(app)
        screen = app.screen
        assert screen.check_action("keep", ()) is False and screen.check_action("keep_and_land", ()) is False
        await press(pilot, "a")  # not offered after a FAIL: nothing journaled
        assert not [d for d in decisions(session) if d[3] == "accept"]
        await press(pilot, "enter")  # the default key re-lands
        assert "✔ PASS" in board_text(app) and "landing 2" in board_text(app)

    drive(session, scenario, faults={FAULT})
    assert decisions(session) == [((0, 0), "line-a", 1, "reland", "")]
    landings = [e["payload"]["landing"] for e in journal(session) if e["type"] == "landing"]
    assert landings == [1, 2]


def test_fail_kept_only_with_A_and_a_reason_and_the_wafer_shows_it(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "space", "A")
        assert isinstance(app.screen, AskReason)
        assert "Keep a FAILED landing?" in screen_text(app)
        await press(pilot, "escape")  # backing out keeps nothing
        assert isinstance(app.screen, Probe) and not decisions(session)
        await press(pilot, "A", "2")
        assert "KEPT DESPITE FAIL" in board_text(app)
        await press(pilot, "w")
        assert isinstance(app.screen, WaferView)
        assert (0, 0) in app.screen.query_one(DieMap).flagged
        assert "a landing kept despite FAIL" in screen_text(app)  # the cursor starts on that die
        assert "! kept despite FAIL" in legend(None).plain  # and the legend says what ! means
        await press(pilot, "escape")

    drive(session, scenario, faults={FAULT})
    assert decisions(session) == [((0, 0), "line-a", 1, "accept-despite-fail",
                                   "checked under the microscope: contact is good")]


def test_instrument_error_holds_the_board_until_retried(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "space")
        assert isinstance(app.screen, Failure)
        text = screen_text(app)
        assert "The VNA failed during the landing" in text  # titled by what failed
        assert "enter retries" in text and "no reply to the sweep trigger" in text  # what to do, its words
        await press(pilot, "enter")  # closes the dialog only
        assert isinstance(app.screen, Probe)
        assert board_text(app).startswith("ERROR") and "nothing recorded" in screen_text(app)
        assert app.screen.check_action("retry", ()) is True and app.screen.check_action("land", ()) is False
        await press(pilot, "n", "escape")  # a note in between leaves the error up
        assert board_text(app).startswith("ERROR")
        await press(pilot, "enter")  # retry
        assert "✔ PASS" in board_text(app) and "landing 1" in board_text(app)

    drive(session, scenario, errors={FAULT})
    types = [e["type"] for e in journal(session)]
    assert types.count("instrument-error") == 1 and types.count("landing") == 1


def test_instrument_error_then_skip_the_site(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "space", "enter", "s", "1")
        assert not board_text(app).startswith("ERROR")
        assert app.engine.next_step.site == "line-b"

    drive(session, scenario, errors={FAULT})
    assert decisions(session) == [((0, 0), "line-a", 0, "skip", "structure damaged")]


def test_a_dead_die_is_skipped_whole_with_one_reason(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "x", "1")
        assert app.engine.wafer_status[(0, 0)] == "skipped"
        assert app.engine.next_step.die == (1, 0)

    drive(session, scenario)
    skipped = [e["payload"] for e in journal(session) if e["type"] == "die-skipped"]
    assert skipped == [{"die": [0, 0], "sites": [s for s, _ in SITES], "reason": "die dead: no site answers"}]


def test_a_die_skipped_while_its_landing_failed(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "space")
        assert "✖ FAIL" in board_text(app)
        await press(pilot, "x", "1")
        assert app.engine.wafer_status[(0, 0)] == "skipped"

    drive(session, scenario, faults={FAULT})
    # the landing on screen is skipped first (the engine skips whole dies while probing)
    assert decisions(session) == [((0, 0), "line-a", 1, "skip", "die dead: no site answers")]
    skipped = [e["payload"] for e in journal(session) if e["type"] == "die-skipped"]
    assert skipped == [{"die": [0, 0], "sites": ["line-b"], "reason": "die dead: no site answers"}]


def test_keys_pressed_just_before_a_dialog_do_not_answer_it(tmp_path, monkeypatch):
    monkeypatch.setattr(dialogs, "GUARD_S", 60.0)  # the guard stays shut until opened below
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "q")
        assert isinstance(app.screen, Confirm)
        await press(pilot, "enter", "y")  # the landing keys the operator was pressing
        assert isinstance(app.screen, Confirm)  # unanswered
        await press(pilot, "n")
        assert isinstance(app.screen, Confirm)
        app.screen.open_guard()
        await press(pilot, "n")
        assert isinstance(app.screen, Probe)
        monkeypatch.setattr(dialogs, "GUARD_S", 0.0)

    drive(session, scenario)


def test_journal_view_filters_by_die_and_type(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "space", "enter", "enter", "enter")  # 0,0 a b, 1,0 a on screen
        await press(pilot, "j")
        assert isinstance(app.screen, JournalView)
        assert "decision accept die 0,0 line-a" in screen_text(app)
        await press(pilot, "slash", *"1,0 landing")
        text = screen_text(app)
        assert "landing die 1,0 line-a" in text and "die 0,0" not in text
        await press(pilot, "escape", "escape")
        assert isinstance(app.screen, Probe)

    drive(session, scenario)


def test_keys_overlay_lists_what_applies_now_and_the_rest(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "question_mark")
        assert isinstance(app.screen, KeysHelp)
        text = screen_text(app)
        now, later = text.split("not now")
        assert "Move to the next site" in now and "Keep this FAILED landing anyway" in later
        await press(pilot, "escape")
        assert isinstance(app.screen, Probe)

    drive(session, scenario)


def test_drift_reference_looks_unlike_a_site_and_enter_then_lands(tmp_path):
    session = tmp_path / "s"

    async def scenario(pilot, app):
        await press(pilot, "d")
        assert board_text(app).startswith("drift reference ✔ PASS")
        assert app.screen.query_one("#board").has_class("v-ref")
        await press(pilot, "enter")  # lands on the next site of the plan
        # (the fake's drift reference is line-a on die 0,0 itself, so this is its 2nd landing)
        assert board_text(app).startswith("✔ PASS die 0,0 · line-a (line)")
        assert not app.screen.query_one("#board").has_class("v-ref")

    drive(session, scenario)


def test_palette_quit_asks_to_close_the_journal(tmp_path):
    session = tmp_path / "s"

    async def go():
        app = build_app(lambda: FakeEngine(session), show_cautions=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await probing(pilot)
            await pilot.press("ctrl+p")
            await pilot.press(*"Quit")
            await pilot.wait_for_scheduled_animations()
            await press(pilot, "enter")
            assert isinstance(app.screen, Confirm)
            await app._press_keys(["y"])
            await settle(pilot, "closing")
            for _ in range(200):  # bounded: the closing worker posts, then the app leaves
                if app.return_code is not None:
                    break
                await asyncio.sleep(0.01)
        assert "resume it with: probelog run --resume" in app.farewell

    asyncio.run(go())
    assert journal(session)[-1]["type"] == "session-closed"
