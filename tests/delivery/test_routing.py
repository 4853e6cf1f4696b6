"""Routing: who gets which event, and quiet hours across midnight and a DST change."""

from __future__ import annotations

from datetime import UTC, datetime, time, timedelta

import pytest

from notifier.delivery.routing import (
    DEFAULT_SUBSCRIBER,
    Mute,
    default_subscribers,
    quiet_until,
    route,
)
from tests.delivery.scenes import config_with, event, utc

HARBOUR = {"id": "harbour-desk", "channel": "stdout", "sites": ["tag:harbour"]}
EVERYONE = {"id": "ops-room", "channel": "stdout", "sites": ["all"]}
FIELDS = {"id": "field-lead", "channel": "stdout", "sites": ["north-field"]}
WARN_ONLY = {"id": "duty-manager", "channel": "stdout", "min_level": "warning"}
NO_ICING = {"id": "fog-only", "channel": "stdout", "hazards": ["fog", "data_gap"]}


def ids(deliveries):
    return sorted(d.subscriber_id for d in deliveries)


@pytest.mark.parametrize(
    ("ev", "expected"),
    [
        (event(site_id="quay-two"), ["harbour-desk", "ops-room"]),
        (event(site_id="north-field"), ["field-lead", "ops-room"]),
    ],
    ids=["tag-and-all", "id-and-all"],
)
def test_sites_by_id_tag_and_all(ev, expected):
    config = config_with([HARBOUR, EVERYONE, FIELDS])
    assert ids(route([ev], config.subscribers, config)) == expected


@pytest.mark.parametrize(
    ("ev", "gets_it"),
    [
        (event("raised", "watch"), False),
        (event("raised", "warning"), True),
        (event("escalated", "warning", "watch"), True),
        (event("reminder", "warning", "warning"), True),
        (event("downgraded", "watch", "warning"), True),
        (event("cleared", "none", "warning"), True),
        (event("cleared", "none", "watch"), False),
        (event("data_gap", "watch", hazard="data_gap"), True),
        (event("data_back", "none", "watch", hazard="data_gap"), True),
    ],
    ids=[
        "watch-below-min",
        "warning",
        "escalation",
        "reminder",
        "downgrade-ends-warning",
        "all-clear-of-warning",
        "all-clear-of-watch-not-theirs",
        "data-gap-always",
        "data-back-always",
    ],
)
def test_min_level_routes_endings_by_the_level_they_end(ev, gets_it):
    config = config_with([WARN_ONLY])
    assert bool(route([ev], config.subscribers, config)) is gets_it


def test_hazard_filter():
    config = config_with([NO_ICING])
    assert route([event(hazard="icing")], config.subscribers, config) == []
    assert len(route([event(hazard="fog")], config.subscribers, config)) == 1


def test_mutes_by_subscriber_site_and_time():
    config = config_with([EVERYONE, HARBOUR])
    ev = event(site_id="quay-two", at=utc(2026, 1, 10, 20, 0))
    until = utc(2026, 1, 10, 21, 0)
    assert ids(route([ev], config.subscribers, config, [Mute("ops-room", "quay-two", until)])) == [
        "harbour-desk"
    ]
    assert ids(route([ev], config.subscribers, config, [Mute(None, "quay-two", until)])) == []
    assert ids(route([ev], config.subscribers, config, [Mute(None, None, until)])) == []
    assert len(route([ev], config.subscribers, config, [Mute(None, "north-field", until)])) == 2
    expired = [Mute(None, "quay-two", utc(2026, 1, 10, 19, 59))]
    assert len(route([ev], config.subscribers, config, expired)) == 2


def test_a_subscriber_id_of_a_star_is_not_everyone():
    """Regression: "*" once meant "every subscriber", so a mute for a subscriber or sender
    called "*" silenced everyone. "Every" is None now; "*" is just an id like any other."""
    config = config_with([EVERYONE, HARBOUR])
    ev = event(site_id="quay-two", at=utc(2026, 1, 10, 20, 0))
    until = utc(2026, 1, 10, 21, 0)
    star = [Mute("*", "quay-two", until)]
    assert ids(route([ev], config.subscribers, config, star)) == ["harbour-desk", "ops-room"]
    star_site = [Mute("ops-room", "*", until)]
    assert ids(route([ev], config.subscribers, config, star_site)) == ["harbour-desk", "ops-room"]


