"""What the probe screen says in words: the where bar's three parts for the
screen's state, why the walk cannot jump to a die now, and the preset reasons
its dialogs offer. Pure functions of the engine's view (no widgets), so the
wording is read and tested in one place.
"""

from __future__ import annotations

from probelog.engine.protocol import EngineProtocol
from probelog.state import FINISHED
from probelog.tui.widgets.verdict_board import verdict_word
from probelog.tui.widgets.where_bar import describe_step, kind_name

SKIP_PRESETS = ("structure damaged", "pads contaminated", "die known bad", "out of time on this wafer")
SKIP_DIE_PRESETS = ("die dead: no site answers", "die cracked or scratched", "pads contaminated on the whole die",
                    "die known bad from an earlier test")
KEEP_FAIL_PRESETS = ("the device is expected to fail this check", "checked under the microscope: contact is good",
                     "structure known damaged; kept for the record")
RECAL_PRESETS = ("drift reference out of limits", "probes re-planarised", "scheduled recalibration",
                 "room temperature changed")


def where_parts(engine: EngineProtocol, state: str, busy: bool) -> tuple[str, str, str]:
    """(here, next, doing) for the where bar; ``state`` as Probe.state() says it
    (busy, error, probing, pass, fail, done, other)."""
    done, total = engine.progress
    last, nxt = engine.last_outcome, engine.next_step
    if state == "error":
        here = "the last landing did not complete: nothing was recorded for it"
        next_ = "[enter] retry (the link is reopened)  [s] skip site  [x] skip die"
    elif state in ("pass", "fail") and last is not None:
        here = f"{describe_step(last.step)} · {verdict_word(last.verdict)}"
        next_ = ("[enter] keep + next site  [a] keep  [r] re-land  [s] skip" if state != "fail" else
                 "[enter] re-land  [s] skip  [x] skip die  (pre-check: no sweep to keep)" if last.precheck else
                 "[enter] re-land  [s] skip  [x] skip die  [A] keep FAIL (asks why)")
    elif kind_name(engine.phase) == "DONE":
        here, next_ = "every site of the plan is decided", "[q] close the journal and quit"
    else:
        here = "probes up"
        next_ = f"{describe_step(nxt)}   [enter]" if nxt is not None else "—"
        if nxt is not None and kind_name(nxt.kind) == "DRIFT":
            next_ = "drift reference: " + next_
    here += f"  ·  sites {done}/{total}"
    doing = ("✖ instrument error: see the board" if state == "error" else
             "busy…" if busy else ("DONE" if state == "done" else "idle: waiting for you"))
    return here, next_, doing


def goto_refusal(engine: EngineProtocol, die: tuple[int, int], busy: bool) -> str | None:
    """Why the walk cannot go to ``die`` now, or None when it can."""
    status = engine.wafer_status.get(die)
    phase = kind_name(engine.phase)
    where = f"die {die[0]},{die[1]}"
    if busy:
        return "wait: the instrument is busy"
    if phase == "DECIDING":
        return "decide on this landing first (keep, re-land or skip)"
    if phase in ("CALIBRATING", "VERIFYING"):
        return "calibrate first"
    if phase == "DONE":
        return "every site of the plan is decided"
    if status is None:
        return f"{where} is not in the plan"
    if status in FINISHED:
        return f"{where} is {status}: nothing left to land on"
    return None
