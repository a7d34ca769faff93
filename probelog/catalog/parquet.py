"""``export_parquet(cat, out_dir)``: the catalog as Parquet datasets, for DuckDB,
pandas (pyarrow) and Spark.

Two hive-partitioned datasets (``lot=<lot>/wafer=<wafer>/``):

- ``landings/``: one row per kept landing: session, wafer, die, site, geometry,
  outcome and verdict, every check (``chk_<name>`` verdict and
  ``chk_<name>_value`` / ``_limit`` / ``_at_hz``), the journaled line metrics as
  arrays over ``metric_f_hz`` (one list column per figure, units in the name),
  and the S-parameters as file references: ``raw_path`` / ``corrected_path``
  (absolute) with their SHA-256.
- ``line_figures/``: the pad-free figures, one row per die, line family and frequency.

Why file references and not arrays: the Touchstone files are the record the
journal hashes, with a self-describing header; as arrays, 201 points of a
2-port are 3.2 kB a landing raw plus corrected, about 1 GB for 1,000 sessions of
150 landings, some 50 times the rest of the export, duplicating data whose
authoritative copy sits beside its hash. ``skrf.Network(row.corrected_path)``
reads one back.

Written to a temporary folder beside ``out_dir`` and renamed at the end: a
failed export leaves nothing half-written.
"""

from __future__ import annotations

import os
import re
import shutil
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.engine import Connection

from probelog.catalog.db import Catalog, CatalogError
from probelog.catalog.schema import METRIC_COLUMNS, checks, line_figures, metrics, sessions, site_results

SESSION_COLS = ("session_id", "lot", "wafer", "chip", "operator", "station", "plan_name", "opened_at", "status")


def check_column(name: str) -> str:
    """``chk_<name>`` with anything but a-z, 0-9 as '_' (a safe column name for Spark)."""
    return "chk_" + re.sub(r"[^0-9a-z]+", "_", name.lower()).strip("_")


def _landing_rows(conn: Connection) -> tuple[list[dict[str, Any]], list[str]]:
    q = select(*(sessions.c[c] for c in SESSION_COLS), sessions.c.path.label("session_path"),
               *(c for c in site_results.c if c.name != "session_id")) \
        .select_from(site_results.join(sessions, sessions.c.session_id == site_results.c.session_id)) \
        .where(site_results.c.kept_seq.is_not(None)) \
        .order_by(sessions.c.opened_at, sessions.c.session_id, site_results.c.kept_seq)
    rows = [dict(r._mapping) for r in conn.execute(q)]
    index = {(r["session_id"], r["kept_seq"]): r for r in rows}
    names: dict[str, None] = {}
    for c in conn.execute(select(checks)):
        r = index.get((c.session_id, c.seq))
        if r is None:
            continue
        col = check_column(c.name)
        names[col] = None
        r[col], r[col + "_value"], r[col + "_limit"], r[col + "_at_hz"] = c.verdict, c.value, c.limit_value, c.at_hz
    for m in conn.execute(select(metrics).order_by(metrics.c.session_id, metrics.c.seq, metrics.c.f_hz)):
        r = index.get((m.session_id, m.seq))
        if r is None:
            continue
        r.setdefault("metric_f_hz", []).append(m.f_hz)
        for name in METRIC_COLUMNS:
            r.setdefault(name, []).append(getattr(m, name))
    for r in rows:
        base = Path(r.pop("session_path"))
        r["raw_path"] = str(base / r.pop("raw_file")) if r["raw_file"] else None
        r["corrected_path"] = str(base / r.pop("corrected_file")) if r["corrected_file"] else None
        r.pop("raw_file", None)
        r.pop("corrected_file", None)
    return rows, sorted(names)


def _landings_table(rows: list[dict[str, Any]], check_cols: list[str]) -> Any:
    import pyarrow as pa

    f64, s = pa.float64(), pa.string()
    fields = [(c, s) for c in SESSION_COLS if c != "opened_at"] + [("opened_at", pa.timestamp("ms"))] + [
        ("die_col", pa.int32()), ("die_row", pa.int32()), ("site", s), ("kind", s), ("outcome", s),
        ("verdict", s), ("landings", pa.int32()), ("kept_seq", pa.int64()), ("kept_landing", pa.int32()),
        ("ts", pa.timestamp("ms")), ("cal_id", s), ("line_type", s), ("metal", s), ("width_um", f64),
        ("gap_um", f64), ("length_um", f64), ("files_ok", pa.bool_()),
        ("raw_path", s), ("raw_sha256", s), ("corrected_path", s), ("corrected_sha256", s)]
    for c in check_cols:
        fields += [(c, s), (c + "_value", f64), (c + "_limit", f64), (c + "_at_hz", f64)]
    fields += [("metric_f_hz", pa.list_(f64))] + [(m, pa.list_(f64)) for m in METRIC_COLUMNS]
    schema = pa.schema(fields)
    return pa.Table.from_pydict({n: [r.get(n) for r in rows] for n in schema.names}, schema=schema)


def _figures_table(conn: Connection) -> Any:
    import pyarrow as pa

    q = select(sessions.c.session_id, sessions.c.lot, sessions.c.wafer,
               *(c for c in line_figures.c if c.name != "session_id")) \
        .select_from(line_figures.join(sessions, sessions.c.session_id == line_figures.c.session_id)) \
        .order_by(sessions.c.opened_at, line_figures.c.die_col, line_figures.c.die_row, line_figures.c.family,
                  line_figures.c.f_hz)
    rows = [dict(r._mapping) for r in conn.execute(q)]
    cols = ["session_id", "lot", "wafer"] + [c.name for c in line_figures.c if c.name != "session_id"]
    types = {c.name: (pa.int32() if c.name.startswith("die_") else
                      pa.float64() if c.type.python_type is float else pa.string()) for c in line_figures.c}
    schema = pa.schema([(c, types.get(c, pa.string())) for c in cols])
    return pa.Table.from_pydict({c: [r[c] for r in rows] for c in cols}, schema=schema)


def export_parquet(cat: Catalog, out_dir: str | Path) -> dict[str, int]:
    """Write ``landings/`` and ``line_figures/`` under ``out_dir`` (must not exist
    or be empty). Returns the row count of each."""
    import pyarrow.dataset as ds

    out = Path(out_dir)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise CatalogError(f"{out}: exists and is not an empty folder; choose another")
    if not out.parent.is_dir():
        raise CatalogError(f"{out}: folder {out.parent} does not exist")
    tmp = out.parent / f".{out.name}.tmp-{os.getpid()}"
    shutil.rmtree(tmp, ignore_errors=True)
    with cat.engine.connect() as conn:
        rows, check_cols = _landing_rows(conn)
        tables = {"landings": _landings_table(rows, check_cols), "line_figures": _figures_table(conn)}
    try:
        for name, table in tables.items():
            (tmp / name).mkdir(parents=True)
            if table.num_rows:
                ds.write_dataset(table, tmp / name, format="parquet", partitioning=["lot", "wafer"],
                                 partitioning_flavor="hive", basename_template="part-{i}.parquet",
                                 existing_data_behavior="error")
        if out.exists():
            out.rmdir()
        tmp.rename(out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return {name: t.num_rows for name, t in tables.items()}


__all__ = ["export_parquet", "check_column"]
