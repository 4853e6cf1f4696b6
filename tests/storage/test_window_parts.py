"""A whole window read in two parts, the upper sites in a helper process
(notifier/storage/window_parts.py), against the same read in one piece.

The reference is ``Store.window`` on the same store: the parts joined must be the same
table, row for row, whichever part fails. The readings are invented.
"""

from __future__ import annotations

import logging
import sys
from datetime import timedelta
from typing import Any

import pandas as pd
import pytest

from notifier.storage import window_parts
from notifier.storage.store import Store
from notifier.storage.window import RollingWindow
from tests.storage.test_window import T0, as_objects, canonical, row

SITES = [f"zz-{name}" for name in ("wold", "vale", "quay", "moor", "fen", "holm", "dale")]


def _filled(url: str) -> Store:
    store = Store(url)
    rows = [
        row(site, minute, temp=1.0 + i + minute / 100.0, weather="BR" if minute % 40 else None)
        for i, site in enumerate(SITES)
        for minute in range(0, 240, 10)
    ]
    store.add_observations(canonical(rows))
    store.add_observations(canonical([row("zz-fen", 250, kind="forecast", temp=0.5)]))
    return store


def _read_whole(store: Store) -> pd.DataFrame:
    window = RollingWindow(store, SITES, back=timedelta(hours=5), ahead=timedelta(hours=3))
    return as_objects(window.frame(T0 + timedelta(hours=4)))


@pytest.fixture
def stores(tmp_path: Any, monkeypatch: pytest.MonkeyPatch) -> Any:
    monkeypatch.setattr(window_parts, "SPLIT_MIN_SITES", 2)
    with _filled(f"sqlite:///{tmp_path / 'w.sqlite'}") as store:
        yield store


def test_the_split_falls_between_the_sites_by_id(stores: Store) -> None:
    assert window_parts.split_point(stores, SITES) == sorted(SITES)[len(SITES) // 2]
    with Store.memory() as memory:  # another process cannot open it
        assert window_parts.split_point(memory, SITES) is None


def test_two_parts_give_the_one_piece_read(stores: Store, monkeypatch: pytest.MonkeyPatch) -> None:
    started = []
    original = window_parts._start_helper
    monkeypatch.setattr(window_parts, "_start_helper", lambda *a: started.append(a) or original(*a))
    split = _read_whole(stores)
    assert len(started) == 1, "the upper part was read by a helper"
    monkeypatch.setattr(window_parts, "SPLIT_MIN_SITES", 10**9)
    whole = _read_whole(stores)
    assert len(whole) == 7 * 24 + 1 and sorted(set(whole["site"])) == sorted(SITES)
    pd.testing.assert_frame_equal(split, whole)


def test_a_helper_that_cannot_start_or_fails_leaves_its_part_to_this_process(
    stores: Store, monkeypatch: pytest.MonkeyPatch, caplog: pytest.LogCaptureFixture
) -> None:
    whole = _read_whole(stores)
    caplog.set_level(logging.WARNING, logger="notifier.storage.window_parts")
    monkeypatch.setattr(sys, "executable", "/nonexistent/python")  # cannot start
    pd.testing.assert_frame_equal(_read_whole(stores), whole)
    assert "cannot start the window's second reader" in caplog.text
    caplog.clear()
    monkeypatch.setattr(sys, "executable", "/bin/false")  # starts, writes nothing
    pd.testing.assert_frame_equal(_read_whole(stores), whole)
    assert "the window's second reader" in caplog.text and "failed" in caplog.text