def test_delivery_carries_channel_address_and_a_stable_key():
    sub = {"id": "harbour-mail", "channel": "stdout", "address": "ops@example.test"}
    config = config_with([sub])
    ev = event()
    (d,) = route([ev], config.subscribers, config)
    assert (d.event_id, d.channel_id, d.address) == (ev.id, "stdout", "ops@example.test")
    assert d.not_before is None and d.summary is False
    (again,) = route([ev], config.subscribers, config)
    assert again.key == d.key and d.key.startswith("fw-")


def test_no_subscribers_means_print_everything():
    config = config_with([])
    assert default_subscribers(config) == (DEFAULT_SUBSCRIBER,)
    assert ids(route([event()], default_subscribers(config), config)) == ["console"]


# -- quiet hours -----------------------------------------------------------------------

NIGHT = {"id": "night-shift", "channel": "stdout", "quiet_hours": "22:00-06:30"}


@pytest.mark.parametrize(
    ("at", "level", "held_until"),
    [
        (utc(2026, 1, 10, 23, 30), "watch", utc(2026, 1, 11, 6, 30)),
        (utc(2026, 1, 11, 5, 0), "watch", utc(2026, 1, 11, 6, 30)),
        (utc(2026, 1, 10, 22, 0), "watch", utc(2026, 1, 11, 6, 30)),
        (utc(2026, 1, 11, 6, 30), "watch", None),
        (utc(2026, 1, 10, 21, 59), "watch", None),
        (utc(2026, 1, 10, 23, 30), "warning", None),
    ],
    ids=[
        "before-midnight",
        "after-midnight",
        "window-start",
        "window-end-is-open",
        "just-before-window",
        "warning-goes-through",
    ],
)
def test_quiet_hours_across_midnight(at, level, held_until):
    config = config_with([NIGHT])
    (d,) = route([event("raised", level, at=at)], config.subscribers, config)
    assert d.not_before == held_until
    assert d.summary is (held_until is not None)


def test_warnings_held_when_subscriber_opts_out():
    config = config_with([{**NIGHT, "warnings_in_quiet_hours": False}])
    at = utc(2026, 1, 10, 23, 30)
    (d,) = route([event("raised", "warning", at=at)], config.subscribers, config)
    assert d.not_before == utc(2026, 1, 11, 6, 30) and d.summary


def test_all_clear_of_a_warning_is_warning_news_in_quiet_hours():
    config = config_with([NIGHT])
    at = utc(2026, 1, 11, 3, 0)
    (d,) = route([event("cleared", "none", "warning", at=at)], config.subscribers, config)
    assert d.not_before is None
    (d,) = route([event("cleared", "none", "watch", at=at)], config.subscribers, config)
    assert d.not_before == utc(2026, 1, 11, 6, 30)


def test_quiet_hours_in_the_subscribers_own_zone():
    away = {**NIGHT, "id": "remote-desk", "timezone": "America/New_York"}
    config = config_with([away])
    # 23:30 in London is 18:30 in New York: not quiet there
    (d,) = route([event(at=utc(2026, 1, 10, 23, 30))], config.subscribers, config)
    assert d.not_before is None
    # 04:00 UTC is 23:00 in New York: quiet until 06:30 New York = 11:30 UTC
    (d,) = route([event(at=utc(2026, 1, 11, 4, 0))], config.subscribers, config)
    assert d.not_before == utc(2026, 1, 11, 11, 30)


# Europe/London leaves summer time at 02:00 BST on Sunday 25 October 2026 (clocks go
# back to 01:00 GMT): the night of 24–25 October is an hour longer.
DST_NIGHT = (time(22, 0), time(7, 0))


@pytest.mark.parametrize(
    ("at", "held_until"),
    [
        (utc(2026, 10, 24, 21, 0), utc(2026, 10, 25, 7, 0)),  # 22:00 BST
        (utc(2026, 10, 24, 22, 30), utc(2026, 10, 25, 7, 0)),  # 23:30 BST
        (utc(2026, 10, 25, 0, 30), utc(2026, 10, 25, 7, 0)),  # 01:30 BST, first pass
        (utc(2026, 10, 25, 1, 30), utc(2026, 10, 25, 7, 0)),  # 01:30 GMT, second pass
        (utc(2026, 10, 25, 6, 59), utc(2026, 10, 25, 7, 0)),  # 06:59 GMT
        (utc(2026, 10, 25, 7, 0), None),  # 07:00 GMT: the window is over
        (utc(2026, 10, 24, 20, 59), None),  # 21:59 BST: not yet
    ],
    ids=[
        "start-bst",
        "late-bst",
        "repeated-hour-first",
        "repeated-hour-second",
        "just-before-end-gmt",
        "end-gmt",
        "before-start-bst",
    ],
)
def test_quiet_hours_across_the_october_change(at, held_until):
    assert quiet_until(DST_NIGHT, "Europe/London", at) == held_until


