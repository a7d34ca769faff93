"""list / trend / yield / wear / export answer from the catalog what the journals
say, on SQLite and PostgreSQL; the command line prints one line for bad input."""

from __future__ import annotations

import json
import statistics

import pytest

from probelog.catalog.db import CatalogError, open_catalog
from probelog.catalog.ingest import add_session
from probelog.catalog.parquet import export_parquet
from probelog.catalog.queries import list_sessions, trend, wear, yield_table
from probelog.tui.cli import main


def _events(session_dir):
    return [json.loads(x) for x in (session_dir / "journal.jsonl").read_text().splitlines()]


def _journaled_metric(session_dir, site, name, near_hz):
    """The journaled metric of each accepted landing of ``site``, read straight
    from the JSON lines (the outside reference for the trend query)."""
    ev = _events(session_dir)
    kept = {(tuple(e["payload"]["die"]), e["payload"]["landing"]) for e in ev
            if e["type"] == "decision" and e["payload"]["action"] == "accept" and e["payload"]["site"] == site}
    out = []
    for e in ev:
        p = e["payload"]
        if e["type"] == "landing" and p["site"] == site and (tuple(p["die"]), p["landing"]) in kept:
            i = min(range(len(p["metrics"]["f_hz"])), key=lambda k: abs(p["metrics"]["f_hz"][k] - near_hz))
            out.append(p["metrics"][name][i])
    return out


@pytest.fixture
def filled(db_url, demo_sessions):
    cat = open_catalog(db_url)
    for s in demo_sessions:
        add_session(cat, s)
    yield cat
    cat.close()


def test_list_counts_each_session(filled, demo_sessions):
    rows = list_sessions(filled)
    assert [r["wafer"] for r in rows] == ["QF2611-W07", "QF2611-W07"]
    for r, s in zip(rows, demo_sessions, strict=True):
        accepted = sum(1 for e in _events(s) if e["type"] == "decision" and e["payload"]["action"] == "accept")
        assert r["pass"] + r["warn"] + r["accepted_fail"] == accepted
        assert r["status"] == "ok" and r["completed"] is True


def test_trend_matches_the_journal(filled, demo_sessions):
    site = "ln-cpw-m9-r2-l500"
    t = trend(filled, "z0_re", site, at_hz=40e9)
    assert abs(t.f_hz - 40e9) < 1e9 and t.unit == "ohm"
    per = {w["session_id"]: w for w in t.per_wafer}
    for s in demo_sessions:
        want = _journaled_metric(s, site, "z0_re", 40e9)
        sid = _events(s)[0]["payload"]["session_id"]
        assert per[sid]["n"] == len(want) == 12
        assert per[sid]["median"] == pytest.approx(statistics.median(want), rel=1e-12)
    with pytest.raises(CatalogError, match="not a quantity"):
        trend(filled, "no-such", site)
    with pytest.raises(CatalogError, match="no kept landings"):
        trend(filled, "z0_re", "no-such-site")


def test_pad_free_trend_is_below_the_single_line_figure(filled):
    """The pads add shunt capacitance: the single-line eps_eff of a short line
    reads high (demo plan note); the two-line figure must come out lower and the
    same from either line of the pair."""
    single = trend(filled, "eps_eff", "ln-cpw-m9-r2-l500", at_hz=40e9)
    a = trend(filled, "padfree.eps_eff", "ln-cpw-m9-r2-l500", at_hz=40e9)
    b = trend(filled, "padfree.eps_eff", "ln-cpw-m9-r2-l1500", at_hz=40e9)
    assert [p["value"] for p in a.points] == [p["value"] for p in b.points]
    assert max(p["value"] for p in a.points) < min(p["value"] for p in single.points)


def test_yield_and_wear(filled, demo_sessions):
    rows = yield_table(filled, site="dev-ind")
    assert len(rows) == 2 and all(r["pass"] + r["warn"] + r["fail"] + r["accepted_fail"] == 12 for r in rows)
    w = {x["probe_id"]: x for x in wear(filled)}
    # the last touchdown count journaled in each session, summed (outside reference: the JSON lines)
    want = sum(max(e["payload"].get("touchdowns", {}).get("GSG100-A17", 0) for e in _events(s))
               for s in demo_sessions)
    assert w["GSG100-A17"]["touchdowns"] == want and w["GSG100-A17"]["sessions"] == 2
    assert w["GSG100-A17"]["wear_limit"] == 5000  # demo plan [probes] wear_warn_touchdowns


def test_parquet_export_reads_back_in_duckdb(filled, tmp_path):
    duckdb = pytest.importorskip("duckdb")
    n = export_parquet(filled, tmp_path / "pq")
    assert n["landings"] == 288 and n["line_figures"] > 0
    got = duckdb.sql(f"select wafer, count(*), count(distinct session_id), "
                     f"sum(case when files_ok then 1 else 0 end) from read_parquet('{tmp_path}/pq/landings/**/*.parquet',"
                     f" hive_partitioning=true) group by wafer").fetchall()
    assert got == [("QF2611-W07", 288, 2, 288)]
    rows = duckdb.sql(f"select metric_f_hz, z0_re from read_parquet('{tmp_path}/pq/landings/**/*.parquet') "
                      f"where site = 'ln-cpw-m9-r2-l500'").fetchall()
    at40 = [z[min(range(len(f)), key=lambda i: abs(f[i] - 40e9))] for f, z in rows]
    assert len(at40) == 24 and all(40 < v < 60 for v in at40)  # demo plan window 45..58.9 ohm
    with pytest.raises(CatalogError, match="not an empty folder"):
        export_parquet(filled, tmp_path / "pq")


def test_command_line(db_url, demo_sessions, tmp_path, capsys):
    assert main(["catalog", "scan", str(demo_sessions[0].parent), "--db", db_url]) == 0
    assert "2 session(s)" in capsys.readouterr().out
    assert main(["catalog", "add", str(tmp_path), "--db", db_url]) == 1
    assert "not a probelog session" in capsys.readouterr().err
    plot = tmp_path / "t.svg"
    assert main(["catalog", "trend", "padfree.alpha_db_per_mm", "--site", "ln-cpw-m9-r2-l500", "--at-hz", "40e9",
                 "--plot", str(plot), "--db", db_url]) == 0
    assert plot.read_text().startswith("<?xml")
    for cmd in (["list"], ["yield"], ["wear"]):
        assert main(["catalog", *cmd, "--db", db_url]) == 0
    out = capsys.readouterr().out
    assert "GSG100-A17" in out and "QF2611-W07" in out
    assert main(["catalog", "trend", "nope", "--site", "x", "--db", db_url]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("probelog catalog: nope: not a quantity") and "\n" not in err
