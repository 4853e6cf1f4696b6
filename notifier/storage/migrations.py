"""The store's schema: named migrations, applied in order, and the ``Table`` objects that
describe the newest shape for the queries.

Schema changes are named migrations, applied in order, each once and in its own
transaction, and recorded in ``schema_migrations`` (its row count is the schema
version). To add one:

1. write ``def _m0006_name(conn: Connection) -> None`` issuing plain DDL with
   ``conn.exec_driver_sql(...)`` (a migration is a frozen snapshot: never build it from
   the current ``Table`` objects, which describe the newest shape and may change later);
2. append ``Migration("0006_name", _m0006_name)`` to :data:`MIGRATIONS` — never
   reorder, rename or edit a migration that has shipped;
3. add or update the ``Table`` objects below that the queries use.

The tables: ``observations`` (the canonical table, one row per site, time and kind),
``counters``, ``source_health`` and ``seen_files`` for the store itself;
``alert_states``, ``events``, ``deliveries`` and ``site_status`` for the outbox
(:mod:`notifier.storage.outbox`); ``members``, ``member_grants``, ``follows`` and ``mutes``
for the bot (:mod:`notifier.storage.botstate`); ``seen_messages`` for the bot
endpoint's replay protection (:mod:`notifier.storage.seen`); ``matrix_sync`` and
``matrix_events`` for the Matrix connection (:mod:`notifier.storage.matrixstate`).
Migration 0009 gave ``observations`` its ``ceiling_m`` and ``precip_mm`` columns;
0011 added ``snapshot_facts`` and ``site_status``'s ``facts_key`` and ``facts_column``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from notifier.core.columns import FLOAT_COLUMNS

__all__ = ["MIGRATIONS", "Migration", "metadata"]


@dataclass(frozen=True)
class Migration:
    name: str
    apply: Callable[[Connection], None]


def _m0001_initial(conn: Connection) -> None:
    conn.exec_driver_sql(
        """
        CREATE TABLE observations (
            site TEXT NOT NULL,
            time INTEGER NOT NULL,
            kind TEXT NOT NULL,
            temp_c REAL, dewpoint_c REAL, rh_pct REAL, wind_ms REAL, wind_dir_deg REAL,
            cloud_pct REAL, surface_temp_c REAL, water_temp_c REAL, visibility_m REAL,
            pressure_hpa REAL, weather TEXT, source TEXT,
            received_at INTEGER NOT NULL,
            PRIMARY KEY (site, time, kind)
        )
        """
    )
    # The primary key's index (site, time, kind) serves the per-site window queries;
    # trimming by time alone scans, which is cheap for a 48-hour window.
    conn.exec_driver_sql(
        """
        CREATE TABLE source_health (
            source_id TEXT PRIMARY KEY,
            last_success TEXT,
            last_error TEXT,
            last_error_at TEXT,
            rows_ok INTEGER NOT NULL DEFAULT 0,
            rows_rejected INTEGER NOT NULL DEFAULT 0,
            polls INTEGER NOT NULL DEFAULT 0,
            failures INTEGER NOT NULL DEFAULT 0
        )
        """
    )
    conn.exec_driver_sql(
        """
        CREATE TABLE seen_files (
            sha256 TEXT PRIMARY KEY,
            name TEXT NOT NULL,
            status TEXT NOT NULL,
            taken_at TEXT NOT NULL,
            source_id TEXT
        )
        """
    )


def _m0002_alerts(conn: Connection) -> None:
    """Alert states, events, the delivery outbox, site snapshots, and the bot's tables."""
    # PostgreSQL has no BLOB. This migration could never run there before this choice of
    # type was added, so no database holds the other spelling: SQLite keeps BLOB.
    binary = "BYTEA" if conn.dialect.name == "postgresql" else "BLOB"
    for ddl in (
        """CREATE TABLE alert_states (
            site TEXT NOT NULL, hazard TEXT NOT NULL, state TEXT NOT NULL,
            updated_at TEXT NOT NULL, PRIMARY KEY (site, hazard))""",
        f"""CREATE TABLE events (
            id TEXT PRIMARY KEY, site TEXT NOT NULL, hazard TEXT NOT NULL,
            type TEXT NOT NULL, level TEXT NOT NULL, time TEXT NOT NULL,
            payload TEXT NOT NULL, chart {binary}, created_at TEXT NOT NULL)""",
        """CREATE TABLE deliveries (
            key TEXT PRIMARY KEY, event_id TEXT NOT NULL, subscriber TEXT NOT NULL,
            channel TEXT NOT NULL, address TEXT, status TEXT NOT NULL,
            attempts INTEGER NOT NULL DEFAULT 0, next_attempt_at TEXT NOT NULL,
            not_before TEXT, summary INTEGER NOT NULL DEFAULT 0, created_at TEXT NOT NULL,
            sent_at TEXT, last_error TEXT)""",
        "CREATE INDEX deliveries_due ON deliveries (status, next_attempt_at)",
        """CREATE TABLE site_status (
            site TEXT PRIMARY KEY, time TEXT NOT NULL, level TEXT NOT NULL,
            payload TEXT NOT NULL)""",
        """CREATE TABLE follows (
            sender TEXT NOT NULL, site TEXT NOT NULL, min_level TEXT NOT NULL,
            created_at TEXT NOT NULL, PRIMARY KEY (sender, site))""",
        """CREATE TABLE mutes (
            who TEXT NOT NULL, site TEXT NOT NULL, until TEXT NOT NULL,
            created_at TEXT NOT NULL, PRIMARY KEY (who, site))""",
        """CREATE TABLE members (
            sender TEXT PRIMARY KEY, joined_at TEXT NOT NULL, via TEXT)""",
    ):
        conn.exec_driver_sql(ddl)


