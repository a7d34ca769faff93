"""Read a session journal and turn it into the analyst manifest.

The journal format is the contract in docs/journal-events.md; lines are decoded
by probelog.events and folded into a probelog.state.SessionState (no dependency
on the engine), so a bundle can be built from a session written by any version
that keeps the contract.

One manifest row per kept sweep: the landing a site's final decision kept, an
``accept`` or an ``accept-despite-fail`` (column ``decision``, with the operator's
reason). Landings on the same die/site that were not kept are counted as
retries of the kept one.
"""

from __future__ import annotations

import csv
import hashlib
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable

from probelog import events as ev
from probelog import state as st

JOURNAL_NAME = "journal.jsonl"
ZERO_HASH = "0" * 64


class SessionFormatError(ValueError):
    """The folder or its journal does not follow docs/journal-events.md."""


@dataclass
class Journal:
    """The events of one session journal, their state, and what the reader noticed.

    ``lines`` are the raw bytes of each event line (without newline), kept for
    the hash chain; ``torn_tail`` is True when an unterminated, unparsable last
    line was left aside (a crash while appending).
    """

    path: Path
    events: list[ev.Event]
    lines: list[bytes]
    torn_tail: bool = False
    state: st.SessionState = field(default_factory=st.SessionState)


@dataclass
class ChainStatus:
    """Result of re-walking the hash chain: ``ok``, the SHA-256 of the last line
    (what makes the chain tamper-evident once copied elsewhere), ``events`` the
    lines intact from the start, ``total`` the lines read and, when broken, one
    sentence saying where."""

    ok: bool
    last_hash: str
    events: int
    problem: str = ""
    checked_by: str = "probelog.manifest"
    total: int = 0


def read_journal(session_dir: Path) -> Journal:
    """Read and decode ``journal.jsonl`` of a session folder.

    Raises SessionFormatError naming the file and line for anything that is not
    an event; an unparsable *last* line without a newline is treated as torn.
    """
    path = Path(session_dir) / JOURNAL_NAME
    if not Path(session_dir).is_dir():
        raise SessionFormatError(f"{session_dir}: not a folder")
    if not path.is_file():
        raise SessionFormatError(f"{session_dir}: not a probelog session (no {JOURNAL_NAME})")
    blob = path.read_bytes()
    raw_lines = blob.split(b"\n")
    ends_with_newline = blob.endswith(b"\n")
    if ends_with_newline:
        raw_lines = raw_lines[:-1]
    decoder = ev.Decoder(str(path))
    events: list[ev.Event] = []
    lines: list[bytes] = []
    torn = False
    for i, line in enumerate(raw_lines, start=1):
        try:
            events.append(decoder.line(line))
        except ev.EventError as exc:
            if i == len(raw_lines) and not ends_with_newline:
                torn = True
                break
            why = str(exc).split(": ", 1)[-1] if "not a journal line" not in str(exc) else "not a JSON event"
            raise SessionFormatError(f"{path}:{i}: {why}") from None
        lines.append(line)
    if not events:
        raise SessionFormatError(f"{path}: journal has no events")
    if not isinstance(events[0].data, ev.SessionOpened):
        raise SessionFormatError(f"{path}:1: first event is '{events[0].type}', expected 'session-opened'")
    return Journal(path=path, events=events, lines=lines, torn_tail=torn, state=st.fold(events))


def walk_chain(lines: list[bytes]) -> ChainStatus:
    """Re-walk the hash chain: each event's ``prev`` is the SHA-256 hex of the
    previous line's bytes (64 zeros for the first), and ``seq`` counts 1, 2, ...
    (lines decoded by probelog.events)."""
    prev = ZERO_HASH
    problem = ""
    intact = 0
    decoder = ev.Decoder()
    for i, line in enumerate(lines, start=1):
        try:
            e = decoder.line(line)
            seq, line_prev = e.seq, e.prev
        except ev.EventError:
            seq, line_prev = -1, ""
        if not problem and seq != i:
            problem = f"line {i}: seq is {seq}, expected {i}"
        elif not problem and line_prev != prev:
            problem = f"line {i}: 'prev' is not the SHA-256 of line {i - 1} (line {i - 1} edited, or lines removed)"
        if not problem:
            intact = i
        prev = hashlib.sha256(line).hexdigest()
    return ChainStatus(not problem, prev, intact, problem, total=len(lines))


def chain_status(session_dir: Path, journal: Journal) -> ChainStatus:
    """Chain status from ``probelog.journal.verify``, with the intact count and
    the last line's SHA-256 from :func:`walk_chain` over the lines this bundle
    copies (a torn tail left aside by the reader is not part of them)."""
    from probelog.journal import verify

    own = walk_chain(journal.lines)
    try:
        report = verify(Path(session_dir))
    except Exception as exc:  # a verifier crash must not stop the bundle
        own.problem = (own.problem + "; " if own.problem else "") + f"journal.verify failed: {exc}"
        return own
    # Data-file problems are reported by the export against the copies; here
    # only the journal's own chain counts.
    chain_problems = [p for p in getattr(report, "problems", [])
                      if str(getattr(p, "file", "")).endswith(JOURNAL_NAME)]
    text = "; ".join(f"line {p.line}: {p.message}" if p.line else str(p.message) for p in chain_problems)
    ok = own.ok and not chain_problems
    return ChainStatus(ok, own.last_hash, own.events, text or own.problem, total=own.total,
                       checked_by="probelog.journal.verify")


# ---------------------------------------------------------------- the plan


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


# ---------------------------------------------------------------- metrics

_FREQ_KEYS = ("freq_hz", "f_hz", "frequency_hz", "frequencies_hz", "at_hz", "hz")


