"""Read a session journal and turn it into the analyst manifest.

The journal format is the contract in docs/journal-events.md; this module reads
the JSONL directly (no dependency on the engine) so a bundle can be built from a
session written by any version of the engine that keeps the contract.

One manifest row per kept sweep: a ``landing`` event whose (die, site, landing)
got an ``accept`` decision. Landings on the same die/site that were not kept are
counted as retries of the kept one.
"""

from __future__ import annotations

import csv
import hashlib
import json
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable

JOURNAL_NAME = "journal.jsonl"
ZERO_HASH = "0" * 64


class SessionFormatError(ValueError):
    """The folder or its journal does not follow docs/journal-events.md."""


@dataclass
class Journal:
    """The events of one session journal and what the reader noticed on the way.

    ``lines`` are the raw bytes of each event line (without newline), kept for
    the hash chain; ``torn_tail`` is True when an unterminated, unparsable last
    line was left aside (a crash while appending).
    """

    path: Path
    events: list[dict]
    lines: list[bytes]
    torn_tail: bool = False


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
    """Read ``journal.jsonl`` of a session folder.

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
    events: list[dict] = []
    lines: list[bytes] = []
    torn = False
    for i, line in enumerate(raw_lines, start=1):
        last = i == len(raw_lines)
        try:
            ev = json.loads(line)
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            if last and not ends_with_newline:
                torn = True
                break
            raise SessionFormatError(f"{path}:{i}: not a JSON event ({getattr(exc, 'msg', exc)})") from None
        if not isinstance(ev, dict):
            raise SessionFormatError(f"{path}:{i}: event is not a JSON object")
        for key in ("seq", "ts", "type", "payload", "prev"):
            if key not in ev:
                raise SessionFormatError(f"{path}:{i}: event has no '{key}' field")
        if not isinstance(ev["payload"], dict):
            raise SessionFormatError(f"{path}:{i}: 'payload' is not an object")
        events.append(ev)
        lines.append(line)
    if not events:
        raise SessionFormatError(f"{path}: journal has no events")
    if events[0]["type"] != "session-opened":
        raise SessionFormatError(f"{path}:1: first event is '{events[0]['type']}', expected 'session-opened'")
    return Journal(path=path, events=events, lines=lines, torn_tail=torn)


def walk_chain(lines: list[bytes]) -> ChainStatus:
    """Re-walk the hash chain: each event's ``prev`` is the SHA-256 hex of the
    previous line's bytes (64 zeros for the first), and ``seq`` counts 1, 2, ..."""
    prev = ZERO_HASH
    problem = ""
    intact = 0
    for i, line in enumerate(lines, start=1):
        ev = json.loads(line)
        if not problem and ev.get("seq") != i:
            problem = f"line {i}: seq is {ev.get('seq')}, expected {i}"
        elif not problem and ev.get("prev") != prev:
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


def plan_sites(plan_text: str | None) -> dict[str, dict]:
    """Site tables of the plan TOML by name: any table with ``name`` and ``kind``
    (geometry keys: line_type, metal, width_um, gap_um, length_um)."""
    if not plan_text:
        return {}
    try:
        doc = tomllib.loads(plan_text)
    except tomllib.TOMLDecodeError as exc:
        raise SessionFormatError(f"session-opened plan_text: not valid TOML ({exc})") from None
    found: dict[str, dict] = {}

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
    "files_ok", "verdict", "notes",
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
    "notes": "operator notes on this die/site, joined with ' | '",
}


def check_column(check_name: str) -> str:
    return "chk_" + re.sub(r"[^0-9a-z]+", "_", check_name.lower()).strip("_")


def _file_ref(ref: Any) -> tuple[str, str]:
    if isinstance(ref, dict):
        return str(ref.get("path") or ""), str(ref.get("sha256") or "")
    if isinstance(ref, str):
        return ref, ""
    return "", ""


@dataclass
class SessionIndex:
    """What a bundle needs from the journal, gathered in one pass."""

    opened: dict
    sites: dict[str, dict]
    rows: list[dict]
    landings: list[dict]
    decisions: list[dict]
    notes: list[dict]
    cal_events: list[dict]
    drifts: list[dict]
    errors: list[dict]
    closed: dict | None
    check_units: dict[str, str] = field(default_factory=dict)
    metric_columns: list[str] = field(default_factory=list)

    @property
    def columns(self) -> list[str]:
        checks = []
        for name in self.check_units:
            c = check_column(name)
            checks += [c, f"{c}_value", f"{c}_limit", f"{c}_at_hz"]
        return list(BASE_COLUMNS) + checks + self.metric_columns


