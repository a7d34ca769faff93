"""The catalog's tables (SQLAlchemy Core, one schema for SQLite and PostgreSQL)
and its versioned migrations.

Why not Alembic: the catalog's history is linear (one line of versions, no
branches), its tables are few, and every command opens the database. Alembic
would add about 115 ms of imports to each command (measured on the lab VM, on
top of SQLAlchemy's ~200 ms), an ini file, an ``env.py`` and a ``versions/``
folder shipped as package data. A ``catalog_schema`` table with one version
number and :data:`MIGRATIONS`, an ordered tuple of functions applied in one
transaction under a lock (DDL is transactional on both databases), gives the same
guarantees for a linear history: a database is brought to :data:`SCHEMA_VERSION`
step by step, and a database written by a newer probelog (a version above ours)
is refused before anything is read or written.

Units are in the column names (Hz, um, dB/mm, ohm); times are naive UTC.
"""

from __future__ import annotations

from typing import Callable

from sqlalchemy import (
    Boolean,
    Column,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Table,
    Text,
)
from sqlalchemy.engine import Connection

metadata = MetaData()

SCHEMA_VERSION = 2
"""The schema this probelog writes and reads (1: the tables; 2: the trend index)."""

catalog_schema = Table(
    "catalog_schema", metadata,
    Column("id", Integer, primary_key=True),  # always 1: one row
    Column("version", Integer, nullable=False),
    Column("written_by", String(64), nullable=False),
)

sessions = Table(
    "sessions", metadata,
    Column("session_id", String(200), primary_key=True),
    Column("path", Text, nullable=False),
    Column("wafer", String(200), nullable=False, default=""),
    Column("lot", String(200), nullable=False, default=""),
    Column("chip", String(200), nullable=False, default=""),
    Column("plan_name", String(200), nullable=False, default=""),
    Column("plan_sha256", String(64), nullable=False, default=""),
    Column("operator", String(200), nullable=False, default=""),
    Column("station", Text, nullable=False, default=""),
    Column("probelog_version", String(64), nullable=False, default=""),
    Column("opened_at", DateTime, nullable=True),
    Column("closed_at", DateTime, nullable=True),
    Column("completed", Boolean, nullable=False, default=False),
    # 'ok', or 'damaged' (journal or file hashes wrong: see problem)
    Column("status", String(16), nullable=False),
    Column("problem", Text, nullable=False, default=""),
    Column("n_events", Integer, nullable=False, default=0),
    Column("last_hash", String(64), nullable=False, default=""),
    Column("wear_limit", Integer, nullable=True),
    Column("added_at", DateTime, nullable=False),
    Column("added_by", String(200), nullable=False, default=""),
)

# One row per (die, site) the session decided or landed: its final outcome and,
# when a landing was kept, that landing.
site_results = Table(
    "site_results", metadata,
    Column("session_id", String(200), ForeignKey("sessions.session_id", ondelete="CASCADE"), primary_key=True),
    Column("die_col", Integer, primary_key=True),
    Column("die_row", Integer, primary_key=True),
    Column("site", String(200), primary_key=True),
    Column("kind", String(32), nullable=False, default=""),
    # pass | warn | fail | accepted-fail | skipped | given-up | open (no decision yet)
    Column("outcome", String(16), nullable=False),
    Column("verdict", String(8), nullable=False, default=""),
    Column("landings", Integer, nullable=False, default=0),
    Column("kept_seq", Integer, nullable=True),
    Column("kept_landing", Integer, nullable=True),
    Column("ts", DateTime, nullable=True),
    Column("cal_id", String(64), nullable=False, default=""),
    Column("raw_file", Text, nullable=False, default=""),
    Column("raw_sha256", String(64), nullable=False, default=""),
    Column("corrected_file", Text, nullable=False, default=""),
    Column("corrected_sha256", String(64), nullable=False, default=""),
    Column("files_ok", Boolean, nullable=True),
    Column("line_type", String(64), nullable=False, default=""),
    Column("metal", String(64), nullable=False, default=""),
    Column("width_um", Float, nullable=True),
    Column("gap_um", Float, nullable=True),
    Column("length_um", Float, nullable=True),
)
Index("ix_site_results_site", site_results.c.site, site_results.c.session_id)
# Version 2: a trend reads (site, files_ok) -> kept landing from this index alone
# (measured: the SQL of a 100-session trend 41 -> 25 ms on SQLite).
IX_TREND = Index("ix_site_results_trend", site_results.c.site, site_results.c.files_ok, site_results.c.session_id,
                 site_results.c.kept_seq, site_results.c.die_col, site_results.c.die_row)

