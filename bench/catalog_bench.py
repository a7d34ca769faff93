"""Catalog benchmarks (``make bench``, rows 'catalog ...').

The sessions are synthetic catalog rows built directly (not journals: the
simulated bench is not run 150,000 times): 150 kept landings a session on 12
dies of the demo's sites, each with five checks, the line sites with line
metrics at seven frequencies, one pad-free family per die, two probes, one
calibration comparison; values drawn at random around the demo's figures.
What is measured is the database side: ``write_record`` (one transaction per
session, upsert then replace, as ``catalog add`` does) against a bare DBAPI
executemany of exactly the same rows in one transaction, on SQLite and on a
throw-away PostgreSQL server; then a trend over all sessions and the Parquet
export read back by DuckDB.
"""

from __future__ import annotations

import random
import shutil
import tempfile
import time
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any, Callable

SITES = [("ln-cpw-m9-r2-l500", "line", 500.0), ("ln-cpw-m9-r2-l1500", "line", 1500.0),
         ("ln-cpw-m6-r1-l500", "line", 500.0), ("ln-cpw-m6-r3-l1500", "line", 1500.0),
         ("ln-gcpw-m9-r1-l500", "line", 500.0), ("ln-gcpw-m6-r2-l1500", "line", 1500.0),
         ("ln-swl-m9-r3-l500", "line", 500.0), ("ln-swl-m6-r2-l1500", "line", 1500.0),
         ("ver-ostub", "open-stub", None), ("ver-sstub", "short-stub", None),
         ("dev-ind", "device", None), ("dev-mim", "device", None)]
CHECKS = ("contact", "passivity", "reciprocity", "symmetry", "line-window")
FREQS = (1e9, 5e9, 10e9, 20e9, 40e9, 67e9, 110e9)
METRICS = ("z0_re", "z0_im", "alpha_db_per_mm", "beta_rad_per_mm", "eps_eff",
           "r_ohm_per_m", "l_h_per_m", "g_s_per_m", "c_f_per_m", "q")


