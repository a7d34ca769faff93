"""Putting sessions into the catalog: one transaction per session.

Adding a session again replaces its rows (idempotent; a session that grew after
a resume is updated). The session's row is written first with an upsert: on
PostgreSQL that row lock makes a second writer of the same session wait until
the first commits, then replace its rows whole; writers of different sessions
never touch the same rows. On SQLite the whole database is the lock
(``BEGIN IMMEDIATE``, see ``probelog.catalog.db``). A failure rolls the
transaction back: a session is in the catalog completely or as it was before.
"""

from __future__ import annotations

import os
import socket
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable, Iterable

from sqlalchemy import delete
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.exc import SQLAlchemyError

from probelog.catalog.db import Catalog, CatalogError, _first_line
from probelog.catalog.schema import CHILD_TABLES, sessions
from probelog.catalog.source import NotASession, SessionRecord, read_session


@dataclass
class Added:
    """What adding one session did: ``action`` 'added', 'updated' or 'damaged'."""

    session_id: str
    path: str
    action: str
    kept: int
    problem: str = ""


def _upsert(cat: Catalog, row: dict[str, Any]) -> Any:
    ins = (postgresql.insert if cat.dialect == "postgresql" else sqlite.insert)(sessions).values(**row)
    cols = {k: ins.excluded[k] for k in row if k != "session_id"}
    return ins.on_conflict_do_update(index_elements=["session_id"], set_=cols)


def write_record(cat: Catalog, rec: SessionRecord) -> bool:
    """Write one session in one transaction; True when it was new."""
    row = dict(rec.session, added_at=datetime.now(timezone.utc).replace(tzinfo=None),
               added_by=f"{socket.gethostname()} pid {os.getpid()}"[:200])
    try:
        with cat.begin() as conn:
            existed = conn.execute(sessions.select().with_only_columns(sessions.c.session_id)
                                   .where(sessions.c.session_id == rec.session_id)).first() is not None
            conn.execute(_upsert(cat, row))
            for table in CHILD_TABLES:
                conn.execute(delete(table).where(table.c.session_id == rec.session_id))
            for table in CHILD_TABLES:
                rows = getattr(rec, table.name)
                if rows:
                    sid = rec.session_id
                    conn.execute(table.insert(), [dict(r, session_id=sid) for r in rows])
    except SQLAlchemyError as exc:
        raise CatalogError(f"{cat.url}: session {rec.session_id} not added ({_first_line(exc)})") from None
    return not existed


def add_session(cat: Catalog, path: str | Path) -> Added:
    """Read, check and write one session folder. Raises NotASession, CatalogError."""
    rec = read_session(path)
    new = write_record(cat, rec)
    action = "damaged" if rec.damaged else ("added" if new else "updated")
    kept = sum(1 for r in rec.site_results if r["kept_seq"] is not None)
    return Added(rec.session_id, rec.session["path"], action, kept, rec.session["problem"])


def find_sessions(folder: str | Path) -> list[Path]:
    """Session folders under ``folder`` (any depth; a session's own subfolders
    are not searched), sorted by path."""
    found = []
    for root, dirs, files in os.walk(folder):
        if "journal.jsonl" in files:
            found.append(Path(root))
            dirs[:] = []
        else:
            dirs.sort()
    return sorted(found)


def add_many(cat: Catalog, paths: Iterable[str | Path],
             report: Callable[[Added | str], None] = lambda _x: None) -> tuple[list[Added], list[str]]:
    """Add each session; a path that is not a session gives one line in the
    returned problems and the others go on."""
    done, problems = [], []
    for p in paths:
        try:
            a = add_session(cat, p)
        except NotASession as exc:
            problems.append(str(exc))
            report(str(exc))
            continue
        done.append(a)
        report(a)
    return done, problems


__all__ = ["Added", "add_session", "add_many", "find_sessions", "write_record"]
