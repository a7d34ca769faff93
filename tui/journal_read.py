"""What the screens read out of the journal's events (dicts as written in
journal.jsonl, docs/journal-events.md, or typed events): line metrics per die,
the landings kept despite a FAIL, and the journal view's filter.

Pure functions of the event list, so the screens stay thin and the tests can
feed them a journal written by the real engine.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Iterable

Die = tuple[int, int]

# line metrics as the engine journals them (probelog.lines.JSON_KEYS): key -> (label, unit)
METRIC_UNITS = {
    "z0_ohm": ("|Z0|", "ohm"), "z0_re": ("Re Z0", "ohm"), "z0_im": ("Im Z0", "ohm"),
    "eps_eff": ("eps_eff", ""), "alpha_db_per_mm": ("alpha", "dB/mm"),
    "alpha_np_per_m": ("alpha", "Np/m"), "beta_rad_per_mm": ("beta", "rad/mm"),
    "r_ohm_per_m": ("R", "ohm/m"), "l_h_per_m": ("L", "H/m"), "g_s_per_m": ("G", "S/m"),
    "c_f_per_m": ("C", "F/m"), "q": ("Q", ""),
}


def as_dict(event: Any) -> dict:
    """A journal event as the line's dict (seq, ts, type, payload), whether it came
    as that dict or as a typed probelog.events.Event."""
    if isinstance(event, dict):
        return event
    import msgspec

    payload = msgspec.to_builtins(event.data)
    return {"seq": event.seq, "ts": event.ts, "type": event.type,
            "payload": payload if isinstance(payload, dict) else {}}


def type_of(event: Any) -> str:
    """The event's type, without converting a typed event's payload."""
    return str(event.get("type", "")) if isinstance(event, dict) else str(event.type)


def field(event: Any, name: str) -> Any:
    """One payload field, without converting a typed event's payload."""
    if isinstance(event, dict):
        return (event.get("payload") or {}).get(name)
    return getattr(event.data, name, None)


def _die(p: dict) -> Die | None:
    d = p.get("die")
    return (int(d[0]), int(d[1])) if isinstance(d, (list, tuple)) and len(d) == 2 else None


@dataclass(frozen=True)
class MetricChoice:
    """One colouring of the map: a metric of one site at one frequency (Hz)."""

    site: str
    key: str
    f_hz: float

    @property
    def label(self) -> str:
        name, unit = METRIC_UNITS.get(self.key, (self.key, ""))
        return f"{name} of {self.site} at {self.f_hz / 1e9:.4g} GHz" + (f" ({unit})" if unit else "")


def fold_metrics(events: Iterable[dict], into: dict[Die, dict[str, dict]] | None = None) -> dict[Die, dict[str, dict]]:
    """Line metrics of the landing kept (accepted) on every (die, site):
    die -> site -> {key: [values], "f_hz": [...]}. A rejected landing's figures
    (a lifted tip gives nonsense) never colour the map."""
    out: dict[Die, dict[str, dict]] = {} if into is None else into
    pending: dict[tuple, dict] = {}
    for ev in map(as_dict, events):
        p = ev.get("payload") or {}
        die = _die(p)
        if die is None:
            continue
        key = (die, str(p.get("site")), p.get("landing"))
        if ev.get("type") == "landing" and isinstance(p.get("metrics"), dict):
            pending[key] = p["metrics"]
        elif ev.get("type") == "decision" and p.get("action") == "accept" and key in pending:
            out.setdefault(die, {})[key[1]] = pending.pop(key)
    return out


def metric_choices(metrics: dict[Die, dict[str, dict]]) -> list[tuple[str, str]]:
    """(site, key) pairs that hold numbers somewhere on the wafer, sorted."""
    found = set()
    for sites in metrics.values():
        for site, m in sites.items():
            for key, v in m.items():
                if key != "f_hz" and isinstance(v, list) and any(isinstance(x, (int, float)) for x in v):
                    found.add((site, key))
    return sorted(found)


def metric_frequencies(metrics: dict[Die, dict[str, dict]], site: str) -> list[float]:
    """The frequencies (Hz) the site's metrics were journaled at."""
    for sites in metrics.values():
        f = (sites.get(site) or {}).get("f_hz")
        if isinstance(f, list) and f:
            return [float(x) for x in f]
    return []


def metric_values(metrics: dict[Die, dict[str, dict]], choice: MetricChoice) -> dict[Die, float]:
    """The chosen metric on every die that has it, at the journaled frequency
    nearest the chosen one."""
    out: dict[Die, float] = {}
    for die, sites in metrics.items():
        m = sites.get(choice.site) or {}
        vals, f = m.get(choice.key), m.get("f_hz")
        if not isinstance(vals, list) or not vals:
            continue
        i = 0
        if isinstance(f, list) and len(f) == len(vals):
            i = min(range(len(f)), key=lambda k: abs(float(f[k]) - choice.f_hz))
        v = vals[i]
        if isinstance(v, (int, float)):
            out[die] = float(v)
    return out


def kept_despite_fail(events: Iterable[dict]) -> dict[Die, list[str]]:
    """Dies with a landing accepted although its verdict was FAIL: die -> sites."""
    verdicts: dict[tuple, str] = {}
    out: dict[Die, list[str]] = {}
    for ev in events:
        kind = type_of(ev)
        if kind not in ("landing", "decision"):
            continue
        die = _die({"die": field(ev, "die")})
        if die is None:
            continue
        key = (die, field(ev, "site"), field(ev, "landing"))
        if kind == "landing":
            v = field(ev, "verdict")
            verdicts[key] = str(getattr(v, "value", v))
        elif field(ev, "action") == "accept-despite-fail" or (
                field(ev, "action") == "accept" and verdicts.get(key) == "fail"):
            out.setdefault(die, []).append(str(field(ev, "site")))
    return out


def event_matches(ev: dict, words: list[str]) -> bool:
    """The journal view's filter: every word must match the event's die ("3,4"),
    its site (a part of the name) or its type (a part of it)."""
    ev = as_dict(ev)
    p = ev.get("payload") or {}
    die = _die(p)
    die_txt = f"{die[0]},{die[1]}" if die else ""
    site = str(p.get("site") or p.get("standard") or "").lower()
    kind = str(ev.get("type", "")).lower()
    for w in words:
        w = w.lower().strip()
        if not w:
            continue
        if w.startswith("die:"):
            if w[4:] != die_txt:
                return False
        elif w.startswith("site:"):
            if w[5:] not in site:
                return False
        elif w.startswith("type:"):
            if w[5:] not in kind:
                return False
        elif not (w == die_txt or w in site or w in kind):
            return False
    return True


def is_resume(ev: dict) -> bool:
    """The journal's mark of a session reopened after a quit or a crash."""
    ev = as_dict(ev)
    return ev.get("type") in ("recovered", "session-resumed")


def position_of(outcome: Any, step: Any) -> tuple[Die, str] | None:
    """(die, site) the operator is looking at: the landing on screen, else the next step."""
    for s in (getattr(outcome, "step", None), step):
        if s is not None:
            return (int(s.die[0]), int(s.die[1])), str(s.site)
    return None