def _freq_label(hz: float) -> str:
    return f"{hz / 1e9:g}GHz"


def _scalar_items(name: str, value: Any) -> Iterable[tuple[str, float | None]]:
    if isinstance(value, bool):
        yield name, float(value)
    elif isinstance(value, (int, float)) or value is None:
        yield name, value
    elif isinstance(value, list) and len(value) == 2 and all(isinstance(v, (int, float)) for v in value):
        # a complex value stored as [re, im]
        yield f"{name}_re", value[0]
        yield f"{name}_im", value[1]
    elif isinstance(value, dict):
        for k, v in value.items():
            yield from _scalar_items(f"{name}_{k}", v)


def flatten_metrics(metrics: Any) -> dict[str, float | None]:
    """Line metrics of a ``landing`` payload as flat ``name@<f>GHz`` columns.

    Accepts the shapes an engine may reasonably journal: a dict of lists with a
    frequency key (``freq_hz``), a list of per-frequency dicts, a dict keyed by
    frequency, or a flat dict of scalars. Units stay those of the key names.
    """
    out: dict[str, float | None] = {}
    if not metrics:
        return out
    if isinstance(metrics, list):
        for row in metrics:
            if isinstance(row, dict):
                fkey = next((k for k in _FREQ_KEYS if k in row), None)
                if fkey is None:
                    continue
                label = _freq_label(float(row[fkey]))
                for k, v in row.items():
                    if k != fkey:
                        out.update({f"{n}@{label}": x for n, x in _scalar_items(k, v)})
        return out
    if not isinstance(metrics, dict):
        return out
    fkey = next((k for k in _FREQ_KEYS if isinstance(metrics.get(k), list)), None)
    if fkey is not None:
        freqs = [float(f) for f in metrics[fkey]]
        for k, v in metrics.items():
            if k == fkey:
                continue
            if isinstance(v, list) and len(v) == len(freqs):
                for f, x in zip(freqs, v, strict=False):
                    out.update({f"{n}@{_freq_label(f)}": y for n, y in _scalar_items(k, x)})
            else:
                out.update(dict(_scalar_items(k, v)))
        return out
    try:
        keyed = {float(k): v for k, v in metrics.items()}
    except (TypeError, ValueError):
        keyed = None
    if keyed and all(isinstance(v, dict) for v in keyed.values()):
        for f, row in keyed.items():
            for k, v in row.items():
                out.update({f"{n}@{_freq_label(f)}": x for n, x in _scalar_items(k, v)})
        return out
    for k, v in metrics.items():
        out.update(dict(_scalar_items(k, v)))
    return out


# ---------------------------------------------------------------- manifest

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


_METRIC_ORDER = ("z0", "alpha", "loss", "eps", "q", "beta", "gamma", "r_", "l_", "g_", "c_")


def metric_sort_key(col: str) -> tuple[int, str, float]:
    """Z0, loss, eps_eff and Q first (what analysts read), then the rest; each
    metric's frequencies in ascending order."""
    base, _, freq = col.partition("@")
    rank = next((i for i, p in enumerate(_METRIC_ORDER) if base.lower().startswith(p)), len(_METRIC_ORDER))
    try:
        f = float(freq[:-3]) if freq else 0.0
    except ValueError:
        f = 0.0
    return (rank, base, f)


def add_metric_columns(index: SessionIndex, names: Iterable[str]) -> None:
    """Register metric columns that were computed after indexing."""
    for n in names:
        if n not in index.metric_columns:
            index.metric_columns.append(n)
    index.metric_columns.sort(key=metric_sort_key)


def write_manifest_csv(path: Path, index: SessionIndex) -> Path:
    """Write the manifest: one row per kept sweep, every column of ``index.columns``
    (empty cell for a value that does not apply)."""
    cols = index.columns
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=cols, extrasaction="ignore", lineterminator="\n")
        w.writeheader()
        for row in index.rows:
            w.writerow({c: csv_cell(row.get(c)) for c in cols})
    return path


# A text cell a spreadsheet would run as a formula (OWASP "CSV Injection": =, +, -,
# @, tab, carriage return) is written with a leading single quote, which every
# common spreadsheet reads as "this is text". Numbers, and text that is a plain
# number (-3.5), are left alone.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def csv_cell(value: Any) -> Any:
    """One manifest cell: "" for None, text that could start a formula prefixed
    with ``'``, everything else unchanged."""
    if value is None:
        return ""
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        try:
            float(value)
        except ValueError:
            return "'" + value
    return value


_INT_COLS = {"seq", "die_col", "die_row", "landing", "retries", "files_ok"}
_TEXT_COLS = {"time", "site", "kind", "line_type", "metal", "cal_id", "verdict", "decision", "decision_reason", "notes"}


def read_manifest_csv(path: Path) -> list[dict[str, Any]]:
    """Read a bundle's manifest back with numbers as numbers and empty cells as None."""
    rows = []
    with open(path, newline="", encoding="utf-8") as fh:
        for rec in csv.DictReader(fh):
            row: dict[str, Any] = {}
            for k, v in rec.items():
                if v == "":
                    row[k] = None
                elif k in _INT_COLS:
                    row[k] = int(float(v))
                elif k in _TEXT_COLS or k.endswith(("_file", "_sha256")) or (
                        k.startswith("chk_") and not k.endswith(("_value", "_limit", "_at_hz"))):
                    row[k] = v[1:] if v[:1] == "'" and csv_cell(v[1:]) == v else v  # undo csv_cell
                else:
                    try:
                        row[k] = float(v)
                    except ValueError:
                        row[k] = v
            rows.append(row)
    return rows


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
