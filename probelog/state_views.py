"""Views of a SessionState for the die map, the die history and reports: a
die's status, metrics at a chosen frequency, the frequencies and names
journaled, one die's history in journal order. Pure functions; units: Hz.
"""

from __future__ import annotations

from collections.abc import Sequence

from probelog import events as ev
from probelog.events import Die
from probelog.state import (ACCEPTED_DESPITE_FAIL, DONE, FAILED, NOT_STARTED, PARTIAL, SKIPPED,
                            SessionState)
from probelog.state_records import DecisionRec, LandingRec, metric_at


def die_status(state: SessionState, die: Die, planned_sites: Sequence[str]) -> str:
    """todo / partial / done / skipped / failed / accepted-despite-fail for a die
    whose plan has ``planned_sites``. A give-up wins over an accepted FAIL."""
    by_site = state.sites.get(die, {})
    acts = [by_site[s].decision.action for s in planned_sites  # type: ignore[union-attr]
            if s in by_site and by_site[s].decision is not None]
    if not acts:
        return NOT_STARTED
    if len(acts) < len(planned_sites):
        return PARTIAL
    if all(a == ev.SKIP for a in acts):
        return SKIPPED
    if ev.GIVE_UP in acts:
        return FAILED
    if ev.ACCEPT_DESPITE_FAIL in acts:
        return ACCEPTED_DESPITE_FAIL
    return DONE


def kept_metric_at(state: SessionState, die: Die, site: str, name: str, f_hz: float) -> float | None:
    """Metric ``name`` of the kept landing of (die, site) at the journaled
    frequency nearest ``f_hz`` (Hz); None when there is none."""
    kept = state.last_accepted(die, site)
    return metric_at(kept.metrics if kept else None, name, f_hz)


def metric_names(state: SessionState) -> list[str]:
    """Every line-metric name journaled in the session (``f_hz`` excluded)."""
    names: dict[str, None] = {}
    for by_site in state.sites.values():
        for rec in by_site.values():
            for x in rec.landings:
                if x.metrics:
                    names.update(dict.fromkeys(k for k in x.metrics if k != "f_hz"))
    return list(names)


def metric_frequencies(state: SessionState) -> list[float]:
    """Every frequency (Hz) a metric was journaled at, ascending."""
    out: set[float] = set()
    for by_site in state.sites.values():
        for rec in by_site.values():
            for x in rec.landings:
                if x.metrics and x.metrics.get("f_hz"):
                    out.update(float(f) for f in x.metrics["f_hz"] if f is not None)
    return sorted(out)


def middle_frequency(state: SessionState) -> float | None:
    """The journaled metric frequency (Hz) in the middle of the list, or None."""
    freqs = metric_frequencies(state)
    return freqs[len(freqs) // 2] if freqs else None


def die_metrics(state: SessionState, f_hz: float | None = None) -> dict[Die, dict[str, float]]:
    """Per die, every metric of every kept landing at the journaled frequency
    nearest ``f_hz`` (Hz; default :func:`middle_frequency`), keyed
    ``<site>.<metric>`` (the die map shades dies by one key)."""
    f = middle_frequency(state) if f_hz is None else f_hz
    out: dict[Die, dict[str, float]] = {}
    if f is None:
        return out
    for die, by_site in state.sites.items():
        for site, rec in by_site.items():
            kept = rec.accepted_landing
            if kept is None or not kept.metrics:
                continue
            for name in kept.metrics:
                v = metric_at(kept.metrics, name, f) if name != "f_hz" else None
                if v is not None:
                    out.setdefault(die, {})[f"{site}.{name}"] = v
    return out


def die_history(state: SessionState, die: Die) -> list[tuple[int, str, LandingRec | DecisionRec]]:
    """Landings (site, drift, verification) and decisions on ``die`` in journal
    order: (seq, site, record)."""
    rows: list[tuple[int, str, LandingRec | DecisionRec]] = []
    for site, rec in state.sites.get(die, {}).items():
        rows += [(x.seq, site, x) for x in rec.landings]
        rows += [(x.seq, site, x) for x in rec.decisions]
    return sorted(rows, key=lambda r: r[0])
