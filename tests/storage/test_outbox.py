"""The outbox on the store: one transaction per cycle, idempotent keys, due, expire, trim,
the bot's tables, and everything kept across a reopen of a file-backed store."""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path

import pytest
import sqlalchemy as sa

from notifier.engine.alerts import AlertState
from notifier.storage import deliveries as deliveries_module
from notifier.storage import outbox as outbox_module
from notifier.storage.botstate import BotState
from notifier.storage.deliveries import Delivery
from notifier.storage.migrations import deliveries, events
from notifier.storage.outbox import Outbox
from notifier.storage.store import Store
from tests.delivery.scenes import event, utc

T0 = utc(2026, 1, 10, 20, 0)
QUAY = ("quay-two", "fog")
FIELD = ("north-field", "fog")


@pytest.fixture
def box(any_store):
    return Outbox(any_store)  # SQLite and PostgreSQL (tests/conftest.py)


def state(key=QUAY, level="watch", at=T0) -> AlertState:
    return AlertState(
        site_id=key[0],
        hazard=key[1],
        level=level,
        since=at,
        episode_start=at,
        last_event_at=at,
        last_raised=((level, at),),
        rules=(f"radiation-fog-{level}",),
        reasons=("dew-point depression 0.8 °C ≤ 1 °C",),
    )


def deliveries_for(ev, *subscribers: str, channel: str = "mail", **kw) -> list[Delivery]:
    return [Delivery(ev.id, s, channel, f"{s}@example.test", **kw) for s in subscribers]


def counts(box: Outbox) -> tuple[int, int, int]:
    """(states, events, deliveries) rows in the database."""
    with box.engine.connect() as conn:
        n_events = conn.execute(sa.select(sa.func.count()).select_from(events)).scalar_one()
        n_deliv = conn.execute(sa.select(sa.func.count()).select_from(deliveries)).scalar_one()
    return len(box.states()), n_events, n_deliv


def test_public_names():
    assert set(outbox_module.__all__) == {"CLAIM_LEASE", "Outbox"}
    assert set(deliveries_module.__all__) == {"Delivery", "DeliveryRow", "delivery_key"}


def test_commit_cycle_writes_states_events_and_deliveries_together(box):
    ev = event(at=T0)
    new = {QUAY: state()}
    added = box.commit_cycle(
        {},
        new,
        [ev],
        deliveries_for(ev, "harbour-ops", "duty-lead"),
        T0,
        charts={ev.id: b"png"},
        snapshots={"quay-two": ("watch", {"level": "watch"})},
    )
    assert added == 2
    assert box.states() == new
    back, chart = box.event(ev.id)
    assert back == ev and chart == b"png"
    rows = box.deliveries()
    assert {r.subscriber for r in rows} == {"harbour-ops", "duty-lead"}
    assert all(r.status == "pending" and r.attempts == 0 for r in rows)
    assert all(r.next_attempt_at == T0 and r.created_at == T0 for r in rows)
    assert {r.key for r in rows} == {d.key for d in deliveries_for(ev, "harbour-ops", "duty-lead")}
    assert rows[0].as_delivery() in deliveries_for(ev, "harbour-ops", "duty-lead")
    when, level, payload = box.snapshots()["quay-two"]
    assert (when, level, payload) == (T0, "watch", {"level": "watch"})


@pytest.mark.parametrize("failing", ["events", "deliveries", "site_status"])
def test_a_failure_mid_commit_leaves_nothing(box, monkeypatch, failing):
    old = {QUAY: state()}
    box.commit_cycle({}, old, [], [], T0)
    ev = event("escalated", "warning", "watch", at=T0 + timedelta(hours=1))
    new = {QUAY: state(level="warning", at=ev.time), FIELD: state(FIELD)}
    real_insert = box.store._insert

    def insert(table):
        if table.name == failing:
            raise RuntimeError(f"disk trouble writing {table.name}")
        return real_insert(table)

    monkeypatch.setattr(box.store, "_insert", insert)
    with pytest.raises(RuntimeError, match="disk trouble"):
        box.commit_cycle(
            old,
            new,
            [ev],
            deliveries_for(ev, "harbour-ops"),
            ev.time,
            snapshots={"quay-two": ("warning", {})},
        )
    monkeypatch.undo()
    # the state is as before, and no event, delivery or snapshot of the failed cycle
    assert box.states() == old
    assert counts(box) == (1, 0, 0)
    assert box.snapshots() == {}
    with pytest.raises(KeyError):
        box.event(ev.id)


