"""The bot's own state in the store: members (who joined with a code) and what their
codes grant, follows (which sites a member hears about, from which level) and mutes
(hushes, a sender's own or, set by an operator, for everyone, until a time).

"For everyone" is a flag of its own, never a value of the sender id. The tables are
created by the store's migrations ``0002_alerts``, ``0006_mutes_for_everyone`` and
``0007_member_grants``.
"""

from __future__ import annotations

from datetime import datetime
from typing import NamedTuple

import sqlalchemy as sa

from notifier.core.timefmt import iso_z, parse_iso
from notifier.storage.migrations import follows, member_grants, members, mutes
from notifier.storage.store import Store

__all__ = ["BotState", "Hush"]


class Hush(NamedTuple):
    """A stored hush: ``who`` asked for it, for themselves or (``everyone``) for all."""

    who: str
    site: str
    until: datetime
    everyone: bool = False


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

    def grant(self, sender: str, scope: str, now: datetime) -> None:
        """Records that ``sender`` may name the sites of ``scope`` (a site id, ``tag:NAME``
        or ``all``); a grant already held is kept as it was."""
        with self.store.atomic() as conn:
            conn.execute(
                self.store._insert(member_grants)
                .values(sender=sender, scope=scope, granted_at=iso_z(now))
                .on_conflict_do_nothing(index_elements=["sender", "scope"])
            )

    def grants(self) -> dict[str, tuple[str, ...]]:
        """sender → the scopes their join codes granted."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                sa.select(member_grants.c.sender, member_grants.c.scope).order_by(
                    member_grants.c.sender, member_grants.c.scope
                )
            )
            out: dict[str, tuple[str, ...]] = {}
            for sender, scope in rows:
                out[sender] = (*out.get(sender, ()), scope)
            return out

    def mute(
        self, who: str, site: str, until: datetime, now: datetime, *, everyone: bool = False
    ) -> None:
        """``who`` hushes ``site`` until ``until``: for themselves, or for everyone."""
        with self.store.atomic() as conn:
            stmt = self.store._insert(mutes).values(
                everyone=int(everyone), who=who, site=site, until=iso_z(until),
                created_at=iso_z(now),
            )  # fmt: skip
            conn.execute(
                stmt.on_conflict_do_update(
                    index_elements=["everyone", "who", "site"],
                    set_={"until": stmt.excluded.until},
                )
            )

    def unmute(self, who: str, site: str, now: datetime, *, everyone: bool = False) -> bool:
        """Lifts ``who``'s own hush of ``site``, or (``everyone``) every hush of it for
        everyone, whoever set it. True if one was in force."""
        scope = (
            (mutes.c.everyone == 1) if everyone else (mutes.c.everyone == 0) & (mutes.c.who == who)
        )
        with self.store.atomic() as conn:
            return bool(
                conn.execute(
                    mutes.delete().where(
                        scope & (mutes.c.site == site) & (mutes.c.until > iso_z(now))
                    )
                ).rowcount
            )

    def mutes(self, now: datetime) -> list[Hush]:
        """Hushes still in force."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                sa.select(mutes.c.who, mutes.c.site, mutes.c.until, mutes.c.everyone)
                .where(mutes.c.until > iso_z(now))
                .order_by(mutes.c.everyone, mutes.c.who, mutes.c.site)
            )
            return [Hush(w, s, parse_iso(u), bool(e)) for w, s, u, e in rows]
