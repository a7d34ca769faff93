"""Read-back of VNA settings: is what the instrument reports what we asked for?

A VNA may clamp a value to its range, round it to a step it supports, or ignore
a command it did not understand without queueing an error. probelog sends a
setting, then asks for it back (the dialect's ``query_*`` operations) and
refuses to sweep when the two differ. Units: Hz, points, dBm.

Tolerances (common practice, no source): VNAs set frequencies to 1 Hz or finer
and source power in 0.01 dB steps, so a start / stop within 1 Hz (or 1e-9 of
the value) and a power within 0.05 dB are the same setting; the point count is
exact; an IF bandwidth the instrument rounded to one of its own steps differs.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from probelog.bench import SweepSettings

FREQ_TOL_HZ = 1.0
FREQ_TOL_REL = 1e-9
IFBW_TOL_REL = 1e-6
POWER_TOL_DB = 0.05

_NUMBER = re.compile(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)")


@dataclass(frozen=True)
class Setting:
    """One read-back: ``operation`` is the dialect's query, ``field`` the
    SweepSettings attribute, ``name`` and ``unit`` words for messages."""

    field: str
    operation: str
    name: str
    unit: str


SETTINGS = (
    Setting("start_hz", "query_start_hz", "start frequency", "Hz"),
    Setting("stop_hz", "query_stop_hz", "stop frequency", "Hz"),
    Setting("points", "query_points", "point count", "points"),
    Setting("ifbw_hz", "query_ifbw_hz", "IF bandwidth", "Hz"),
    Setting("power_dbm", "query_power_dbm", "source power", "dBm"),
)


def parse_number(reply: str) -> float | None:
    """The leading number of a reply ("+1.0000E+09", "201", "-10 DBM"), or None."""
    m = _NUMBER.match(reply)
    return float(m.group(1)) if m else None


def same(field: str, asked: float, got: float) -> bool:
    """Whether the instrument's ``got`` is the ``asked`` value of SweepSettings ``field``."""
    if field == "points":
        return got == int(asked)
    if field in ("start_hz", "stop_hz"):
        return abs(got - asked) <= max(FREQ_TOL_HZ, FREQ_TOL_REL * abs(asked))
    if field == "ifbw_hz":
        return abs(got - asked) <= IFBW_TOL_REL * abs(asked)
    if field == "power_dbm":
        return abs(got - asked) <= POWER_TOL_DB
    raise KeyError(f"no read-back rule for {field!r}")


def changed_fields(old: SweepSettings | None, new: SweepSettings) -> list[str]:
    """SweepSettings fields whose value differs between ``old`` and ``new`` (all when old is None)."""
    fields = [s.field for s in SETTINGS]
    if old is None:
        return fields
    return [f for f in fields if getattr(old, f) != getattr(new, f)]


def fmt(value: float, unit: str) -> str:
    if unit == "dBm":
        return f"{value:+.4g} dBm"
    if unit == "points":
        return f"{value:g} points"
    return f"{value:.12g} Hz"
