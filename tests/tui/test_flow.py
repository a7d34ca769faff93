"""The whole bench flow driven from the keyboard through the Pilot, on the fake
engine of docs/engine.md: cautions, calibrate, land, a fault caught, re-land, skip
with a reason, a note, quit, resume. Asserts on what the screen shows, then on
what the journal holds, and that the two agree."""

from __future__ import annotations

import json

import pytest

from tests.tui.fake_engine import DIES, SITES, FakeEngine
from tests.tui.helpers import press, quit_session, settle
from probelog.tui.app import build_app
from probelog.tui.messages import ChecksFinished, LandingStarted, SweepMeasured
from probelog.tui.screens.calibrate import Calibrate
from probelog.tui.screens.cautions import Cautions
from probelog.tui.screens.dialogs import AskReason, Confirm, Failure
from probelog.tui.screens.probe import Probe
from probelog.tui.screens.wafer import WaferView
from probelog.tui.widgets.logbook import Logbook

FAULT = ((1, 0), "line-a", 1)  # lifted tip on the first landing of line-a on die 1,0


def journal(session_dir):
    return [json.loads(x) for x in (session_dir / "journal.jsonl").read_bytes().splitlines()]


def board_text(app) -> str:
    return app.screen.query_one("#board").shown_text


def screen_text(app) -> str:
    """Everything the terminal shows, as text (from the exported SVG's text runs)."""
    import html
    import re

    svg = app.export_screenshot()
    runs = re.findall(r"<text[^>]*>(.*?)</text>", svg, flags=re.S)
    return html.unescape("".join(runs)).replace("\xa0", " ")


def logbook_text(app) -> str:
    """The logbook panel's lines, as the widget holds them."""
    log = app.screen.query_one(Logbook)
    return "\n".join(strip.text for strip in log.lines)


async def calibrate(pilot):
    app = pilot.app
    assert isinstance(app.screen, Calibrate)
    await press(pilot, "space", "space", "space", "space")
    await press(pilot, "k")
    return app




def run(coro):
    import asyncio

    return asyncio.run(coro)


