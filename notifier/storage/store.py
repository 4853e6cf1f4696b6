"""SQLite (SQLAlchemy Core) store: the rolling observation window, source health, files.

The schema and its migrations are in :mod:`notifier.storage.migrations`.

Times: ``observations.time`` is integer seconds since the Unix epoch (UTC), which keeps
the window queries and bulk inserts cheap; the small bookkeeping tables hold ISO 8601
UTC text (``2024-01-05T03:00:00Z``) so that they read well in the sqlite shell.
"""

from __future__ import annotations

import contextlib
import logging
from collections.abc import Iterator, Sequence
from datetime import UTC, datetime
from typing import Any

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine
from sqlalchemy.pool import StaticPool

from notifier.core.columns import FLOAT_COLUMNS, text_columns_as_objects
from notifier.core.errors import StoreError
from notifier.core.redact import redact, redact_url
from notifier.core.timefmt import iso_z, parse_iso
from notifier.storage.connect import make_engine, sqlite_events
from notifier.storage.migrations import (
    MIGRATIONS,
    counters,
    observations,
    schema_migrations,
    seen_files,
    source_health,
)
from notifier.storage.rows import (
    by_kind_and_source,
    epoch_s,
    frame_rows,
    join_columns,
    own_columns,
    records_frame,
    sql_text,
)
from notifier.storage.window_query import window_sql

__all__ = ["Store"]

log = logging.getLogger(__name__)

_BATCH_ROWS = 50_000
_FETCH_ROWS = 20_000  # rows per fetch: a smaller transient, as fast


