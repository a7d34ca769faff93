"""The one place the catalog reads a session folder: ``read_session(path)``.

It turns a session (journal plus data files) into a :class:`SessionRecord`:
plain rows for the catalog's tables. Nothing else in ``probelog.catalog`` reads
journal lines. Today it reads through ``probelog.manifest.read_journal`` and
``probelog.journal.verify`` (the hash chain and every data file's SHA-256);
when the typed session state lands it is the only module to switch.

Kept landing: the landing a site's final decision accepted (``accept``,
including an accept of a landing whose verdict was FAIL, recorded as outcome
``accepted-fail``). Outcomes per (die, site): pass, warn, accepted-fail,
given-up, skipped, or open (landed, not decided yet).
"""

from __future__ import annotations

import json
import tomllib
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from probelog.catalog.schema import METRIC_COLUMNS as METRIC_NAMES
from probelog.journal import JournalError, verify
from probelog.line_pairs import figures_at, line_site, pad_free_metrics, pairs_on_die
from probelog.manifest import JOURNAL_NAME, SessionFormatError, plan_sites, read_journal

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
    sid, opened = path.name, dict[str, Any]()
    try:
        with open(path / JOURNAL_NAME, "rb") as fh:
            first = json.loads(fh.readline())
        opened = first.get("payload") or {}
        sid = str(opened.get("session_id") or sid)
    except (OSError, ValueError, AttributeError):
        pass
    row = _session_row(path, sid, opened, [], problem)
    row["status"] = "damaged"
    return SessionRecord(row)


