"""The one place the catalog reads a session folder: ``read_session(path)``.

It turns a session (journal plus data files) into a :class:`SessionRecord`:
plain rows for the catalog's tables. Nothing else in ``probelog.catalog`` reads
the journal. It decodes the events with ``probelog.events`` and folds them into
``probelog.state.SessionState`` (the one reading of a session), after
``probelog.journal.verify`` re-walked the hash chain and every data file's SHA-256.

Kept landing: the landing a site's final decision accepted (``accept``, or
``accept-despite-fail``: outcome ``accepted-fail``). Outcomes per (die, site):
pass, warn, accepted-fail, given-up, skipped, or open (landed, not decided yet).
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from probelog.catalog.schema import METRIC_COLUMNS as METRIC_NAMES
from probelog import events as ev
from probelog.journal import JournalError, verify
from probelog.line_figures_step import journaled_rows
from probelog.line_pairs import die_figures, line_site
from probelog.manifest import JOURNAL_NAME, SessionFormatError, plan_sites
from probelog.state import LandingRec, SessionState, fold

FINAL_ACTIONS = ("accept", "skip", "give-up")


class NotASession(ValueError):
    """The path is not a probelog session folder (one sentence, names the path)."""


@dataclass
class SessionRecord:
    """Rows for the catalog. ``session`` is the sessions row (without the
    added_at / added_by columns the writer sets); the lists are child rows, each
    without ``session_id``."""

    session: dict[str, Any]
    site_results: list[dict[str, Any]] = field(default_factory=list)
    checks: list[dict[str, Any]] = field(default_factory=list)
    metrics: list[dict[str, Any]] = field(default_factory=list)
    line_figures: list[dict[str, Any]] = field(default_factory=list)
    touchdowns: list[dict[str, Any]] = field(default_factory=list)
    cal_agreement: list[dict[str, Any]] = field(default_factory=list)

    @property
    def session_id(self) -> str:
        return str(self.session["session_id"])

    @property
    def damaged(self) -> bool:
        return bool(self.session["status"] == "damaged")


def parse_ts(ts: Any) -> datetime | None:
    """Journal time (UTC ISO 8601 with 'Z') as a naive UTC datetime."""
    if not isinstance(ts, str):
        return None
    try:
        t = datetime.fromisoformat(ts.replace("Z", "+00:00"))
    except ValueError:
        return None
    return t.astimezone(timezone.utc).replace(tzinfo=None) if t.tzinfo else t


def _num(v: Any) -> float | None:
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return None
    return float(v) if np.isfinite(v) else None


def _ref(v: Any) -> tuple[str, str]:
    if isinstance(v, dict):
        return str(v.get("path") or ""), str(v.get("sha256") or "")
    return (v, "") if isinstance(v, str) else ("", "")


def _damaged_record(path: Path, problem: str) -> SessionRecord:
    """A session whose journal cannot be read: one row that says so."""
    sid = path.name
    opened: dict[str, Any] | ev.SessionOpened = {}
    try:  # salvage the session's own description from its first line, if it reads
        with open(path / JOURNAL_NAME, "rb") as fh:
            first = ev.Decoder(str(path / JOURNAL_NAME)).line(fh.readline().rstrip(b"\n"))
        if isinstance(first.data, ev.SessionOpened):
            opened = first.data
            sid = str(first.data.session_id or sid)
    except (OSError, ValueError):  # EventError is a ValueError
        pass
    row = _session_row(path, sid, opened, [], problem)
    row["status"] = "damaged"
    return SessionRecord(row)


def _session_row(path: Path, sid: str, opened: Any, events: list[ev.Event], problem: str) -> dict[str, Any]:
    """The sessions row; ``opened`` a SessionOpened or the raw first payload (dict)."""
    get = opened.get if isinstance(opened, dict) else (lambda k, d=None: getattr(opened, k, d))
    b = get("bench")
    bench: dict[str, Any] = b if isinstance(b, dict) else {}
    closed = next((e for e in reversed(events) if isinstance(e.data, ev.SessionClosed)), None)
    wear = None
    try:
        probes = tomllib.loads(get("plan_text") or "").get("probes", {})
        wear = int(probes["wear_warn_touchdowns"]) if "wear_warn_touchdowns" in probes else None
    except (tomllib.TOMLDecodeError, TypeError, ValueError):
        pass
    return {
        "session_id": sid, "path": str(path.resolve()),
        "wafer": str(get("wafer") or ""), "lot": str(get("lot") or ""),
        "chip": str(get("chip") or ""), "plan_name": str(get("plan_name") or ""),
        "plan_sha256": str(get("plan_sha256") or ""), "operator": str(get("operator") or ""),
        "station": str(bench.get("prober_idn") or bench.get("description") or bench.get("kind") or ""),
        "probelog_version": str(get("probelog_version") or ""),
        "opened_at": parse_ts(events[0].ts) if events else None,
        "closed_at": parse_ts(closed.ts) if closed else None,
        "completed": bool(closed is not None and isinstance(closed.data, ev.SessionClosed) and closed.data.completed),
        "status": "damaged" if problem else "ok", "problem": problem,
        "n_events": len(events), "last_hash": "", "wear_limit": wear,
    }


def _integrity(path: Path) -> tuple[str, set[str], str, str]:
    """(damage sentence or '', paths whose hash is wrong, last line hash,
    harmless notes) from ``probelog.journal.verify``. A torn last line and
    unreferenced files (a crash; the next open recovers them) are notes, not damage."""
    report = verify(path)
    damage, notes, bad = [], [], set()
    for p in report.problems:
        where = f"{p.file}:{p.line}" if p.line else p.file
        text = f"{where}: {p.message}"
        if p.file == JOURNAL_NAME and p.line is not None and p.line > report.events:
            notes.append(text)  # the torn tail, beyond the complete lines
        elif p.line is None:
            notes.append(text)  # a data file no event names yet
        else:
            damage.append(text)
            if p.file != JOURNAL_NAME:
                bad.add(p.file)
    more = f" (and {len(damage) - 3} more)" if len(damage) > 3 else ""
    return "; ".join(damage[:3]) + more, bad, report.last_hash, "; ".join(notes[:2])


def read_session(path: str | Path, line_figures: bool = True) -> SessionRecord:
    """Read one session folder into catalog rows, checking every file hash.

    Raises :class:`NotASession` for a path that is not a session folder. A
    journal that cannot be read, a broken hash chain or a data file whose hash
    differs gives a record with status 'damaged' and the problem in one sentence.
    ``line_figures`` gives the pad-free line figures (the journaled ones; a die
    without them is computed from its line sweeps).
    """
    path = Path(path)
    if not path.is_dir():
        raise NotASession(f"{path}: not a folder")
    if not (path / JOURNAL_NAME).is_file():
        raise NotASession(f"{path}: not a probelog session (no {JOURNAL_NAME})")
    damage = ""
    try:
        damage, bad_files, last_hash, _notes = _integrity(path)
        events = ev.read_session(path)
        if not events or not isinstance(events[0].data, ev.SessionOpened):
            raise ev.EventError(f"{path / JOURNAL_NAME}:1: the first event is not 'session-opened'")
        state = fold(events)
    except (ev.EventError, JournalError, OSError) as exc:
        # verify names the line; the decoder's message is the fallback
        return _damaged_record(path, damage or " ".join(str(exc).split()))
    opened = events[0].data
    sid = str(opened.session_id or path.name)
    rec = SessionRecord(_session_row(path, sid, opened, events, damage))
    rec.session["last_hash"] = last_hash
    try:
        sites = plan_sites(opened.plan_text)
    except SessionFormatError:
        sites = {}
    _fold_sites(rec, state, sites, bad_files)
    rec.touchdowns = [{"probe_id": k, "touchdowns": v} for k, v in sorted(state.touchdowns.items())]
    rec.cal_agreement = [{"seq": e.seq, "cal_id": e.data.cal_id, "method": e.data.method,
                          "other_method": e.data.other_method, "worst": _num(e.data.worst),
                          "at_hz": _num(e.data.at_hz), "verdict": e.data.verdict.value, "ts": parse_ts(e.ts)}
                         for e in events if isinstance(e.data, ev.CalAgreement)]
    if line_figures:
        _line_figures(rec, path, sites, state)
    return rec


_OUTCOME = {ev.ACCEPT_DESPITE_FAIL: "accepted-fail", ev.SKIP: "skipped", ev.GIVE_UP: "given-up"}


def _fold_sites(rec: SessionRecord, state: SessionState, sites: dict[str, dict[str, Any]], bad: set[str]) -> None:
    for die, by_site in sorted(state.sites.items()):
        for name, srec in sorted(by_site.items()):
            last = srec.last_landing
            if last is None and srec.decision is None:
                continue  # only drift re-measures of a reference site
            geo = sites.get(name, {})
            row: dict[str, Any] = {
                "die_col": die[0], "die_row": die[1], "site": name,
                "kind": (last.kind if last else "") or str(geo.get("kind") or ""),
                "landings": sum(1 for x in srec.landings if x.what == "landing"),
                "kept_seq": None, "kept_landing": None, "ts": None,
                "verdict": last.verdict.value if last else "", "cal_id": "", "raw_file": "", "raw_sha256": "",
                "corrected_file": "", "corrected_sha256": "", "files_ok": None,
                "line_type": str(geo.get("line_type") or ""), "metal": str(geo.get("metal") or ""),
                "width_um": _num(geo.get("width_um")), "gap_um": _num(geo.get("gap_um")),
                "length_um": _num(geo.get("length_um")),
            }
            kept = srec.accepted_landing
            action = srec.decision.action if srec.decision else None
            if kept is not None:
                raw = kept.raw.path if kept.raw else ""
                cor = kept.corrected.path if kept.corrected else ""
                row.update(kept_seq=kept.seq, kept_landing=kept.landing, ts=parse_ts(kept.ts),
                           verdict=kept.verdict.value, cal_id=kept.cal_id or "",
                           raw_file=raw, raw_sha256=kept.raw.sha256 if kept.raw else "",
                           corrected_file=cor, corrected_sha256=kept.corrected.sha256 if kept.corrected else "",
                           files_ok=not ({raw, cor} & bad))
                row["outcome"] = _OUTCOME.get(action or "", kept.verdict.value)
                _kept_rows(rec, kept)
            else:
                row["outcome"] = _OUTCOME.get(action or "", "open")
            rec.site_results.append(row)


def _kept_rows(rec: SessionRecord, kept: LandingRec) -> None:
    seen = set()
    for c in kept.checks:
        if c.name in seen:
            continue
        seen.add(c.name)
        rec.checks.append({"seq": kept.seq, "name": c.name, "verdict": c.verdict.value, "value": _num(c.value),
                           "limit_value": _num(c.limit), "at_hz": _num(c.at_hz), "unit": c.unit})
    m = kept.metrics
    if m and isinstance(m.get("f_hz"), list):
        freqs = m["f_hz"]
        cols = {n: v for n in METRIC_NAMES if isinstance(v := m.get(n), list) and len(v) == len(freqs)}
        seen_f: set[float] = set()
        for i, f in enumerate(freqs):
            if f is None or _num(f) is None or f in seen_f:
                continue
            seen_f.add(f)
            row: dict[str, Any] = {"seq": kept.seq, "f_hz": float(f)}
            row.update({n: _num(cols[n][i]) if n in cols else None for n in METRIC_NAMES})
            rec.metrics.append(row)


def _line_figures(rec: SessionRecord, root: Path, sites: dict[str, dict[str, Any]], state: SessionState) -> None:
    """Pad-free figures per die and line family: those the session journaled
    (``line-figures``, read into the state); for a die without them (a session
    left mid-die, or a journal from before those events) from its kept sweeps
    (corrected, else raw) whose files passed their hash check."""
    import skrf

    journaled = journaled_rows(state, sites)
    done = {(r["die_col"], r["die_row"]) for r in journaled}
    kept = []
    for row in rec.site_results:
        rel = row["corrected_file"] or row["raw_file"]
        if (row["die_col"], row["die_row"]) in done or line_site(row["site"], sites.get(row["site"], {})) is None \
                or row["kept_seq"] is None or not row["files_ok"] or not rel:
            continue
        try:
            ntwk = skrf.Network(str(root / rel))
        except (OSError, ValueError, IndexError):
            continue  # an unreadable sweep gives no figure rather than a wrong one
        kept.append(((row["die_col"], row["die_row"]), row["site"], ntwk))
    for fig in journaled + die_figures(kept, sites):
        rec.line_figures.append({k: fig[k] for k in (
            "die_col", "die_row", "family", "f_hz", "line_type", "metal", "width_um", "gap_um", "site_a", "site_b",
            "length_a_um", "length_b_um", *METRIC_NAMES, "z0_from")})


__all__ = ["read_session", "SessionRecord", "NotASession", "parse_ts", "METRIC_NAMES"]
