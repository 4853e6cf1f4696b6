"""The outbox worker: deliver what is due, retry what may succeed later, record the rest.

At-least-once: a delivery is marked sent only after its channel accepted it, in its own
small transaction, so a crash between the two costs at most one duplicate — and every
channel carries the delivery's idempotency key (email Message-ID, webhook header,
folder file name) so receivers can drop it.

Retries use exponential backoff with jitter: 1 min, 2, 4, … capped at 30 min, ±20 %,
or the far side's Retry-After when it gives one. A delivery still pending after the
maximum age (12 h by default) is given up and recorded as expired: an alert that old
is no longer news.

A channel that fails :data:`MAX_TRANSIENT_IN_A_ROW` times running is left alone for the
rest of the run: a mail server that is down would otherwise cost a connect timeout per
pending delivery while the service waits (the rest stay due and go next run). An
unexpected exception from a channel is logged and retried like a transient failure, so
one bad row or adapter bug never stops the others.

The deliveries of one cycle for one subscriber and one site (fog and icing news of the
same moment) go as one message (except to a webhook, whose program reads one event per
body), keyed by the set of their delivery keys (the same set
gives the same key on a retry); held summary rows go as one morning summary.

What was queued for someone who has since hushed the site (a mute covering it now) or
stopped following it (no longer among ``subscribers``) is not sent but recorded as
cancelled, with the reason: a held morning summary must not bring back a site its
reader silenced overnight.
"""

from __future__ import annotations

import hashlib
import logging
import random
from collections import defaultdict
from collections.abc import Callable, Collection, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from notifier.core.config import Config, WebhookChannel
from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels import build_channel, channel_config_for
from notifier.delivery.channels.base import RetryLater
from notifier.delivery.messages import Message, render, render_site, render_summary
from notifier.delivery.routing import Mute, muted
from notifier.engine.rules import RuleSet
from notifier.storage.deliveries import DeliveryRow
from notifier.storage.outbox import Outbox

__all__ = ["DispatchReport", "backoff_s", "dispatch"]

log = logging.getLogger(__name__)

BASE_BACKOFF_S = 60.0
MAX_BACKOFF_S = 1800.0
MAX_TRANSIENT_IN_A_ROW = 3


def backoff_s(attempts: int, rng: random.Random) -> float:
    """Delay before retry number ``attempts + 1``: 60·2^attempts s, capped, ±20 % jitter."""
    base = min(MAX_BACKOFF_S, BASE_BACKOFF_S * 2 ** max(attempts, 0))
    return base * rng.uniform(0.8, 1.2)


@dataclass
class DispatchReport:
    sent: int = 0
    retried: int = 0
    failed: int = 0
    expired: int = 0
    cancelled: int = 0
    errors: list[str] = field(default_factory=list)


def _subscriber_zone(config: Config, subscriber_id: str) -> str | None:
    for sub in config.subscribers:
        if sub.id == subscriber_id:
            return sub.timezone
    return None


def dispatch(
    outbox: Outbox,
    config: Config,
    rules: RuleSet,
    now: datetime,
    *,
    channel_kwargs: Mapping[str, Mapping[str, Any]] | None = None,
    rng: random.Random | None = None,
    should_stop: Callable[[], bool] = lambda: False,
    mutes: Sequence[Mute] = (),
    subscribers: Collection[str] | None = None,
) -> DispatchReport:
    """Deliver every due delivery once; ``channel_kwargs[channel_id]`` is injected.

    ``mutes`` (as for routing) and ``subscribers`` (the ids still subscribed; ``None``:
    do not check) cancel what was queued before a hush or an unfollow."""
    rng = rng or random.Random()
    report = DispatchReport()
    max_age = timedelta(seconds=config.alerts.max_delivery_age)
    hours = config.alerts.max_delivery_age / 3600
    report.expired = len(
        outbox.expire(now - max_age, now, f"gave up: still undelivered after {hours:g} h")
    )
    claimed_at = outbox.wall_clock()  # the lease runs from before the claim, to be safe
    due, claim = outbox.claim(now)
    try:
        lease = _Lease(outbox, claim, due, claimed_at)
        due = _cancel_unwanted(lease, due, now, mutes, subscribers, report)
        _dispatch_claimed(
            outbox, config, rules, due, now, channel_kwargs, rng, should_stop, report, lease
        )
    finally:
        # what was neither sent nor given up (a stop, a failing channel) is due again now
        outbox.release([r.key for r in due], claim)
    return report


