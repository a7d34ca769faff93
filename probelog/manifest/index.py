"""The manifest rows: one per kept sweep (a site's final ``accept`` or
``accept-despite-fail``), with the plan's geometry, every check's verdict and
figure, and the line metrics journaled with the landing."""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass, field
from typing import Any, Iterable

from probelog import events as ev
from probelog import state as st
from probelog.manifest.metrics import flatten_metrics, metric_sort_key
from probelog.manifest.reader import Journal, SessionFormatError


def plan_sites(plan_text: str | None) -> dict[str, dict[str, Any]]:  # Any: parsed TOML
    """Site tables of the plan TOML by name: any table with ``name`` and ``kind``
    (geometry keys: line_type, metal, width_um, gap_um, length_um)."""
    if not plan_text:
        return {}
    try:
        doc = tomllib.loads(plan_text)
    except tomllib.TOMLDecodeError as exc:
        raise SessionFormatError(f"session-opened plan_text: not valid TOML ({exc})") from None
    found: dict[str, dict[str, Any]] = {}

    def visit(node: Any) -> None:
        if isinstance(node, dict):
            if isinstance(node.get("name"), str) and isinstance(node.get("kind"), str):
                found.setdefault(node["name"], node)
            for value in node.values():
                visit(value)
        elif isinstance(node, list):
            for value in node:
                visit(value)

    visit(doc)
    return found


BASE_COLUMNS = (
    "seq", "time", "die_col", "die_row", "site", "kind", "line_type", "metal",
    "width_um", "gap_um", "length_um", "w_over_g", "landing", "retries",
    "cal_id", "raw_file", "raw_sha256", "corrected_file", "corrected_sha256",
    "files_ok", "verdict", "decision", "decision_reason", "notes",
)

COLUMN_HELP = {
    "seq": "journal sequence number of the kept landing event",
    "time": "UTC time the sweep was journaled (ISO 8601, ms)",
    "die_col": "die column, counted from 0 at the wafer map's left",
    "die_row": "die row, counted from 0 at the wafer map's top",
    "site": "structure name on the die (plan site table)",
    "kind": "what the site is: open, short, load, thru, line, open-stub, short-stub, device",
    "line_type": "declared line type from the plan (e.g. cpw, gcpw, swl); empty if not a line",
    "metal": "declared metal level from the plan",
    "width_um": "declared signal width, um",
    "gap_um": "declared signal-to-ground gap, um",
    "length_um": "declared line length, um",
    "w_over_g": "width-to-gap ratio, width_um / gap_um",
    "landing": "1-based touchdown count on this die/site; the kept one",
    "retries": "landings on this die/site that were not kept (re-landed)",
    "cal_id": "calibration set that corrected the sweep (empty: raw only)",
    "raw_file": "raw Touchstone file, relative to the bundle folder",
    "raw_sha256": "SHA-256 of raw_file as journaled",
    "corrected_file": "corrected Touchstone file, relative to the bundle folder (empty if none)",
    "corrected_sha256": "SHA-256 of corrected_file as journaled",
    "files_ok": "1 when every file of the row was found and its SHA-256 matched, else 0",
    "verdict": "overall verdict of the landing's checks: pass, warn or fail",
    "decision": "accept, or accept-despite-fail (a FAIL landing the operator kept, with a reason)",
    "decision_reason": "the operator's reason for the decision (always given for accept-despite-fail)",
    "notes": "operator notes on this die/site, joined with ' | '",
}


def check_column(check_name: str) -> str:
    """The manifest column of a check's verdict: ``chk_`` and the name in lower case,
    every run of other characters as one ``_`` ('line-z0' -> 'chk_line_z0')."""
    return "chk_" + re.sub(r"[^0-9a-z]+", "_", check_name.lower()).strip("_")


@dataclass
class SessionIndex:
    """What a bundle needs from the journal: the folded state, the typed events by
    kind, and the manifest rows (one per kept sweep)."""

    opened: ev.SessionOpened
    sites: dict[str, dict[str, Any]]
    rows: list[dict[str, Any]]  # Any: manifest cells (numbers, text, None)
    landings: list[ev.Event]
    decisions: list[ev.Event]
    notes: list[ev.Event]
    cal_events: list[ev.Event]
    drifts: list[ev.Event]
    errors: list[ev.Event]
    closed: ev.SessionClosed | None
    check_units: dict[str, str] = field(default_factory=dict)
    metric_columns: list[str] = field(default_factory=list)
    state: st.SessionState = field(default_factory=st.SessionState)

    @property
    def columns(self) -> list[str]:
        checks = []
        for name in self.check_units:
            c = check_column(name)
            checks += [c, f"{c}_value", f"{c}_limit", f"{c}_at_hz"]
        return list(BASE_COLUMNS) + checks + self.metric_columns


