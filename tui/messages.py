"""Messages the bench UI passes around, named in the past tense.

Thread workers post these when a blocking engine call returns; screens react to
them on the UI thread. Payloads are the engine's own objects (see docs/engine.md):
the UI never copies engine state into widgets beyond what one redraw needs.
"""

from __future__ import annotations

from typing import Any

from textual.message import Message

from probelog import events as ev


class EngineNotified(Message):
    """An engine event (PhaseChanged, StepMeasured, ...) arrived from a worker thread."""

    def __init__(self, event: Any) -> None:
        super().__init__()
        self.event = event


class LandingStarted(Message):
    """A worker began ``engine.measure()`` for ``step`` (move, contact, sweep)."""

    def __init__(self, step: Any) -> None:
        super().__init__()
        self.step = step


class SweepMeasured(Message):
    """``engine.measure()`` returned; ``outcome`` is a LandingOutcome."""

    def __init__(self, outcome: Any) -> None:
        super().__init__()
        self.outcome = outcome


class ChecksFinished(Message):
    """The checks of ``outcome`` are journaled and may be shown."""

    def __init__(self, outcome: Any) -> None:
        super().__init__()
        self.outcome = outcome


class CalibrationSolved(Message):
    """``engine.compute_calibration()`` returned a CalOutcome."""

    def __init__(self, outcome: Any) -> None:
        super().__init__()
        self.outcome = outcome


class DecisionRecorded(Message):
    """An operator decision (accept, reland, skip, note, drift, recal, cal-accept,
    cal-redo) is journaled."""

    def __init__(self, action: str, reason: str = "") -> None:
        super().__init__()
        self.action = action
        self.reason = reason


class SessionClosed(Message):
    """``engine.close()`` returned: the journal is closed and the app may exit."""

    def __init__(self, completed: bool) -> None:
        super().__init__()
        self.completed = completed


class JournalGrew(Message):
    """New complete lines were read from the session's journal.jsonl."""

    def __init__(self, events: list[ev.Event]) -> None:
        super().__init__()
        self.events = events


class EngineReady(Message):
    """The engine is open; ``cautions`` is the text to show once (or None)."""

    def __init__(self, engine: Any, cautions: str | None, events: list[ev.Event]) -> None:
        super().__init__()
        self.engine = engine
        self.cautions = cautions
        self.events = events
