"""What the operator's window shows, read from the store: each site's level and its data's
age, each source's health, the outbox, and the health verdict behind ``GET /health``.

Everything is read from the store at request time (the snapshot each cycle writes, the
alert states, the source-health counts, the delivery queue), so ``fogwatch serve`` shows
the same picture whether it runs beside the scheduler or on its own. Nothing here
recomputes an assessment. Subscribers' addresses never leave this module: a delivery
error that quotes one has it replaced by ``[address]``.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import TYPE_CHECKING, Any

from notifier.core.timefmt import parse_iso

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Config, Site
    from notifier.storage.outbox import Outbox
    from notifier.storage.store import Store

__all__ = [
    "GIVEN_UP_WINDOW",
    "Health",
    "OutboxView",
    "SiteView",
    "SourceView",
    "cycle_late_after",
    "health",
    "last_cycle",
    "outbox_view",
    "scrub",
    "site_views",
    "source_late_after",
    "source_views",
]

# a given-up delivery keeps /health at 503 for this long (common practice: a day, so the
# night's failures are still flagged at the morning check, but not for a fortnight)
GIVEN_UP_WINDOW = timedelta(hours=24)
# three missed runs before a source or the scheduler counts as late (common practice)
MISSED_RUNS = 3
_EMAIL = re.compile(r"[^\s<>@,;:\"']+@[^\s<>@,;:\"']+")


@dataclass
class SiteView:
    site: Site
    level: str = "none"
    hazards: list[dict[str, Any]] = field(default_factory=list)
    assessed_at: datetime | None = None
    since: datetime | None = None  # when the site's current level began
    data_last: datetime | None = None
    data_age_min: float | None = None
    stale: bool = False
    features: dict[str, Any] = field(default_factory=dict)


@dataclass
class SourceView:
    id: str
    type: str
    last_success: datetime | None
    age_s: float | None
    late: bool
    rows_ok: int = 0
    rows_rejected: int = 0
    polls: int = 0
    failures: int = 0
    last_error: str = ""


@dataclass
class OutboxView:
    counts: dict[str, int]
    problems: list[dict[str, Any]]


@dataclass
class Health:
    ok: bool
    reasons: list[str]
    checked_at: datetime
    last_cycle: datetime | None

    def to_json(self) -> dict[str, Any]:
        return {
            "status": "ok" if self.ok else "unhealthy",
            "reasons": self.reasons,
            "checked_at": self.checked_at.isoformat(),
            "last_cycle": self.last_cycle.isoformat() if self.last_cycle else None,
        }


def scrub(text: str | None, addresses: Iterable[str]) -> str:
    """``text`` with every known address and anything shaped like an email address
    replaced by ``[address]``.

    >>> scrub("550 no such user ann@farm.example", ["+440000"])
    '550 no such user [address]'
    """
    out = text or ""
    for address in sorted({a for a in addresses if a}, key=len, reverse=True):
        out = out.replace(address, "[address]")
    return _EMAIL.sub("[address]", out)


def last_cycle(store: Store) -> datetime | None:
    """When the newest cycle ran: the latest site snapshot any cycle wrote (a row, or
    a cycle's record of every site's snapshot)."""
    import sqlalchemy as sa

    from notifier.storage.migrations import site_status, snapshot_facts

    with store.engine.connect() as conn:
        times = [
            conn.execute(sa.select(sa.func.max(table.c.time))).scalar()
            for table in (site_status, snapshot_facts)
        ]
    newest = max((t for t in times if t), default=None)  # ISO texts of one width
    return parse_iso(newest) if newest else None


def site_views(
    outbox: Outbox, config: Config, now: datetime, site_ids: Sequence[str] | None = None
) -> list[SiteView]:
    """Every configured site's view, or those of ``site_ids`` (only their snapshots
    read and put into words)."""
    snaps = outbox.snapshots(site_ids)
    states = outbox.states()
    out = []
    wanted = None if site_ids is None else set(site_ids)
    for site in config.sites:
        if wanted is not None and site.id not in wanted:
            continue
        view = SiteView(site)
        snap = snaps.get(site.id)
        if snap is not None:
            when, level, payload = snap
            data = payload.get("data", {})
            view.level, view.assessed_at = level, when
            view.hazards = list(payload.get("hazards", []))
            view.features = dict(payload.get("features", {}))
            view.data_last = parse_iso(data.get("last_time"))
            if view.data_last is not None:
                view.data_age_min = max(0.0, (now - view.data_last).total_seconds() / 60)
                view.stale = view.data_age_min > config.alerts.stale_after / 60
            else:
                view.stale = True
            starts = [
                s.since
                for (sid, _), s in states.items()
                if sid == site.id and s.level == level and s.since is not None
            ]
            view.since = min(starts) if starts else None
        out.append(view)
    return out


def source_late_after(config: Config, source_id: str) -> float:
    """Seconds without a success before a source counts as late: three missed polls."""
    source = next(s for s in config.sources if s.id == source_id)
    return MISSED_RUNS * source.interval


def cycle_late_after(config: Config) -> float:
    """Seconds without a cycle before the scheduler counts as late: three missed runs."""
    return MISSED_RUNS * config.schedule.evaluate_every


def source_views(store: Store, config: Config, now: datetime) -> list[SourceView]:
    health_rows = {row["source_id"]: row for row in store.source_health()}
    out = []
    for source in config.sources:
        row = health_rows.get(source.id, {})
        last = row.get("last_success")
        age = (now - last).total_seconds() if last else None
        out.append(
            SourceView(
                id=source.id,
                type=source.type,
                last_success=last,
                age_s=age,
                late=age is None or age > source_late_after(config, source.id),
                rows_ok=int(row.get("rows_ok") or 0),
                rows_rejected=int(row.get("rows_rejected") or 0),
                polls=int(row.get("polls") or 0),
                failures=int(row.get("failures") or 0),
                last_error=str(row.get("last_error") or ""),
            )
        )
    return out


def known_addresses(config: Config, outbox: Outbox) -> set[str]:
    """Every address a delivery may carry: configured ones and those on queued rows."""
    found = {s.address for s in config.subscribers if s.address}
    found |= {s for sub in config.subscribers for s in sub.senders}
    found |= {r.address for r in outbox.deliveries() if r.address}
    return found


def outbox_view(outbox: Outbox, config: Config, limit: int = 10) -> OutboxView:
    """Counts by status, and the latest rows that failed, were given up or are retrying.

    Rows are shown by subscriber id and channel only, never by address."""
    addresses = known_addresses(config, outbox)
    rows = outbox.deliveries(["failed", "expired"])[-limit:]
    rows += [r for r in outbox.deliveries(["pending"]) if r.attempts][-limit:]
    problems = [
        {
            "status": "given up" if r.status == "expired" else r.status,
            "subscriber": r.subscriber,
            "channel": r.channel,
            "attempts": r.attempts,
            "created_at": r.created_at,
            "error": scrub(r.last_error, addresses),
        }
        for r in rows
    ]
    return OutboxView(outbox.backlog(), problems)


def health(store: Store, outbox: Outbox, config: Config, now: datetime) -> Health:
    """200 material when every source reported within its window, the last cycle is
    recent and nothing was given up in the last day; else the reasons."""
    reasons = []
    for view in source_views(store, config, now):
        if view.last_success is None:
            reasons.append(f"source {view.id}: no successful poll yet")
        elif view.late:
            reasons.append(
                f"source {view.id}: last success {_ago(view.age_s)} ago "
                f"(late after {_ago(source_late_after(config, view.id))})"
            )
    cycle = last_cycle(store)
    if cycle is None:
        reasons.append("no cycle has run yet")
    elif (now - cycle).total_seconds() > cycle_late_after(config):
        reasons.append(f"last cycle {_ago((now - cycle).total_seconds())} ago")
    recent = [
        r for r in outbox.deliveries(["failed", "expired"]) if now - r.created_at <= GIVEN_UP_WINDOW
    ]
    if recent:
        reasons.append(f"{len(recent)} delivery(ies) given up in the last 24 h")
    return Health(not reasons, reasons, now, cycle)


def _ago(seconds: float | None) -> str:
    if seconds is None or not math.isfinite(seconds):
        return "never"
    minutes = int(seconds // 60)
    return f"{minutes} min" if minutes < 120 else f"{minutes / 60:.1f} h"
