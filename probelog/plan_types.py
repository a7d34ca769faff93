"""The plan's data: frozen dataclasses of a loaded, validated plan.

Units: offsets, pitches, lengths and widths in um; frequencies in Hz; power in
dBm; impedances in ohm; attenuation in dB/mm (dB = 20 log10 |S|). Dies are
addressed (column, row), counted from 0 at the wafer map's top-left. The values
are checked when the plan is read (probelog.plan_layout, probelog.plan_procedure);
these classes only hold them and answer questions about them.
"""

from __future__ import annotations

import tomllib
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from probelog import plan_walk
from probelog.bench import PRECHECK_IFBW_HZ, PRECHECK_POINTS, Die, SweepSettings
from probelog.plan_toml import PlanError, too_deep

KINDS = ("open", "short", "load", "thru", "line", "open-stub", "short-stub", "device")
ORDERS = ("serpentine", "rows", "listed")
METHODS = ("solt", "lrrm", "mtrl")


@dataclass(frozen=True)
class Wafer:
    """The wafer and its die grid.

    ``dies`` is None for "all dies on the grid but the skipped ones"; ``order``
    is how the dies are visited (``serpentine``: rows alternate direction,
    ``rows``: every row left to right, ``listed``: as written in the plan).
    """

    id: str
    lot: str
    chip: str
    cols: int
    rows: int
    die_pitch_um: tuple[float, float]
    skip: tuple[Die, ...]
    dies: tuple[Die, ...] | None
    order: str


@dataclass(frozen=True)
class Precheck:
    """The contact pre-check before a site's sweep (``[precheck]``, or ``precheck``
    in a ``[[site]]``: false, or a table overriding the plan's keys): ``points``
    spread over the plan's band at ``ifbw_hz`` Hz; skipped when not ``enabled``."""

    enabled: bool = True
    points: int = PRECHECK_POINTS
    ifbw_hz: float = PRECHECK_IFBW_HZ


@dataclass(frozen=True)
class Golden:
    """A site's golden Touchstone file (``golden_file``), read when the plan was
    loaded: ``file`` its resolved path, ``sha256`` its hash (hex), ``f_hz`` (n,)
    in Hz, ``s`` (n, 2, 2) linear, ``z0_ohm`` its reference impedance. Every
    corrected landing must stay within ``tol_db`` (dB of |S|) and ``tol_deg``
    (degrees of phase) of it; below ``floor_db`` (dB) magnitudes are clamped and
    phase is not judged (:mod:`probelog.checks.golden`)."""

    file: str
    sha256: str
    tol_db: float
    tol_deg: float
    floor_db: float
    z0_ohm: float
    f_hz: np.ndarray = field(compare=False, repr=False)
    s: np.ndarray = field(compare=False, repr=False)


@dataclass(frozen=True)
class Site:
    """A structure on every die, at ``offset_um`` (x, y in um) from the die origin.

    Expectations are None when the plan does not give them: ``z0_window_ohm``
    (lo, hi) in ohm, ``alpha_db_per_mm_max`` in dB/mm, ``eps_eff_window`` (lo, hi),
    ``window_band_hz`` (lo, hi) in Hz: where the windows are judged (default: the
    whole sweep). ``c_ref_pf_per_mm`` (pF/mm) or ``z0_ref_ohm`` (ohm): a line's
    capacitance per length or impedance, known from elsewhere, that turns the
    pad-free two-line gamma into Z0 and RLGC (probelog.line_pairs).
    ``golden``: the golden Touchstone file every landing is compared with.
    """

    name: str
    kind: str
    offset_um: tuple[float, float]
    ports: int = 2
    symmetric: bool = False
    length_um: float | None = None
    z0_window_ohm: tuple[float, float] | None = None
    alpha_db_per_mm_max: float | None = None
    eps_eff_window: tuple[float, float] | None = None
    window_band_hz: tuple[float, float] | None = None
    line_type: str | None = None
    width_um: float | None = None
    gap_um: float | None = None
    metal: str | None = None
    note: str = ""
    precheck: Precheck | None = None  # None: the plan's [precheck]
    s21_db_window: tuple[float, float] | None = None  # device: |S21| (dB) it must stay in over s21_band_hz
    s21_band_hz: tuple[float, float] | None = None
    c_ref_pf_per_mm: float | None = None
    z0_ref_ohm: float | None = None
    golden: Golden | None = None


