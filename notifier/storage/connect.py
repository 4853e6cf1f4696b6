"""Opening a database: SQLite or PostgreSQL through SQLAlchemy.

SQLite connections get WAL journaling (readers do not block the writer), a busy timeout
(a second process waits rather than failing), and explicit ``BEGIN`` so that DDL runs
inside the migration's transaction (the sqlite3 module would otherwise autocommit it).
Write transactions use ``BEGIN IMMEDIATE`` so two writers queue instead of deadlocking.
"""

from __future__ import annotations

from typing import Any

import sqlalchemy as sa
from sqlalchemy import event
from sqlalchemy.engine import Connection, Engine

from notifier.core.errors import StoreError

__all__ = ["BUSY_TIMEOUT_MS", "SQLITE_AT_LEAST", "make_engine", "sqlite_events"]

BUSY_TIMEOUT_MS = 10_000

#: ``INSERT … RETURNING`` and ``UPDATE … RETURNING`` (the outbox's counts and claims).
SQLITE_AT_LEAST = (3, 35)


def make_engine(url: str) -> Engine:
    engine = sa.create_engine(url)
    if engine.dialect.name == "sqlite":
        sqlite_events(engine)
    return engine


def sqlite_events(engine: Engine) -> None:
    import sqlite3

    if sqlite3.sqlite_version_info < SQLITE_AT_LEAST:
        raise StoreError(
            f"SQLite {'.'.join(map(str, SQLITE_AT_LEAST))} or newer is needed; this Python "
            f"has {sqlite3.sqlite_version}"
        )

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        # Let SQLAlchemy's "begin" event issue BEGIN itself (see the module docstring).
        dbapi_conn.isolation_level = None
        cursor = dbapi_conn.cursor()
        cursor.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        cursor.execute("PRAGMA journal_mode = WAL")
        # NORMAL is safe with WAL: a power cut may lose the last commits, never corrupt.
        cursor.execute("PRAGMA synchronous = NORMAL")
        # A bigger page cache (16 MiB, eight times the default) keeps bulk upserts into the
        # primary-key index fast; 64 MiB stored a million rows no faster (bench/README.md)
        # and held 50 MB more for the life of a service.
        cursor.execute("PRAGMA cache_size = -16384")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Connection) -> None:
        mode = conn.get_execution_options().get("fogwatch_begin", "")
        conn.exec_driver_sql(f"BEGIN {mode}".strip())
