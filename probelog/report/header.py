"""The report's head: session identity and hash chain, the summary counts
and the file integrity problems."""

from __future__ import annotations

from collections import Counter
from typing import Any

from probelog.report.common import ReportInputs, esc, ghz, table


def header_section(inp: ReportInputs) -> str:
    o, chain = inp.index.opened, inp.chain
    s = o.settings
    bench = o.bench
    closed = inp.index.closed
    resumes = inp.index.state.resumes
    rows = [
        ("Session", o.session_id), ("Wafer / lot", f"{o.wafer} / {o.lot}"),
        ("Chip", o.chip), ("Plan", f"{o.plan_name} ({o.plan_file}, SHA-256 {o.plan_sha256})"),
        ("Operator", o.operator), ("Probes", ", ".join(o.probes)),
        ("Bench", f"{bench.get('description', '')} | VNA: {bench.get('vna_idn', '')} | prober: {bench.get('prober_idn', '')}"),
        ("Sweep", f"{ghz(s.start_hz)} to {ghz(s.stop_hz)} GHz, {s.points} points, "
                  f"IF bandwidth {s.ifbw_hz} Hz, {s.power_dbm} dBm"),
        ("probelog", o.probelog_version),
        ("Resumed", "; ".join(f"{r.ts} by {r.operator or r.login} (probelog {r.probelog_version})" for r in resumes)
         or "never"),
        ("Closed", "not closed (session ended without session-closed)" if closed is None
         else f"{'completed' if closed.completed else 'stopped early'}: {_summary_text(closed.summary)}"),
    ]
    state = "intact" if chain.ok else "BROKEN"
    count = f"{chain.total} events" if chain.ok else f"intact through line {chain.events} of {chain.total}"
    cls = "ok" if chain.ok else "bad"
    torn = "<p class='bad'>The journal ended in a torn line (crash while writing); it was not read.</p>" if inp.torn_tail else ""
    return (
        f"<h1>Probing session {esc(o.session_id)}</h1>"
        + table(("", ""), rows, "kv")
        + f'<div class="chain {cls}"><b>Journal hash chain: {state}</b> ({count}, '
        f"checked by {esc(chain.checked_by)}){'. ' + esc(chain.problem) if chain.problem else ''}<br>"
        f"SHA-256 of the last journal line: <code>{chain.last_hash}</code><br>"
        "<small>Copy this hash off the machine: with it, any later edit of the journal shows.</small></div>"
        + torn
    )


def _summary_text(summary: Any) -> str:
    if isinstance(summary, dict):
        return ", ".join(f"{k}: {_summary_text(v)}" for k, v in summary.items())
    return "" if summary is None else str(summary)


def summary_section(inp: ReportInputs) -> str:
    idx = inp.index
    state = idx.state
    relands = sum(1 for by_site in state.sites.values() for rec in by_site.values()
                  for d in rec.decisions if d.action == "reland")
    verdicts = Counter(r.get("verdict") for r in idx.rows)
    dies = {(r["die_col"], r["die_row"]) for r in idx.rows}
    rows = [
        ("Kept sweeps", len(idx.rows)), ("Dies with kept sweeps", len(dies)),
        ("Sites", len({r["site"] for r in idx.rows})), ("Landings (all)", len(idx.landings)),
        ("Accepted", state.n_accepted),
        ("Accepted despite FAIL", state.n_accepted_despite_fail),
        ("Re-landed", relands), ("Skipped", state.n_skipped),
        ("Given up", state.n_given_up), ("Notes", len(idx.notes)),
        ("Kept verdicts", ", ".join(f"{k}: {v}" for k, v in sorted(verdicts.items()))),
        ("File integrity", "all files present, SHA-256 match" if not inp.integrity
         else f"{len(inp.integrity)} problem(s), see below"),
    ]
    return "<h2 id='summary'>Summary</h2>" + table(("", ""), rows, "kv")


def integrity_section(inp: ReportInputs) -> str:
    if not inp.integrity:
        return ""
    return ("<h2 id='integrity' class='bad'>File integrity problems</h2><ul>"
            + "".join(f"<li>{esc(p)}</li>" for p in inp.integrity) + "</ul>")