def _m0003_observation_batches(conn: Connection) -> None:
    """Number the write batches of observations, so that a reader holding the window in
    memory can fetch only what changed since it last looked (``Store.window(after=…)``).

    ``received_at`` cannot serve: it is the writer's clock, which the demo and replay
    set themselves, and two writers' clocks need not agree. Rows written before this
    migration are batch 0.
    """
    for ddl in (
        "ALTER TABLE observations ADD COLUMN batch INTEGER NOT NULL DEFAULT 0",
        "CREATE INDEX observations_batch ON observations (batch)",
        "CREATE TABLE counters (name TEXT PRIMARY KEY, value INTEGER NOT NULL)",
        "INSERT INTO counters (name, value) VALUES ('observation_batch', 0)",
    ):
        conn.exec_driver_sql(ddl)


def _m0004_postgresql_widths(conn: Connection) -> None:
    """On PostgreSQL, the widths SQLite gives these columns anyway: REAL and INTEGER are
    4 bytes there (7 digits; seconds that run out in 2038), 8 bytes in SQLite. Nothing
    to do on SQLite."""
    if conn.dialect.name != "postgresql":
        return
    floats = ", ".join(
        f"ALTER COLUMN {c} TYPE DOUBLE PRECISION"
        for c in (
            "temp_c", "dewpoint_c", "rh_pct", "wind_ms", "wind_dir_deg", "cloud_pct",
            "surface_temp_c", "water_temp_c", "visibility_m", "pressure_hpa",
        )
    )  # fmt: skip
    wide = ", ".join(f"ALTER COLUMN {c} TYPE BIGINT" for c in ("time", "received_at", "batch"))
    conn.exec_driver_sql(f"ALTER TABLE observations {floats}, {wide}")
    conn.exec_driver_sql("ALTER TABLE counters ALTER COLUMN value TYPE BIGINT")


def _m0005_delivery_claims(conn: Connection) -> None:
    """A dispatcher claims the deliveries it is about to send until ``claimed_until``, so
    that two dispatchers sharing one store (PostgreSQL, several instances) do not both
    send them; a crashed one's claims lapse and the rows go out again."""
    conn.exec_driver_sql("ALTER TABLE deliveries ADD COLUMN claimed_until TEXT")
    conn.exec_driver_sql("ALTER TABLE deliveries ADD COLUMN claimed_by TEXT")