def index_session(journal: Journal) -> SessionIndex:
    """One pass over the events: kept sweeps become manifest rows (without the
    ``files_ok`` and computed-metric fields, which need the files)."""
    opened = journal.events[0]["payload"]
    sites = plan_sites(opened.get("plan_text"))
    landings, decisions, notes, cal_events, drifts, errors = [], [], [], [], [], []
    closed = None
    for ev in journal.events:
        t, p = ev["type"], ev["payload"]
        if t == "landing":
            landings.append(ev)
        elif t == "decision":
            decisions.append(ev)
        elif t == "note":
            notes.append(ev)
        elif t.startswith("cal-"):
            cal_events.append(ev)
        elif t == "drift":
            drifts.append(ev)
        elif t in ("instrument-error", "recovered", "recal-requested"):
            errors.append(ev)
        elif t == "session-closed":
            closed = p

    def key(p: dict) -> tuple:
        die = p.get("die") or [None, None]
        return (tuple(die), p.get("site"), p.get("landing"))

    accepted = {key(ev["payload"]) for ev in decisions if ev["payload"].get("action") == "accept"}
    per_site: dict[tuple, list[dict]] = {}
    for ev in landings:
        p = ev["payload"]
        per_site.setdefault(key(p)[:2], []).append(ev)
    notes_by_site: dict[tuple, list[str]] = {}
    for ev in notes:
        p = ev["payload"]
        if p.get("site") is not None:
            notes_by_site.setdefault((tuple(p.get("die") or [None, None]), p["site"]), []).append(str(p.get("text", "")))

    # latest landing event per (die, site, landing) that was accepted
    kept: dict[tuple, dict] = {}
    for ev in landings:
        k = key(ev["payload"])
        if k in accepted:
            kept[k] = ev
    check_units: dict[str, str] = {}
    metric_cols: dict[str, None] = {}
    rows = []
    for k, ev in sorted(kept.items(), key=lambda kv: kv[1]["seq"]):
        p = ev["payload"]
        die, site, landing = k
        geo = sites.get(site, {})
        raw, raw_sha = _file_ref(p.get("raw"))
        cor, cor_sha = _file_ref(p.get("corrected"))
        width, gap = geo.get("width_um"), geo.get("gap_um")
        row: dict[str, Any] = {
            "seq": ev["seq"], "time": ev["ts"], "die_col": die[0], "die_row": die[1],
            "site": site, "kind": p.get("kind") or geo.get("kind", ""),
            "line_type": geo.get("line_type", ""), "metal": geo.get("metal", ""),
            "width_um": width, "gap_um": gap, "length_um": geo.get("length_um"),
            "w_over_g": (width / gap) if width and gap else None,
            "landing": landing,
            "retries": sum(1 for o in per_site.get((die, site), []) if key(o["payload"]) != k),
            "cal_id": p.get("cal_id") or "", "raw_file": raw, "raw_sha256": raw_sha,
            "corrected_file": cor, "corrected_sha256": cor_sha, "files_ok": None,
            "verdict": p.get("verdict", ""),
            "notes": " | ".join(notes_by_site.get((die, site), [])),
        }
        for c in p.get("checks") or []:
            name = str(c.get("name", "check"))
            check_units.setdefault(name, str(c.get("unit") or ""))
            col = check_column(name)
            row[col] = c.get("verdict")
            row[f"{col}_value"] = c.get("value")
            row[f"{col}_limit"] = c.get("limit")
            row[f"{col}_at_hz"] = c.get("at_hz")
        flat = flatten_metrics(p.get("metrics"))
        row.update(flat)
        metric_cols.update(dict.fromkeys(flat))
        rows.append(row)
    return SessionIndex(opened, sites, rows, landings, decisions, notes, cal_events, drifts,
                        errors, closed, check_units, sorted(metric_cols, key=metric_sort_key))


_METRIC_ORDER = ("z0", "alpha", "loss", "eps", "q", "beta", "gamma", "r_", "l_", "g_", "c_")


def metric_sort_key(col: str) -> tuple:
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
_TEXT_COLS = {"time", "site", "kind", "line_type", "metal", "cal_id", "verdict", "notes"}


def read_manifest_csv(path: Path) -> list[dict]:
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
        f"# probelog bundle of session {opened.get('session_id', '?')}",
        "",
        f"Wafer {opened.get('wafer', '?')} (lot {opened.get('lot', '?')}), chip {opened.get('chip', '?')}, "
        f"plan {opened.get('plan_name', '?')}, operator {opened.get('operator', '?')}.",
        f"Journal chain: {'intact' if chain.ok else 'BROKEN: ' + chain.problem}; "
        f"{chain.total} events; SHA-256 of the last line: {chain.last_hash}",
        "Keep that hash somewhere else: with it, any later edit of journal.jsonl shows.",
        "",
        "## Contents",
        "",
        "- `manifest.csv`: one row per kept sweep (landings with an accept decision).",
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