_CAL_TYPES = (ev.CalStandard, ev.CalComputed, ev.CalVerification, ev.CalAgreement, ev.CalAccepted, ev.CalRejected)
_ERROR_TYPES = (ev.InstrumentError, ev.Recovered, ev.RecalRequested)


def index_session(journal: Journal) -> SessionIndex:
    """Kept sweeps (from the state: each site's final accept, despite FAIL or
    not) become manifest rows, without the ``files_ok`` and computed-metric
    fields, which need the files."""
    state = journal.state
    opened = state.opened
    if opened is None:
        raise SessionFormatError(f"{journal.path}: no session-opened event")
    sites = plan_sites(opened.plan_text)
    by_kind: dict[str, list[ev.Event]] = {k: [] for k in ("landing", "decision", "note", "cal", "drift", "error")}
    for e in journal.events:
        d = e.data
        kind = ("landing" if isinstance(d, ev.Landing) else "decision" if isinstance(d, (ev.Decision, ev.DieSkipped))
                else "note" if isinstance(d, ev.Note) else "cal" if isinstance(d, _CAL_TYPES)
                else "drift" if isinstance(d, ev.Drift) else "error" if isinstance(d, _ERROR_TYPES) else "")
        if kind:
            by_kind[kind].append(e)
    notes_by_site: dict[tuple[Any, str], list[str]] = {}
    for n in state.notes:
        if n.site is not None:
            notes_by_site.setdefault((n.die, n.site), []).append(n.text)
    check_units: dict[str, str] = {}
    metric_cols: dict[str, None] = {}
    kept_rows: list[tuple[st.LandingRec, dict[str, Any]]] = []
    for die, by_site in state.sites.items():
        for site, rec in by_site.items():
            kept = rec.accepted_landing
            if kept is None or rec.decision is None:
                continue
            geo = sites.get(site, {})
            width, gap = geo.get("width_um"), geo.get("gap_um")
            row: dict[str, Any] = {
                "seq": kept.seq, "time": kept.ts, "die_col": die[0], "die_row": die[1],
                "site": site, "kind": kept.kind or geo.get("kind", ""),
                "line_type": geo.get("line_type", ""), "metal": geo.get("metal", ""),
                "width_um": width, "gap_um": gap, "length_um": geo.get("length_um"),
                "w_over_g": (width / gap) if width and gap else None,
                "landing": kept.landing,
                "retries": sum(1 for x in rec.landings if x.what in ("landing", "precheck") and x.seq != kept.seq),
                "cal_id": kept.cal_id or "",
                "raw_file": kept.raw.path if kept.raw else "", "raw_sha256": kept.raw.sha256 if kept.raw else "",
                "corrected_file": kept.corrected.path if kept.corrected else "",
                "corrected_sha256": kept.corrected.sha256 if kept.corrected else "", "files_ok": None,
                "verdict": kept.verdict.value, "decision": rec.decision.action,
                "decision_reason": rec.decision.reason,
                "notes": " | ".join(notes_by_site.get((die, site), [])),
            }
            for c in kept.checks:
                check_units.setdefault(c.name, c.unit)
                col = check_column(c.name)
                row[col] = c.verdict.value
                row[f"{col}_value"] = c.value
                row[f"{col}_limit"] = c.limit
                row[f"{col}_at_hz"] = c.at_hz
            flat = flatten_metrics(kept.metrics)
            row.update(flat)
            metric_cols.update(dict.fromkeys(flat))
            kept_rows.append((kept, row))
    rows = [row for _, row in sorted(kept_rows, key=lambda kr: kr[0].seq)]
    return SessionIndex(opened, sites, rows, by_kind["landing"], by_kind["decision"], by_kind["note"],
                        by_kind["cal"], by_kind["drift"], by_kind["error"], state.closed, check_units,
                        sorted(metric_cols, key=metric_sort_key), state)


def add_metric_columns(index: SessionIndex, names: Iterable[str]) -> None:
    """Register metric columns that were computed after indexing."""
    for n in names:
        if n not in index.metric_columns:
            index.metric_columns.append(n)
    index.metric_columns.sort(key=metric_sort_key)
