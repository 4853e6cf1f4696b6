"""The Matrix connection's place in the store (migration 0010_matrix_sync): the sync
token, the events answered, and the state ``fogwatch status`` shows. Runs on SQLite and
PostgreSQL. Every id is invented."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from notifier.storage.matrixstate import KEEP_EVENTS_S, MatrixState
from notifier.storage.store import Store

T0 = datetime(2026, 11, 20, 22, 0, tzinfo=UTC)
BOT = "@fogbot:example.test"


def test_the_sync_token_and_state_survive_a_new_handle(tmp_path):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"
    with Store(url) as store:
        state = MatrixState(store, BOT)
        assert state.next_batch() is None and state.status() is None
        state.set_state("starting", T0)
        state.synced("s72594_4483_1934", T0 + timedelta(seconds=5))
    with Store(url) as store:  # a restart
        again = MatrixState(store, BOT)
        assert again.next_batch() == "s72594_4483_1934"
        shown = again.status()
        assert shown is not None and "next_batch" not in shown  # nothing for a person
        assert shown["state"] == "connected"
        assert shown["last_sync_at"] == "2026-11-20T22:00:05Z"
        assert MatrixState(store, "@other:example.test").next_batch() is None


def test_an_error_is_kept_until_the_next_one_and_the_state_follows(any_store):
    state = MatrixState(any_store, BOT)
    state.set_state("token refused", T0, "homeserver error: M_UNKNOWN_TOKEN")
    state.set_state("stopped", T0 + timedelta(minutes=1))
    shown = state.status()
    assert shown is not None
    assert shown["state"] == "stopped"
    assert shown["last_error"] == "homeserver error: M_UNKNOWN_TOKEN"
    assert shown["last_error_at"] == "2026-11-20T22:00:00Z"
    assert shown["updated_at"] == "2026-11-20T22:01:00Z"


def test_an_event_is_answered_once_and_old_ids_are_let_go(any_store):
    state = MatrixState(any_store, BOT)
    now_s = T0.timestamp()
    assert not state.handled("$ev-a")
    assert state.mark_handled("$ev-a", "!room-1", now_s)
    assert state.handled("$ev-a")
    assert not state.mark_handled("$ev-a", "!room-1", now_s + 1)  # a second instance loses
    later = now_s + KEEP_EVENTS_S + 1
    assert state.mark_handled("$ev-b", "!room-1", later)
    assert not state.handled("$ev-a")  # past the keeping time
    assert state.handled("$ev-b")