def test_whole_flow_then_resume(tmp_path):
    session = tmp_path / "s1"
    messages: list = []

    async def first_sitting():
        app = build_app(lambda: FakeEngine(session, faults={FAULT}))
        async with app.run_test(size=(120, 40), message_hook=messages.append) as pilot:
            await settle(pilot, "open")
            # cautions once, journaled by the engine
            assert isinstance(app.screen, Cautions)
            assert "ESD" in screen_text(app)
            await press(pilot, "y")
            assert isinstance(app.screen, Calibrate)
            # calibrate: the next standard is marked, each is measured in one key
            assert "land on die 0,0 · open on cal-open" in screen_text(app)
            await calibrate(pilot)
            text = screen_text(app)
            assert "cal set cal1 (solt)" in text and "agreement vs lrrm" in text
            assert "turns clockwise" in text  # the verification stub on the Smith chart
            assert "✔ PASS" in board_text(app)
            await press(pilot, "a")
            assert isinstance(app.screen, Probe)

            # first site passes; accept
            await press(pilot, "space")
            assert "✔ PASS" in board_text(app)
            await press(pilot, "a", "space")
            assert "✔ PASS" in board_text(app)
            await press(pilot, "a")
            # the fault: one keypress from the sweep to a failed check on screen
            n_before = len(messages)
            await press(pilot, "space")
            kinds = [type(m) for m in messages[n_before:]]
            assert LandingStarted in kinds and SweepMeasured in kinds and ChecksFinished in kinds
            shown = board_text(app)
            assert "✖ FAIL" in shown and "die 1,0 · line-a (line) · landing 1" in shown
            text = screen_text(app)
            assert "contact" in text and "port 1 looks open" in text
            # re-land: one key, lands again, the same site at landing 2 passes
            await press(pilot, "r")
            assert "✔ PASS" in board_text(app) and "landing 2" in board_text(app)
            await press(pilot, "enter")  # accept and land on the next site at once
            assert "die 1,0 · line-b" in board_text(app)
            # skip with a reason (digit picks a preset), then a typed note
            await press(pilot, "s")
            assert isinstance(app.screen, AskReason)
            await press(pilot, "1")
            await press(pilot, "n")
            await pilot.press(*"tips cleaned")
            await press(pilot, "enter")
            assert isinstance(app.screen, Probe)
            log = logbook_text(app)
            assert "skip" in log and "structure damaged" in log and "“tips cleaned”" in log
            # quit asks first, and leaves only after the journal is closed
            await press(pilot, "q")
            assert isinstance(app.screen, Confirm)
            await press(pilot, "n")  # not yet: nothing is closed
            assert isinstance(app.screen, Probe)
            assert journal(session)[-1]["type"] != "session-closed"
            await quit_session(pilot)
        assert app.return_code == 0

    run(first_sitting())
    events = journal(session)
    types = [e["type"] for e in events]
    assert types.count("cautions-shown") == 1
    assert types[-1] == "session-closed" and events[-1]["payload"]["completed"] is False
    landings = [e["payload"] for e in events if e["type"] == "landing"]
    fail = [p for p in landings if p["verdict"] == "fail"]
    assert [(tuple(p["die"]), p["site"], p["landing"]) for p in fail] == [FAULT]
    contact = next(c for c in fail[0]["checks"] if c["name"] == "contact")
    assert contact["verdict"] == "fail" and contact["message"] == "port 1 looks open: tips not down?"
    decisions = [(tuple(p["die"]), p["site"], p["landing"], p["action"], p["reason"])
                 for p in (e["payload"] for e in events if e["type"] == "decision")]
    assert decisions == [
        ((0, 0), "line-a", 1, "accept", ""),
        ((0, 0), "line-b", 1, "accept", ""),
        ((1, 0), "line-a", 1, "reland", ""),
        ((1, 0), "line-a", 2, "accept", ""),
        ((1, 0), "line-b", 1, "skip", "structure damaged"),
    ]
    notes = [e["payload"] for e in events if e["type"] == "note"]
    # taken with the probes up after the skip, the note is about the landing still on
    # the board (die 1,0 line-b), not the next site
    assert notes == [{"text": "tips cleaned", "die": [1, 0], "site": "line-b"}]

    # ---- resume: no cautions again, straight to probing where we stopped
    async def second_sitting():
        app = build_app(lambda: FakeEngine.resume(session))
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, "open")
            assert isinstance(app.screen, Probe)
            text = screen_text(app)
            assert "sites 4/6" in text
            assert "die 0,1 · line-a (line) · landing 1" in text  # next step
            await press(pilot, "space", "a", "space", "a")
            assert "every site of the plan is decided" in screen_text(app)
            await quit_session(pilot)

    run(second_sitting())
    events = journal(session)
    assert [e["type"] for e in events].count("cautions-shown") == 1
    assert events[-1]["type"] == "session-closed" and events[-1]["payload"]["completed"] is True
    # every die and site of the plan is decided exactly once in the journal
    final = {(tuple(p["die"]), p["site"]) for p in (e["payload"] for e in events if e["type"] == "decision")
             if p["action"] != "reland"}
    assert final == {(d, s) for d in DIES for s, _ in SITES}


def test_keys_follow_the_phase(tmp_path):
    async def go():
        app = build_app(lambda: FakeEngine(tmp_path / "s"), show_cautions=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, "open")
            screen = app.screen
            assert screen.check_action("measure", ()) is True
            assert screen.check_action("solve", ()) is False  # standards not measured yet: not offered
            assert screen.check_action("accept_cal", ()) is False
            # a decision key pressed in the wrong phase does nothing to the journal
            n = len(journal(tmp_path / "s"))
            await press(pilot, "a", "x")
            assert len(journal(tmp_path / "s")) == n
            await quit_session(pilot)

    run(go())


def test_footer_greys_keys_in_place_as_textual_reckons_them(tmp_path):
    # Reference: Textual's own Screen.active_bindings, which asks check_action; the
    # footer must show each key enabled exactly when Textual would run it, and a
    # landing (keys greyed, then back) must not rebuild the key widgets.
    from textual.widgets._footer import FooterKey

    def footer_state(app):
        active = app.screen.active_bindings
        return [(k.key, not k._disabled, active[k.key].enabled) for k in app.screen.query(FooterKey)]

    async def go():
        app = build_app(lambda: FakeEngine(tmp_path / "s"), show_cautions=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, "open")
            await calibrate(pilot)
            await press(pilot, "a")
            assert isinstance(app.screen, Probe)
            await pilot.pause()
            before = footer_state(app)
            assert before and all(shown == reckoned for _, shown, reckoned in before)
            widgets = list(app.screen.query(FooterKey))
            await press(pilot, "space")
            await pilot.pause()
            after = footer_state(app)
            assert all(shown == reckoned for _, shown, reckoned in after)
            # only the keys that apply now: "a" (keep) appears once there is a landing to keep
            assert {k: on for k, on, _ in after}["a"] and "a" not in {k: on for k, on, _ in before}
            assert widgets  # the footer had keys before the landing
            await quit_session(pilot)

    run(go())


