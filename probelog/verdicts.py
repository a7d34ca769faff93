"""The result of one quick check, shared by every check, the engine and the UI."""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum
from typing import Any, Iterable, Mapping


class Verdict(str, Enum):
    """Outcome of a check. ``NA`` means the check cannot judge this sweep (for
    example contact on an open); it never makes a landing fail."""

    PASS = "pass"
    WARN = "warn"
    FAIL = "fail"
    NA = "n/a"

    @property
    def rank(self) -> int:
        return {"n/a": 0, "pass": 1, "warn": 2, "fail": 3}[self.value]


@dataclass(frozen=True)
class CheckResult:
    """One check on one sweep.

    value and limit are in ``unit``; ``at_hz`` is the frequency (Hz) where the
    figure is worst, or None when the figure is not per-frequency.
    """

    name: str
    verdict: Verdict
    value: float | None
    limit: float | None
    at_hz: float | None
    message: str
    unit: str = ""

    def to_json(self) -> dict[str, Any]:
        # by hand: dataclasses.asdict deep-copies and is ~10x slower on the landing path
        return {"name": self.name, "verdict": self.verdict.value, "value": self.value,
                "limit": self.limit, "at_hz": self.at_hz, "message": self.message, "unit": self.unit}

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> "CheckResult":  # Any: values as parsed from JSON
        return cls(
            name=d["name"],
            verdict=Verdict(d["verdict"]),
            value=d.get("value"),
            limit=d.get("limit"),
            at_hz=d.get("at_hz"),
            message=d.get("message", ""),
            unit=d.get("unit", ""),
        )


def overall(results: Iterable[CheckResult]) -> Verdict:
    """Worst verdict of a set of checks; PASS when every check is n/a or none ran."""
    worst = Verdict.PASS
    for r in results:
        if r.verdict.rank > worst.rank:
            worst = r.verdict
    return worst