@dataclass(frozen=True)
class Sequence:
    """What to probe on each die, the drift reference and the recalibration cadence.

    ``drift_every_landings`` 0 means no drift re-measurement;
    ``recal_every_hours`` None means never recalibrate on a timer.
    """

    sites: tuple[str, ...]
    drift_site: str | None
    drift_die: Die | None
    drift_every_landings: int
    recal_every_hours: float | None


@dataclass(frozen=True)
class CalibrationPlan:
    """How to calibrate at the probe tips.

    ``kit_path`` is the cal-kit file resolved against the plan's folder, or None
    when the kit is written inline (``kit_inline``). ``standards`` are site names
    measured on ``die``; ``verification`` sites are measured after solving.
    """

    method: str
    compare_with: str | None
    kit_path: Path | None
    kit_inline: Mapping[str, Any] | None
    die: Die
    standards: tuple[str, ...]
    verification: tuple[str, ...]
    source: str = ""

    def load_kit(self) -> dict[str, Any]:
        """The cal kit as a TOML table; PlanError naming the plan key if unreadable."""
        if self.kit_inline is not None:
            return dict(self.kit_inline)
        assert self.kit_path is not None
        where = f"{self.source}: calibration.kit"
        try:
            text = self.kit_path.read_text(encoding="utf-8")
        except OSError as exc:
            raise PlanError(f"{where}: cannot read the kit file {self.kit_path} ({exc.strerror})") from None
        try:
            return tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise PlanError(f"{where}: the kit file {self.kit_path} is not valid TOML: {exc}") from None
        except RecursionError:
            raise PlanError(f"{where}: the kit file {self.kit_path}: {too_deep(text)}") from None


@dataclass(frozen=True)
class VnaSettings:
    """Stimulus: start_hz, stop_hz, ifbw_hz in Hz; power_dbm and its limit in dBm."""

    start_hz: float
    stop_hz: float
    points: int
    ifbw_hz: float
    power_dbm: float
    power_limit_dbm: float

    def sweep_settings(self) -> SweepSettings:
        return SweepSettings(
            start_hz=self.start_hz,
            stop_hz=self.stop_hz,
            points=self.points,
            ifbw_hz=self.ifbw_hz,
            power_dbm=self.power_dbm,
        )


@dataclass(frozen=True)
class Probes:
    """The mounted probes: ids (port 1 first), GSG pitch in um, wear warning."""

    ids: tuple[str, ...]
    pitch_um: float
    wear_warn_touchdowns: int


@dataclass(frozen=True)
class Plan:
    """A loaded, validated plan. ``text`` is the file as read, ``sha256`` its hash."""

    name: str
    description: str
    source: str
    text: str
    sha256: str
    wafer: Wafer
    sites: tuple[Site, ...]
    sequence: Sequence
    calibration: CalibrationPlan
    vna: VnaSettings
    probes: Probes
    limits: Mapping[str, float]
    precheck: Precheck = Precheck()

    def site(self, name: str) -> Site:
        for s in self.sites:
            if s.name == name:
                return s
        raise KeyError(name)

    @property
    def settings(self) -> SweepSettings:
        """The stimulus as the bench's SweepSettings."""
        return self.vna.sweep_settings()

    def precheck_for(self, name: str) -> Precheck:
        """The contact pre-check of site ``name``: its own, else the plan's."""
        own = self.site(name).precheck
        return own if own is not None else self.precheck

    @property
    def power_limit_dbm(self) -> float:
        return self.vna.power_limit_dbm

    @property
    def sequence_sites(self) -> tuple[Site, ...]:
        """The sites of ``sequence.sites`` in probing order."""
        return tuple(self.site(n) for n in self.sequence.sites)

    def dies_in_order(self) -> list[Die]:
        """Dies to probe as (col, row) in visiting order (a list; see iter_dies)."""
        return list(self.iter_dies())

    def iter_dies(self) -> Iterator[Die]:
        """Dies to probe as (col, row) in visiting order, one at a time
        (see :func:`probelog.plan_walk.iter_dies`)."""
        return plan_walk.iter_dies(self.wafer)

    def die_count(self) -> int:
        """How many dies :meth:`iter_dies` yields, without walking them."""
        return plan_walk.die_count(self.wafer)
