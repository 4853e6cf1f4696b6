"""The alert states kept in memory between cycles (notifier/storage/states.py).

The oracle is the store itself: after every commit, what an outbox hands out from
memory must equal what a read of the table by a fresh ``Outbox`` gives back. A write
by anyone else (another ``Outbox`` on the same store: another instance, another
process) must send the next read back to the store.
"""

from __future__ import annotations

import random
from datetime import timedelta

import pytest

from notifier.storage import states as states_module
from notifier.storage.outbox import Outbox
from tests.delivery.scenes import utc
from tests.storage.test_outbox import state

T0 = utc(2026, 1, 10, 20, 0)
SITES = [f"site-{k}" for k in range(12)]


def test_public_names():
    assert states_module.__all__ == ["AlertStates"]


def _random_states(rng: random.Random, at) -> dict:
    out = {}
    for site in rng.sample(SITES, rng.randint(0, len(SITES))):
        for hazard in rng.sample(["fog", "icing"], rng.randint(1, 2)):
            level = rng.choice(["watch", "warning"])
            # microseconds too: what is kept is what a read gives back, not the object
            out[(site, hazard)] = state((site, hazard), level, at)
    return out


def test_states_from_memory_equal_the_table_after_every_commit(any_store):
    rng = random.Random(19)
    box = Outbox(any_store)
    previous = box.states()
    assert previous == {} and not box.alert_states.last_from_memory
    for k in range(25):
        at = T0 + timedelta(minutes=10 * k, microseconds=rng.randint(0, 999_999))
        new = _random_states(rng, at)
        # some states carried over unchanged (not written again)
        new.update({key: s for key, s in previous.items() if rng.random() < 0.3})
        box.commit_cycle(previous, new, [], [], at)
        previous = box.states()
        assert box.alert_states.last_from_memory
        assert previous == Outbox(any_store).states()  # the table, read afresh


def test_a_write_by_another_outbox_sends_the_next_read_to_the_store(any_store):
    mine, other = Outbox(any_store), Outbox(any_store)
    a, b = ("site-1", "fog"), ("site-2", "fog")
    mine.commit_cycle(mine.states(), {a: state(a)}, [], [], T0)
    assert mine.states() == {a: state(a)} and mine.alert_states.last_from_memory
    other.commit_cycle(other.states(), {a: state(a), b: state(b, "warning")}, [], [], T0)
    got = mine.states()
    assert not mine.alert_states.last_from_memory
    assert got == {a: state(a), b: state(b, "warning")}
    # and this outbox's next write, on top of the other's, is followed in memory again
    mine.commit_cycle(got, {b: state(b, "warning")}, [], [], T0 + timedelta(minutes=10))
    assert mine.states() == {b: state(b, "warning")} == Outbox(any_store).states()
    assert mine.alert_states.last_from_memory


def test_a_failed_commit_leaves_nothing_in_memory(any_store):
    box = Outbox(any_store)
    a = ("site-1", "fog")
    box.commit_cycle(box.states(), {a: state(a)}, [], [], T0)
    box.states()
    with pytest.raises(TypeError):  # a snapshot that is no JSON: the transaction rolls back
        box.commit_cycle(
            {a: state(a)}, {}, [], [], T0, snapshots={"site-1": ("none", {"x": object()})}
        )
    assert box.states() == {a: state(a)} == Outbox(any_store).states()
    assert not box.alert_states.last_from_memory


def test_the_caller_may_change_what_it_is_handed(any_store):
    box = Outbox(any_store)
    a = ("site-1", "fog")
    box.commit_cycle({}, {a: state(a)}, [], [], T0)
    box.states().clear()
    assert box.states() == {a: state(a)}


def test_what_is_kept_is_what_a_read_gives_back_to_the_letter(any_store):
    # a state kept as it was handed must read back identically: times in another zone
    # (equal instants, another tzinfo), lists for tuples and an empty peak are parsed
    # back from the JSON written, as a read would give them
    from dataclasses import replace
    from datetime import timezone

    box = Outbox(any_store)
    a, b, c, d = (("site-1", "fog"), ("site-2", "fog"), ("site-3", "icing"), ("site-4", "fog"))
    elsewhere = (T0 + timedelta(microseconds=7)).astimezone(timezone(timedelta(hours=2)))
    new = {
        a: state(a, "warning", T0 + timedelta(microseconds=7)),
        b: state(b, "warning", elsewhere),
        c: replace(state(c), reasons=["dew-point depression 0.8 °C ≤ 1 °C"]),  # type: ignore[arg-type]
        d: replace(state(d), peak=""),
    }
    box.commit_cycle(box.states(), new, [], [], T0)
    kept, read = box.states(), Outbox(any_store).states()
    assert box.alert_states.last_from_memory
    assert repr(sorted(kept.items())) == repr(sorted(read.items()))
    assert kept[a] is new[a]  # in UTC with tuples: kept as it is, not parsed again