def _m0006_mutes_for_everyone(conn: Connection) -> None:
    """A hush for everyone is a flag, no longer the sender id ``*``: any string could be
    a sender id, so a sender called ``*`` could hush a site for every subscriber. The
    table is rebuilt with ``everyone`` in its key (``who`` is then the operator who asked;
    empty for a hush made before this migration, whose asker is unknown); old rows with
    ``who = '*'`` become hushes for everyone."""
    for ddl in (
        """CREATE TABLE mutes_v6 (
            everyone INTEGER NOT NULL, who TEXT NOT NULL, site TEXT NOT NULL,
            until TEXT NOT NULL, created_at TEXT NOT NULL,
            PRIMARY KEY (everyone, who, site))""",
        """INSERT INTO mutes_v6 (everyone, who, site, until, created_at)
            SELECT CASE WHEN who = '*' THEN 1 ELSE 0 END,
                   CASE WHEN who = '*' THEN '' ELSE who END,
                   site, until, created_at
            FROM mutes""",
        "DROP TABLE mutes",
        "ALTER TABLE mutes_v6 RENAME TO mutes",
    ):
        conn.exec_driver_sql(ddl)


def _m0007_member_grants(conn: Connection) -> None:
    """What a member's join codes grant: a site id, ``tag:NAME`` or ``all``, one row per
    grant. Members who joined before this migration keep the site their code named,
    which ``members.via`` recorded as ``code for SITE``. (No LIKE pattern: psycopg would
    read its percent sign as a parameter.)"""
    conn.exec_driver_sql(
        """CREATE TABLE member_grants (
            sender TEXT NOT NULL, scope TEXT NOT NULL, granted_at TEXT NOT NULL,
            PRIMARY KEY (sender, scope))"""
    )
    conn.exec_driver_sql(
        """INSERT INTO member_grants (sender, scope, granted_at)
            SELECT sender, substr(via, 10), joined_at FROM members
            WHERE substr(via, 1, 9) = 'code for ' AND length(via) > 9"""
    )


def _m0008_seen_messages(conn: Connection) -> None:
    """The ``webhook-id`` of every signed request the bot endpoint took, until its
    timestamp window has passed, so that a captured request is refused after a restart
    and by every instance sharing the store (Standard Webhooks replay protection)."""
    seconds = "BIGINT" if conn.dialect.name == "postgresql" else "INTEGER"
    conn.exec_driver_sql(
        f"""CREATE TABLE seen_messages (
            message_id TEXT PRIMARY KEY, seen_at {seconds} NOT NULL,
            expires_at {seconds} NOT NULL)"""
    )
    conn.exec_driver_sql("CREATE INDEX seen_messages_expiry ON seen_messages (expires_at)")


def _m0009_ceiling_precip(conn: Connection) -> None:
    """Two observed columns: ``ceiling_m`` (the lowest broken or overcast cloud base, or
    the vertical visibility; 30 000 for no ceiling) and ``precip_mm`` (the last hour's
    precipitation). Rows written before have neither (NULL: unknown)."""
    real = "DOUBLE PRECISION" if conn.dialect.name == "postgresql" else "REAL"
    for column in ("ceiling_m", "precip_mm"):
        conn.exec_driver_sql(f"ALTER TABLE observations ADD COLUMN {column} {real}")


def _m0010_matrix_sync(conn: Connection) -> None:
    """The Matrix connection's place in its sync stream and the events it answered, so
    that a restart neither answers a command twice nor misses one sent while it was
    down; and its state, for ``fogwatch status`` in another process."""
    seconds = "BIGINT" if conn.dialect.name == "postgresql" else "INTEGER"
    conn.exec_driver_sql(
        """CREATE TABLE matrix_sync (
            account TEXT PRIMARY KEY, next_batch TEXT, state TEXT NOT NULL,
            last_sync_at TEXT, last_error TEXT, last_error_at TEXT, updated_at TEXT NOT NULL)"""
    )
    conn.exec_driver_sql(
        f"""CREATE TABLE matrix_events (
            event_id TEXT PRIMARY KEY, room_id TEXT NOT NULL, handled_at {seconds} NOT NULL)"""
    )
    conn.exec_driver_sql("CREATE INDEX matrix_events_age ON matrix_events (handled_at)")


