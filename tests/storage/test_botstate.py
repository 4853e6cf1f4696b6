"""The bot's members, follows and mutes on the store (SQLite and PostgreSQL)."""

from datetime import UTC, datetime, timedelta

import pytest

from notifier.storage import botstate as botstate_module
from notifier.storage.botstate import BotState, Hush

T0 = datetime(2026, 1, 10, 20, 0, tzinfo=UTC)


@pytest.fixture
def bot(any_store):
    return BotState(any_store)  # SQLite and PostgreSQL (tests/conftest.py)


def test_public_names():
    assert botstate_module.__all__ == ["BotState", "Hush"]


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
    bot.mute("op-lee", "north-field", T0 + timedelta(minutes=30), T0, everyone=True)
    half_hour = T0 + timedelta(minutes=30)
    assert bot.mutes(T0) == [
        Hush("harbour-ops", "quay-two", until, everyone=False),
        Hush("op-lee", "north-field", half_hour, everyone=True),
    ]
    assert bot.mutes(T0 + timedelta(hours=1)) == [Hush("harbour-ops", "quay-two", until)]
    assert bot.unmute("op-lee", "north-field", T0 + timedelta(hours=1), everyone=True) is False
    assert bot.unmute("harbour-ops", "quay-two", T0) is True
    assert bot.mutes(T0) == [Hush("op-lee", "north-field", half_hour, everyone=True)]


def test_a_hush_for_everyone_is_a_flag_apart_from_the_senders_own(bot):
    """Regression (issue 16, defect 1): "for everyone" was the sender id "*", so a sender
    called "*" made everyone's hush with a plain one and lifted an operator's with a
    plain unhush. Now a sender's own hush and one for everyone never meet."""
    later = T0 + timedelta(hours=3)
    bot.mute("op-lee", "quay-two", later, T0, everyone=True)
    bot.mute("*", "quay-two", T0 + timedelta(hours=1), T0)  # a sender's own, whatever its id
    bot.mute("op-lee", "quay-two", T0 + timedelta(hours=2), T0)  # the operator's own, too
    assert [(h.who, h.everyone) for h in bot.mutes(T0)] == [
        ("*", False),
        ("op-lee", False),
        ("op-lee", True),
    ]
    assert bot.unmute("*", "quay-two", T0) is True  # lifts only its own
    assert bot.unmute("op-lee", "quay-two", T0) is True
    assert bot.mutes(T0) == [Hush("op-lee", "quay-two", later, everyone=True)]
    # any operator lifts a hush for everyone, whoever set it
    assert bot.unmute("op-kit", "quay-two", T0, everyone=True) is True
    assert bot.mutes(T0) == []


def test_grants_accumulate_and_are_kept_once(bot):
    assert bot.grants() == {}
    bot.grant("@ana:example.org", "quay-two", T0)
    bot.grant("@ana:example.org", "tag:harbour", T0)
    bot.grant("@ana:example.org", "quay-two", T0 + timedelta(days=1))  # already held
    bot.grant("+440000001", "all", T0)
    assert bot.grants() == {
        "+440000001": ("all",),
        "@ana:example.org": ("quay-two", "tag:harbour"),
    }


@pytest.fixture(params=["sqlite", "postgresql"])
def store_url(request: pytest.FixtureRequest, tmp_path) -> str:
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'fw.sqlite'}"
    return request.getfixturevalue("postgres").new_database()


def test_old_stores_migrate_star_hushes_to_everyone_and_codes_to_grants(store_url, monkeypatch):
    """A store written before migrations 0006 and 0007: its hush by "*" becomes one for
    everyone, a sender's own stays theirs, and each member keeps the site their code
    named (recorded then as "code for SITE")."""
    from notifier.storage import store as store_module
    from notifier.storage.migrations import MIGRATIONS
    from notifier.storage.store import Store

    monkeypatch.setattr(store_module, "MIGRATIONS", MIGRATIONS[:5])
    with Store(store_url) as old, old.atomic() as conn:
        for ddl in (
            "INSERT INTO mutes (who, site, until, created_at) VALUES "
            "('*', 'quay-two', '2026-01-10T23:00:00Z', '2026-01-10T20:00:00Z'), "
            "('crew-bo', 'north-field', '2026-01-10T22:00:00Z', '2026-01-10T20:00:00Z')",
            "INSERT INTO members (sender, joined_at, via) VALUES "
            "('walk-in-dee', '2026-01-09T08:00:00Z', 'code for north-field'), "
            "('+440000001', '2026-01-09T08:00:00Z', NULL)",
        ):
            conn.exec_driver_sql(ddl)
    monkeypatch.setattr(store_module, "MIGRATIONS", MIGRATIONS)
    with Store(store_url) as db:
        assert db.applied_migrations()[5:7] == ["0006_mutes_for_everyone", "0007_member_grants"]
        bot = BotState(db)
        assert bot.mutes(T0) == [
            Hush("crew-bo", "north-field", datetime(2026, 1, 10, 22, 0, tzinfo=UTC)),
            Hush("", "quay-two", datetime(2026, 1, 10, 23, 0, tzinfo=UTC), everyone=True),
        ]
        assert bot.grants() == {"walk-in-dee": ("north-field",)}
        assert bot.is_member("+440000001")  # still known, granted nothing
        # and the new key takes a sender's own hush beside one for everyone
        bot.mute("op-lee", "quay-two", T0 + timedelta(hours=1), T0)
        assert len(bot.mutes(T0)) == 3
