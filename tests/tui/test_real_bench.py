"""The bench UI on the real engine and the real instrument path: drivers.simbench
served over loopback TCP, ScpiVna / ScpiProber through pyvisa-py (wired by
tui.benches.build_bench as `probelog run --bench sim` does), probelog.session.Engine
journaling for real. A lifted port-1 tip is injected on the first site the plan
lands on; the operator calibrates from the keyboard, sees the fault caught, re-lands
to a pass, finishes the reduced plan, shades the wafer by a line metric and quits.
Then the journal is read back.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from tests.tui.helpers import press, quit_session, settle
from tests.tui.test_flow import screen_text
from probelog.tui.app import build_app
from probelog.tui.messages import ChecksFinished, LandingStarted, SweepMeasured
from probelog.tui.screens.calibrate import Calibrate
from probelog.tui.screens.probe import Probe
from probelog.tui.screens.wafer import WaferView
from probelog.tui.widgets.die_map import SHADES, DieMap

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "probelog" / "plans" / "demo.toml"
KIT = ROOT / "probelog" / "kits" / "plx7.toml"
SITES = ("ln-cpw-m9-r2-l500", "ln-cpw-m9-r2-l1500")
DIES = ((4, 1), (4, 3))


def reduced_plan(tmp_path: Path) -> Path:
    """The demo plan cut to two dies and two line sites, kit path made absolute."""
    text = DEMO.read_text()
    start, end = text.index("dies = ["), text.index('order = "serpentine"')
    text = text[:start] + f"dies = {[list(d) for d in DIES]}\n" + text[end:]
    start, end = text.index("sites = [\n"), text.index("# Re-measure the thru")
    text = text[:start] + f"sites = {json.dumps(list(SITES))}\n" + text[end:]
    text = text.replace('kit = "../kits/plx7.toml"', f'kit = "{KIT.as_posix()}"')
    path = tmp_path / "reduced.toml"
    path.write_text(text)
    return path


def journal(session_dir: Path) -> list[dict]:
    return [json.loads(x) for x in (session_dir / "journal.jsonl").read_bytes().splitlines()]


def board_text(app) -> str:
    return app.screen.query_one("#board").shown_text


def test_real_engine_on_the_simulated_bench(tmp_path):
    import asyncio

    from probelog.plan import load_plan
    from probelog.session import Engine
    from probelog.tui.benches import build_bench

    plan = load_plan(str(reduced_plan(tmp_path)))
    first_die = plan.dies_in_order()[0]
    fault = (tuple(first_die), SITES[0])
    opts = argparse.Namespace(bench="sim", vna=None, vna_dialect="generic-vna", prober=None,
                              prober_dialect="generic-prober", watch_folder=None, seed=11,
                              fault=[f"lifted-1@{first_die[0]},{first_die[1]}:{SITES[0]}"], fault_rate=0.0)
    engines: list = []

    def factory():
        bench = build_bench(opts, plan.probes.ids)
        try:
            engines.append(Engine.new(plan, bench, tmp_path / "sessions", operator="ana",
                                      session_id="QF2611-W07-ui"))
        except BaseException:
            bench.close()
            raise
        return engines[-1]

    messages: list = []
    by_metric: dict = {}

    async def go():
        app = build_app(factory, show_cautions=False)
        async with app.run_test(size=(120, 40), message_hook=messages.append) as pilot:
            await settle(pilot, "open")
            assert isinstance(app.screen, Calibrate)
            for _ in plan.calibration.standards:  # LRRM: open, short, load, thru
                await press(pilot, "space")
            await press(pilot, "k")
            # verification and agreement judged; the SOLT cross-check may only warn
            assert "cal set cal1 (lrrm)" in board_text(app) and "FAIL" not in board_text(app)
            await press(pilot, "a")
            assert isinstance(app.screen, Probe)
            await press(pilot, "space")  # the drift reference right after the cal
            assert "drift reference" in board_text(app)
            # the fault: one keypress from the sweep to FAIL on the board
            n = len(messages)
            await press(pilot, "space")
            kinds = [type(m) for m in messages[n:]]
            assert kinds.index(LandingStarted) < kinds.index(SweepMeasured) < kinds.index(ChecksFinished)
            shown = board_text(app)
            assert "✖ FAIL" in shown and f"die {first_die[0]},{first_die[1]} · {SITES[0]}" in shown, shown
            text = screen_text(app)
            assert "contact" in text and "port 1" in text, text
            # a failed pre-check took no sweep: nothing to keep, so A is neither offered nor taken
            assert "keep FAIL" not in text and "no sweep to keep" in text, text
            await press(pilot, "A")
            assert isinstance(app.screen, Probe) and "✖ FAIL" in board_text(app)
            await press(pilot, "r")  # re-land: the fault was for one landing
            shown = board_text(app)
            assert "✖ FAIL" not in shown and "landing 2" in shown, shown
            await press(pilot, "a")
            for _ in range(len(SITES) * len(DIES) - 1):
                await press(pilot, "space")
                assert "✖ FAIL" not in board_text(app), board_text(app)
                await press(pilot, "a")
            assert "every site of the plan is decided" in str(app.screen.query_one("#where").render())
            # the wafer by a line metric of a real session: a shade on every die
            await press(pilot, "w", "m")
            assert isinstance(app.screen, WaferView)
            die_map = app.screen.query_one(DieMap)
            assert die_map.values is not None and set(die_map.values) == set(DIES), die_map.values
            assert sum(die_map.render().plain.count(s) for s in SHADES) == len(DIES)
            by_metric.update(choice=app.screen._choice(), values=dict(die_map.values))
            assert by_metric["choice"].label in screen_text(app)
            await press(pilot, "escape")
            await quit_session(pilot)
        assert app.return_code == 0

    asyncio.run(go())
    session = tmp_path / "sessions" / "QF2611-W07-ui"
    events = journal(session)
    types = [e["type"] for e in events]
    assert types[0] == "session-opened" and types[-1] == "session-closed"
    assert events[-1]["payload"]["completed"] is True
    assert types.count("cal-standard") == 4 and "cal-accepted" in types
    # the lifted tip is caught by the contact pre-check: a FAIL landing of its own kind
    landings = [e["payload"] for e in events if e["type"] in ("landing", "precheck")]
    assert [(tuple(p["die"]), p["site"], p["landing"], p["verdict"]) for p in landings][:2] == [
        (fault[0], fault[1], 1, "fail"), (fault[0], fault[1], 2, landings[1]["verdict"])]
    assert [e["type"] for e in events if e["type"] in ("landing", "precheck")][0] == "precheck"
    assert landings[1]["verdict"] != "fail"
    contact = next(c for c in landings[0]["checks"] if c["name"] == "contact")
    assert contact["verdict"] == "fail"
    decisions = [(tuple(p["die"]), p["site"], p["action"]) for p in
                 (e["payload"] for e in events if e["type"] == "decision")]
    assert decisions[0] == (fault[0], fault[1], "reland")
    kept = {(d, s) for d, s, a in decisions if a == "accept"}
    assert kept == {(tuple(d), s) for d in DIES for s in SITES}
    # the map showed, for each die, the figure journaled with its kept landing at the
    # journaled frequency nearest the chosen one (read here from the raw lines)
    choice = by_metric["choice"]
    for die in DIES:
        kept = [p for p in landings if tuple(p["die"]) == die and p["site"] == choice.site][-1]
        f = kept["metrics"]["f_hz"]
        i = min(range(len(f)), key=lambda k: abs(f[k] - choice.f_hz))
        assert by_metric["values"][die] == kept["metrics"][choice.key][i]
    # every landing's data file is on disk with the hash the journal names
    import hashlib

    for p in landings:
        ref = p.get("corrected") or p["raw"]  # a failed pre-check keeps its raw short sweep
        assert hashlib.sha256((session / ref["path"]).read_bytes()).hexdigest() == ref["sha256"]


def test_reland_after_a_fail_goes_before_a_due_drift_check(tmp_path):
    """``r`` after a FAIL re-lands that site even when the plan's drift cadence has
    fallen due (issue #12: the screen showed the drift reference's PASS first);
    the re-measure comes before the next new site. The UI only asks the engine."""
    import asyncio

    from probelog.plan import load_plan
    from probelog.session import Engine
    from probelog.tui.benches import build_bench

    path = reduced_plan(tmp_path)
    path.write_text(path.read_text().replace("drift_every_landings = 40", "drift_every_landings = 1"))
    plan = load_plan(str(path))
    first_die = plan.dies_in_order()[0]
    opts = argparse.Namespace(bench="sim", vna=None, vna_dialect="generic-vna", prober=None,
                              prober_dialect="generic-prober", watch_folder=None, seed=11,
                              fault=[f"lifted-1@{first_die[0]},{first_die[1]}:{SITES[0]}"], fault_rate=0.0)

    def factory():
        bench = build_bench(opts, plan.probes.ids)
        try:
            return Engine.new(plan, bench, tmp_path / "sessions", operator="ana", session_id="QF2611-W07-rl")
        except BaseException:
            bench.close()
            raise

    async def go():
        app = build_app(factory, show_cautions=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, "open")
            for _ in plan.calibration.standards:
                await press(pilot, "space")
            await press(pilot, "k")
            await press(pilot, "a")
            await press(pilot, "space")  # the drift reference right after the cal
            assert "drift reference" in board_text(app)
            await press(pilot, "space")  # the lifted tip: FAIL, and a re-measure is due now
            assert "✖ FAIL" in board_text(app)
            await press(pilot, "r")
            shown = board_text(app)
            assert "drift reference" not in shown and f"{SITES[0]}" in shown and "landing 2" in shown, shown
            await press(pilot, "a")
            await press(pilot, "space")  # the next new site: the due re-measure first
            assert "drift reference" in board_text(app), board_text(app)
            await quit_session(pilot)

    asyncio.run(go())
    events = journal(tmp_path / "sessions" / "QF2611-W07-rl")
    measured = [(e["type"], e["payload"]["site"], e["payload"]["landing"]) for e in events
                if e["type"] in ("landing", "precheck", "drift")]
    n = measured[0][2]  # the thru's landings go on from its landing as a cal standard
    assert measured[:4] == [("drift", "cal-thru", n), ("precheck", SITES[0], 1), ("landing", SITES[0], 2),
                            ("drift", "cal-thru", n + 1)], measured
