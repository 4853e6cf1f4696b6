"""The bot's own state in the store: members (who joined with a code), follows (which
sites a member hears about, from which level) and mutes (hushes, per person or for
everyone, until a time).

The tables are created by the store's migration ``0002_alerts``.
"""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa

from notifier.core.timefmt import iso_z, parse_iso
from notifier.storage.migrations import follows, members, mutes
from notifier.storage.store import Store

__all__ = ["BotState"]


class BotState:
    """Queries over the bot's tables of a ``Store``."""

    def __init__(self, store: Store):
        self.store = store
        self.engine = store.engine

    def add_member(self, sender: str, now: datetime, via: str | None) -> None:
        with self.store.atomic() as conn:
            conn.execute(
                self.store._insert(members)
                .values(
                    sender=sender,
                    joined_at=iso_z(now),
                    via=via,
                )
                .on_conflict_do_nothing(index_elements=["sender"])
            )

    def is_member(self, sender: str) -> bool:
        with self.engine.connect() as conn:
            return (
                conn.execute(sa.select(members.c.sender).where(members.c.sender == sender)).first()
                is not None
            )

    def follow(self, sender: str, site: str, min_level: str, now: datetime) -> None:
        with self.store.atomic() as conn:
            stmt = self.store._insert(follows).values(
                sender=sender, site=site, min_level=min_level, created_at=iso_z(now)
            )
            conn.execute(
                stmt.on_conflict_do_update(
                    index_elements=["sender", "site"], set_={"min_level": stmt.excluded.min_level}
                )
            )

    def unfollow(self, sender: str, site: str) -> bool:
        with self.store.atomic() as conn:
            return bool(
                conn.execute(
                    follows.delete().where((follows.c.sender == sender) & (follows.c.site == site))
                ).rowcount
            )

    def follows(self, sender: str | None = None) -> list[tuple[str, str, str]]:
        """(sender, site, min_level) rows."""
        with self.engine.connect() as conn:
            q = sa.select(follows.c.sender, follows.c.site, follows.c.min_level).order_by(
                follows.c.sender, follows.c.site
            )
            if sender is not None:
                q = q.where(follows.c.sender == sender)
            return [tuple(r) for r in conn.execute(q)]  # type: ignore[misc]

    def mute(self, who: str, site: str, until: datetime, now: datetime) -> None:
        with self.store.atomic() as conn:
            stmt = self.store._insert(mutes).values(
                who=who, site=site, until=iso_z(until), created_at=iso_z(now)
            )
            conn.execute(
                stmt.on_conflict_do_update(
                    index_elements=["who", "site"], set_={"until": stmt.excluded.until}
                )
            )

    def unmute(self, who: str, site: str, now: datetime) -> bool:
        with self.store.atomic() as conn:
            return bool(
                conn.execute(
                    mutes.delete().where(
                        (mutes.c.who == who) & (mutes.c.site == site) & (mutes.c.until > iso_z(now))
                    )
                ).rowcount
            )

    def mutes(self, now: datetime) -> list[tuple[str, str, datetime]]:
        """Mutes still in force: (who, site, until)."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                sa.select(mutes.c.who, mutes.c.site, mutes.c.until).where(
                    mutes.c.until > iso_z(now)
                )
            )
            return [(w, s, parse_iso(u)) for w, s, u in rows]  # type: ignore[misc]