def _m0011_snapshot_facts(conn: Connection) -> None:
    """A site with a hazard keeps its snapshot's hazards as facts of the cycle (the
    rules that fired, the tests that held, the values they tested), one record per
    cycle, and the words are made when the snapshot is read
    (:mod:`notifier.storage.snapshot_facts`)."""
    binary = "BYTEA" if conn.dialect.name == "postgresql" else "BLOB"
    conn.exec_driver_sql(
        f"""CREATE TABLE snapshot_facts (
            key TEXT PRIMARY KEY, time TEXT NOT NULL, catalogue TEXT NOT NULL,
            arrays {binary} NOT NULL)"""
    )
    conn.exec_driver_sql("ALTER TABLE site_status ADD COLUMN facts_key TEXT")
    conn.exec_driver_sql("ALTER TABLE site_status ADD COLUMN facts_column INTEGER")


#: Every schema change, in order. Append only.
MIGRATIONS: list[Migration] = [
    Migration("0001_initial", _m0001_initial),
    Migration("0002_alerts", _m0002_alerts),
    Migration("0003_observation_batches", _m0003_observation_batches),
    Migration("0004_postgresql_widths", _m0004_postgresql_widths),
    Migration("0005_delivery_claims", _m0005_delivery_claims),
    Migration("0006_mutes_for_everyone", _m0006_mutes_for_everyone),
    Migration("0007_member_grants", _m0007_member_grants),
    Migration("0008_seen_messages", _m0008_seen_messages),
    Migration("0009_ceiling_precip", _m0009_ceiling_precip),
    Migration("0010_matrix_sync", _m0010_matrix_sync),
    Migration("0011_snapshot_facts", _m0011_snapshot_facts),
]

