"""How long a sweep takes on the simulated VNA, and how much of it is really waited.

The model (seconds), per driven port (one stimulus direction each)::

    points * (1 / IFBW + per_point_s) + per_sweep_s

plus ``setup_s`` once when the stimulus (range, points, IF bandwidth, ports)
changed since the previous sweep. A receiver needs about 1 / IFBW to settle on
each point; the overheads stand for the source's frequency step and the
retrace. With the defaults 1,001 points at 100 Hz take 10.04 s a direction
(common practice, no source: "about 10 s" is what such a sweep costs at the bench).

The bench setting ``scale`` says how much of the modelled time the instrument
really waits before ``*OPC?`` answers: 0 ("off", the default for tests and the
demo) answers at once, 1 ("realistic") waits all of it, anything between is a
scaled bench. Whatever the scale, the instrument adds the full modelled time of
every sweep to its ``modelled_s`` counter, the simulated instrument clock a
benchmark can add to the measured wall time of the software around it.
"""

from __future__ import annotations

from dataclasses import dataclass

PRESETS = {"off": 0.0, "realistic": 1.0}


@dataclass(frozen=True)
class SweepTimeModel:
    """Overheads of one sweep, in seconds (assumed figures, common practice, no source)."""

    per_point_s: float = 20e-6  # source step and settling between points
    per_sweep_s: float = 5e-3  # retrace and trigger latency, per direction
    setup_s: float = 20e-3  # re-arming after a stimulus change

    def seconds(self, points: int, ifbw_hz: float, directions: int, changed: bool) -> float:
        """Modelled duration (s) of one sweep of ``points`` at ``ifbw_hz`` Hz over
        ``directions`` stimulus directions; ``changed``: the stimulus changed since
        the last sweep."""
        per = points * (1.0 / ifbw_hz + self.per_point_s) + self.per_sweep_s
        return per * directions + (self.setup_s if changed else 0.0)


def sweep_time_scale(value: float | str) -> float:
    """A scale factor (>= 0) or a preset name ("off" = 0, "realistic" = 1)."""
    if isinstance(value, str):
        try:
            return PRESETS[value]
        except KeyError:
            try:
                value = float(value)
            except ValueError:
                raise ValueError(f"sweep time {value!r}: expected a scale >= 0, 'off' or 'realistic'") from None
    if not value >= 0:
        raise ValueError(f"sweep time scale must be >= 0, got {value!r}")
    return float(value)
