"""The engine's one call after the last decision on a die: journal the die's
pad-free line figures (``line-figures`` events), one per line family kept at two
lengths. Pure reading of the state and the kept sweeps; the engine appends.
:func:`journaled_rows` reads them back from the state for the bundle."""

from __future__ import annotations

from dataclasses import asdict
from pathlib import Path
from typing import Any

from probelog import events as ev
from probelog.line_pairs import LINE_KINDS, die_figures, line_site
from probelog.lines import JSON_KEYS
from probelog.state import SessionState


def die_events(state: SessionState, die: ev.Die, plan_sites: Any, root: Path) -> list[ev.LineFigures]:
    """``line-figures`` payloads for ``die``: its kept line sweeps (corrected,
    else raw) read from ``root``; ``plan_sites`` the plan's Site objects. A sweep
    that cannot be read or paired gives no event (never a wrong one)."""
    import skrf

    tables = {s.name: asdict(s) for s in plan_sites}
    kept = []
    for name, rec in state.sites.get(die, {}).items():
        landing = rec.accepted_landing
        ref = (landing.corrected or landing.raw) if landing is not None else None
        if ref is None or tables.get(name, {}).get("kind") not in LINE_KINDS:
            continue
        try:
            kept.append((die, name, skrf.Network(str(root / ref.path))))
        except (OSError, ValueError, IndexError):
            continue
    fams: dict[str, list[dict[str, Any]]] = {}
    for fig in die_figures(kept, tables):
        fams.setdefault(fig["family"], []).append(fig)
    out = []
    for family, figs in fams.items():
        first = figs[0]
        metrics = {k: [f[k] for f in figs] for k in JSON_KEYS}
        out.append(ev.LineFigures(die=die, family=family, site_a=first["site_a"], site_b=first["site_b"],
                                  length_a_um=first["length_a_um"], length_b_um=first["length_b_um"],
                                  z0_from=first["z0_from"], metrics=metrics))
    return out


def journaled_rows(state: SessionState, sites: dict[str, dict[str, Any]]) -> list[dict[str, Any]]:
    """The ``line-figures`` events of ``state`` as rows shaped like
    :func:`probelog.line_pairs.die_figures` gives them (one a die, family and
    frequency; line type, metal, width and gap from the plan's site tables
    ``sites``). A family whose line the plan no longer describes gives no rows."""
    out: list[dict[str, Any]] = []
    for die, by_family in state.line_figures.items():
        for fig in by_family.values():
            a = line_site(fig.site_a, sites.get(fig.site_a, {}))
            if a is None:
                continue
            n = len(fig.metrics.get("f_hz") or [])
            cols = {k: list(fig.metrics.get(k) or [None] * n) for k in JSON_KEYS}
            for i in range(n):
                out.append({"die_col": die[0], "die_row": die[1], "family": fig.family, "line_type": a.line_type,
                            "metal": a.metal, "width_um": a.width_um, "gap_um": a.gap_um, "site_a": fig.site_a,
                            "site_b": fig.site_b, "length_a_um": fig.length_a_um, "length_b_um": fig.length_b_um,
                            "z0_from": fig.z0_from, **{k: cols[k][i] for k in JSON_KEYS}})
    return out


__all__ = ["die_events", "journaled_rows"]
