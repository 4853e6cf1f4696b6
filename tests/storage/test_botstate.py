"""The bot's members, follows and mutes on the store (SQLite and PostgreSQL)."""

from datetime import UTC, datetime, timedelta

import pytest

from notifier.storage import botstate as botstate_module
from notifier.storage.botstate import BotState

T0 = datetime(2026, 1, 10, 20, 0, tzinfo=UTC)


@pytest.fixture
def bot(any_store):
    return BotState(any_store)  # SQLite and PostgreSQL (tests/conftest.py)


def test_public_names():
    assert botstate_module.__all__ == ["BotState"]


def test_members_follows_and_mutes_round_trip(bot):
    assert not bot.is_member("+440000001")
    bot.add_member("+440000001", T0, "code")
    bot.add_member("+440000001", T0 + timedelta(days=1), "again")  # first join kept
    assert bot.is_member("+440000001")

    bot.follow("+440000001", "quay-two", "watch", T0)
    bot.follow("+440000001", "north-field", "warning", T0)
    bot.follow("+440000002", "quay-two", "warning", T0)
    bot.follow("+440000001", "quay-two", "warning", T0)  # changes the level
    assert bot.follows() == [
        ("+440000001", "north-field", "warning"),
        ("+440000001", "quay-two", "warning"),
        ("+440000002", "quay-two", "warning"),
    ]
    assert bot.follows("+440000002") == [("+440000002", "quay-two", "warning")]
    assert bot.unfollow("+440000002", "quay-two") is True
    assert bot.unfollow("+440000002", "quay-two") is False

    until = T0 + timedelta(hours=2)
    bot.mute("harbour-ops", "quay-two", T0 + timedelta(hours=1), T0)
    bot.mute("harbour-ops", "quay-two", until, T0)  # extends
    bot.mute("*", "north-field", T0 + timedelta(minutes=30), T0)
    half_hour = T0 + timedelta(minutes=30)
    assert sorted(bot.mutes(T0)) == [
        ("*", "north-field", half_hour),
        ("harbour-ops", "quay-two", until),
    ]
    assert bot.mutes(T0 + timedelta(hours=1)) == [("harbour-ops", "quay-two", until)]
    assert bot.unmute("*", "north-field", T0 + timedelta(hours=1)) is False  # already over
    assert bot.unmute("harbour-ops", "quay-two", T0) is True
    assert bot.mutes(T0) == [("*", "north-field", T0 + timedelta(minutes=30))]
