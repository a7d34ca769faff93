"""Pad-free line figures in the analyst bundle: manifest columns and a report section.

Where the plan lands the same line type, width, gap and metal at two lengths on
a die, :func:`probelog.line_pairs.die_figures` gives gamma from the two kept
sweeps (free of the pads), hence alpha, beta, eps_eff, Q and, with a C or Z0
reference the plan states, Z0 and RLGC. Here they become manifest columns
``padfree_<figure>@<f>GHz`` on the rows of both lines of the pair (units as in
the name; eps_eff and Q are ratios) and one report section: Z0, loss, eps_eff and
Q against width-to-gap ratio, one curve per line type and metal, the
die-to-die spread as a band.
"""

from __future__ import annotations

import base64
import html
from typing import Any

from probelog.line_figures_step import journaled_rows
from probelog.line_pairs import LINE_KINDS, die_figures
from probelog.manifest import SessionIndex, add_metric_columns

FIGURES = ("z0_re", "alpha_db_per_mm", "beta_rad_per_mm", "eps_eff", "q",
           "r_ohm_per_m", "l_h_per_m", "g_s_per_m", "c_f_per_m")
REPORT_HZ = 40e9


def figures(index: SessionIndex, networks: dict[int, Any]) -> list[dict[str, Any]]:
    """Pad-free figures: those the session journaled (``line-figures``, read into
    the state) for each die that has them; for the other dies (left unfinished,
    or a journal from before those events) from the kept line sweeps
    (``networks``: manifest seq -> Network)."""
    journaled = journaled_rows(index.state, index.sites)
    done = {(r["die_col"], r["die_row"]) for r in journaled}
    kept = [((r["die_col"], r["die_row"]), r["site"], networks.get(r["seq"])) for r in index.rows
            if r.get("kind") in LINE_KINDS and (r["die_col"], r["die_row"]) not in done]
    return journaled + die_figures(kept, index.sites)


def add_pad_free_columns(index: SessionIndex, networks: dict[int, Any]) -> int:
    """Write ``padfree_*`` columns on the rows of each pair; returns the number of
    (die, family) pairs found."""
    figs = figures(index, networks)
    rows = {((r["die_col"], r["die_row"]), r["site"]): r for r in index.rows}
    names: dict[str, None] = {}
    pairs = set()
    for f in figs:
        pairs.add((f["die_col"], f["die_row"], f["family"]))
        label = f"{f['f_hz'] / 1e9:g}GHz"
        for site in (f["site_a"], f["site_b"]):
            row = rows.get(((f["die_col"], f["die_row"]), site))
            if row is None:
                continue
            for k in FIGURES:
                if f[k] is None:
                    continue  # Z0 and RLGC without a reference in the plan: no empty columns
                col = f"padfree_{k}@{label}"
                row[col] = f[k]
                names[col] = None
    add_metric_columns(index, names)
    return len(pairs)


def section(index: SessionIndex, networks: dict[int, Any]) -> str:
    """The report section (HTML, self-contained: the plot is an inline PNG)."""
    from probelog.catalog.plots import line_figures_figure, to_bytes

    head = "<h2 id='padfree'>Pad-free line figures (two lengths on a die)</h2>"
    figs = figures(index, networks)
    if not figs:
        return head + ("<p class='none'>No line type, width, gap and metal was kept at two lengths on one die: "
                       "no pad-free figures.</p>")
    f = min({x["f_hz"] for x in figs}, key=lambda v: abs(v - REPORT_HZ))
    at = [x for x in figs if abs(x["f_hz"] - f) <= 0.02 * f]
    png = base64.b64encode(to_bytes(line_figures_figure(at, f), "png")).decode("ascii")
    fams = sorted({f"{x['family']} ({x['site_a']} and {x['site_b']})" for x in at})
    note = "" if any(x["z0_re"] is not None for x in at) else (
        " Z0 and RLGC need a capacitance (c_ref_pf_per_mm) or Z0 reference (z0_ref_ohm) in the plan's site "
        "table; without one they are left out rather than guessed.")
    return (head + f"<p>Gamma from two lines that differ only in length (Engen &amp; Hoer 1979; Marks 1991), "
            f"so the GSG pads drop out; at {f / 1e9:.4g} GHz. Families: {html.escape('; '.join(fams))}.{note}</p>"
            f"<img alt='pad-free line figures' src='data:image/png;base64,{png}'>")


__all__ = ["add_pad_free_columns", "section", "figures"]
