"""Waiting helpers for Pilot tests: wait for named worker groups, never fixed pauses."""

from __future__ import annotations

from textual.app import App
from textual.pilot import Pilot
from textual.worker import WorkerCancelled, WorkerState

OPEN = (WorkerState.PENDING, WorkerState.RUNNING)


async def settle(pilot: Pilot, *groups: str) -> None:
    """Wait until no worker of ``groups`` is running and their messages are handled."""
    app: App = pilot.app
    groups = groups or ("open", "bench", "journal", "closing")
    for _ in range(50):
        if not app.is_running or app._exit_renderables or app.return_code is not None:
            return  # the app is leaving; pausing the pilot now would wait forever
        busy = [w for w in app.workers if w.group in groups and w.state in OPEN]
        if not busy:
            await pilot.pause()
            if not [w for w in app.workers if w.group in groups and w.state in OPEN]:
                return
            continue
        for w in busy:
            await w.wait()
        await pilot.pause()


async def press(pilot: Pilot, *keys: str) -> None:
    """Press keys one by one, letting the bench and journal workers finish after each."""
    for key in keys:
        await pilot.press(key)
        await settle(pilot)


async def quit_session(pilot: Pilot) -> None:
    """q, then y on the confirmation; wait until the journal is closed and the app
    leaves. The last key is sent without the Pilot's wait-for-screen, which would
    wait on a screen that is being torn down."""
    import asyncio

    app = pilot.app
    await press(pilot, "q")
    await app._press_keys(["y"])
    for _ in range(500):  # bounded: 5 s at most
        if app.return_code is not None:
            return
        closing = [w for w in app.workers if w.group == "closing"]
        for w in closing:
            if w.state in OPEN:
                try:
                    await w.wait()
                except WorkerCancelled:
                    # the worker's last act is to post SessionClosed; the app can
                    # exit (cancelling it) before the thread reports success
                    pass
        await asyncio.sleep(0.01)
    raise AssertionError("the app did not leave after the journal was closed")