def synthetic_record(i: int, landings: int = 150, rng: random.Random | None = None):
    """A SessionRecord of ``landings`` kept landings (see module docstring)."""
    from probelog.catalog.source import SessionRecord

    rng = rng or random.Random(i)
    t0 = datetime(2026, 1, 1) + timedelta(hours=6 * i)
    lot = f"QF{2600 + i // 25}"
    rec = SessionRecord({
        "session_id": f"bench-{i:05d}", "path": f"/lab/sessions/bench-{i:05d}", "wafer": f"{lot}-W{i % 25:02d}",
        "lot": lot, "chip": "PLX-7", "plan_name": "demo", "plan_sha256": "0" * 64, "operator": f"op{i % 4}",
        "station": f"station-{i % 3}", "probelog_version": "0.1.0", "opened_at": t0,
        "closed_at": t0 + timedelta(minutes=40), "completed": True, "status": "ok", "problem": "",
        "n_events": 2 * landings + 20, "last_hash": "f" * 64, "wear_limit": 5000})
    dies = [(c, r) for c in range(1, 8) for r in range(1, 8)]
    seq = 20
    for k in range(landings):
        name, kind, length = SITES[k % len(SITES)]
        die = dies[k // len(SITES)]
        seq += 2
        verdict = "pass" if rng.random() > 0.05 else "warn"
        rec.site_results.append({
            "die_col": die[0], "die_row": die[1], "site": name, "kind": kind, "outcome": verdict,
            "verdict": verdict, "landings": 1, "kept_seq": seq, "kept_landing": 1, "ts": t0 + timedelta(seconds=k),
            "cal_id": "cal1", "raw_file": f"data/d{die[0]}_{die[1]}/{name}/L1-raw.s2p", "raw_sha256": "a" * 64,
            "corrected_file": f"data/d{die[0]}_{die[1]}/{name}/L1-cor.s2p", "corrected_sha256": "b" * 64,
            "files_ok": True, "line_type": name.split("-")[1] if kind == "line" else "",
            "metal": name.split("-")[2].upper() if kind == "line" else "", "width_um": 10.0 if length else None,
            "gap_um": 6.0 if length else None, "length_um": length})
        for c in CHECKS:
            rec.checks.append({"seq": seq, "name": c, "verdict": "pass", "value": rng.gauss(0.5, 0.1),
                               "limit_value": 1.0, "at_hz": 40e9, "unit": ""})
        if kind == "line":
            for f in FREQS:
                row: dict[str, Any] = {"seq": seq, "f_hz": f}
                row.update({m: rng.gauss(50.0, 1.0) for m in METRICS})
                rec.metrics.append(row)
    for die in {(r["die_col"], r["die_row"]) for r in rec.site_results}:
        for f in FREQS:
            fig: dict[str, Any] = {m: rng.gauss(6.6, 0.05) for m in METRICS}
            rec.line_figures.append({"die_col": die[0], "die_row": die[1], "family": "cpw/M9/10x6um", "f_hz": f,
                                     "line_type": "cpw", "metal": "M9", "width_um": 10.0, "gap_um": 6.0,
                                     "site_a": "ln-cpw-m9-r2-l500", "site_b": "ln-cpw-m9-r2-l1500",
                                     "length_a_um": 500.0, "length_b_um": 1500.0, **fig, "z0_from": ""})
    rec.touchdowns = [{"probe_id": "GSG100-A17", "touchdowns": landings + 13},
                      {"probe_id": f"GSG100-B{i % 7:02d}", "touchdowns": landings + 13}]
    rec.cal_agreement = [{"seq": 10, "cal_id": "cal1", "method": "lrrm", "other_method": "solt",
                          "worst": abs(rng.gauss(0.03, 0.005)), "at_hz": 110e9, "verdict": "pass", "ts": t0}]
    return rec


def _bare(url: str, records: list) -> float:
    """Seconds for one DBAPI executemany per table of every row (no SQLAlchemy)."""
    from probelog.catalog.schema import CHILD_TABLES, sessions

    tables = [sessions, *CHILD_TABLES]
    if url.startswith("postgresql"):
        import psycopg

        conn: Any = psycopg.connect(url.replace("postgresql+psycopg", "postgresql"))
        mark = "%s"
    else:
        import sqlite3

        conn = sqlite3.connect(url.removeprefix("sqlite:///"))
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=NORMAL")
        mark = "?"
    now = datetime(2026, 6, 1)
    t0 = time.perf_counter()
    cur = conn.cursor()
    for table in tables:
        cols = [c.name for c in table.c]
        sql = f"INSERT INTO {table.name} ({', '.join(cols)}) VALUES ({', '.join([mark] * len(cols))})"
        if table is sessions:
            rows = [tuple({**r.session, "added_at": now, "added_by": "bench"}[c] for c in cols) for r in records]
        else:
            rows = [tuple({**x, "session_id": r.session_id}[c] for c in cols) for r in records
                    for x in getattr(r, table.name)]
        cur.executemany(sql, rows)
    conn.commit()
    dt = time.perf_counter() - t0
    conn.close()
    return dt


def run(report: Callable[..., None], quick: bool) -> None:
    from probelog.catalog.db import open_catalog
    from probelog.catalog.ingest import write_record
    from probelog.catalog.parquet import export_parquet
    from probelog.catalog.queries import trend

    n = 100 if quick else 1000
    t0 = time.perf_counter()
    records = [synthetic_record(i) for i in range(n)]
    landings = sum(len(r.site_results) for r in records)
    rows = sum(1 + sum(len(getattr(r, t)) for t in ("site_results", "checks", "metrics", "line_figures",
                                                      "touchdowns", "cal_agreement")) for r in records)
    print(f"  {n} synthetic sessions, {landings} landings, {rows} rows built in {time.perf_counter() - t0:.1f} s",
          flush=True)
    tmp = Path(tempfile.mkdtemp(prefix="probelog-catbench-"))
    server = None
    targets = [("SQLite", lambda: str(tmp / "catalog.sqlite"), lambda: "sqlite:///" + str(tmp / "bare.sqlite"))]
    try:
        from tests.catalog.pgserver import TempPostgres, find_bin

        bindir = find_bin()
        if bindir is None:
            report("catalog PostgreSQL", "skipped", "no PostgreSQL server binaries", None, "-", None)
        else:
            server = TempPostgres(bindir).start()
            targets.append(("PostgreSQL", server.new_database, server.new_database))
        for label, new_url, bare_url in targets:
            url = new_url()
            cat = open_catalog(url)
            t0 = time.perf_counter()
            for r in records:
                write_record(cat, r)
            ours = time.perf_counter() - t0
            bare_db = bare_url()
            open_catalog(bare_db).close()  # the same schema, empty
            from probelog.catalog.db import resolve_url

            bare = _bare(resolve_url(bare_db), records)
            report(f"catalog ingest {label} ({n} sessions x 150 landings)", f"{landings / ours:,.0f} landings/s",
                   f"bare executemany {landings / bare:,.0f} landings/s", bare / ours,
                   "one transaction per session; ratio for orientation", None)
            times = []
            for _ in range(5):
                t0 = time.perf_counter()
                t = trend(cat, "z0_re", "ln-cpw-m9-r2-l500", at_hz=40e9)
                times.append(time.perf_counter() - t0)
            report(f"catalog trend {label} (z0_re of one site, {len(t.points):,} landings)",
                   f"{min(times) * 1e3:.0f} ms", "target 500 ms", None, "< 0.5 s", min(times) < 0.5)
            if label == "SQLite":
                import duckdb

                out = tmp / "parquet"
                t0 = time.perf_counter()
                counts = export_parquet(cat, out)
                exp = time.perf_counter() - t0
                t0 = time.perf_counter()
                got = duckdb.sql(f"select count(*), count(distinct session_id), avg(chk_contact_value) from "
                                 f"read_parquet('{out}/landings/**/*.parquet', hive_partitioning=true)").fetchall()[0]
                read = time.perf_counter() - t0
                ok = got is not None and got[0] == counts["landings"] == landings and got[1] == n
                report(f"catalog export Parquet ({counts['landings']:,} landings)", f"export {exp:.1f} s",
                       f"DuckDB reads it back in {read * 1e3:.0f} ms", None, "all rows read back", ok)
            cat.close()
    finally:
        if server is not None:
            server.stop()
        shutil.rmtree(tmp, ignore_errors=True)