metadata = sa.MetaData()
schema_migrations = sa.Table(
    "schema_migrations",
    metadata,
    sa.Column("version", sa.Integer, primary_key=True, autoincrement=False),
    sa.Column("name", sa.Text, nullable=False, unique=True),
    sa.Column("applied_at", sa.Text, nullable=False),
)
observations = sa.Table(
    "observations",
    metadata,
    sa.Column("site", sa.Text, primary_key=True),
    sa.Column("time", sa.Integer, primary_key=True),
    sa.Column("kind", sa.Text, primary_key=True),
    *(sa.Column(column, sa.Float) for column in FLOAT_COLUMNS),
    sa.Column("weather", sa.Text),
    sa.Column("source", sa.Text),
    sa.Column("received_at", sa.Integer, nullable=False),
    sa.Column("batch", sa.Integer, nullable=False),
)
counters = sa.Table(
    "counters",
    metadata,
    sa.Column("name", sa.Text, primary_key=True),
    sa.Column("value", sa.Integer, nullable=False),
)
source_health = sa.Table(
    "source_health",
    metadata,
    sa.Column("source_id", sa.Text, primary_key=True),
    sa.Column("last_success", sa.Text),
    sa.Column("last_error", sa.Text),
    sa.Column("last_error_at", sa.Text),
    sa.Column("rows_ok", sa.Integer, nullable=False),
    sa.Column("rows_rejected", sa.Integer, nullable=False),
    sa.Column("polls", sa.Integer, nullable=False),
    sa.Column("failures", sa.Integer, nullable=False),
)
seen_files = sa.Table(
    "seen_files",
    metadata,
    sa.Column("sha256", sa.Text, primary_key=True),
    sa.Column("name", sa.Text, nullable=False),
    sa.Column("status", sa.Text, nullable=False),
    sa.Column("taken_at", sa.Text, nullable=False),
    sa.Column("source_id", sa.Text),
)
alert_states = sa.Table(
    "alert_states",
    metadata,
    sa.Column("site", sa.Text, primary_key=True),
    sa.Column("hazard", sa.Text, primary_key=True),
    sa.Column("state", sa.Text, nullable=False),
    sa.Column("updated_at", sa.Text, nullable=False),
)
events = sa.Table(
    "events",
    metadata,
    sa.Column("id", sa.Text, primary_key=True),
    sa.Column("site", sa.Text, nullable=False),
    sa.Column("hazard", sa.Text, nullable=False),
    sa.Column("type", sa.Text, nullable=False),
    sa.Column("level", sa.Text, nullable=False),
    sa.Column("time", sa.Text, nullable=False),
    sa.Column("payload", sa.Text, nullable=False),
    sa.Column("chart", sa.LargeBinary),
    sa.Column("created_at", sa.Text, nullable=False),
)
deliveries = sa.Table(
    "deliveries",
    metadata,
    sa.Column("key", sa.Text, primary_key=True),
    sa.Column("event_id", sa.Text, nullable=False),
    sa.Column("subscriber", sa.Text, nullable=False),
    sa.Column("channel", sa.Text, nullable=False),
    sa.Column("address", sa.Text),
    sa.Column("status", sa.Text, nullable=False),
    sa.Column("attempts", sa.Integer, nullable=False),
    sa.Column("next_attempt_at", sa.Text, nullable=False),
    sa.Column("not_before", sa.Text),
    sa.Column("summary", sa.Integer, nullable=False),
    sa.Column("created_at", sa.Text, nullable=False),
    sa.Column("sent_at", sa.Text),
    sa.Column("last_error", sa.Text),
    sa.Column("claimed_until", sa.Text),
    sa.Column("claimed_by", sa.Text),  # the claim's own token (see Outbox.claim)
)
site_status = sa.Table(
    "site_status",
    metadata,
    sa.Column("site", sa.Text, primary_key=True),
    sa.Column("time", sa.Text, nullable=False),
    sa.Column("level", sa.Text, nullable=False),
    sa.Column("payload", sa.Text, nullable=False),
    sa.Column("facts_key", sa.Text),  # its hazards: this record of snapshot_facts
    sa.Column("facts_column", sa.Integer),  # and this column of it
)
snapshot_facts = sa.Table(
    "snapshot_facts",
    metadata,
    sa.Column("key", sa.Text, primary_key=True),
    sa.Column("time", sa.Text, nullable=False),
    sa.Column("catalogue", sa.Text, nullable=False),
    sa.Column("arrays", sa.LargeBinary, nullable=False),
)
follows = sa.Table(
    "follows",
    metadata,
    sa.Column("sender", sa.Text, primary_key=True),
    sa.Column("site", sa.Text, primary_key=True),
    sa.Column("min_level", sa.Text, nullable=False),
    sa.Column("created_at", sa.Text, nullable=False),
)
mutes = sa.Table(
    "mutes",
    metadata,
    sa.Column("everyone", sa.Integer, primary_key=True),  # 1: for every subscriber
    sa.Column("who", sa.Text, primary_key=True),  # the sender who asked ("" if unknown)
    sa.Column("site", sa.Text, primary_key=True),
    sa.Column("until", sa.Text, nullable=False),
    sa.Column("created_at", sa.Text, nullable=False),
)
members = sa.Table(
    "members",
    metadata,
    sa.Column("sender", sa.Text, primary_key=True),
    sa.Column("joined_at", sa.Text, nullable=False),
    sa.Column("via", sa.Text),
)
member_grants = sa.Table(
    "member_grants",
    metadata,
    sa.Column("sender", sa.Text, primary_key=True),
    sa.Column("scope", sa.Text, primary_key=True),  # a site id, "tag:NAME" or "all"
    sa.Column("granted_at", sa.Text, nullable=False),
)
seen_messages = sa.Table(
    "seen_messages",
    metadata,
    sa.Column("message_id", sa.Text, primary_key=True),
    sa.Column("seen_at", sa.BigInteger, nullable=False),  # POSIX seconds
    sa.Column("expires_at", sa.BigInteger, nullable=False),
)
matrix_sync = sa.Table(
    "matrix_sync",
    metadata,
    sa.Column("account", sa.Text, primary_key=True),  # the bot's Matrix user id
    sa.Column("next_batch", sa.Text),  # where the next sync starts
    sa.Column("state", sa.Text, nullable=False),  # connected | retrying | token refused | …
    sa.Column("last_sync_at", sa.Text),
    sa.Column("last_error", sa.Text),
    sa.Column("last_error_at", sa.Text),
    sa.Column("updated_at", sa.Text, nullable=False),
)
matrix_events = sa.Table(
    "matrix_events",
    metadata,
    sa.Column("event_id", sa.Text, primary_key=True),
    sa.Column("room_id", sa.Text, nullable=False),
    sa.Column("handled_at", sa.BigInteger, nullable=False),  # POSIX seconds
)
