"""Snapshots of every screen at 80x24 and 120x40: the text the terminal shows,
compared with tests/tui/snapshots/<screen>-<cols>x<rows>.txt.

They catch what Pilot assertions miss: a map clipped to three columns, a check
name cut to "stu…", an agreement row below the edge, a footer that loses its
last keys. Deterministic: the fake engine's clock is frozen, its sweeps are
noiseless scikit-rf media, text cursors do not blink, and the screen is read only
when no worker runs.

After a deliberate change of a screen, look at it (tmux), then rewrite the files:
    PROBELOG_UPDATE_SNAPSHOTS=1 .venv/bin/python -m pytest tests/tui/test_snapshots.py
and read the diff before committing it.
"""

from __future__ import annotations

import asyncio
import difflib
import os
from datetime import datetime, timezone
from pathlib import Path

import pytest
from textual.widgets import Input

from probelog.tui.app import build_app
from probelog.tui.screens.intake import SessionRequest
from tests.tui.fake_engine import FakeEngine
from tests.tui.helpers import press, settle
from tests.tui.test_flow import calibrate

HERE = Path(__file__).parent / "snapshots"
SIZES = [(80, 24), (120, 40)]
FAULT = ((0, 0), "line-a", 1)
UPDATE = os.environ.get("PROBELOG_UPDATE_SNAPSHOTS") == "1"


def frozen() -> datetime:
    return datetime(2026, 3, 4, 9, 30, 0, tzinfo=timezone.utc)


def check(name: str, size: tuple[int, int], text: str) -> None:
    path = HERE / f"{name}-{size[0]}x{size[1]}.txt"
    lines = [line.rstrip() for line in text.splitlines()]
    got = "\n".join(lines) + "\n"
    if UPDATE or not path.exists():
        if not UPDATE:
            pytest.fail(f"{path} missing: run with PROBELOG_UPDATE_SNAPSHOTS=1 to write it, then read it")
        HERE.mkdir(exist_ok=True)
        path.write_text(got, encoding="utf-8")
        return
    want = path.read_text(encoding="utf-8")
    if got != want:
        diff = "\n".join(difflib.unified_diff(want.splitlines(), got.splitlines(), "stored", "now", lineterm=""))
        pytest.fail(f"{path.name} differs from the screen:\n{diff}")


def terminal_text(app) -> str:
    """Every cell of the terminal as text, spaces kept (what export_screenshot
    draws, as a recording console's plain text instead of SVG)."""
    import io

    from rich.console import Console

    width, height = app.size
    console = Console(width=width, height=height, file=io.StringIO(), force_terminal=True,
                      color_system="truecolor", record=True, legacy_windows=False, safe_box=False)
    console.print(app.screen._compositor.render_update(full=True, screen_stack=app._background_screens))
    return console.export_text(styles=False)


async def shown(pilot) -> str:
    """The screen's text once nothing is running and no cursor blinks."""
    await settle(pilot)
    for box in pilot.app.screen.query(Input):
        box.cursor_blink = False
    await pilot.pause()
    return terminal_text(pilot.app)


async def to_probing(pilot) -> None:
    await settle(pilot, "open")
    await calibrate(pilot)
    await press(pilot, "a")


SCENES = {}


def scene(name):
    def register(fn):
        SCENES[name] = fn
        return fn
    return register


@scene("cautions")
async def _cautions(pilot):
    await settle(pilot, "open")


@scene("calibrate")
async def _calibrate(pilot):
    await settle(pilot, "open")
    await calibrate(pilot)  # solved: verification rows and the agreement row


@scene("probe-pass")
async def _pass(pilot):
    await to_probing(pilot)
    await press(pilot, "enter", "enter", "enter")  # 0,0 a b, then 1,0 a on screen


@scene("probe-fail")
async def _fail(pilot):
    await to_probing(pilot)
    await press(pilot, "enter")


@scene("error")
async def _error(pilot):
    await to_probing(pilot)
    await press(pilot, "enter")  # the VNA fails: the dialog over the board in its error state


@scene("map")
async def _map(pilot):
    await to_probing(pilot)
    await press(pilot, "enter", "A", "1", "enter", "enter", "enter", "w")


@scene("journal")
async def _journal(pilot):
    await to_probing(pilot)
    await press(pilot, "enter", "enter", "j")


def engine_for(name: str, session: Path) -> FakeEngine:
    return FakeEngine(session, clock=frozen, faults={FAULT} if name in ("probe-fail", "map") else None,
                      errors={FAULT} if name == "error" else None)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
@pytest.mark.parametrize("name", ["cautions", "calibrate", "probe-pass", "probe-fail", "error", "map", "journal"])
def test_screen(tmp_path, name, size):
    session = tmp_path / "s"

    async def go():
        app = build_app(lambda: engine_for(name, session), show_cautions=name == "cautions")
        async with app.run_test(size=size) as pilot:
            await SCENES[name](pilot)
            text = await shown(pilot)
            app.exit(0)  # no quit dialog: the fake journal needs no closing here
        return text

    check(name, size, asyncio.run(go()))


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_intake(tmp_path, size, monkeypatch):
    monkeypatch.chdir(tmp_path)  # "none under no-sessions-here/" whatever the machine
    defaults = SessionRequest(operator="ana", wafer="QF2611-W07", lot="QF2611", probes=("gsg-w", "gsg-e"),
                              plan="demo", sessions_root="no-sessions-here")

    async def go():
        app = build_app(lambda request: engine_for("intake", tmp_path / "s"), intake=defaults)
        async with app.run_test(size=size) as pilot:
            await settle(pilot, "scan")
            text = await shown(pilot)
            app.exit(0)
        return text

    check("intake", size, asyncio.run(go()))
