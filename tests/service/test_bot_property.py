"""A property of the bot over a real file-backed service: whatever a sender who is not an
operator says — any sender id, any run of join, follow, unfollow, hush and unhush — the
deliveries of every subscriber they do not speak for stay as they were, as routing
(``notifier.delivery.routing.route``) computes them from the stored follows and hushes.
Issue 16: a sender called ``*`` once hushed a site for everyone."""

from __future__ import annotations

from datetime import timedelta

import sqlalchemy as sa
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from notifier.bot.grammar import handle
from notifier.delivery.routing import route
from notifier.service.access import bot_subscriber_id
from notifier.service.botbackend import ServiceBackend
from notifier.service.cycle import Service
from notifier.storage.migrations import follows, member_grants, members, mutes
from tests.delivery.scenes import event
from tests.service.scene import FOG_FROM, Scene

AT = FOG_FROM + timedelta(minutes=10)
OPERATORS = {"op-ash"}

# the scene's senders (operator, a subscriber's, allow-list), strangers, names that look
# like subscriber ids or wildcards, and short random strings with hostile characters
SENDERS = st.one_of(
    st.sampled_from(
        ["op-ash", "crew-bo", "guest-cy", "walk-in-dee", "@ana:example.org", "desk", "crew"]
    ),
    st.sampled_from(["*", "", " ", "op-ash\n"]),
    st.text(alphabet="ab*@:. \n-", max_size=5),
)
SITE = st.sampled_from(["zz-vale", "zz-quay", "vale", "quay", "o", "*", "all", "tag:harbour"])
EVERYONE = st.sampled_from(["", " for everyone"])
COMMANDS = st.one_of(
    st.sampled_from(["join VALE-7", "join HARBOUR-2", "join ALL-9", "join NOPE-1"]),
    st.builds("follow {}{}".format, SITE, st.sampled_from(["", " from warning"])),
    st.builds("unfollow {}".format, SITE),
    st.builds(
        "hush {} for {}{}".format,
        SITE,
        st.sampled_from(["2h", "30min", "14d", "2h", "15d", "99999999999999999999h"]),
        EVERYONE,
    ),
    st.builds("unhush {}{}".format, SITE, EVERYONE),
)


@st.composite
def conversations(draw: st.DrawFn) -> list[tuple[str, str]]:
    """A few senders (so that one sender's join, follow and hush meet), then their turns."""
    pool = draw(st.lists(SENDERS, min_size=1, max_size=3, unique=True))
    return draw(st.lists(st.tuples(st.sampled_from(pool), COMMANDS), min_size=1, max_size=8))


# news of both sites, just after the commands: a fog warning and an icing watch each
EVENTS = [
    event("raised", level, site_id=site, hazard=hazard, at=AT + timedelta(minutes=1))
    for site in ("zz-vale", "zz-quay")
    for hazard, level in (("fog", "warning"), ("icing", "watch"))
]


def with_codes(scene: Scene) -> None:
    """The quay tagged "harbour", and join codes for the tag and for all sites."""
    text = scene.config_path.read_text(encoding="utf-8")
    text = text.replace("    use: port\n", "    use: port\n    tags: [harbour]\n")
    text = text.replace(
        "    VALE-7: zz-vale\n", "    VALE-7: zz-vale\n    HARBOUR-2: tag:harbour\n    ALL-9: all\n"
    )
    scene.config_path.write_text(text, encoding="utf-8")


def deliveries(service: Service) -> set[tuple[str, str]]:
    """(subscriber, event) of everything routing would deliver now."""
    subs = service.subscribers()
    found = route(EVENTS, subs, service.config, service.mutes(AT))
    return {(d.subscriber_id, d.event_id) for d in found}


def theirs(service: Service, sender: str) -> set[str]:
    """The subscribers ``sender`` speaks for: configured ones and their own follows."""
    own = {sub.id for sub in service.config.subscribers if sender in sub.senders}
    return own | {bot_subscriber_id(sender, s.id) for s in service.config.sites}


def forget_the_bot(service: Service) -> None:
    with service.store.atomic() as conn:
        for table in (mutes, follows, member_grants, members):
            conn.execute(sa.delete(table))


@settings(
    max_examples=200,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(steps=conversations())
@example(steps=[("*", "join VALE-7"), ("*", "hush vale for 2h")])  # issue 16, defect 1
def test_no_members_command_changes_anyone_elses_deliveries(scene: Scene, steps):
    if not scene.services:
        with_codes(scene)
    service = scene.services[0] if scene.services else scene.service()
    forget_the_bot(service)
    backend = ServiceBackend(service, AT)
    for sender, text in steps:
        before = deliveries(service)
        handle(backend, sender, text, AT)
        after = deliveries(service)
        if sender in OPERATORS:
            continue
        mine = theirs(service, sender)
        assert {d for d in before if d[0] not in mine} == {d for d in after if d[0] not in mine}, (
            sender,
            text,
        )
    # no one but an operator ever made a hush for everyone
    assert all(h.who in OPERATORS for h in service.bot_state.mutes(AT) if h.everyone)


def test_the_property_can_fail_an_operator_does_change_others_deliveries(scene: Scene):
    """The check above is not vacuous: the same comparison sees an operator's hush."""
    with_codes(scene)
    service = scene.service()
    backend = ServiceBackend(service, AT)
    handle(backend, "crew-bo", "follow zz-quay", AT)
    before = deliveries(service)
    assert handle(backend, "op-ash", "hush quay for 2h for everyone", AT).startswith("North Quay")
    after = deliveries(service)
    others = theirs(service, "op-ash")
    changed = {d for d in before if d[0] not in others} - after
    assert {d[0] for d in changed} == {bot_subscriber_id("crew-bo", "zz-quay")}
