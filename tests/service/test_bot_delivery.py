"""Follows and hushes made through the bot are honoured by delivery, across a simulated
night on a real file-backed service."""

from __future__ import annotations

from datetime import datetime, timedelta

from notifier.bot.grammar import handle
from notifier.service.botbackend import ServiceBackend
from notifier.service.cycle import Service, bot_subscriber_id
from tests.service.scene import Scene, utc


def cycle(scene: Scene, service: Service, at: datetime) -> None:
    scene.feed(at)
    service.cycle(at)


def say(service: Service, sender: str, text: str, at: datetime) -> str:
    return handle(ServiceBackend(service, at), sender, text, at)


def received(service: Service) -> set[tuple[str, str, str, str, str]]:
    """(subscriber, channel, event type, hazard, status) of every delivery so far."""
    out = set()
    for row in service.outbox.deliveries():
        event, _ = service.outbox.event(row.event_id)
        out.add((row.subscriber, row.channel, event.type, event.hazard, row.status))
    return out


def vale_gap_news(service: Service) -> set[tuple[str, str]]:
    """(subscriber, channel) of every data-gap delivery for the valley."""
    out = set()
    for row in service.outbox.deliveries():
        event, _ = service.outbox.event(row.event_id)
        if event.type == "data_gap" and event.site_id == "zz-vale":
            out.add((row.subscriber, row.channel))
    return out


def test_a_follow_routes_later_alerts_to_the_bot_channel(scene: Scene):
    service = scene.service()
    cycle(scene, service, utc(2026, 11, 20, 22, 30))
    assert service.outbox.deliveries() == []
    at = utc(2026, 11, 20, 22, 40)
    assert "from watch level up" in say(service, "guest-cy", "follow vale", at)
    assert "from warning level up" in say(service, "op-ash", "follow vale from warning", at)
    assert say(service, "walk-in-dee", "join VALE-7", at).startswith("Welcome.")

    cycle(scene, service, utc(2026, 11, 20, 23, 0))  # fog warning raised at the valley
    cycle(scene, service, utc(2026, 11, 20, 23, 30))  # icing watch raised
    guest = bot_subscriber_id("guest-cy", "zz-vale")
    op = bot_subscriber_id("op-ash", "zz-vale")
    walk_in = bot_subscriber_id("walk-in-dee", "zz-vale")
    got = received(service)
    for who in (guest, op, walk_in):
        assert (who, "botline", "raised", "fog", "sent") in got
    # watch-level news only for those who follow from watch
    assert (guest, "botline", "raised", "icing", "sent") in got
    assert (walk_in, "botline", "raised", "icing", "sent") in got
    assert not any(r[0] == op and r[3] == "icing" for r in got)
    # the configured subscribers still get theirs on their own channel
    assert ("desk", "duty", "raised", "fog", "sent") in got

    text = scene.out("bot.txt")
    assert text.count("Fog warning · Lower Vale Orchard") == 3
    assert "not an official" in text

    # after unfollowing, later news of the site does not go to that sender. The fog was
    # seen when its warning was raised, so no reminder comes (its next news is its change
    # or its end); the later news here is the logger falling silent after 23:30: noticed
    # at 05:30 under the fog warning, it is sent when its grace ends (alerts.gap_grace,
    # 45 min), at the 06:20 cycle
    assert say(service, "guest-cy", "unfollow vale", utc(2026, 11, 21, 0, 0)).startswith(
        "You no longer"
    )
    service.cycle(utc(2026, 11, 21, 5, 30))  # no readings fed: stale, the gap held
    assert vale_gap_news(service) == set()
    service.cycle(utc(2026, 11, 21, 6, 20))
    gaps = {sub for sub, _ in vale_gap_news(service)}
    assert walk_in in gaps and "desk" in gaps
    assert guest not in gaps
    assert not any(r[2] == "reminder" for r in received(service))


