"""The report's tables of kept sweeps: checks with their counts and the kept
warn/fail rows, retries, skips, notes, drift checks and instrument errors."""

from __future__ import annotations

from collections import Counter, defaultdict
from typing import Any

from probelog import events as ev
from probelog.manifest import check_column
from probelog.report.common import Die, ReportInputs, die_label, table


MAX_TABLE_ROWS = 60


def _capped(rows: list[list[Any]], what: str) -> tuple[list[list[Any]], str]:
    """At most MAX_TABLE_ROWS rows in the page; the rest is in the manifest/journal."""
    if len(rows) <= MAX_TABLE_ROWS:
        return rows, ""
    return rows[:MAX_TABLE_ROWS], f"<p class='none'>{len(rows) - MAX_TABLE_ROWS} more {what} not shown here.</p>"


def checks_section(inp: ReportInputs) -> str:
    idx = inp.index
    rows: list[list[Any]] = []
    for name, unit in idx.check_units.items():
        counts: Counter[str] = Counter()
        worst: tuple[str, str] | None = None
        for r in idx.rows:
            col = check_column(name)
            v = r.get(col)
            if v is None:
                continue
            counts[v] += 1
            val = r.get(f"{col}_value")
            if v in ("warn", "fail") and isinstance(val, (int, float)):
                if worst is None or {"warn": 1, "fail": 2}[v] > {"warn": 1, "fail": 2}[worst[0]]:
                    worst = (v, f"{val:.4g} {unit} at d({r['die_col']}, {r['die_row']}) {r['site']}")
        rows.append([name, counts.get("pass", 0), counts.get("warn", 0), counts.get("fail", 0),
                     counts.get("n/a", 0), worst[1] if worst else ""])
    flagged = [[r["die_col"], r["die_row"], r["site"], r["landing"], r["verdict"],
                "; ".join(f"{name}: {r.get(check_column(name))}" for name in idx.check_units
                          if r.get(check_column(name)) in ("warn", "fail")),
                f"{r.get('decision', '')}: {r.get('decision_reason') or ''}".rstrip(": ")]
               for r in idx.rows if r.get("verdict") in ("warn", "fail")]
    flagged.sort(key=lambda x: (x[4] != "fail", x[0], x[1], x[2]))
    flagged, more = _capped(flagged, "rows (filter verdict in manifest.csv)")
    return ("<h2 id='checks'>Checks on kept sweeps</h2>"
            + table(("check", "pass", "warn", "fail", "n/a", "worst flagged"), rows)
            + f"<h3>Kept despite a warn or fail verdict ({sum(1 for r in idx.rows if r.get('verdict') in ('warn', 'fail'))})</h3>"
            + table(("die col", "die row", "site", "landing", "verdict", "flagged by", "decision"), flagged) + more)


def retries_and_notes_section(inp: ReportInputs) -> str:
    idx = inp.index
    landed: dict[tuple[Die, str], list[ev.Landing]] = defaultdict(list)
    for e in idx.landings:
        if isinstance(e.data, ev.Landing):
            landed[(e.data.die, e.data.site)].append(e.data)
    reasons: dict[tuple[Die, str], list[str]] = defaultdict(list)
    other: list[list[Any]] = []
    for e in idx.decisions:
        d = e.data
        if isinstance(d, ev.DieSkipped):
            other.append([e.ts, die_label(d), ", ".join(d.sites), "skip (whole die)", d.reason])
            continue
        if not isinstance(d, ev.Decision) or d.standard:
            continue
        k = (d.die, d.site)
        if d.action == ev.RELAND:
            reasons[k].append(f"L{d.landing}: {d.reason}")
        elif d.action in (ev.SKIP, ev.GIVE_UP):
            other.append([e.ts, die_label(d), d.site, d.action, d.reason])
    retry_rows = []
    for k, ps in landed.items():
        if len(ps) > 1:
            retry_rows.append([f"({k[0][0]}, {k[0][1]})", k[1], len(ps),
                               " > ".join(p.verdict.value for p in ps), " | ".join(reasons.get(k, []))])
    notes = [[e.ts, die_label(e.data), getattr(e.data, "site", None) or "", getattr(e.data, "text", "")]
             for e in idx.notes]
    errs = [[e.ts, e.type, getattr(e.data, "where", "") or "",
             getattr(e.data, "message", "") or getattr(e.data, "reason", "") or ""] for e in idx.errors]
    drifts = [[e.ts, die_label(e.data), e.data.site, e.data.verdict.value,
               "; ".join(f"{c.name}: {c.verdict.value}" for c in e.data.checks)]
              for e in idx.drifts if isinstance(e.data, ev.Drift)]
    n_retry = len(retry_rows)
    retry_rows, more = _capped(retry_rows, "re-landed sites (see the retries column of manifest.csv)")
    return (f"<h2 id='retries'>Retries ({n_retry} die/site pairs landed more than once)</h2>"
            + table(("die", "site", "landings", "verdicts in order", "re-land reasons"), retry_rows) + more
            + "<h3>Skipped and given up</h3>" + table(("time", "die", "site", "action", "reason"), other)
            + "<h2 id='notes'>Notes</h2>" + table(("time", "die", "site", "note"), notes)
            + "<h2 id='events'>Drift checks, instrument errors, recoveries</h2>"
            + table(("time", "die", "site", "verdict", "checks"), drifts)
            + table(("time", "event", "where", "message"), errs))
