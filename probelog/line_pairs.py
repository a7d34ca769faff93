"""Pad-free line figures of a die: the same line at two lengths.

Where a plan lands the same line type, width, gap and metal level at two
lengths on one die, the propagation constant gamma comes from the two lines
with :func:`probelog.lines.gamma_two_lines` (Engen & Hoer, IEEE T-MTT 27(12),
1979; Marks, IEEE T-MTT 39(7), 1991): free of the GSG pads and of the line's own
Z0. From gamma: alpha (dB/mm), beta (rad/mm), eps_eff and Q = beta / (2 alpha).
Z0 and R, L, G, C per unit length need one more figure the plan states:

- a capacitance per length C (``c_ref_pf_per_mm``): Z0 = gamma / (G + j omega C)
  with G taken as 0 (Marks & Williams, IEEE MGWL 1(6), 1991), or
- a line impedance Z0 (``z0_ref_ohm``) taken as real and constant.

Without either, Z0 and RLGC stay NaN (they are not guessed). Frequencies in
Hz, lengths in um in the plan, metres inside; e^{+j omega t}.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from probelog.lines import LineMetrics, gamma_two_lines, metrics_at, metrics_from_gamma

LINE_KINDS = ("line", "thru")


@dataclass(frozen=True)
class LineSite:
    """A line site of the plan as far as pairing needs it (lengths in um)."""

    name: str
    line_type: str
    metal: str
    width_um: float
    gap_um: float
    length_um: float
    c_ref_pf_per_mm: float | None = None
    z0_ref_ohm: float | None = None

    @property
    def family(self) -> str:
        """``<line_type>/<metal>/<width>x<gap>um``: what two lengths must share."""
        return f"{self.line_type}/{self.metal}/{self.width_um:g}x{self.gap_um:g}um"


def line_site(name: str, table: dict[str, Any]) -> LineSite | None:
    """A :class:`LineSite` from a plan's site table (TOML dict), or None when the
    site is not a line with type, metal, width, gap and length all stated."""
    if table.get("kind") not in LINE_KINDS:
        return None
    try:
        return LineSite(name, str(table["line_type"]), str(table["metal"]), float(table["width_um"]),
                        float(table["gap_um"]), float(table["length_um"]),
                        _opt(table.get("c_ref_pf_per_mm")), _opt(table.get("z0_ref_ohm")))
    except (KeyError, TypeError, ValueError):
        return None


def _opt(v: Any) -> float | None:
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) and v > 0 else None


def pairs_on_die(sites: list[LineSite]) -> list[tuple[LineSite, LineSite]]:
    """(shorter, longer) per family among the kept line sites of one die: the
    shortest and the longest length, when they differ. Families in first-seen order."""
    fams: dict[str, list[LineSite]] = {}
    for s in sites:
        fams.setdefault(s.family, []).append(s)
    out = []
    for group in fams.values():
        a = min(group, key=lambda s: s.length_um)
        b = max(group, key=lambda s: s.length_um)
        if b.length_um > a.length_um:
            out.append((a, b))
    return out


def pad_free_metrics(ntwk_a: Any, site_a: LineSite, ntwk_b: Any, site_b: LineSite) -> tuple[LineMetrics, str]:
    """Gamma from the two lines and, with the plan's reference, Z0.

    Returns (metrics over the whole sweep, how Z0 was found: '' / 'c-ref' /
    'z0-ref'). Raises ValueError when the sweeps do not fit (other grid, not
    2-ports)."""
    f = np.asarray(ntwk_a.f, dtype=float)
    with np.errstate(all="ignore"):
        gamma = gamma_two_lines(ntwk_a, site_a.length_um * 1e-6, ntwk_b, site_b.length_um * 1e-6)
    c_ref = site_a.c_ref_pf_per_mm or site_b.c_ref_pf_per_mm
    z0_ref = site_a.z0_ref_ohm or site_b.z0_ref_ohm
    if c_ref is not None:
        c_f_per_m = c_ref * 1e-12 * 1e3  # pF/mm -> F/m
        with np.errstate(all="ignore"):
            z0 = gamma / (1j * 2.0 * np.pi * f * c_f_per_m)
        return metrics_from_gamma(f, gamma, z0), "c-ref"
    if z0_ref is not None:
        return metrics_from_gamma(f, gamma, np.full(f.shape, complex(z0_ref))), "z0-ref"
    return metrics_from_gamma(f, gamma), ""


def figures_at(metrics: LineMetrics, freqs_hz: Any) -> list[dict[str, float | None]]:
    """One dict per frequency (keys of :data:`probelog.lines.JSON_KEYS`; None
    for NaN), at the measured points nearest to ``freqs_hz``."""
    cols = metrics_at(metrics, freqs_hz)
    n = len(cols["f_hz"])
    return [{k: v[i] for k, v in cols.items()} for i in range(n)]


def die_figures(kept: list[tuple[tuple[int, int], str, Any]], sites: dict[str, dict[str, Any]]) -> list[dict[str, Any]]:
    """Pad-free figures of every line family measured at two lengths on a die.

    ``kept``: (die, site name, skrf.Network of its kept sweep) for the kept line
    sweeps; ``sites``: the plan's site tables by name. Returns one dict a die,
    family and reported frequency (the journal's round frequencies): die_col,
    die_row, family, line_type, metal, width_um, gap_um, site_a, site_b,
    length_a_um, length_b_um, z0_from and the keys of ``probelog.lines.JSON_KEYS``.
    A pair whose sweeps do not fit (another grid, no line) gives no figures."""
    from probelog.lines import default_frequencies

    by_die: dict[tuple[int, int], list[LineSite]] = {}
    nets: dict[tuple[tuple[int, int], str], Any] = {}
    for die, name, ntwk in kept:
        ls = line_site(name, sites.get(name, {}))
        if ls is not None and ntwk is not None:
            by_die.setdefault(die, []).append(ls)
            nets[(die, name)] = ntwk
    out: list[dict[str, Any]] = []
    for die, lsites in by_die.items():
        for a, b in pairs_on_die(lsites):
            try:
                m, z0_from = pad_free_metrics(nets[(die, a.name)], a, nets[(die, b.name)], b)
            except (ValueError, IndexError, np.linalg.LinAlgError):
                continue
            for fig in figures_at(m, default_frequencies(m.f_hz, prefer_round=True)):
                out.append({"die_col": die[0], "die_row": die[1], "family": a.family, "line_type": a.line_type,
                            "metal": a.metal, "width_um": a.width_um, "gap_um": a.gap_um, "site_a": a.name,
                            "site_b": b.name, "length_a_um": a.length_um, "length_b_um": b.length_um,
                            "z0_from": z0_from, **fig})
    return out


__all__ = ["LineSite", "line_site", "pairs_on_die", "pad_free_metrics", "figures_at", "die_figures", "LINE_KINDS"]