def test_a_hush_holds_a_senders_alerts_until_it_expires(scene: Scene):
    service = scene.service()
    cycle(scene, service, utc(2026, 11, 20, 22, 30))
    reply = say(service, "crew-bo", "hush vale for 2h", utc(2026, 11, 20, 22, 50))
    assert "until 00:50 GMT (21 Nov)" in reply
    assert "from watch level up" in say(
        service, "guest-cy", "follow vale", utc(2026, 11, 20, 22, 50)
    )
    # guest-cy follows and also hushes: their bot subscription is muted too
    say(service, "guest-cy", "hush vale for 2h", utc(2026, 11, 20, 22, 50))
    guest = bot_subscriber_id("guest-cy", "zz-vale")

    for at in (utc(2026, 11, 20, 23, 0), utc(2026, 11, 20, 23, 30), utc(2026, 11, 21, 0, 30)):
        cycle(scene, service, at)
    got = received(service)
    assert ("desk", "duty", "raised", "fog", "sent") in got  # others are told
    assert ("desk", "duty", "raised", "icing", "sent") in got
    assert not any(r[0] in ("crew", guest) for r in got)  # the hushed are not

    # the hush ended at 00:50; later news reaches them again: the valley's logger silent
    # after 00:30, a gap noticed at 05:30 under the fog warning and sent when its grace
    # ends (alerts.gap_grace, 45 min), at 06:20 (the fog was seen at its raise: no
    # reminder)
    service.cycle(utc(2026, 11, 21, 5, 30))
    service.cycle(utc(2026, 11, 21, 6, 20))
    assert {("crew", "duty"), (guest, "botline")} <= vale_gap_news(service)


def test_a_hush_for_everyone_and_its_early_lifting(scene: Scene):
    service = scene.service()
    cycle(scene, service, utc(2026, 11, 20, 22, 30))
    assert "for everyone" in say(
        service, "op-ash", "hush vale for 1h for everyone", utc(2026, 11, 20, 22, 50)
    )
    cycle(scene, service, utc(2026, 11, 20, 23, 0))
    assert service.outbox.deliveries() == []  # no one: fog warning raised under the hush
    say(service, "op-ash", "unhush vale for everyone", utc(2026, 11, 20, 23, 10))
    cycle(scene, service, utc(2026, 11, 20, 23, 30))  # icing watch raised, hush lifted
    got = received(service)
    assert ("desk", "duty", "raised", "icing", "sent") in got
    assert ("crew", "duty", "raised", "icing", "sent") in got
    assert not any(r[3] == "fog" for r in got)


def test_follows_and_mutes_outlive_the_process(scene: Scene):
    first = scene.service()
    at = utc(2026, 11, 20, 22, 40)
    say(first, "guest-cy", "follow quay from warning", at)
    say(first, "crew-bo", "hush vale for 3h", at)
    first.close()
    second = scene.service()
    assert second.bot_state.follows() == [("guest-cy", "zz-quay", "warning")]
    subs = {s.id: s for s in second.subscribers()}
    follower = subs[bot_subscriber_id("guest-cy", "zz-quay")]
    assert (follower.channel, follower.address, follower.sites, follower.min_level) == (
        "botline",
        "guest-cy",
        ("zz-quay",),
        "warning",
    )
    assert ("crew", "zz-vale", at + timedelta(hours=3)) in second.mutes(at)


def test_what_was_queued_before_a_hush_or_an_unfollow_is_cancelled(scene: Scene, capsys):
    from notifier.cli import main as cli

    service = scene.service()
    cycle(scene, service, utc(2026, 11, 20, 22, 30))
    say(service, "guest-cy", "follow vale", utc(2026, 11, 20, 22, 40))
    # the fog warning is queued (assessed, not yet sent): then crew hushes, guest leaves
    at = utc(2026, 11, 20, 23, 0)
    scene.feed(at)
    service.poll_and_assess(at)
    guest = bot_subscriber_id("guest-cy", "zz-vale")
    queued = {(r.subscriber, r.status) for r in service.outbox.deliveries()}
    assert {("crew", "pending"), ("desk", "pending"), (guest, "pending")} <= queued
    say(service, "crew-bo", "hush vale for 2h", at)
    say(service, "guest-cy", "unfollow vale", at)
    report = service.deliver(at + timedelta(seconds=30))
    rows = {r.subscriber: r for r in service.outbox.deliveries()}
    assert rows["desk"].status == "sent"  # the others are told
    assert (rows["crew"].status, rows["crew"].last_error) == (
        "cancelled",
        "cancelled: zz-vale hushed",
    )
    assert (rows[guest].status, rows[guest].last_error) == (
        "cancelled",
        "cancelled: no longer subscribed",
    )
    assert report.cancelled == 2 and report.sent == sum(r.status == "sent" for r in rows.values())
    capsys.readouterr()
    assert cli.main(["status", str(service.config_path)]) == 0
    out = capsys.readouterr().out
    assert "2 cancelled" in out and "cancelled: crew via duty: cancelled: zz-vale hushed" in out