def test_recommitting_the_same_cycle_adds_nothing(box):
    ev = event(at=T0)
    rows = deliveries_for(ev, "harbour-ops", "duty-lead")
    new = {QUAY: state()}
    assert box.commit_cycle({}, new, [ev], rows, T0) == 2
    box.mark([rows[0].key], "sent", T0 + timedelta(minutes=1))
    # the same events and deliveries again, later (a re-run cycle, or a crash and replay)
    later = T0 + timedelta(minutes=5)
    assert box.commit_cycle(box.states(), new, [ev], rows, later) == 0
    assert counts(box) == (1, 1, 2)
    by_key = {r.key: r for r in box.deliveries()}
    assert by_key[rows[0].key].status == "sent"  # not reset to pending
    assert by_key[rows[1].key].created_at == T0  # not re-dated
    assert box.event(ev.id)[0] == ev


def test_pruned_states_are_deleted(box):
    both = {QUAY: state(), FIELD: state(FIELD)}
    box.commit_cycle({}, both, [], [], T0)
    box.commit_cycle(both, {QUAY: both[QUAY]}, [], [], T0 + timedelta(hours=2))
    assert box.states() == {QUAY: both[QUAY]}


def test_due_respects_retry_time_quiet_hold_and_status(box):
    ev = event(at=T0)
    morning = T0 + timedelta(hours=10)
    rows = [
        *deliveries_for(ev, "now-a", "now-b", "retrying", "sent-one"),
        *deliveries_for(ev, "held", not_before=morning, summary=True),
    ]
    box.commit_cycle({}, {}, [ev], rows, T0)
    key = {r.subscriber_id: r.key for r in rows}
    box.mark(
        [key["retrying"]], "pending", T0, error="451", next_attempt_at=T0 + timedelta(minutes=1)
    )
    box.mark([key["sent-one"]], "sent", T0)

    def due(at):
        return sorted(r.subscriber for r in box.due(at))

    assert due(T0 - timedelta(seconds=1)) == []
    assert due(T0) == ["now-a", "now-b"]
    assert due(T0 + timedelta(seconds=59)) == ["now-a", "now-b"]
    assert due(T0 + timedelta(minutes=1)) == ["now-a", "now-b", "retrying"]
    assert due(morning - timedelta(seconds=1)) == ["now-a", "now-b", "retrying"]
    assert due(morning) == ["held", "now-a", "now-b", "retrying"]
    (held,) = [r for r in box.due(morning) if r.subscriber == "held"]
    assert held.summary and held.not_before == morning
    assert len(box.due(morning, limit=2)) == 2


def test_mark_counts_attempts_and_records_errors(box):
    ev = event(at=T0)
    (row,) = deliveries_for(ev, "harbour-ops")
    box.commit_cycle({}, {}, [ev], [row], T0)
    retry_at = T0 + timedelta(seconds=61)
    box.mark([row.key], "pending", T0, error="SMTP 451 busy", next_attempt_at=retry_at)
    (r,) = box.deliveries()
    assert (r.status, r.attempts, r.next_attempt_at, r.last_error) == (
        "pending",
        1,
        retry_at,
        "SMTP 451 busy",
    )
    box.mark([row.key], "sent", retry_at)
    (r,) = box.deliveries()
    assert (r.status, r.attempts, r.sent_at, r.last_error) == ("sent", 2, retry_at, None)
    assert box.backlog() == {"sent": 1}


def test_expire_gives_up_old_pending_deliveries_only(box):
    old, new = event(at=T0), event(at=T0 + timedelta(hours=13))
    box.commit_cycle({}, {}, [old], deliveries_for(old, "a", "b"), T0)
    box.commit_cycle({}, {}, [new], deliveries_for(new, "a"), new.time)
    sent = deliveries_for(old, "b")[0].key
    box.mark([sent], "sent", T0)
    now = T0 + timedelta(hours=13)
    keys = box.expire(now - timedelta(hours=12), now, "gave up: still undelivered after 12 h")
    assert keys == [deliveries_for(old, "a")[0].key]
    assert box.backlog() == {"expired": 1, "pending": 1, "sent": 1}
    (gone,) = box.deliveries(["expired"])
    assert gone.last_error == "gave up: still undelivered after 12 h"
    assert box.expire(now - timedelta(hours=12), now, "again") == []


