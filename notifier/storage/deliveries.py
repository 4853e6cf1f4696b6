"""Delivery records: one event for one subscriber on one channel, as routing makes it
(:class:`Delivery`) and as the outbox stores it (:class:`DeliveryRow`).

A delivery's ``key`` is its idempotency key: the same on every retry and every re-run,
so writing the same delivery twice is a no-op and a channel can drop a repeat.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import sqlalchemy as sa

from notifier.core.timefmt import parse_iso

__all__ = ["Delivery", "DeliveryRow", "delivery_key"]


def delivery_key(event_id: str, subscriber_id: str, channel_id: str) -> str:
    """The idempotency key of one delivery: the same on every retry and every re-run."""
    text = f"{event_id}|{subscriber_id}|{channel_id}"
    return "fw-" + hashlib.sha256(text.encode()).hexdigest()[:32]


@dataclass(frozen=True)
class Delivery:
    """One event for one subscriber on one channel."""

    event_id: str
    subscriber_id: str
    channel_id: str
    address: str | None
    not_before: datetime | None = None  # held for quiet hours until then (UTC)
    summary: bool = False  # part of the morning summary rather than a message of its own

    @property
    def key(self) -> str:
        return delivery_key(self.event_id, self.subscriber_id, self.channel_id)


@dataclass(frozen=True)
class DeliveryRow:
    key: str
    event_id: str
    subscriber: str
    channel: str
    address: str | None
    status: str
    attempts: int
    next_attempt_at: datetime
    not_before: datetime | None
    summary: bool
    created_at: datetime
    sent_at: datetime | None
    last_error: str | None

    @classmethod
    def from_row(cls, row: Mapping[str, Any] | sa.RowMapping) -> DeliveryRow:
        return cls(
            key=row["key"],
            event_id=row["event_id"],
            subscriber=row["subscriber"],
            channel=row["channel"],
            address=row["address"],
            status=row["status"],
            attempts=int(row["attempts"]),
            next_attempt_at=parse_iso(row["next_attempt_at"]),  # type: ignore[arg-type]
            not_before=parse_iso(row["not_before"]),
            summary=bool(row["summary"]),
            created_at=parse_iso(row["created_at"]),  # type: ignore[arg-type]
            sent_at=parse_iso(row["sent_at"]),
            last_error=row["last_error"],
        )

    def as_delivery(self) -> Delivery:
        return Delivery(
            self.event_id,
            self.subscriber,
            self.channel,
            self.address,
            self.not_before,
            self.summary,
        )
