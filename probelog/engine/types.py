"""The engine's vocabulary: phases, steps, outcomes and the notifications it
sends subscribers (the UI, the headless runner). Plain data, no behaviour.

Units: frequencies in Hz, power in dBm, offsets in um. Networks are skrf.Network
with ``s`` shaped (n_freq, n_ports, n_ports).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import Enum
from typing import TYPE_CHECKING, Any, Callable

import skrf

from probelog.bench import Die
from probelog.verdicts import CheckResult, Verdict

if TYPE_CHECKING:  # types only: the cal set is imported where it is solved or read
    from probelog.calset import CalSet

CAUTIONS = """\
Before you land:
- ESD: wear a grounded wrist strap; keep the chuck and the probes grounded.
  Millimetre-wave devices and probe tips are easily damaged by discharge.
- Probe care: never move in XY while in contact (probelog separates first);
  check planarity and tip marks before the session; keep overtravel modest.
- RF power: the source power stays at or below the plan's limit.
- Lab rules come first: follow your lab's procedures and safety instructions,
  which take precedence over anything this tool says."""


class EngineError(Exception):
    """A call the engine cannot honour in its current state, or bad input."""


class InstrumentError(EngineError):
    """An instrument call failed; it was journaled as ``instrument-error``.

    The engine is left in the state it had before the failed ``measure()``,
    so the caller may simply call ``measure()`` again.
    """

    def __init__(self, where: str, error: BaseException):
        super().__init__(f"{where}: {type(error).__name__}: {error}")
        self.where = where
        self.error = error


class Phase(str, Enum):
    CALIBRATING = "calibrating"
    VERIFYING = "verifying"
    PROBING = "probing"
    DECIDING = "deciding"
    DONE = "done"


class StepKind(str, Enum):
    CAL_STANDARD = "cal-standard"
    SITE = "site"
    VERIFY = "verify"
    DRIFT = "drift"


@dataclass(frozen=True)
class Step:
    """One thing ``measure()`` does.

    ``landing`` is the 1-based landing number this measurement will get on
    (die, site); ``index`` / ``total`` count steps of the same kind (standards of
    the cal, or site landings of the plan). ``standard`` names the cal standard
    for CAL_STANDARD steps.
    """

    kind: StepKind
    die: Die
    site: str
    site_kind: str
    landing: int
    index: int
    total: int
    standard: str | None = None


@dataclass
class LandingOutcome:
    """One measured landing (site, cal standard, verification, drift or a failed
    contact pre-check)."""

    step: Step
    raw: skrf.Network
    corrected: skrf.Network | None
    checks: list[CheckResult]
    verdict: Verdict
    metrics: dict[str, list[float | None]] | None
    seq: int
    files: dict[str, str] = field(default_factory=dict)
    precheck: bool = False  # a failed contact pre-check: raw is its short sweep, no full sweep taken


@dataclass(frozen=True)
class StandardStatus:
    name: str
    site: str
    kind: str
    measured: bool
    verdict: Verdict | None


@dataclass
class CalOutcome:
    """A computed calibration and what its verification said.

    ``agreement`` holds ``other_method``, ``worst`` (linear |dS| bound), ``at_hz``
    and ``verdict`` when a second algorithm could be compared, else None.
    """

    cal_id: str
    method: str
    ok: bool
    message: str
    calset: CalSet | None
    verification: list[LandingOutcome]
    agreement: dict[str, Any] | None
    verdict: Verdict
    seq: int
    file: str | None = None


# ---------------------------------------------------------------- events


@dataclass(frozen=True, kw_only=True)
class EngineEvent:
    """Base of every engine notification; ``seq`` is the journal seq it follows."""

    seq: int


@dataclass(frozen=True, kw_only=True)
class PhaseChanged(EngineEvent):
    phase: Phase


@dataclass(frozen=True, kw_only=True)
class StepMeasured(EngineEvent):
    outcome: LandingOutcome


@dataclass(frozen=True, kw_only=True)
class CalibrationComputed(EngineEvent):
    outcome: CalOutcome


@dataclass(frozen=True, kw_only=True)
class DecisionRecorded(EngineEvent):
    die: Die
    site: str
    landing: int
    action: str
    reason: str


@dataclass(frozen=True, kw_only=True)
class NoteAdded(EngineEvent):
    text: str


@dataclass(frozen=True, kw_only=True)
class DriftChecked(EngineEvent):
    outcome: LandingOutcome


@dataclass(frozen=True, kw_only=True)
class RecalibrationAdvised(EngineEvent):
    reason: str


@dataclass(frozen=True, kw_only=True)
class InstrumentFailed(EngineEvent):
    where: str
    message: str


@dataclass(frozen=True, kw_only=True)
class JumpedToDie(EngineEvent):
    """``goto(die)`` moved the walk: the next site step is on ``die``."""

    die: Die
    reason: str


@dataclass(frozen=True, kw_only=True)
class SessionClosed(EngineEvent):
    completed: bool


Subscriber = Callable[[EngineEvent], None]