class Store:
    """The fogwatch database. ``Store(url)``; ``Store.memory()`` for tests.

    Opening a store applies any pending migrations. Every method that writes takes an
    optional ``conn`` so that several writes can share one transaction::

        with store.atomic() as conn:
            store.add_observations(frame, conn=conn)
            store.mark_file(sha, name, "processed", source_id, now, conn=conn)
    """

    def __init__(self, url: str, *, engine: Engine | None = None):
        self.url = url
        try:
            self.engine = engine or make_engine(url)
            try:
                self._migrate()
            except StoreError:
                self.engine.dispose()
                raise
        except sa.exc.SQLAlchemyError as exc:
            # the URL may carry the database password, and the driver's text may repeat it
            raise StoreError(redact(f"cannot open store {redact_url(url)}: {exc}")) from exc

    @classmethod
    def memory(cls) -> Store:
        """A private in-memory database (one shared connection, so it persists)."""
        engine = sa.create_engine(
            "sqlite://", poolclass=StaticPool, connect_args={"check_same_thread": False}
        )
        sqlite_events(engine)
        return cls("sqlite://", engine=engine)

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @contextlib.contextmanager
    def atomic(self) -> Iterator[Connection]:
        """One write transaction (``BEGIN IMMEDIATE`` on SQLite), committed on success."""
        with self.engine.connect().execution_options(fogwatch_begin="IMMEDIATE") as conn:
            with conn.begin():
                yield conn

    @contextlib.contextmanager
    def _write(self, conn: Connection | None) -> Iterator[Connection]:
        if conn is not None:
            yield conn
        else:
            with self.atomic() as own:
                yield own

    # -- migrations ----------------------------------------------------------------

    def _migrate(self) -> None:
        with self.atomic() as conn:
            schema_migrations.create(conn, checkfirst=True)
            # A newer fogwatch has changed this database in ways this one does not know
            # (rows it writes could go unseen by the newer one): refuse rather than guess.
            newer = conn.execute(
                sa.select(schema_migrations.c.name)
                .where(schema_migrations.c.version > len(MIGRATIONS))
                .order_by(schema_migrations.c.version)
            ).first()
        if newer is not None:
            raise StoreError(
                f"the store was upgraded by a newer fogwatch (migration {newer[0]!r}); "
                f"this version knows {len(MIGRATIONS)} migrations: upgrade it to use this store"
            )
        for version, migration in enumerate(MIGRATIONS, start=1):
            with self.atomic() as conn:
                # Checked inside the write lock: a second process may have just applied it.
                done = conn.execute(
                    sa.select(schema_migrations.c.name).where(
                        schema_migrations.c.version == version
                    )
                ).scalar()
                if done is not None:
                    if done != migration.name:
                        raise StoreError(
                            f"migration {version} in the database is {done!r}, "
                            f"expected {migration.name!r}: was a migration reordered?"
                        )
                    continue
                log.info("applying store migration %s", migration.name)
                try:
                    migration.apply(conn)
                except Exception as exc:  # rolled back with its transaction as it leaves
                    raise StoreError(f"store migration {migration.name} failed: {exc}") from exc
                conn.execute(
                    schema_migrations.insert().values(
                        version=version,
                        name=migration.name,
                        applied_at=iso_z(datetime.now(UTC)),
                    )
                )

    @property
    def schema_version(self) -> int:
        with self.engine.connect() as conn:
            return int(
                conn.execute(sa.select(sa.func.count()).select_from(schema_migrations)).scalar_one()
            )

    def applied_migrations(self) -> list[str]:
        with self.engine.connect() as conn:
            rows = conn.execute(
                sa.select(schema_migrations.c.name).order_by(schema_migrations.c.version)
            )
            return [r[0] for r in rows]

    # -- observations --------------------------------------------------------------

    def add_observations(
        self,
        frame: pd.DataFrame,
        *,
        conn: Connection | None = None,
        received_at: datetime | None = None,
    ) -> int:
        """Upsert canonical rows; a row with the same (site, time, kind) is replaced
        whole, so the newest input wins. Returns the number of rows written."""
        if frame.empty:
            return 0
        received = epoch_s(received_at or datetime.now(UTC))
        nan_is_null = self.engine.dialect.name == "sqlite"
        with self._write(conn) as c:
            batch = self._next_batch(c)
            # Straight to the DB-API cursor: SQLAlchemy's per-row parameter handling would
            # triple the cost of a million-row batch.
            cursor = c.connection.cursor()
            try:
                for (kind, source), part in by_kind_and_source(frame):
                    present = [
                        name
                        for name in (*FLOAT_COLUMNS, "weather")
                        # a frame from before a column existed lacks it: NULL there
                        if name in part and bool(part[name].notna().any())
                    ]
                    sql = self._upsert_sql(present, kind, source, received, batch)
                    rows = frame_rows(part, present, nan_is_null=nan_is_null)
                    for start in range(0, len(rows), _BATCH_ROWS):
                        cursor.executemany(sql, rows[start : start + _BATCH_ROWS])
            finally:
                cursor.close()
        return len(frame)

    def _insert(self, table: sa.Table) -> Any:
        """The dialect's INSERT, which knows ON CONFLICT (SQLite and PostgreSQL)."""
        if self.engine.dialect.name == "postgresql":
            from sqlalchemy.dialects.postgresql import insert as pg_insert

            return pg_insert(table)
        from sqlalchemy.dialects.sqlite import insert as sqlite_insert

        return sqlite_insert(table)

    def insert_once(self, conn: Any, table: sa.Table, key: str, **values: Any) -> bool:
        """Insert one row unless its ``key`` is taken; True when it went in (told by
        RETURNING: rowcount is not reliable for ON CONFLICT DO NOTHING on every driver)."""
        inserted = conn.execute(
            self._insert(table)
            .values(**values)
            .on_conflict_do_nothing(index_elements=[key])
            .returning(table.c[key])
        ).first()
        return inserted is not None

    def _mark(self) -> str:
        return "?" if self.engine.dialect.paramstyle == "qmark" else "%s"

    def _next_batch(self, conn: Connection) -> int:
        """The number of a new write batch. The counter row stays locked until the
        batch commits, so batches commit in the order of their numbers."""
        return int(
            conn.execute(
                counters.update()
                .where(counters.c.name == "observation_batch")
                .values(value=counters.c.value + 1)
                .returning(counters.c.value)
            ).scalar_one()
        )

    def last_batch(self) -> int:
        """The number of the newest committed write batch of observations (0: none)."""
        with self.engine.connect() as conn:
            return int(
                conn.execute(
                    sa.select(counters.c.value).where(counters.c.name == "observation_batch")
                ).scalar_one()
            )

    def _upsert_sql(
        self, present: list[str], kind: str, source: Any, received: int, batch: int
    ) -> str:
        """Only the columns this batch fills are bound, and the batch-wide values are
        written into the statement: each bound column costs time on every row."""
        names = ["site", "time", *present, "kind", "source", "received_at", "batch"]
        values = [self._mark()] * (2 + len(present))
        values += [sql_text(kind), sql_text(source), str(int(received)), str(int(batch))]
        updates = [
            f"{name} = excluded.{name}" if name in present else f"{name} = NULL"
            for name in (*FLOAT_COLUMNS, "weather")
        ]
        updates += [
            "source = excluded.source",
            "received_at = excluded.received_at",
            "batch = excluded.batch",
        ]
        return (
            f"INSERT INTO observations ({', '.join(names)}) VALUES ({', '.join(values)}) "
            f"ON CONFLICT (site, time, kind) DO UPDATE SET {', '.join(updates)}"
        )

    def window(
        self,
        site_ids: Sequence[str] | None,
        start: datetime,
        end: datetime | None,
        kinds: Sequence[str] = ("obs", "forecast"),
        *,
        after: int | None = None,
        categorical: bool = False,
    ) -> pd.DataFrame:
        """Rows with ``start <= time <= end``, as a canonical table sorted by site, time.

        ``end=None``: no upper bound. ``after``: only rows written by batches after that
        one (see :meth:`last_batch`). ``categorical``: the text columns as categoricals
        (one string per distinct value) instead of ``str`` objects.
        """
        chunks = self.window_chunks(site_ids, start, end, kinds, after=after)
        if not chunks:
            return records_frame([], shared_text=categorical)
        joined = join_columns(chunks)
        return joined if categorical else text_columns_as_objects(joined)

    def window_chunks(
        self,
        site_ids: Sequence[str] | None,
        start: datetime,
        end: datetime | None,
        kinds: Sequence[str] = ("obs", "forecast"),
        *,
        after: int | None = None,
        site_range: tuple[str | None, str | None] = (None, None),
    ) -> list[dict[str, Any]]:
        """:meth:`window`'s rows as :func:`~notifier.storage.rows.join_columns` takes
        them: a dict of columns per fetched chunk, in order. ``site_range``: only sites
        from the first (included) to the second (not included); ``None`` leaves that
        end open."""
        kinds = list(kinds)
        if not kinds or (site_ids is not None and not list(site_ids)):
            return []
        sql, params = window_sql(
            self.engine.dialect.name,
            self._mark(),
            start_s=epoch_s(start, ceil=True),
            end_s=None if end is None else epoch_s(end),
            kinds=kinds,
            site_ids=site_ids,
            after=after,
            site_range=site_range,
        )
        # Fetched in chunks, each turned into columns at once, and the text columns
        # (site, kind, source, weather: few distinct values) share one string object per
        # value: a 10,000-site window then costs a fraction of the memory of 1.4 M tuples.
        chunks: list[dict[str, Any]] = []
        with self.engine.connect() as conn:
            cursor = conn.connection.cursor()
            try:
                cursor.execute(sql, params)
                while True:
                    records = cursor.fetchmany(_FETCH_ROWS)
                    if not records:
                        break
                    chunks.append(own_columns(records_frame(records, shared_text=True)))
                    del records
            finally:
                cursor.close()
        return chunks

    def trim_observations(self, before: datetime, *, conn: Connection | None = None) -> int:
        """Delete rows older than ``before``; returns how many."""
        with self._write(conn) as c:
            result = c.execute(observations.delete().where(observations.c.time < epoch_s(before)))
            return int(result.rowcount or 0)

    def newest_readings(self) -> list[tuple[str, str | None, datetime]]:
        """(site, source, time) of the newest observed row of each site from each source,
        whatever its age: what ``status`` and ``sources`` show as the data's age."""
        o = observations.c
        query = (
            sa.select(o.site, o.source, sa.func.max(o.time))
            .where(o.kind == "obs")
            .group_by(o.site, o.source)
            .order_by(o.site, o.source)
        )
        with self.engine.connect() as conn:
            return [
                (site, source, datetime.fromtimestamp(int(t), UTC))
                for site, source, t in conn.execute(query)
            ]

    # -- source health -------------------------------------------------------------

    def record_poll(
        self,
        source_id: str,
        at: datetime,
        ok: bool,
        rows_ok: int,
        rows_rejected: int,
        error: str | None,
        *,
        conn: Connection | None = None,
    ) -> None:
        """Count one poll of a source: its rows, and its success or its error."""
        when = iso_z(at)
        h = source_health.c
        with self._write(conn) as c:
            c.execute(
                self._insert(source_health)
                .values(source_id=source_id, rows_ok=0, rows_rejected=0, polls=0, failures=0)
                .on_conflict_do_nothing(index_elements=["source_id"])
            )
            values: dict[str, Any] = {
                "polls": h.polls + 1,
                "failures": h.failures + (0 if ok else 1),
                "rows_ok": h.rows_ok + int(rows_ok),
                "rows_rejected": h.rows_rejected + int(rows_rejected),
            }
            if ok:
                values["last_success"] = when
            if error:
                values["last_error"] = redact(error)
                values["last_error_at"] = when
            c.execute(source_health.update().where(h.source_id == source_id).values(**values))

    def source_health(self) -> list[dict[str, Any]]:
        """One dict per source that has been polled, by source id; times as datetimes."""
        with self.engine.connect() as conn:
            rows = conn.execute(sa.select(source_health).order_by(source_health.c.source_id))
            out = []
            for row in rows.mappings():
                item = dict(row)
                for key in ("last_success", "last_error_at"):
                    item[key] = parse_iso(item[key])
                out.append(item)
            return out

    # -- seen files ----------------------------------------------------------------

    def file_seen(self, sha256: str) -> bool:
        return self.seen_file(sha256) is not None

    def seen_file(self, sha256: str) -> dict[str, Any] | None:
        """What was recorded when a file with this content was taken, or None."""
        with self.engine.connect() as conn:
            row = (
                conn.execute(sa.select(seen_files).where(seen_files.c.sha256 == sha256))
                .mappings()
                .first()
            )
        if row is None:
            return None
        item = dict(row)
        item["taken_at"] = parse_iso(item["taken_at"])
        return item

    def mark_file(
        self,
        sha256: str,
        name: str,
        status: str,
        source_id: str | None,
        at: datetime,
        *,
        conn: Connection | None = None,
    ) -> None:
        """Record that a file with this content was taken (first record wins)."""
        with self._write(conn) as c:
            c.execute(
                self._insert(seen_files)
                .values(
                    sha256=sha256,
                    name=name,
                    status=status,
                    taken_at=iso_z(at),
                    source_id=source_id,
                )
                .on_conflict_do_nothing(index_elements=["sha256"])
            )