def _session_row(path: Path, sid: str, opened: dict[str, Any], events: list[dict[str, Any]], problem: str) -> dict[str, Any]:
    b = opened.get("bench")
    bench: dict[str, Any] = b if isinstance(b, dict) else {}
    closed = next((e for e in reversed(events) if e["type"] == "session-closed"), None)
    wear = None
    try:
        probes = tomllib.loads(opened.get("plan_text") or "").get("probes", {})
        wear = int(probes["wear_warn_touchdowns"]) if "wear_warn_touchdowns" in probes else None
    except (tomllib.TOMLDecodeError, TypeError, ValueError):
        pass
    return {
        "session_id": sid, "path": str(path.resolve()),
        "wafer": str(opened.get("wafer") or ""), "lot": str(opened.get("lot") or ""),
        "chip": str(opened.get("chip") or ""), "plan_name": str(opened.get("plan_name") or ""),
        "plan_sha256": str(opened.get("plan_sha256") or ""), "operator": str(opened.get("operator") or ""),
        "station": str(bench.get("prober_idn") or bench.get("description") or bench.get("kind") or ""),
        "probelog_version": str(opened.get("probelog_version") or ""),
        "opened_at": parse_ts(events[0]["ts"]) if events else None,
        "closed_at": parse_ts(closed["ts"]) if closed else None,
        "completed": bool(closed and closed["payload"].get("completed")),
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
    ``line_figures`` computes the pad-free line figures (reads the line sweeps).
    """
    path = Path(path)
    if not path.is_dir():
        raise NotASession(f"{path}: not a folder")
    if not (path / JOURNAL_NAME).is_file():
        raise NotASession(f"{path}: not a probelog session (no {JOURNAL_NAME})")
    try:
        damage, bad_files, last_hash, _notes = _integrity(path)
        journal = read_journal(path)
    except (SessionFormatError, JournalError) as exc:
        return _damaged_record(path, str(exc))
    events = journal.events
    opened = events[0]["payload"]
    sid = str(opened.get("session_id") or path.name)
    rec = SessionRecord(_session_row(path, sid, opened, events, damage))
    rec.session["last_hash"] = last_hash
    try:
        sites = plan_sites(opened.get("plan_text"))
    except SessionFormatError:
        sites = {}
    _fold_sites(rec, events, sites, bad_files)
    _fold_bench(rec, events)
    if line_figures:
        _line_figures(rec, path, sites)
    return rec


def _fold_sites(rec: SessionRecord, events: list[dict[str, Any]], sites: dict[str, dict[str, Any]], bad: set[str]) -> None:
    landed: dict[tuple[Any, ...], dict[int, dict[str, Any]]] = {}
    final: dict[tuple[Any, ...], dict[str, Any]] = {}
    for ev in events:
        t, p = ev["type"], ev["payload"]
        if t not in ("landing", "decision"):
            continue
        die = p.get("die") or [None, None]
        key = (int(die[0]), int(die[1]), str(p.get("site")))
        if t == "landing":
            landed.setdefault(key, {})[int(p.get("landing") or 0)] = ev
        elif p.get("action") in FINAL_ACTIONS:
            final[key] = p
    for key in sorted(set(landed) | set(final), key=lambda k: (k[0], k[1], k[2])):
        tries = landed.get(key, {})
        dec = final.get(key)
        geo = sites.get(key[2], {})
        row: dict[str, Any] = {
            "die_col": key[0], "die_row": key[1], "site": key[2], "kind": str(geo.get("kind") or ""),
            "landings": len(tries), "kept_seq": None, "kept_landing": None, "ts": None, "verdict": "",
            "cal_id": "", "raw_file": "", "raw_sha256": "", "corrected_file": "", "corrected_sha256": "",
            "files_ok": None, "line_type": str(geo.get("line_type") or ""), "metal": str(geo.get("metal") or ""),
            "width_um": _num(geo.get("width_um")), "gap_um": _num(geo.get("gap_um")),
            "length_um": _num(geo.get("length_um")),
        }
        last = tries[max(tries)] if tries else None
        if last is not None:
            row["verdict"] = str(last["payload"].get("verdict") or "")
            row["kind"] = str(last["payload"].get("kind") or row["kind"])
        action = dec.get("action") if dec else None
        kept = tries.get(int(dec.get("landing") or 0)) if dec is not None and action == "accept" else None
        if action == "accept" and kept is not None:
            p = kept["payload"]
            verdict = str(p.get("verdict") or "")
            raw, raw_sha = _ref(p.get("raw"))
            cor, cor_sha = _ref(p.get("corrected"))
            row.update(kept_seq=kept["seq"], kept_landing=int(p.get("landing") or 0), ts=parse_ts(kept["ts"]),
                       verdict=verdict, cal_id=str(p.get("cal_id") or ""), raw_file=raw, raw_sha256=raw_sha,
                       corrected_file=cor, corrected_sha256=cor_sha,
                       files_ok=not ({raw, cor} & bad))
            row["outcome"] = "accepted-fail" if verdict == "fail" else (verdict or "pass")
            _kept_rows(rec, kept)
        elif action == "skip":
            row["outcome"] = "skipped"
        elif action == "give-up":
            row["outcome"] = "given-up"
        else:
            row["outcome"] = "open"
        rec.site_results.append(row)


def _kept_rows(rec: SessionRecord, ev: dict[str, Any]) -> None:
    p, seq = ev["payload"], ev["seq"]
    seen = set()
    for c in p.get("checks") or []:
        name = str(c.get("name") or "check")
        if name in seen:
            continue
        seen.add(name)
        rec.checks.append({"seq": seq, "name": name, "verdict": str(c.get("verdict") or ""),
                           "value": _num(c.get("value")), "limit_value": _num(c.get("limit")),
                           "at_hz": _num(c.get("at_hz")), "unit": str(c.get("unit") or "")})
    m = p.get("metrics")
    if isinstance(m, dict) and isinstance(m.get("f_hz"), list):
        freqs = m["f_hz"]
        cols = {n: v for n in METRIC_NAMES if isinstance(v := m.get(n), list) and len(v) == len(freqs)}
        seen_f = set()
        for i, f in enumerate(freqs):
            if _num(f) is None or f in seen_f:
                continue
            seen_f.add(f)
            row = {"seq": seq, "f_hz": float(f)}
            row.update({n: _num(cols[n][i]) if n in cols else None for n in METRIC_NAMES})
            rec.metrics.append(row)


def _fold_bench(rec: SessionRecord, events: list[dict[str, Any]]) -> None:
    wear: dict[str, int] = {}
    for ev in events:
        p = ev["payload"]
        td = p.get("touchdowns")
        if isinstance(td, dict):
            for probe, n in td.items():
                if isinstance(n, int) and not isinstance(n, bool):
                    wear[str(probe)] = max(wear.get(str(probe), 0), n)
        if ev["type"] == "cal-agreement":
            rec.cal_agreement.append({
                "seq": ev["seq"], "cal_id": str(p.get("cal_id") or ""), "method": str(p.get("method") or ""),
                "other_method": str(p.get("other_method") or ""), "worst": _num(p.get("worst")),
                "at_hz": _num(p.get("at_hz")), "verdict": str(p.get("verdict") or ""), "ts": parse_ts(ev["ts"])})
    rec.touchdowns = [{"probe_id": k, "touchdowns": v} for k, v in sorted(wear.items())]


def _line_figures(rec: SessionRecord, root: Path, sites: dict[str, dict[str, Any]]) -> None:
    """Pad-free figures per die and line family from the kept sweeps (corrected,
    else raw) whose files passed their hash check."""
    import skrf

    from probelog.lines import default_frequencies

    by_die: dict[tuple[int, int], list[Any]] = {}
    files: dict[tuple[Any, ...], str] = {}
    for row in rec.site_results:
        ls = line_site(row["site"], sites.get(row["site"], {}))
        rel = row["corrected_file"] or row["raw_file"]
        if ls is None or row["kept_seq"] is None or not row["files_ok"] or not rel:
            continue
        die = (row["die_col"], row["die_row"])
        by_die.setdefault(die, []).append(ls)
        files[(die, ls.name)] = rel
    for die, lsites in by_die.items():
        for a, b in pairs_on_die(lsites):
            try:
                na = skrf.Network(str(root / files[(die, a.name)]))
                nb = skrf.Network(str(root / files[(die, b.name)]))
                m, z0_from = pad_free_metrics(na, a, nb, b)
            except (OSError, ValueError, IndexError, np.linalg.LinAlgError):
                continue  # e.g. a kept sweep that is no line: no figure rather than a wrong one
            for fig in figures_at(m, default_frequencies(m.f_hz, prefer_round=True)):
                rec.line_figures.append({
                    "die_col": die[0], "die_row": die[1], "family": a.family, "f_hz": fig["f_hz"],
                    "line_type": a.line_type, "metal": a.metal, "width_um": a.width_um, "gap_um": a.gap_um,
                    "site_a": a.name, "site_b": b.name, "length_a_um": a.length_um, "length_b_um": b.length_um,
                    **{k: fig[k] for k in METRIC_NAMES}, "z0_from": z0_from})


__all__ = ["read_session", "SessionRecord", "NotASession", "parse_ts", "METRIC_NAMES"]
