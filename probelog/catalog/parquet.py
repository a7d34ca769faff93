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

Columns are built whole (numpy scatter, Arrow list offsets), not row by row.
Written to a temporary folder beside ``out_dir`` and renamed at the end: a
failed export leaves nothing half-written.
"""

from __future__ import annotations

import os
import re
import shutil
from pathlib import Path
from collections.abc import Sequence
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.engine import Connection

from probelog.catalog.db import Catalog, CatalogError
from probelog.catalog.schema import METRIC_COLUMNS, checks, line_figures, metrics, sessions, site_results

SESSION_COLS = ("session_id", "lot", "wafer", "chip", "operator", "station", "plan_name", "opened_at", "status")
SITE_COLS = ("die_col", "die_row", "site", "kind", "outcome", "verdict", "landings", "kept_seq", "kept_landing",
             "ts", "cal_id", "line_type", "metal", "width_um", "gap_um", "length_um", "files_ok",
             "raw_sha256", "corrected_sha256")


def check_column(name: str) -> str:
    """``chk_<name>`` with anything but a-z, 0-9 as '_' (a safe column name for Spark)."""
    return "chk_" + re.sub(r"[^0-9a-z]+", "_", name.lower()).strip("_")


def _columns(rows: Sequence[Any], names: tuple[str, ...] | list[str]) -> dict[str, list[Any]]:
    cols = list(zip(*rows, strict=True)) if rows else [()] * len(names)
    return {n: list(c) for n, c in zip(names, cols, strict=True)}


def _landings_table(conn: Connection) -> Any:
    import pyarrow as pa

    q = select(*(sessions.c[c] for c in SESSION_COLS), sessions.c.path, site_results.c.raw_file,
               site_results.c.corrected_file, *(site_results.c[c] for c in SITE_COLS)) \
        .select_from(site_results.join(sessions, sessions.c.session_id == site_results.c.session_id)) \
        .where(site_results.c.kept_seq.is_not(None)) \
        .order_by(sessions.c.opened_at, sessions.c.session_id, site_results.c.kept_seq)
    names = (*SESSION_COLS, "path", "raw_file", "corrected_file", *SITE_COLS)
    cols = _columns(conn.execute(q).all(), names)
    n = len(cols["session_id"])
    index = {k: i for i, k in enumerate(zip(cols["session_id"], cols["kept_seq"], strict=True))}
    sep = os.sep
    paths = cols.pop("path")
    raw = cols.pop("raw_file")
    cor = cols.pop("corrected_file")
    cols["raw_path"] = [p + sep + r if r else None for p, r in zip(paths, raw, strict=True)]
    cols["corrected_path"] = [p + sep + r if r else None for p, r in zip(paths, cor, strict=True)]

    f64, s = pa.float64(), pa.string()
    types: dict[str, Any] = dict.fromkeys(names, s)
    types.update(opened_at=pa.timestamp("ms"), ts=pa.timestamp("ms"), die_col=pa.int32(), die_row=pa.int32(),
                 landings=pa.int32(), kept_seq=pa.int64(), kept_landing=pa.int32(), width_um=f64, gap_um=f64,
                 length_um=f64, files_ok=pa.bool_())
    arrays: dict[str, Any] = {c: pa.array(cols[c], type=types.get(c, s)) for c in
                              (*SESSION_COLS, *SITE_COLS[:-2], "raw_path", "raw_sha256", "corrected_path",
                               "corrected_sha256")}
    # checks: one verdict / value / limit / at_hz column per check name, scattered by landing index
    crow = conn.execute(select(checks.c.session_id, checks.c.seq, checks.c.name, checks.c.verdict,
                               checks.c.value, checks.c.limit_value, checks.c.at_hz)).all()
    cc = _columns(crow, ("sid", "seq", "name", "verdict", "value", "limit", "at_hz"))
    where = np.array([index.get(k, -1) for k in zip(cc["sid"], cc["seq"], strict=True)], dtype=np.int64)
    name_arr = np.array(cc["name"], dtype=object)
    for name in sorted(set(cc["name"]), key=check_column):
        sel = (name_arr == name) & (where >= 0)
        at = where[sel]
        col = check_column(name)
        verdict = np.full(n, None, dtype=object)
        verdict[at] = np.array(cc["verdict"], dtype=object)[sel]
        arrays[col] = pa.array(verdict, type=s)
        for key, suffix in (("value", "_value"), ("limit", "_limit"), ("at_hz", "_at_hz")):
            vals = np.full(n, np.nan)
            vals[at] = np.array(cc[key], dtype=float)[sel]
            mask = np.ones(n, dtype=bool)
            mask[at] = np.array([v is None for v in np.array(cc[key], dtype=object)[sel]], dtype=bool)
            arrays[col + suffix] = pa.array(vals, type=f64, mask=mask)
    # line metrics: one list column per figure over metric_f_hz (Arrow offsets, no per-row lists)
    mrow = conn.execute(select(metrics.c.session_id, metrics.c.seq, metrics.c.f_hz,
                               *(metrics.c[m] for m in METRIC_COLUMNS))).all()
    mc = _columns(mrow, ("sid", "seq", "f_hz", *METRIC_COLUMNS))
    idx = np.array([index.get(k, -1) for k in zip(mc["sid"], mc["seq"], strict=True)], dtype=np.int64)
    f_all = np.array(mc["f_hz"], dtype=float)
    keep = idx >= 0
    order = np.lexsort((f_all[keep], idx[keep]))
    counts = np.bincount(idx[keep], minlength=n)
    offsets = pa.array(np.concatenate([[0], np.cumsum(counts)]).astype(np.int32))
    empty = pa.array(counts == 0)

    def as_list(values: np.ndarray, nulls: np.ndarray | None = None) -> Any:
        flat = pa.array(values[keep][order], type=f64, mask=None if nulls is None else nulls[keep][order])
        return pa.ListArray.from_arrays(offsets, flat, mask=empty)

    arrays["metric_f_hz"] = as_list(f_all)
    for m in METRIC_COLUMNS:
        raw_m = np.array(mc[m], dtype=object)
        nulls = np.array([v is None for v in raw_m], dtype=bool)
        arrays[m] = as_list(np.where(nulls, np.nan, raw_m).astype(float), nulls)
    return pa.table(arrays)


def _figures_table(conn: Connection) -> Any:
    import pyarrow as pa

    q = select(sessions.c.session_id, sessions.c.lot, sessions.c.wafer,
               *(c for c in line_figures.c if c.name != "session_id")) \
        .select_from(line_figures.join(sessions, sessions.c.session_id == line_figures.c.session_id)) \
        .order_by(sessions.c.opened_at, line_figures.c.die_col, line_figures.c.die_row, line_figures.c.family,
                  line_figures.c.f_hz)
    names = ["session_id", "lot", "wafer"] + [c.name for c in line_figures.c if c.name != "session_id"]
    cols = _columns(conn.execute(q).all(), names)
    types = {c.name: (pa.int32() if c.name.startswith("die_") else
                      pa.float64() if c.type.python_type is float else pa.string()) for c in line_figures.c}
    return pa.table({c: pa.array(cols[c], type=types.get(c, pa.string())) for c in names})


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
        tables = {"landings": _landings_table(conn), "line_figures": _figures_table(conn)}
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
