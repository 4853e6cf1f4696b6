"""Replay protection in the store (issue 16, defect 4): the message ids the bot endpoint
took, kept for the Standard Webhooks timestamp window (5 minutes) and shared by every
instance on the store. Runs on SQLite and PostgreSQL."""

from __future__ import annotations

from notifier.storage.seen import SeenMessages
from notifier.storage.store import Store

T0 = 1_795_000_000


def test_an_id_is_taken_once_while_its_window_lasts(any_store):
    seen = SeenMessages(any_store)
    assert seen.first_time("msg-a", T0, T0)
    assert not seen.first_time("msg-a", T0, T0 + 1)
    assert not seen.first_time("msg-a", T0, T0 + 300)  # the last second a replay could pass
    assert seen.first_time("msg-b", T0, T0 + 1)
    assert seen.count() == 2


def test_ids_past_their_window_are_deleted(any_store):
    seen = SeenMessages(any_store)
    for n in range(5):
        assert seen.first_time(f"msg-{n}", T0, T0)
    # a timestamp 5 minutes ahead keeps its id until 5 minutes after that timestamp
    assert seen.first_time("msg-ahead", T0 + 300, T0)
    later = T0 + 300 + 61  # the window and the clocks' margin have passed for msg-0..4
    assert seen.first_time("msg-new", later, later)
    assert seen.count() == 2
    assert not seen.first_time("msg-ahead", T0 + 300, later)


def test_two_handles_on_one_file_share_the_ids(tmp_path):
    url = f"sqlite:///{tmp_path / 'shared.sqlite'}"
    with Store(url) as one, Store(url) as two:
        assert SeenMessages(one).first_time("msg-shared", T0, T0)
        assert not SeenMessages(two).first_time("msg-shared", T0, T0 + 5)
