"""Opening the catalog database: SQLite (embedded, the default) or PostgreSQL
(shared by a lab), one SQLAlchemy Core engine for both.

Where: ``--db URL`` on the command line, else the ``PROBELOG_CATALOG``
environment variable, else ``sessions/catalog.sqlite``. A plain path means a
SQLite file; ``postgresql://user@host/db`` uses psycopg 3 (the URL may say
``postgresql+psycopg://`` itself).

Concurrency (several stations adding at once): SQLite runs in WAL mode and
every transaction starts with ``BEGIN IMMEDIATE``, so writers queue on the
database lock (busy timeout 60 s) instead of failing on a lock upgrade;
PostgreSQL serialises writers of the same session on that session's row (see
``probelog.catalog.ingest``) and migrations on an advisory lock.
"""

from __future__ import annotations

import os
import socket
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

from sqlalchemy import create_engine, event, inspect, select, text
from sqlalchemy.engine import URL, Connection, Engine, make_url
from sqlalchemy.exc import ArgumentError, DBAPIError, NoSuchModuleError, SQLAlchemyError

from probelog.catalog.schema import MIGRATIONS, SCHEMA_VERSION, catalog_schema

ENV_VAR = "PROBELOG_CATALOG"
DEFAULT_PATH = Path("sessions") / "catalog.sqlite"
CONNECT_TIMEOUT_S = 3
"""Seconds before a PostgreSQL server that does not answer is given up."""
SQLITE_BUSY_MS = 60_000
_MIGRATION_LOCK = 0x70726F62  # an arbitrary constant naming the catalog's advisory lock


class CatalogError(Exception):
    """The catalog cannot be used as asked: one sentence naming the database."""


@dataclass
class Catalog:
    """An open catalog: ``engine`` (SQLAlchemy), ``url`` (password hidden)."""

    engine: Engine
    url: str

    @property
    def dialect(self) -> str:
        return self.engine.dialect.name

    @contextmanager
    def begin(self) -> Iterator[Connection]:
        """A writing transaction (on SQLite it takes the write lock up front)."""
        with self.engine.connect().execution_options(write_lock=True) as conn, conn.begin():
            yield conn

    def close(self) -> None:
        self.engine.dispose()


def resolve_url(db: str | None) -> str:
    """The database URL from ``--db``, the environment or the default path."""
    db = db or os.environ.get(ENV_VAR) or str(DEFAULT_PATH)
    if "://" not in db:
        return "sqlite:///" + str(Path(db).expanduser().resolve())
    if db.startswith(("postgresql://", "postgres://")):
        return "postgresql+psycopg://" + db.split("://", 1)[1]
    return db


def _sqlite_engine(url: URL) -> Engine:
    if url.database and url.database != ":memory:":
        folder = Path(url.database).parent
        if not folder.is_dir():
            raise CatalogError(f"{url.database}: folder {folder} does not exist")
    engine = create_engine(url, connect_args={"timeout": SQLITE_BUSY_MS / 1000})

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        dbapi_conn.isolation_level = None  # we issue BEGIN ourselves (below)
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_MS}")
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute("PRAGMA synchronous=NORMAL")  # WAL: durable at checkpoints, never torn
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Connection) -> None:
        # writers take the lock up front: a deferred transaction that later
        # writes can fail with 'database is locked' instead of waiting
        write = conn.get_execution_options().get("write_lock", False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")

    return engine


def open_catalog(db: str | None = None, migrate: bool = True) -> Catalog:
    """Open (and create or migrate) the catalog at ``db`` (see module docstring).

    Raises CatalogError, one sentence: a URL that cannot be parsed, a server that
    does not answer within CONNECT_TIMEOUT_S, a schema from a newer probelog.
    """
    raw = resolve_url(db)
    try:
        url = make_url(raw)
    except ArgumentError:
        raise CatalogError(f"{db}: not a database URL or path") from None
    shown = url.render_as_string(hide_password=True)
    try:
        if url.get_backend_name() == "sqlite":
            engine = _sqlite_engine(url)
        elif url.get_backend_name() == "postgresql":
            engine = create_engine(url, connect_args={"connect_timeout": CONNECT_TIMEOUT_S},
                                   pool_pre_ping=True)
        else:
            raise CatalogError(f"{shown}: only sqlite and postgresql catalogs are supported")
    except NoSuchModuleError:
        raise CatalogError(f"{shown}: no driver for this URL (PostgreSQL needs psycopg)") from None
    cat = Catalog(engine, shown)
    try:
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
    except DBAPIError as exc:
        engine.dispose()
        raise CatalogError(f"{shown}: cannot connect ({_first_line(exc)})") from None
    if migrate:
        try:
            ensure_schema(cat)
        except CatalogError:
            engine.dispose()
            raise
        except SQLAlchemyError as exc:
            engine.dispose()
            raise CatalogError(f"{shown}: cannot set up the schema ({_first_line(exc)})") from None
    return cat


def _first_line(exc: BaseException) -> str:
    orig = getattr(exc, "orig", None) or exc
    lines = [ln.strip() for ln in str(orig).splitlines() if ln.strip()]
    return lines[0] if lines else type(orig).__name__


def schema_version(conn: Connection) -> tuple[int, str] | None:
    """(version, written_by) of the database, or None when it has no catalog yet."""
    if not inspect(conn).has_table(catalog_schema.name):
        return None
    row = conn.execute(select(catalog_schema.c.version, catalog_schema.c.written_by)).first()
    return (int(row[0]), str(row[1])) if row else None


def ensure_schema(cat: Catalog) -> int:
    """Bring the database to SCHEMA_VERSION in one transaction; refuse a newer one.

    Returns the version found before (0 for a new catalog)."""
    from probelog import __version__

    with cat.begin() as conn:
        if cat.dialect == "postgresql":
            conn.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": _MIGRATION_LOCK})
        found = schema_version(conn)
        have = found[0] if found else 0
        if found is not None and have > SCHEMA_VERSION:
            raise CatalogError(
                f"{cat.url}: catalog schema version {have} was written by probelog {found[1]}; "
                f"this probelog ({__version__}) reads up to version {SCHEMA_VERSION}: upgrade probelog")
        if have == SCHEMA_VERSION:
            return have
        catalog_schema.create(conn, checkfirst=True)
        for step in MIGRATIONS[have:]:
            step(conn)
        written_by = f"{__version__} on {socket.gethostname()}"[:64]
        if found:
            conn.execute(catalog_schema.update().values(version=SCHEMA_VERSION, written_by=written_by))
        else:
            conn.execute(catalog_schema.insert().values(id=1, version=SCHEMA_VERSION, written_by=written_by))
    return have


__all__ = ["Catalog", "CatalogError", "open_catalog", "resolve_url", "ensure_schema", "schema_version",
           "ENV_VAR", "DEFAULT_PATH"]