class _Lease:
    """A dispatch run's claim: renewed once half of it is spent; its outcomes recorded
    only on rows it still holds. If a row's claim lapsed (a send that hung, a paused
    process) and another dispatcher took it, this run leaves that row alone."""

    def __init__(self, outbox: Outbox, token: str, rows: list[DeliveryRow], since: datetime):
        self.outbox, self.token, self.since = outbox, token, since
        self.started = since
        self.held = {r.key for r in rows}

    def left_at(self, now: datetime) -> datetime:
        """When a message left: the run's ``now`` moved on by the real time the run has
        taken so far (a run of slow sends lasts seconds; a simulated clock stays simulated)."""
        return now + max(self.outbox.wall_clock() - self.started, timedelta(0))

    def keep_up(self) -> None:
        now = self.outbox.wall_clock()
        if now - self.since >= self.outbox.lease / 2:
            self.held &= self.outbox.renew(sorted(self.held), self.token)
            self.since = now

    def holds(self, batch: list[DeliveryRow]) -> list[DeliveryRow]:
        return [r for r in batch if r.key in self.held]

    def mark(self, keys: list[str], status: str, now: datetime, **kw: Any) -> None:
        self.outbox.mark(keys, status, now, claim=self.token, **kw)
        self.held.difference_update(keys)


def _cancel_unwanted(
    lease: _Lease,
    rows: list[DeliveryRow],
    now: datetime,
    mutes: Sequence[Mute],
    subscribers: Collection[str] | None,
    report: DispatchReport,
) -> list[DeliveryRow]:
    """``rows`` without those whose reader has since hushed the site or unsubscribed;
    those are marked cancelled, with the reason."""
    if not rows or (not mutes and subscribers is None):
        return rows
    sites = lease.outbox.event_sites({r.event_id for r in rows})
    keep, reasons = [], {}
    for r in rows:
        if subscribers is not None and r.subscriber not in subscribers:
            reasons[r.key] = "cancelled: no longer subscribed"
        elif r.event_id in sites and muted(mutes, r.subscriber, sites[r.event_id], now):
            reasons[r.key] = f"cancelled: {sites[r.event_id]} hushed"
        else:
            keep.append(r)
    for reason in set(reasons.values()):
        lease.mark([k for k, v in reasons.items() if v == reason], "cancelled", now, error=reason)
    report.cancelled += len(reasons)
    return keep


def _dispatch_claimed(
    outbox: Outbox,
    config: Config,
    rules: RuleSet,
    due: list[DeliveryRow],
    now: datetime,
    channel_kwargs: Mapping[str, Mapping[str, Any]] | None,
    rng: random.Random,
    should_stop: Callable[[], bool],
    report: DispatchReport,
    lease: _Lease,
) -> None:
    by_channel: dict[str, list[DeliveryRow]] = defaultdict(list)
    for row in due:
        by_channel[row.channel].append(row)
    moments = outbox.event_moments({r.event_id for r in due if not r.summary})
    for channel_id, rows in by_channel.items():
        try:
            cfg = channel_config_for(config, channel_id)
        except KeyError:
            lease.mark(
                [r.key for r in rows],
                "failed",
                now,
                error=f"channel {channel_id!r} is no longer configured",
            )
            report.failed += len(rows)
            continue
        channel = build_channel(cfg, **dict((channel_kwargs or {}).get(channel_id, {})))
        if hasattr(channel, "bind"):  # a CAP channel needs the sites, notes and episode
            channel.bind(config, rules, outbox)
        try:
            failing = 0
            # people read one message per site and moment; a webhook's receiver is a
            # program and gets each event in its own body (docs/schema/)
            together = {} if isinstance(cfg, WebhookChannel) else moments
            for batch in _batches(rows, together):
                if should_stop():
                    return
                lease.keep_up()
                batch = lease.holds(batch)
                if not batch:
                    continue  # its claim lapsed and another dispatcher has it
                ok = _deliver(outbox, config, rules, channel, batch, now, rng, report, lease)
                failing = 0 if ok else failing + 1
                if failing >= MAX_TRANSIENT_IN_A_ROW:
                    log.warning(
                        "channel %s failed %d times running; the rest wait for the next run",
                        channel_id,
                        failing,
                    )
                    break
        finally:
            try:
                channel.close()
            except Exception:  # closing must not lose the other channels' deliveries
                log.exception("closing channel %s failed", channel_id)


