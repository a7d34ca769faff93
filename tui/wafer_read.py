"""What the wafer view reads out of the session: the line metrics a die can be
shaded by, their values at a chosen frequency, the dies holding a landing kept
despite a FAIL, and the die the calibration was landed on.

Metrics and flags come from the session state (probelog.state_views), the one
reading of the journal the engine, the summary and the report share; only the
calibration die, which the state does not keep, is taken from the events.
Pure functions; frequencies in Hz, dies ``(column, row)``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from probelog import events as ev
from probelog import state_views as sv
from probelog.state import SessionState

Die = tuple[int, int]

# line metrics as the engine journals them (probelog.lines.JSON_KEYS): key -> (label, unit)
METRIC_UNITS = {
    "z0_ohm": ("|Z0|", "ohm"), "z0_re": ("Re Z0", "ohm"), "z0_im": ("Im Z0", "ohm"),
    "eps_eff": ("eps_eff", ""), "alpha_db_per_mm": ("alpha", "dB/mm"),
    "alpha_np_per_m": ("alpha", "Np/m"), "beta_rad_per_mm": ("beta", "rad/mm"),
    "r_ohm_per_m": ("R", "ohm/m"), "l_h_per_m": ("L", "H/m"), "g_s_per_m": ("G", "S/m"),
    "c_f_per_m": ("C", "F/m"), "q": ("Q", ""),
}


@dataclass(frozen=True)
class MetricChoice:
    """One colouring of the map: metric ``key`` of one site at ``f_hz`` (Hz)."""

    site: str
    key: str
    f_hz: float

    @property
    def label(self) -> str:
        name, unit = METRIC_UNITS.get(self.key, (self.key, ""))
        return f"{name} of {self.site} at {self.f_hz / 1e9:.4g} GHz" + (f" ({unit})" if unit else "")


def _split(key: str) -> tuple[str, str]:
    """``<site>.<metric>`` (state_views.die_metrics) as (site, metric); metric
    names hold no dot, site names may."""
    site, _, name = key.rpartition(".")
    return site, name


def metric_choices(state: SessionState) -> list[tuple[str, str]]:
    """(site, metric) pairs with a number on some die's kept landing at the
    middle journaled frequency, sorted; [] before any line metric is kept."""
    found = {_split(k) for by_key in sv.die_metrics(state).values() for k in by_key}
    return sorted(found)


def metric_values(state: SessionState, choice: MetricChoice) -> dict[Die, float]:
    """The chosen metric on every die whose kept landing of the site has it, at
    the journaled frequency nearest ``choice.f_hz``. A rejected landing (a
    lifted tip gives nonsense) never colours the map: only kept ones count."""
    key = f"{choice.site}.{choice.key}"
    return {die: by_key[key] for die, by_key in sv.die_metrics(state, choice.f_hz).items() if key in by_key}


def kept_despite_fail(state: SessionState) -> set[Die]:
    """Dies with a site whose decision keeps a FAILED landing."""
    return {die for die, by_site in state.sites.items()
            if any(rec.decision is not None and rec.decision.action == ev.ACCEPT_DESPITE_FAIL
                   for rec in by_site.values())}


def cal_die_of(events: Sequence[ev.Event]) -> Die | None:
    """The die the last calibration's standards were landed on."""
    for e in reversed(events):
        if isinstance(e.data, ev.CalStandard):
            return int(e.data.die[0]), int(e.data.die[1])
    return None