def test_october_quiet_night_is_ten_hours_long_in_utc():
    start = utc(2026, 10, 24, 21, 0)
    end = quiet_until(DST_NIGHT, "Europe/London", start)
    assert end - start == timedelta(hours=10)
    normal = quiet_until(DST_NIGHT, "Europe/London", utc(2026, 10, 17, 21, 0))
    assert normal - utc(2026, 10, 17, 21, 0) == timedelta(hours=9)


@pytest.mark.parametrize(
    ("window", "at", "held_until"),
    [
        # 01:30 does not exist on 29 March 2026 (01:00 GMT → 02:00 BST): the window
        # ends when the clock jumps past it, 01:00 UTC
        ((time(0, 30), time(1, 30)), utc(2026, 3, 29, 0, 45), utc(2026, 3, 29, 1, 0)),
        ((time(22, 0), time(7, 0)), utc(2026, 3, 28, 23, 0), utc(2026, 3, 29, 6, 0)),
        # 00:30–01:30 on 25 October: 01:30 happens twice; each pass ends at its own
        ((time(0, 30), time(1, 30)), utc(2026, 10, 25, 0, 10), utc(2026, 10, 25, 0, 30)),
        ((time(0, 30), time(1, 30)), utc(2026, 10, 25, 1, 10), utc(2026, 10, 25, 1, 30)),
    ],
    ids=[
        "end-skipped-in-spring",
        "night-across-spring-change",
        "repeated-end-first",
        "repeated-end-second",
    ],
)
def test_quiet_window_ends_at_a_dst_change(window, at, held_until):
    assert quiet_until(window, "Europe/London", at) == held_until


def test_dst_quiet_hours_through_route():
    config = config_with([{**NIGHT, "quiet_hours": "22:00-07:00"}])
    at = datetime(2026, 10, 25, 1, 30, tzinfo=UTC)
    (d,) = route([event(at=at)], config.subscribers, config)
    assert d.not_before == utc(2026, 10, 25, 7, 0) and d.summary


def test_equal_start_and_end_means_no_quiet_hours():
    assert quiet_until((time(6, 0), time(6, 0)), "Europe/London", utc(2026, 1, 1, 6)) is None
    assert quiet_until(None, "Europe/London", utc(2026, 1, 1, 6)) is None


def test_event_for_a_site_no_longer_configured_is_not_routed():
    config = config_with([EVERYONE])
    assert route([event(site_id="gone-site")], config.subscribers, config) == []


# -- news that cannot wait, reminders that can, and endings of a warning ------------------


def test_a_reminder_inside_quiet_hours_is_not_sent_at_all():
    config = config_with([NIGHT, EVERYONE])
    inside = utc(2026, 1, 11, 2, 0)  # 02:00 London, inside 22:00-06:30
    got = route([event("reminder", "warning", "warning", at=inside)], config.subscribers, config)
    assert ids(got) == ["ops-room"]  # no quiet hours there; none held for the night shift
    outside = utc(2026, 1, 11, 7, 0)
    got = route([event("reminder", "warning", "warning", at=outside)], config.subscribers, config)
    assert ids(got) == ["night-shift", "ops-room"]


@pytest.mark.parametrize("type_", ["observed", "sooner"])
def test_seen_and_sooner_go_through_quiet_hours_even_at_watch(type_):
    config = config_with([NIGHT])
    at = utc(2026, 1, 11, 2, 0)
    (d,) = route([event(type_, "watch", "watch", at=at)], config.subscribers, config)
    assert d.not_before is None and not d.summary
    opted_out = config_with([{**NIGHT, "warnings_in_quiet_hours": False}])
    (d,) = route([event(type_, "watch", "watch", at=at)], opted_out.subscribers, opted_out)
    assert d.not_before == utc(2026, 1, 11, 6, 30) and d.summary


def test_the_all_clear_reaches_whoever_heard_the_warning_after_a_downgrade():
    # warning → eased to watch → all clear: the all-clear ends an episode that was a
    # warning, so a warnings-only subscriber hears it (they never heard the watch)
    config = config_with([WARN_ONLY])
    ev = event("cleared", "none", "watch", peak_level="warning")
    assert ids(route([ev], config.subscribers, config)) == ["duty-manager"]
    ev = event("cleared", "none", "watch", peak_level="watch")
    assert route([ev], config.subscribers, config) == []
