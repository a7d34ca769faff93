"""The session engine, split along its seams (docs/engine.md):

- ``types``: phases, steps, outcomes, notifications, errors;
- ``planview``: what the engine reads from a plan, validated before any folder exists;
- ``store``: data-file naming, Touchstone headers, cal-set files, hash-checked reads;
- ``core``: journal + state (every event folded with probelog.state.apply), bench I/O;
- ``calstep``: measuring standards, solving and verifying a cal;
- ``walk``: the next step and measuring sites and drift references;
- ``policy``: decisions (accept, accept despite FAIL, reland, skip, give up, skip a die);
- ``engine``: the ``Engine`` (construction, resume, public actions);
- ``checkpoint``: state snapshots that make resume fold only the tail of the journal;
- ``protocol``: ``EngineProtocol``, what the UI may call.
"""

from probelog.engine.engine import Engine
from probelog.engine.types import (CAUTIONS, CalibrationComputed, CalOutcome, DecisionRecorded, DriftChecked,
                                   EngineError, EngineEvent, InstrumentError, InstrumentFailed, JumpedToDie,
                                   LandingOutcome, NoteAdded, Phase, PhaseChanged, RecalibrationAdvised,
                                   SessionClosed, StandardStatus, Step, StepKind, StepMeasured, Subscriber)

__all__ = [
    "CAUTIONS", "CalibrationComputed", "CalOutcome", "DecisionRecorded", "DriftChecked", "Engine", "EngineError",
    "EngineEvent", "InstrumentError", "InstrumentFailed", "JumpedToDie", "LandingOutcome", "NoteAdded", "Phase",
    "PhaseChanged", "RecalibrationAdvised", "SessionClosed", "StandardStatus", "Step", "StepKind", "StepMeasured",
    "Subscriber",
]