def test_a_delivery_held_for_quiet_hours_ages_from_its_release(box):
    # Held news is late on purpose: its age counts from the end of the quiet window.
    ev = event(at=T0)
    release = T0 + timedelta(hours=13)
    box.commit_cycle(
        {}, {}, [ev], deliveries_for(ev, "night-desk", not_before=release, summary=True), T0
    )
    now = release + timedelta(minutes=1)
    assert box.expire(now - timedelta(hours=12), now, "gave up") == []
    later = release + timedelta(hours=12, minutes=1)
    assert len(box.expire(later - timedelta(hours=12), later, "gave up")) == 1


def test_trim_forgets_old_finished_rows_and_unreferenced_events(box):
    old, kept, new = (event(at=T0 + timedelta(minutes=m)) for m in (0, 1, 60 * 24 * 20))
    box.commit_cycle({}, {}, [old], deliveries_for(old, "a", "b"), T0)
    box.commit_cycle({}, {}, [kept], deliveries_for(kept, "a"), T0)
    box.commit_cycle({}, {}, [new], deliveries_for(new, "a"), new.time)
    box.mark([d.key for d in deliveries_for(old, "a", "b")], "sent", T0)
    box.mark([d.key for d in deliveries_for(new, "a")], "sent", new.time)
    assert box.trim(T0 + timedelta(days=14)) == 2
    assert {r.event_id for r in box.deliveries()} == {kept.id, new.id}
    with pytest.raises(KeyError):
        box.event(old.id)
    assert box.event(kept.id)[0] == kept  # still owed to someone
    assert box.event(new.id)[0] == new


def test_events_between(box):
    evs = [event(at=T0 + timedelta(hours=h)) for h in (0, 1, 2)]
    box.commit_cycle({}, {}, evs, [], T0)
    got = box.events_between(T0 + timedelta(minutes=30), T0 + timedelta(hours=2))
    assert [e.id for e in got] == [evs[1].id, evs[2].id]


def test_a_file_backed_store_keeps_everything_across_a_reopen(tmp_path: Path):
    url = f"sqlite:///{tmp_path / 'fogwatch.sqlite'}"
    ev = event(at=T0)
    rows = deliveries_for(ev, "harbour-ops", "duty-lead") + deliveries_for(
        ev, "night-desk", not_before=T0 + timedelta(hours=9), summary=True
    )
    new = {QUAY: state(), FIELD: state(FIELD, "warning")}
    with Store(url) as store:
        box, bot = Outbox(store), BotState(store)
        box.commit_cycle(
            {},
            new,
            [ev],
            rows,
            T0,
            charts={ev.id: b"\x89PNG"},
            snapshots={"quay-two": ("watch", {"n": 1})},
        )
        box.mark([rows[0].key], "sent", T0 + timedelta(seconds=5))
        bot.follow("+440000001", "quay-two", "watch", T0)
        bot.mute("harbour-ops", "*", T0 + timedelta(hours=3), T0)
        bot.add_member("+440000001", T0, None)
        before = (box.states(), box.deliveries(), box.snapshots(), bot.follows(), bot.mutes(T0))
    with Store(url) as store:
        assert store.applied_migrations() == [
            "0001_initial",
            "0002_alerts",
            "0003_observation_batches",
            "0004_postgresql_widths",
            "0005_delivery_claims",
            "0006_mutes_for_everyone",
            "0007_member_grants",
            "0008_seen_messages",
            "0009_ceiling_precip",
            "0010_matrix_sync",
            "0011_snapshot_facts",
        ]
        box, bot = Outbox(store), BotState(store)
        after = (box.states(), box.deliveries(), box.snapshots(), bot.follows(), bot.mutes(T0))
        assert after == before
        assert box.states() == new
        assert box.event(ev.id) == (ev, b"\x89PNG")
        assert bot.is_member("+440000001")
        assert [r.subscriber for r in box.due(T0 + timedelta(minutes=1))] == ["duty-lead"]