class BrokenVna(FakeEngine):
    def measure(self):
        raise ConnectionError("VNA on TCPIP::127.0.0.1::5025::SOCKET did not answer *OPC? within 10 s")


def test_a_failed_instrument_call_opens_one_modal_and_the_ui_stays_usable(tmp_path):
    async def go():
        app = build_app(lambda: BrokenVna(tmp_path / "s"), show_cautions=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, "open")
            await press(pilot, "space")
            assert isinstance(app.screen, Failure)
            assert "The landing could not be made" in screen_text(app)
            assert "ConnectionError: VNA on TCPIP::127.0.0.1::5025::SOCKET did not answer" in app.screen.message
            await press(pilot, "enter")
            assert isinstance(app.screen, Calibrate)
            assert app.screen.check_action("measure", ()) is True  # not stuck busy
            await quit_session(pilot)

    run(go())


@pytest.mark.parametrize("size", [(120, 40), (80, 24)])
def test_probe_screen_snapshot_text(tmp_path, size):
    """The probe screen after a caught fault, at both terminal sizes: the verdict
    word, the figure and the limit, the keys in the footer."""

    async def go():
        app = build_app(lambda: FakeEngine(tmp_path / "s", faults={((0, 0), "line-a", 1)}), show_cautions=False)
        async with app.run_test(size=size) as pilot:
            await settle(pilot, "open")
            await calibrate(pilot)
            await press(pilot, "a", "space")
            text = screen_text(app)
            assert "FAIL" in text and "contact" in text
            assert "-10 dB" in text  # the limit next to the figure
            assert "re-land" in text and "skip" in text  # context keys in the footer
            assert "land " not in text.split("re-land")[0][-6:]  # measure key hidden while deciding
            await quit_session(pilot)

    run(go())


def test_enter_on_the_die_map_goes_to_that_die_after_asking(tmp_path):
    """w focuses the map, arrows move its cursor, enter asks (n backs out, y goes);
    the next landing is then on that die, and the jump is in the journal."""
    session = tmp_path / "s"

    async def go():
        app = build_app(lambda: FakeEngine(session), show_cautions=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, "open")
            await calibrate(pilot)
            await press(pilot, "a")
            assert isinstance(app.screen, Probe)
            assert app.engine.next_step.die == (0, 0)
            await press(pilot, "w", "down", "enter")  # cursor from 0,0 down to 0,1
            assert isinstance(app.screen, Confirm)
            assert "Land on die 0,1 next?" in screen_text(app)
            await press(pilot, "n")
            assert app.engine.next_step.die == (0, 0)  # backing out changes nothing
            await press(pilot, "w", "down", "enter", "y")
            assert isinstance(app.screen, Probe)
            assert "next: die 0,1 · line-a" in board_text(app)
            await press(pilot, "space")
            assert "die 0,1 · line-a (line) · landing 1" in board_text(app)
            # while a landing waits for its decision the map refuses, without a dialog
            await press(pilot, "w", "enter")
            assert isinstance(app.screen, Probe) and app.engine.calls.count("goto") == 1
            await press(pilot, "a")
            # h opens the die's history in a panel that stays until h closes it
            await press(pilot, "w", "h")
            assert isinstance(app.screen, WaferView)
            panel = app.screen.query_one("#history")
            assert panel.display and "line-a L1: ✔ PASS" in screen_text(app)
            await press(pilot, "up")
            assert panel.display and "die 0,0 history" in screen_text(app)
            await press(pilot, "h")
            assert not panel.display
            await press(pilot, "escape")
            assert isinstance(app.screen, Probe)
            await quit_session(pilot)

    run(go())
    events = journal(session)
    assert [e["payload"] for e in events if e["type"] == "goto"] == [{"die": [0, 1]}]
    landed = [(tuple(e["payload"]["die"]), e["payload"]["site"]) for e in events if e["type"] == "landing"]
    assert landed == [((0, 1), "line-a")]
