"""A signal closes the session through EngineProtocol.close(cause=...).

The app's closing worker passes the signal's name (``app.close_cause``, set by
probelog.tui.interrupts) to the engine. The protocol is what the UI may ask of
an engine, and the test double follows it member for member: a protocol
without ``cause`` would make the UI's call fail on any engine built to it.
"""

from __future__ import annotations

import asyncio
import inspect
import json

from probelog.engine.engine import Engine
from probelog.engine.protocol import EngineProtocol
from probelog.tui.app import build_app
from tests.tui.fake_engine import FakeEngine
from tests.tui.helpers import quit_session
from tests.tui.test_decisions import probing


def test_the_protocol_close_takes_the_cause_the_real_engine_takes():
    real = inspect.signature(Engine.close).parameters["cause"]
    assert inspect.signature(EngineProtocol.close).parameters["cause"].default == real.default


def test_a_signal_cause_reaches_the_journal_through_the_protocol(tmp_path):
    session = tmp_path / "s"

    async def go():
        app = build_app(lambda: FakeEngine(session), show_cautions=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await probing(pilot)
            app.close_cause = "SIGTERM"  # what probelog.tui.interrupts sets on a signal
            await quit_session(pilot)

    asyncio.run(go())
    last = json.loads((session / "journal.jsonl").read_bytes().splitlines()[-1])
    assert last["type"] == "session-closed" and last["payload"]["cause"] == "SIGTERM"
