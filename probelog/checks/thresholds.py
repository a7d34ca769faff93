"""What the checks know before they see a sweep: the site kinds, the check
names in report order and the :class:`Limits` a plan may override."""

from __future__ import annotations

from dataclasses import dataclass, fields, replace
from typing import Any, Mapping

import numpy as np

from probelog.plan_types import KINDS as KINDS  # re-exported; one list of site kinds: the plan validates them, the checks dispatch on them

REFLECT_KINDS = frozenset({"open", "short", "load", "open-stub", "short-stub"})
ROTATING_KINDS = frozenset({"open", "short", "open-stub", "short-stub"})
CHECK_NAMES = (
    "contact",
    "passivity",
    "reciprocity",
    "symmetry",
    "rotation",
    "line-window",
    "line-z0",
    "line-loss",
    "line-eps-eff",
    "golden",
    "repeatability",
    "population",
    "drift",
)


@dataclass(frozen=True)
class Limits:
    """Check limits; each default is a starting point a plan may override.

    Sources: REFERENCES.md "Trade numbers" (common practice, no source) unless
    a line says otherwise. "warn" and "fail" are the thresholds at which a
    figure turns to WARN and FAIL.
    """

    # contact
    contact_low_hz: float = 10e9  # band where pads and probe inductance barely matter; common practice, no source
    match_warn_db: float = -15.0  # matched site return loss > 15 dB (trade numbers: probe return loss > 15 dB)
    match_fail_db: float = -3.0  # a tip in air reads within 0.1-0.3 dB of 0 dB (trade numbers)
    transmission_fail_db: float = -10.0  # a lifted tip leaves |S21| near -40 dB (trade numbers); lines lose far less
    short_r_warn_ohm: float = 0.5  # contact resistance 0.1-0.5 ohm on aluminium after scrub (trade numbers)
    short_r_fail_ohm: float = 1.0  # bad > 1 ohm (trade numbers)
    stub_rotation_warn_ratio: float = 0.8  # common practice, no source
    stub_rotation_fail_ratio: float = 0.5  # common practice, no source
    # contact from physics on raw data (probelog.contact), distances as fractions of the
    # raw open-short span: landing repeatability |dS11| ~0.005-0.01 (trade numbers) is
    # 0.003-0.005 of the span, so 0.05 is ten times that; common practice, no source
    contact_floor: float = 0.05
    contact_open_dc_f: float = 25e-15  # probe open vs tip in air: the pad C, 10-30 fF (common practice, no source)
    contact_short_dl_h: float = 50e-12  # shorted path vs the probe short: a few tens of pH (common practice, no source)
    contact_judge_max: float = 0.35  # beyond this allowance a tip in air and the open are too far apart to judge
    raw_transmission_fail_db: float = -30.0  # raw thru: probe + cable loss at most ~20 dB at 150 GHz (realdata README); a lifted tip is at the isolation floor
    # population (probelog.population): accepted landings of the same site on earlier dies.
    # floor: landing repeatability |dS11| ~0.005-0.01 (trade numbers) is the two-landing
    # difference; one landing's spread is ~0.003; common practice, no source
    population_min: float = 1.0
    population_floor: float = 0.003
    # die-to-die spread of electrical length (eps_eff +-0.2 %) moves |S| in proportion
    # to the phase, so the floor rises with frequency: + 0.003 per 100 GHz; common practice, no source
    population_floor_per_hz: float = 3e-14
    population_warn_sigma: float = 3.0
    population_fail_sigma: float = 5.0
    # passivity: excess of the largest singular value over 1; trace noise 0.001-0.005 dB rms
    # is 1.2e-4-5.8e-4 in |S| (trade numbers), so these are many sigma away
    passivity_warn: float = 0.005
    passivity_fail: float = 0.02
    # reciprocity and symmetry: |dS| linear; landing repeatability |dS11| ~0.005-0.01 (trade numbers)
    reciprocity_warn: float = 0.01
    reciprocity_fail: float = 0.03
    symmetry_warn: float = 0.02
    symmetry_fail: float = 0.05
    # rotation: largest counter-clockwise excursion of the unwrapped phase, degrees;
    # phase trace noise 0.01-0.05 deg rms (trade numbers) -> peak-to-peak well under 0.5 deg
    rotation_warn_deg: float = 0.5
    rotation_fail_deg: float = 2.0
    # repeatability vs the previous landing (trade numbers: |S21| +-0.02-0.05 dB,
    # phase +-0.2-0.5 deg, ~1 deg at 110 GHz, |dS11| ~0.005-0.01)
    # dB and phase only where both |S| exceed this: the reference is the last ACCEPTED
    # landing of the site, on an earlier die, and a matched line's |S11| near -20 dB
    # swings by tenths of a dB on a 0.005 change from die to die (fault matrix, clean
    # seeds); reflections that small are judged by |dS| alone. Common practice, no source
    repeat_floor_db: float = -10.0
    repeat_db_warn: float = 0.05
    repeat_db_fail: float = 0.15
    repeat_deg_warn: float = 0.5
    repeat_deg_fail: float = 2.0
    repeat_mag_warn: float = 0.01
    repeat_mag_fail: float = 0.03
    # drift vs the reference sweep right after calibration (trade numbers: over an hour
    # |S21| 0.01-0.05 dB, phase 0.1-1 deg at 50-110 GHz)
    drift_db_warn: float = 0.05
    drift_db_fail: float = 0.15
    drift_deg_warn: float = 1.0
    drift_deg_fail: float = 3.0
    drift_mag_warn: float = 0.01
    drift_mag_fail: float = 0.03
    # line window: skip points near a half-wavelength, where Z0 = sqrt(B/C) is 0/0;
    # common practice, no source
    line_min_sinh: float = 0.1

    @classmethod
    def from_mapping(cls, d: Mapping[str, Any], source: str) -> Limits:
        """Defaults overridden by ``d``; unknown keys and non-numbers are refused
        with a ValueError naming ``source`` (a file and table) and the key."""
        known = {f.name for f in fields(cls)}
        changes: dict[str, float] = {}
        for key, value in d.items():
            if key not in known:
                raise ValueError(f"{source}: unknown limit '{key}' (known: {', '.join(sorted(known))})")
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
                raise ValueError(f"{source}: limit '{key}' must be a finite number, got {value!r}")
            changes[key] = float(value)
        return replace(cls(), **changes)

