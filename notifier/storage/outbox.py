"""Alert states, events and the durable delivery outbox (the bot's members, follows and
mutes are in :mod:`notifier.storage.botstate`).

The tables are created by the store's migration ``0002_alerts``. ``commit_cycle`` writes
a cycle's new states, its events and their deliveries in ONE transaction, so a state
change is never recorded without the messages it owes, nor the other way round.

A delivery row (:mod:`notifier.storage.deliveries`) moves ``pending`` → ``sent`` |
``failed`` (permanent) | ``expired`` (gave up at the maximum age), or ``cancelled`` (a
hush or an unfollow). Its ``key`` is the idempotency key, so writing the same delivery
twice is a no-op.
"""

from __future__ import annotations

import json
import uuid
from collections.abc import Callable, Iterable, Mapping, Sequence
from datetime import UTC, datetime, timedelta
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from notifier.core.redact import redact
from notifier.core.timefmt import iso_z
from notifier.engine.alerts import AlertState, Event, StateKey
from notifier.storage.deliveries import Delivery, DeliveryRow
from notifier.storage.migrations import deliveries, events
from notifier.storage.snapshot_rows import read_levels, read_snapshots, write_snapshots
from notifier.storage.states import AlertStates
from notifier.storage.store import Store

__all__ = ["CLAIM_LEASE", "Outbox"]


#: How long a dispatcher's claim on the deliveries it is sending lasts, in wall-clock
#: time (``alerts.claim_lease``). The dispatcher renews it while it works through a long
#: run; a claim left to lapse belongs to a dispatcher that died, and its rows go out again.
CLAIM_LEASE = timedelta(minutes=15)


def _claim_time(moment: datetime) -> str:
    """Claim times to the microsecond, fixed width so that they compare as text (a lease
    of a second or two must not lose most of itself to rounding)."""
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


