"""The bundle's README: what is where, and what every manifest column means."""

from __future__ import annotations

from probelog.manifest.index import BASE_COLUMNS, COLUMN_HELP, SessionIndex, check_column
from probelog.manifest.reader import ChainStatus


def readme_text(index: SessionIndex, chain: ChainStatus) -> str:
    """The short README of the bundle: what is where and what each column means."""
    opened = index.opened
    lines = [
        f"# probelog bundle of session {opened.session_id or '?'}",
        "",
        f"Wafer {opened.wafer or '?'} (lot {opened.lot or '?'}), chip {opened.chip or '?'}, "
        f"plan {opened.plan_name or '?'}, operator {opened.operator or '?'}.",
        f"Journal chain: {'intact' if chain.ok else 'BROKEN: ' + chain.problem}; "
        f"{chain.total} events; SHA-256 of the last line: {chain.last_hash}",
        "Keep that hash somewhere else: with it, any later edit of journal.jsonl shows.",
        "",
        "## Contents",
        "",
        "- `manifest.csv`: one row per kept sweep (landings with an accept decision; a FAIL",
        "  landing kept on purpose has decision `accept-despite-fail` and the reason).",
        "- `data/`: every Touchstone file of the session, same layout as the session folder:",
        "  `data/d<col>_<row>/<site>/L<landing>-raw.s2p` and `-cor.s2p`; calibration data in",
        "  `data/cal/<cal_id>/` (raw standards and the saved cal set).",
        "- `journal.jsonl`: the session journal, unchanged (format: docs/journal-events.md).",
        "- `report.html`: self-contained report (plots embedded), open in any browser.",
        "- Text cells of `manifest.csv` that begin with `=`, `+`, `-`, `@`, a tab or a",
        "  carriage return (a note, a site name) start with an added `'` so a spreadsheet",
        "  shows them as text instead of running them as a formula; numbers are unchanged.",
        "  `probelog.open_session` strips that one `'` again; strip it yourself elsewhere.",
        "- In Python: `import probelog; s = probelog.open_session('<this folder>')`,",
        "  then `s.manifest`, `s.to_pandas()`, `s.network_sets['<site>']`.",
        "",
        "## Manifest columns",
        "",
    ]
    for c in BASE_COLUMNS:
        lines.append(f"- `{c}`: {COLUMN_HELP[c]}")
    for name, unit in index.check_units.items():
        col = check_column(name)
        u = f" ({unit})" if unit else ""
        lines.append(f"- `{col}`: verdict of the '{name}' check (pass, warn, fail, n/a); "
                     f"`{col}_value`{u} the measured figure, `{col}_limit`{u} the limit, "
                     f"`{col}_at_hz` the frequency (Hz) where it is worst")
    if index.metric_columns:
        lines.append("- `<metric>@<f>GHz`: line metrics at frequency f (units in the metric "
                     "name: ohm, dB/mm, Np/m, rad/m; eps_eff and Q are ratios), as journaled "
                     "with the landing or computed from the corrected sweep at export")
    lines.append("")
    return "\n".join(lines)
