"""The Matrix connection's state in the store: where its sync stream stands, which
events it has answered, and how it is doing (for ``fogwatch status``).

- ``next_batch`` is saved after each sync's events are handled, so a restart asks the
  homeserver for what came after, including commands sent while fogwatch was down.
- An event id is recorded once its answer has been sent; a command whose id is already
  there is not answered again (a restart in mid-batch, or two instances sharing the
  store: the id is the table's primary key, so one insert wins).

The tables are created by the store's migration ``0010_matrix_sync``.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import sqlalchemy as sa

from notifier.core.timefmt import iso_z
from notifier.storage.migrations import matrix_events, matrix_sync
from notifier.storage.store import Store

__all__ = ["KEEP_EVENTS_S", "MatrixState"]

KEEP_EVENTS_S = 14 * 86400  # well past any sync a restart could ask to see again


class MatrixState:
    """Sync token, answered events and connection state of one bot account."""

    def __init__(self, store: Store, account: str):
        self.store = store
        self.account = account

    def next_batch(self) -> str | None:
        with self.store.engine.connect() as conn:
            row = conn.execute(
                sa.select(matrix_sync.c.next_batch).where(matrix_sync.c.account == self.account)
            ).first()
        return None if row is None else row[0]

    def _upsert(self, now: datetime, **values: Any) -> None:
        values = {**values, "updated_at": iso_z(now)}
        first = {"state": "starting", **values, "account": self.account}
        with self.store.atomic() as conn:
            conn.execute(
                self.store._insert(matrix_sync)
                .values(**first)
                .on_conflict_do_update(index_elements=["account"], set_=values)
            )

    def synced(self, next_batch: str, now: datetime) -> None:
        """A sync's events are handled: the next one starts at ``next_batch``."""
        self._upsert(now, next_batch=next_batch, state="connected", last_sync_at=iso_z(now))

    def set_state(self, state: str, now: datetime, error: str | None = None) -> None:
        """``state`` (starting, connected, retrying, token refused, stopped), and the
        error that led to it, if any (already redacted by the caller)."""
        values: dict[str, Any] = {"state": state}
        if error is not None:
            values.update(last_error=error[:500], last_error_at=iso_z(now))
        self._upsert(now, **values)

    def status(self) -> dict[str, Any] | None:
        """The stored state of this account (None before its first start)."""
        with self.store.engine.connect() as conn:
            row = conn.execute(
                sa.select(matrix_sync).where(matrix_sync.c.account == self.account)
            ).first()
        if row is None:
            return None
        out = dict(row._mapping)
        out.pop("next_batch", None)  # an opaque token: nothing for a person
        return out

    def handled(self, event_id: str) -> bool:
        with self.store.engine.connect() as conn:
            query = sa.select(matrix_events.c.event_id).where(matrix_events.c.event_id == event_id)
            return conn.execute(query).first() is not None

    def mark_handled(self, event_id: str, room_id: str, now_s: float) -> bool:
        """Record ``event_id`` as answered; False when it already was. Ids older than
        :data:`KEEP_EVENTS_S` are deleted."""
        now = int(now_s)
        with self.store.atomic() as conn:
            conn.execute(
                matrix_events.delete().where(matrix_events.c.handled_at < now - KEEP_EVENTS_S)
            )
            return self.store.insert_once(
                conn, matrix_events, "event_id", event_id=event_id, room_id=room_id, handled_at=now
            )
