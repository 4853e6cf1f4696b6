"""Events → deliveries: who hears about what, and when (pure: no I/O, no clock).

A subscriber gets an event when all of these hold:

- the event's site is among ``subscriber.sites`` (ids, ``tag:NAME`` or ``all``);
- its hazard is among ``subscriber.hazards``;
- its *news level* reaches ``subscriber.min_level``. The news level is the event's
  level, except for ``downgraded``, ``cleared`` and ``data_back``, which carry the
  highest level of the episode they end: whoever got the warning gets its all-clear.
  Data gaps (``data_gap`` and ``data_back``) go to everyone who subscribes to the
  ``data_gap`` hazard whatever their ``min_level``: a dead feed means they could miss a
  warning, and silence must not look like safety. The evening outlook is watch-level
  news, whatever the site's level;
- no mute covers it: a :class:`Mute` names a subscriber id (``None``: every subscriber)
  and a site id (``None``: every site) and covers events before ``until``. "Every" is
  ``None``, never a string, so no id can stand for everyone.

Quiet hours (``"22:00-06:30"``, may cross midnight) are read in the subscriber's time
zone, else the site's. Watch-level news inside them is held: ``not_before`` is the end
of the quiet window and ``summary`` is true, so the dispatcher bundles everything held
for one subscriber into a single morning summary. Warning-level news, and news that
cannot wait (the hazard now seen, its expected time an hour sooner: ``Event.urgent``),
goes at once unless the subscriber set ``warnings_in_quiet_hours: false``, in which case
it is held too. A reminder is not news: inside quiet hours it is not sent at all.
Window ends are computed on the local calendar, so a window across a daylight-saving
change lasts an hour longer or shorter in UTC, as a person would expect.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from datetime import UTC, date, datetime, time, timedelta
from typing import TYPE_CHECKING, NamedTuple
from zoneinfo import ZoneInfo

from notifier.core.config import Subscriber
from notifier.engine.assessment import level_rank
from notifier.storage.deliveries import Delivery

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Config
    from notifier.engine.alerts import Event

__all__ = [
    "DEFAULT_SUBSCRIBER",
    "Mute",
    "default_subscribers",
    "quiet_until",
    "route",
]


class Mute(NamedTuple):
    """``subscriber`` hears nothing of ``site`` before ``until`` (``None``: every one)."""

    subscriber: str | None
    site: str | None
    until: datetime


# With no subscribers configured, everything is printed (DESIGN.md: "text to stdout").
DEFAULT_SUBSCRIBER = Subscriber(id="console", name="console", channel="stdout")


def default_subscribers(config: Config) -> tuple[Subscriber, ...]:
    """The configured subscribers, or one that prints everything to stdout."""
    return config.subscribers or (DEFAULT_SUBSCRIBER,)


def _wall(t: datetime, zone: ZoneInfo) -> datetime:
    return t.astimezone(zone).replace(tzinfo=None)


def _local_end(day: date, end: time, zone: ZoneInfo, after: datetime) -> datetime:
    """The instant the local clock first reads ``day`` + ``end``, later than ``after``.

    A wall time that a fall-back change repeats is tried in both readings; one that a
    spring-forward change skips resolves to the instant of the jump, when the clock
    passes it.
    """
    naive = datetime.combine(day, end)
    first, second = (naive.replace(tzinfo=zone, fold=f).astimezone(UTC) for f in (0, 1))
    if _wall(first, zone) != naive:  # skipped by a spring-forward change
        lo, hi = sorted((first, second))
        while (hi - lo) > timedelta(seconds=1):
            mid = lo + (hi - lo) / 2
            if _wall(mid, zone) >= naive:
                hi = mid
            else:
                lo = mid
        return max(hi.replace(microsecond=0), after)
    for candidate in sorted({first, second}):
        if candidate > after:
            return candidate
    return after


def quiet_until(window: tuple[time, time] | None, zone_name: str, at: datetime) -> datetime | None:
    """End (UTC) of the quiet window containing ``at``, or None outside quiet hours.

    >>> from datetime import time
    >>> t = datetime(2026, 1, 10, 23, 30, tzinfo=UTC)
    >>> quiet_until((time(22, 0), time(6, 30)), "Europe/London", t).isoformat()
    '2026-01-11T06:30:00+00:00'
    """
    if window is None:
        return None
    start, end = window
    if start == end:
        return None
    zone = ZoneInfo(zone_name)
    local = at.astimezone(zone)
    now_t = local.time().replace(tzinfo=None)
    if start < end:
        if not (start <= now_t < end):
            return None
        day = local.date()
    else:  # crosses midnight
        if now_t >= start:
            day = local.date() + timedelta(days=1)
        elif now_t < end:
            day = local.date()
        else:
            return None
    return _local_end(day, end, zone, at.astimezone(UTC))


def muted(mutes: Iterable[Mute], subscriber_id: str, site_id: str, at: datetime) -> bool:
    """Whether a mute covers this subscriber's news of this site at ``at``."""
    for mute in mutes:
        if (
            mute.subscriber in (None, subscriber_id)
            and mute.site in (None, site_id)
            and at < mute.until
        ):
            return True
    return False


def route(
    events: Sequence[Event],
    subscribers: Sequence[Subscriber],
    config: Config,
    mutes: Sequence[Mute] = (),
) -> list[Delivery]:
    """Every (event, subscriber) pair that should be delivered, in event order."""
    chosen_sites = {sub.id: {s.id for s in config.sites_matching(sub.sites)} for sub in subscribers}
    out: list[Delivery] = []
    # looked up by id (``config.site`` searches the list: a cycle raising thousands of
    # alerts over 100,000 sites spent seconds there)
    sites = {s.id: s for s in config.sites} if events else {}
    for event in events:
        site = sites.get(event.site_id)
        if site is None:  # a site since removed from the config: no one can select it
            continue
        # the evening outlook is watch-level news whatever the site's level now
        news = "watch" if event.type == "outlook" else event.news_level
        data_news = event.hazard == "data_gap"
        for sub in subscribers:
            if event.site_id not in chosen_sites[sub.id] or event.hazard not in sub.hazards:
                continue
            if not data_news and level_rank(news) < level_rank(sub.min_level):
                continue
            if muted(mutes, sub.id, event.site_id, event.time):
                continue
            zone = sub.timezone or site.timezone
            held_until = quiet_until(sub.quiet_window(), zone, event.time)
            if held_until is not None and event.type == "reminder":
                continue  # a reminder is no news: none inside quiet hours, none held
            urgent = news == "warning" or event.urgent
            if held_until is not None and urgent and sub.warnings_in_quiet_hours:
                held_until = None
            out.append(
                Delivery(
                    event_id=event.id,
                    subscriber_id=sub.id,
                    channel_id=sub.channel,
                    address=sub.address,
                    not_before=held_until,
                    summary=held_until is not None,
                )
            )
    return out