checks = Table(
    "checks", metadata,
    Column("session_id", String(200), ForeignKey("sessions.session_id", ondelete="CASCADE"), primary_key=True),
    Column("seq", Integer, primary_key=True),
    Column("name", String(64), primary_key=True),
    Column("verdict", String(8), nullable=False),
    Column("value", Float, nullable=True),
    Column("limit_value", Float, nullable=True),
    Column("at_hz", Float, nullable=True),
    Column("unit", String(16), nullable=False, default=""),
)

# Line metrics journaled with a kept landing (single-line, pads included): one row
# per frequency, one column per figure (wide: a tenth of the rows of a long table).
METRIC_COLUMNS = ("z0_re", "z0_im", "alpha_db_per_mm", "beta_rad_per_mm", "eps_eff",
                  "r_ohm_per_m", "l_h_per_m", "g_s_per_m", "c_f_per_m", "q")
metrics = Table(
    "metrics", metadata,
    Column("session_id", String(200), ForeignKey("sessions.session_id", ondelete="CASCADE"), primary_key=True),
    Column("seq", Integer, primary_key=True),
    Column("f_hz", Float, primary_key=True),
    *(Column(name, Float, nullable=True) for name in METRIC_COLUMNS),
)

# Pad-free figures of a line family on one die (two lengths), per frequency.
line_figures = Table(
    "line_figures", metadata,
    Column("session_id", String(200), ForeignKey("sessions.session_id", ondelete="CASCADE"), primary_key=True),
    Column("die_col", Integer, primary_key=True),
    Column("die_row", Integer, primary_key=True),
    Column("family", String(200), primary_key=True),  # "<line_type>/<metal>/<w>x<g>um"
    Column("f_hz", Float, primary_key=True),
    Column("line_type", String(64), nullable=False),
    Column("metal", String(64), nullable=False),
    Column("width_um", Float, nullable=False),
    Column("gap_um", Float, nullable=False),
    Column("site_a", String(200), nullable=False),
    Column("site_b", String(200), nullable=False),
    Column("length_a_um", Float, nullable=False),
    Column("length_b_um", Float, nullable=False),
    Column("alpha_db_per_mm", Float, nullable=True),
    Column("beta_rad_per_mm", Float, nullable=True),
    Column("eps_eff", Float, nullable=True),
    Column("q", Float, nullable=True),
    Column("z0_re", Float, nullable=True),
    Column("z0_im", Float, nullable=True),
    Column("r_ohm_per_m", Float, nullable=True),
    Column("l_h_per_m", Float, nullable=True),
    Column("g_s_per_m", Float, nullable=True),
    Column("c_f_per_m", Float, nullable=True),
    Column("z0_from", String(16), nullable=False, default=""),  # '', 'c-ref' or 'z0-ref'
)

touchdowns = Table(
    "touchdowns", metadata,
    Column("session_id", String(200), ForeignKey("sessions.session_id", ondelete="CASCADE"), primary_key=True),
    Column("probe_id", String(200), primary_key=True),
    Column("touchdowns", Integer, nullable=False),
)

cal_agreement = Table(
    "cal_agreement", metadata,
    Column("session_id", String(200), ForeignKey("sessions.session_id", ondelete="CASCADE"), primary_key=True),
    Column("seq", Integer, primary_key=True),
    Column("cal_id", String(64), nullable=False),
    Column("method", String(16), nullable=False, default=""),
    Column("other_method", String(16), nullable=False, default=""),
    Column("worst", Float, nullable=True),
    Column("at_hz", Float, nullable=True),
    Column("verdict", String(8), nullable=False, default=""),
    Column("ts", DateTime, nullable=True),
)

CHILD_TABLES = (site_results, checks, metrics, line_figures, touchdowns, cal_agreement)
"""Tables whose rows belong to one session (replaced whole when it is added again)."""


def _v1(conn: Connection) -> None:
    """Version 1: every table above (a new catalog gets version 2's index here too)."""
    metadata.create_all(conn, tables=[t for t in metadata.sorted_tables if t is not catalog_schema])


def _v2(conn: Connection) -> None:
    """Version 2: the covering index of trend queries."""
    IX_TREND.create(conn, checkfirst=True)


MIGRATIONS: tuple[Callable[[Connection], None], ...] = (_v1, _v2)
"""MIGRATIONS[i] brings a database from version i to i + 1."""

assert len(MIGRATIONS) == SCHEMA_VERSION