class Outbox:
    """Queries over the alert and outbox tables of a ``Store``."""

    def __init__(
        self,
        store: Store,
        *,
        lease: timedelta = CLAIM_LEASE,
        wall_clock: Callable[[], datetime] = lambda: datetime.now(UTC),
    ):
        """``lease`` and ``wall_clock`` are for claims (see :meth:`claim`): a claim is
        about a dispatcher being alive, so it runs on real time even when the service is
        driven by a simulated clock (the demo, replays, ``once --at``)."""
        self.store = store
        self.engine = store.engine
        self.lease = lease
        self.wall_clock = wall_clock
        self.alert_states = AlertStates(store)

    # -- alert states ----------------------------------------------------------------

    def states(self) -> dict[StateKey, AlertState]:
        """Every alert state: from memory when this outbox wrote the table last
        (:mod:`notifier.storage.states`), else read from the store."""
        return self.alert_states.read()

    def commit_cycle(
        self,
        previous: Mapping[StateKey, AlertState],
        new_states: Mapping[StateKey, AlertState],
        new_events: Sequence[Event],
        new_deliveries: Sequence[Delivery],
        now: datetime,
        charts: Mapping[str, bytes] | None = None,
        snapshots: Mapping[str, tuple[str, dict[str, Any]]] | None = None,
    ) -> int:
        """States, events and deliveries of one cycle, together. Returns deliveries added."""
        when = iso_z(now)
        try:
            with self.store.atomic() as conn:
                written = self.alert_states.write(conn, previous, new_states, when)
                self._write_events(conn, new_events, charts or {}, when)
                added = self._write_deliveries(conn, new_deliveries, when)
                self._write_snapshots(conn, snapshots or {}, when)
        except BaseException:
            self.alert_states.forget()  # rolled back: the next read goes to the store
            raise
        self.alert_states.applied(written)
        return added

    def _write_events(
        self, conn: Connection, new_events: Sequence[Event], charts: Mapping[str, bytes], when: str
    ) -> None:
        if not new_events:
            return
        rows = [
            {
                "id": ev.id,
                "site": ev.site_id,
                "hazard": ev.hazard,
                "type": ev.type,
                "level": ev.level,
                "time": iso_z(ev.time),
                "payload": json.dumps(ev.to_dict()),
                "chart": charts.get(ev.id),
                "created_at": when,
            }
            for ev in new_events
        ]
        # one executemany (SQLAlchemy sends it as multi-row INSERTs): a statement per
        # event cost seconds a cycle when tens of thousands of alerts are raised at once
        stmt = self.store._insert(events).on_conflict_do_nothing(index_elements=["id"])
        conn.execute(stmt, rows)

    def _write_deliveries(
        self, conn: Connection, new_deliveries: Sequence[Delivery], when: str
    ) -> int:
        if not new_deliveries:
            return 0
        rows = [
            {
                "key": d.key,
                "event_id": d.event_id,
                "subscriber": d.subscriber_id,
                "channel": d.channel_id,
                "address": d.address,
                "status": "pending",
                "attempts": 0,
                "next_attempt_at": when,
                "not_before": iso_z(d.not_before) if d.not_before else None,
                "summary": int(d.summary),
                "created_at": when,
            }
            for d in new_deliveries
        ]
        stmt = (
            self.store._insert(deliveries)
            .on_conflict_do_nothing(index_elements=["key"])
            # counted by what comes back (a key taken already returns nothing): the
            # drivers report no dependable rowcount for a batched INSERT
            .returning(deliveries.c.key)
        )
        result = conn.execute(stmt, rows)
        return len(result.fetchall())

    def _write_snapshots(
        self, conn: Connection, snapshots: Mapping[str, tuple[str, dict[str, Any]]], when: str
    ) -> None:
        write_snapshots(self.store, conn, snapshots, when)

    def event(self, event_id: str) -> tuple[Event, bytes | None]:
        with self.engine.connect() as conn:
            row = conn.execute(
                sa.select(events.c.payload, events.c.chart).where(events.c.id == event_id)
            ).first()
        if row is None:
            raise KeyError(event_id)
        return Event.from_dict(json.loads(row[0])), row[1]

    def event_sites(self, event_ids: Iterable[str]) -> dict[str, str]:
        """The site of each of these events (those still stored)."""
        ids = list(event_ids)
        if not ids:
            return {}
        with self.engine.connect() as conn:
            rows = conn.execute(sa.select(events.c.id, events.c.site).where(events.c.id.in_(ids)))
            return {event_id: site for event_id, site in rows}

    def event_moments(self, event_ids: Iterable[str]) -> dict[str, tuple[str, str]]:
        """The site and time (ISO text) of each of these events (those still stored):
        what one message per site and moment groups by."""
        ids = list(event_ids)
        if not ids:
            return {}
        with self.engine.connect() as conn:
            rows = conn.execute(
                sa.select(events.c.id, events.c.site, events.c.time).where(events.c.id.in_(ids))
            )
            return {event_id: (site, time) for event_id, site, time in rows}

    def events_between(self, start: datetime, end: datetime) -> list[Event]:
        with self.engine.connect() as conn:
            rows = conn.execute(
                sa.select(events.c.payload)
                .where((events.c.time >= iso_z(start)) & (events.c.time <= iso_z(end)))
                .order_by(events.c.time, events.c.id)
            ).scalars()
            return [Event.from_dict(json.loads(p)) for p in rows]

    # -- deliveries ------------------------------------------------------------------

    def _unclaimed(self) -> Any:
        """Rows no dispatcher holds a live claim on."""
        d = deliveries.c
        return d.claimed_until.is_(None) | (d.claimed_until <= _claim_time(self.wall_clock()))

    def _due(self, when: str) -> Any:
        d = deliveries.c
        return (
            (d.status == "pending")
            & (d.next_attempt_at <= when)
            & (d.not_before.is_(None) | (d.not_before <= when))
            & self._unclaimed()
        )

    def due(self, now: datetime, limit: int = 500) -> list[DeliveryRow]:
        """Pending deliveries whose retry time and quiet-hours hold have passed and that
        no dispatcher holds a claim on."""
        d = deliveries.c
        with self.engine.connect() as conn:
            rows = conn.execute(
                sa.select(deliveries)
                .where(self._due(iso_z(now)))
                .order_by(d.created_at, d.key)
                .limit(limit)
            ).mappings()
            return [DeliveryRow.from_row(r) for r in rows]

    def claim(self, now: datetime, limit: int = 500) -> tuple[list[DeliveryRow], str]:
        """The deliveries due at ``now``, claimed for :attr:`lease` of wall-clock time so
        that no other dispatcher sends them meanwhile; returns them (oldest first) and
        the claim's token.

        The claim is one UPDATE that checks again that each row is still due: of two
        dispatchers, the second gets only what the first did not take (SQLite serialises
        the write transactions; PostgreSQL re-checks a row it had to wait for). Marking a
        row ends its claim; :meth:`release` hands back what was not sent; a crashed
        dispatcher's claims simply lapse.
        """
        when, until = iso_z(now), _claim_time(self.wall_clock() + self.lease)
        token = uuid.uuid4().hex
        d = deliveries.c
        with self.store.atomic() as conn:
            keys = [
                r[0]
                for r in conn.execute(
                    sa.select(d.key)
                    .where(self._due(when))
                    .order_by(d.created_at, d.key)
                    .limit(limit)
                )
            ]
            if not keys:
                return [], token
            rows = conn.execute(
                deliveries.update()
                .where(d.key.in_(keys) & self._due(when))
                .values(claimed_until=until, claimed_by=token)
                .returning(*deliveries.c)
            ).mappings()
            claimed = [DeliveryRow.from_row(r) for r in rows]
        claimed.sort(key=lambda r: (r.created_at, r.key))
        return claimed, token

    def renew(self, keys: Iterable[str], token: str) -> set[str]:
        """Extend the claim ``token`` on these rows by another lease from now; returns
        the keys it still held (a row already marked, or whose claim lapsed and was
        taken by another dispatcher, is not among them)."""
        keys = list(keys)
        if not keys:
            return set()
        with self.store.atomic() as conn:
            held = conn.execute(
                deliveries.update()
                .where(deliveries.c.key.in_(keys) & (deliveries.c.claimed_by == token))
                .values(claimed_until=_claim_time(self.wall_clock() + self.lease))
                .returning(deliveries.c.key)
            )
            return set(held.scalars())

    def release(self, keys: Iterable[str], token: str) -> None:
        """End the claim ``token`` on these rows where it still holds (unsent rows go
        back to the queue at once rather than when the lease runs out)."""
        keys = list(keys)
        if keys:
            with self.store.atomic() as conn:
                conn.execute(
                    deliveries.update()
                    .where(deliveries.c.key.in_(keys) & (deliveries.c.claimed_by == token))
                    .values(claimed_until=None, claimed_by=None)
                )

    def mark(
        self,
        keys: Iterable[str],
        status: str,
        now: datetime,
        *,
        error: str | None = None,
        next_attempt_at: datetime | None = None,
        conn: Connection | None = None,
        claim: str | None = None,
    ) -> None:
        """Record an outcome. With ``claim`` (a dispatcher's token), only rows that
        claim still holds are changed: one whose claim lapsed and passed to another
        dispatcher is that one's to record."""
        keys = list(keys)
        if not keys:
            return
        # a channel's error may carry a URL's key or a value from the environment
        values: dict[str, Any] = {"status": status, "last_error": error and redact(error)}
        values.update(claimed_until=None, claimed_by=None)  # marked: no longer anyone's
        if status == "sent":
            values["sent_at"] = iso_z(now)
        if status in ("sent", "failed") or next_attempt_at is not None:
            values["attempts"] = deliveries.c.attempts + 1
        if next_attempt_at is not None:
            values["next_attempt_at"] = iso_z(next_attempt_at)
        where: Any = deliveries.c.key.in_(keys)
        if claim is not None:
            where &= deliveries.c.claimed_by == claim
        with self.store._write(conn) as c:
            c.execute(deliveries.update().where(where).values(**values))

    def expire(self, older_than: datetime, now: datetime, reason: str) -> list[str]:
        """Give up pending deliveries due since before ``older_than``; their keys.

        A delivery is due from its creation, or, when held for quiet hours, from the end
        of the hold: held news is late on purpose, and a long quiet window must not use
        up its time to be delivered before the morning summary is even sent.
        """
        d = deliveries.c
        due_since = sa.func.coalesce(d.not_before, d.created_at)
        # a row another dispatcher holds a live claim on is that one's to record
        unclaimed = self._unclaimed()
        with self.store.atomic() as conn:
            keys = list(
                conn.execute(
                    sa.select(d.key).where(
                        (d.status == "pending") & (due_since < iso_z(older_than)) & unclaimed
                    )
                ).scalars()
            )
            if keys:
                # checked again in the UPDATE: on PostgreSQL another dispatcher may have
                # sent or claimed one of them since the SELECT
                done = set(
                    conn.execute(
                        deliveries.update()
                        .where(d.key.in_(keys) & (d.status == "pending") & unclaimed)
                        .values(
                            status="expired", last_error=reason, claimed_until=None, claimed_by=None
                        )
                        .returning(d.key)
                    ).scalars()
                )
                keys = [k for k in keys if k in done]
        return keys

    def deliveries(self, statuses: Sequence[str] | None = None) -> list[DeliveryRow]:
        with self.engine.connect() as conn:
            q = sa.select(deliveries).order_by(deliveries.c.created_at, deliveries.c.key)
            if statuses:
                q = q.where(deliveries.c.status.in_(list(statuses)))
            return [DeliveryRow.from_row(r) for r in conn.execute(q).mappings()]

    def backlog(self) -> dict[str, int]:
        with self.engine.connect() as conn:
            rows = conn.execute(
                sa.select(deliveries.c.status, sa.func.count()).group_by(deliveries.c.status)
            )
            return {status: int(n) for status, n in rows}

    def trim(self, before: datetime) -> int:
        """Forget finished deliveries and unreferenced events older than ``before``."""
        d = deliveries.c
        cut = iso_z(before)
        with self.store.atomic() as conn:
            n = conn.execute(
                deliveries.delete().where(
                    d.status.in_(["sent", "failed", "expired", "cancelled"]) & (d.created_at < cut)
                )
            ).rowcount
            conn.execute(
                events.delete().where(
                    (events.c.created_at < cut)
                    & ~events.c.id.in_(sa.select(d.event_id).where(d.status == "pending"))
                )
            )
        return int(n or 0)

    # -- site snapshots ---------------------------------------------------------------

    def snapshots(
        self, sites: Iterable[str] | None = None
    ) -> dict[str, tuple[datetime, str, dict[str, Any]]]:
        """Site id → (time, level, snapshot) for every site, or for ``sites``; the
        hazards of a site with any are put into words now (:mod:`snapshot_rows`)."""
        with self.engine.connect() as conn:
            return read_snapshots(conn, sites)

    def snapshot_levels(self) -> dict[str, str]:
        """Site id → its snapshot's level, nothing put into words."""
        with self.engine.connect() as conn:
            return read_levels(conn)