def _batches(
    rows: list[DeliveryRow], moments: Mapping[str, tuple[str, str]]
) -> list[list[DeliveryRow]]:
    """One message per subscriber, site and moment: the deliveries of one cycle's
    events for one site (fog and icing together) go as one; held summary rows are
    grouped per subscriber."""
    together: dict[tuple[str, str | None, tuple[str, str]], list[DeliveryRow]] = defaultdict(list)
    held: dict[tuple[str, str | None], list[DeliveryRow]] = defaultdict(list)
    for r in rows:
        if r.summary:
            held[(r.subscriber, r.address)].append(r)
        else:
            moment = moments.get(r.event_id, (r.key, ""))
            together[(r.subscriber, r.address, moment)].append(r)
    return list(together.values()) + list(held.values())


def _deliver(
    outbox: Outbox,
    config: Config,
    rules: RuleSet,
    channel: Any,
    batch: list[DeliveryRow],
    now: datetime,
    rng: random.Random,
    report: DispatchReport,
    lease: _Lease,
) -> bool:
    """Send one batch and record the outcome; False on a transient failure."""
    keys = [r.key for r in batch]
    first = batch[0]
    try:
        message, chart, key = _compose(outbox, config, rules, batch)
    except KeyError as exc:
        lease.mark(keys, "failed", now, error=f"cannot compose: missing {exc}")
        report.failed += len(batch)
        return True
    except Exception as exc:  # a row that cannot be rendered must not block the rest
        log.exception("cannot compose delivery %s", first.key)
        error = f"cannot compose: {type(exc).__name__}: {exc}"
        lease.mark(keys, "failed", now, error=error)
        report.failed += len(batch)
        report.errors.append(error)
        return True
    try:
        channel.send(message, first.as_delivery(), key, chart)
    except PermanentDeliveryError as exc:
        log.error("delivery %s to %s failed for good: %s", key, first.subscriber, exc)
        lease.mark(keys, "failed", now, error=str(exc))
        report.failed += len(batch)
        report.errors.append(str(exc))
        return True
    except Exception as exc:
        if isinstance(exc, TransientDeliveryError):
            error = str(exc)
        else:  # a bug in an adapter: retried, and visible in `fogwatch status`
            log.exception("delivery %s: unexpected error from channel %s", key, first.channel)
            error = f"internal error: {type(exc).__name__}: {exc}"
        delay = backoff_s(first.attempts, rng)
        if isinstance(exc, RetryLater) and exc.retry_after_s:
            delay = max(delay, exc.retry_after_s)
        log.warning(
            "delivery %s to %s will be retried in %.0f s: %s", key, first.subscriber, delay, error
        )
        lease.mark(
            keys, "pending", now, error=error, next_attempt_at=now + timedelta(seconds=delay)
        )
        report.retried += len(batch)
        report.errors.append(error)
        return False
    lease.mark(keys, "sent", lease.left_at(now))  # sent_at: when it left, not the run's start
    report.sent += len(batch)
    return True


def _compose(
    outbox: Outbox, config: Config, rules: RuleSet, batch: list[DeliveryRow]
) -> tuple[Message, bytes | None, str]:
    zone = _subscriber_zone(config, batch[0].subscriber)
    if len(batch) == 1 and not batch[0].summary:
        event, chart = outbox.event(batch[0].event_id)
        return render(event, config.site(event.site_id), rules, zone), chart, batch[0].key
    if not batch[0].summary:
        # one site at one moment: one message, keyed by the set of its deliveries
        found = [outbox.event(r.event_id) for r in batch]
        events = sorted((e for e, _ in found), key=lambda e: (e.hazard, e.type))
        chart = next((c for _, c in found if c), None)
        digest = hashlib.sha256("|".join(sorted(r.key for r in batch)).encode()).hexdigest()
        site = config.site(events[0].site_id)
        return render_site(events, site, rules, zone), chart, f"fw-site-{digest[:32]}"
    items = []
    for row in batch:
        event, _ = outbox.event(row.event_id)
        items.append((event, config.site(event.site_id)))
    # one summary per set of held deliveries: the same set gives the same key, and the
    # same text on a retry — it is dated when the quiet hours ended, not by the clock
    digest = hashlib.sha256("|".join(sorted(r.key for r in batch)).encode()).hexdigest()[:32]
    released = max((r.not_before for r in batch if r.not_before), default=None)
    return render_summary(items, rules, zone, at=released), None, f"fw-sum-{digest}"