def test_a_claim_keeps_other_dispatchers_off_until_released_marked_or_lapsed(any_store):
    wall = [T0]  # claims run on the wall clock, here a hand-driven one
    box, other = (Outbox(any_store, wall_clock=lambda: wall[0]) for _ in range(2))
    ev = event(at=T0)
    box.commit_cycle({}, {QUAY: state()}, [ev], deliveries_for(ev, "harbour-ops", "duty-lead"), T0)
    mine, token = box.claim(T0)
    first, second = mine
    assert [r.subscriber for r in mine] == ["duty-lead", "harbour-ops"]
    assert other.claim(T0)[0] == [] and other.due(T0) == []
    # handed back unsent: the other dispatcher may take it at once
    box.release([first.key], token)
    theirs, their_token = other.claim(T0)
    assert [r.key for r in theirs] == [first.key] and their_token != token
    # an old token ends nobody else's claim
    box.release([first.key], token)
    assert box.claim(T0)[0] == []
    # marking a row ends its claim; a retry is due at its own time, claimed by nobody
    box.mark([second.key], "pending", T0, error="451 try later", next_attempt_at=T0)
    assert [r.key for r in other.claim(T0)[0]] == [second.key]
    # a claim is renewed by its holder; one never ended (its dispatcher died) lapses
    wall[0] = T0 + box.lease - timedelta(seconds=1)
    other.renew([second.key], "not-their-token")
    box.renew([first.key], token)  # not box's claim any more: nothing changes
    assert box.claim(T0)[0] == []
    wall[0] = T0 + box.lease
    assert sorted(r.key for r in box.claim(T0)[0]) == sorted([first.key, second.key])


def test_a_renewed_claim_outlasts_its_first_lease(any_store):
    wall = [T0]
    box, other = (Outbox(any_store, wall_clock=lambda: wall[0]) for _ in range(2))
    ev = event(at=T0)
    box.commit_cycle({}, {QUAY: state()}, [ev], deliveries_for(ev, "harbour-ops"), T0)
    (row,), token = box.claim(T0)
    wall[0] = T0 + box.lease / 2
    box.renew([row.key], token)
    wall[0] = T0 + box.lease + timedelta(seconds=1)  # the first lease is over
    assert other.claim(T0)[0] == []
    wall[0] = T0 + box.lease * 1.5  # the renewed one too
    assert [r.key for r in other.claim(T0)[0]] == [row.key]


def test_expiry_leaves_a_row_another_dispatcher_is_sending(any_store):
    wall = [T0]
    box = Outbox(any_store, wall_clock=lambda: wall[0])
    ev = event(at=T0)
    box.commit_cycle({}, {QUAY: state()}, [ev], deliveries_for(ev, "harbour-ops"), T0)
    (row,), _ = box.claim(T0)
    late = T0 + timedelta(days=1)
    assert box.expire(late, late, "too old") == []  # claimed: its sender records it
    wall[0] = T0 + box.lease  # the claim lapsed: nobody is sending it
    assert box.expire(late, late, "too old") == [row.key]
    assert [(r.status, r.last_error) for r in box.deliveries()] == [("expired", "too old")]


def test_a_cycle_of_thousands_is_written_whole_and_counted_once(box):
    # Written in batches (one executemany per table, sent as several multi-row
    # INSERTs): past SQLAlchemy's 1,000-row page the count of deliveries added must
    # still be the rows new to the table, keys already there and repeated ones not
    # counted (the idempotency key, common practice for outboxes).
    sites = [f"site-{i:04d}" for i in range(1500)]
    evs = [event(site_id=s, at=T0) for s in sites]
    states = {(s, "fog"): state((s, "fog")) for s in sites}
    first = [d for ev in evs[:700] for d in deliveries_for(ev, "harbour-ops")]
    assert box.commit_cycle({}, {}, evs[:700], first, T0) == 700
    rows = [d for ev in evs for d in deliveries_for(ev, "harbour-ops", "duty-lead")]
    rows += rows[:10]  # the same delivery twice in one cycle
    assert box.commit_cycle({}, states, evs, rows, T0) == 3000 - 700
    assert counts(box) == (1500, 1500, 3000)
    assert box.states() == states
    # states that end are deleted together, the others left as they were
    kept = {k: v for k, v in states.items() if k[0] < "site-1000"}
    box.commit_cycle(states, kept, [], [], T0)
    assert box.states() == kept
