"""Replay protection in the store: the message ids (``webhook-id``) of the signed
requests already taken, each kept until its timestamp window has passed.

A signed request is good for as long as its ``webhook-timestamp`` is within the
tolerance of the receiver's clock (:data:`notifier.core.signing.TOLERANCE_S`). Its id
is kept at least that long, so a captured request is refused as a replay while its
signature could still pass, after a restart of ``fogwatch bot serve`` too, and by every
instance sharing the store (the id is the table's primary key: of two instances taking
the same request at once, one insert wins). After that the timestamp alone refuses it,
and the row is deleted.

The table is created by the store's migration ``0008_seen_messages``.
"""

from __future__ import annotations

import sqlalchemy as sa

from notifier.core.signing import TOLERANCE_S
from notifier.storage.migrations import seen_messages
from notifier.storage.store import Store

__all__ = ["SeenMessages"]

# kept a little beyond the window: two instances' clocks may differ by some seconds
CLOCK_MARGIN_S = 60


class SeenMessages:
    """The message ids taken, in the store; ``first_time`` records one."""

    def __init__(self, store: Store, tolerance_s: float = TOLERANCE_S):
        self.store = store
        self.keep_s = int(tolerance_s) + CLOCK_MARGIN_S

    def first_time(self, message_id: str, timestamp: int, now_s: float) -> bool:
        """Record ``message_id`` (signed at ``timestamp``); False when it was taken
        before and its window has not passed (a replay). Expired ids are deleted."""
        now = int(now_s)
        expires = max(timestamp, now) + self.keep_s
        with self.store.atomic() as conn:
            conn.execute(seen_messages.delete().where(seen_messages.c.expires_at < now))
            return self.store.insert_once(
                conn, seen_messages, "message_id",
                message_id=message_id, seen_at=now, expires_at=expires,
            )  # fmt: skip

    def count(self) -> int:
        """How many ids are kept (for tests and ``status``)."""
        with self.store.engine.connect() as conn:
            query = sa.select(sa.func.count()).select_from(seen_messages)
            return int(conn.execute(query).scalar_one())
