"""The in-memory rolling window equals a fresh read of the store, cycle after cycle.

The reference is ``Store.window`` itself, on the same SQLite file: whatever is written
(new rows, replaced rows, forecasts far ahead, rows of other sites, clocks going back),
``RollingWindow.frame(at)`` must return the table a full read would.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from notifier.core.columns import CANONICAL_COLUMNS, FLOAT_COLUMNS, text_columns_as_objects
from notifier.storage.store import Store
from notifier.storage.window import RollingWindow

T0 = datetime(2024, 1, 12, 0, 0, tzinfo=UTC)
BACK = timedelta(hours=6)
AHEAD = timedelta(hours=3)
WATCHED = ["zz-vale", "zz-wold", "zz-quay"]  # the configuration's order, not sorted


def canonical(records: list[dict[str, Any]]) -> pd.DataFrame:
    """Canonical rows (invented values) from (site, minute, kind, temp, weather, source)."""
    data: dict[str, Any] = {c: [] for c in CANONICAL_COLUMNS}
    for r in records:
        for column in CANONICAL_COLUMNS:
            data[column].append(r.get(column))
    frame = pd.DataFrame(data)
    frame["time"] = pd.to_datetime(frame["time"], utc=True).astype("datetime64[ns, UTC]")
    for column in FLOAT_COLUMNS:
        frame[column] = frame[column].astype("float64")
    return frame


def row(site: str, minute: int, kind: str = "obs", temp: float = 2.0, **extra: Any) -> dict:
    return {
        "site": site,
        "time": T0 + timedelta(minutes=minute),
        "kind": kind,
        "temp_c": temp,
        "dewpoint_c": temp - 1.0,
        "source": "test",
        **extra,
    }


def as_objects(frame: pd.DataFrame) -> pd.DataFrame:
    return text_columns_as_objects(frame.copy()).reset_index(drop=True)


def assert_same_as_a_full_read(store: Store, window: RollingWindow, at: datetime) -> None:
    held = window.frame(at)
    fresh = store.window(WATCHED, at - BACK, at + AHEAD)
    # grouped by site in the configuration's order, then by time and kind
    place = fresh["site"].map({site: i for i, site in enumerate(WATCHED)})
    fresh = fresh.assign(_place=place).sort_values(["_place", "time", "kind"], kind="stable")
    assert list(held.columns) == CANONICAL_COLUMNS
    for column in ("site", "kind"):
        assert isinstance(held[column].dtype, pd.CategoricalDtype)
    assert list(held["site"].cat.categories) == WATCHED
    pd.testing.assert_frame_equal(
        as_objects(held), as_objects(fresh.drop(columns="_place")), check_dtype=False
    )
    assert str(held["time"].dtype) == "datetime64[ns, UTC]"


@pytest.fixture
def store(any_store: Store) -> Store:
    return any_store  # SQLite and PostgreSQL (tests/conftest.py)


def test_a_cycle_reads_only_what_was_written_since(store: Store) -> None:
    store.add_observations(canonical([row(s, m) for s in WATCHED for m in range(0, 300, 10)]))
    window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD)
    at = T0 + timedelta(minutes=290)
    assert_same_as_a_full_read(store, window, at)
    assert window.last_read == 90
    # the next poll: one new row per site, one replaced row, one row of an unwatched site
    store.add_observations(
        canonical(
            [row(s, 300, temp=1.0) for s in WATCHED]
            + [row("zz-vale", 280, temp=-4.0, weather="FZFG")]
            + [row("zz-elsewhere", 300)]
        )
    )
    at += timedelta(minutes=10)
    assert_same_as_a_full_read(store, window, at)
    assert window.last_read == 5, "the changed rows only"
    held = window.frame(at)
    replaced = held[(held["site"] == "zz-vale") & (held["time"] == T0 + timedelta(minutes=280))]
    assert replaced["temp_c"].tolist() == [-4.0] and replaced["weather"].tolist() == ["FZFG"]
    # nothing written: nothing read, and the back of the window moves on
    at += timedelta(hours=2)
    assert_same_as_a_full_read(store, window, at)
    assert window.last_read == 0
    assert window.frame(at)["time"].min() >= at - BACK


def test_a_share_of_the_sites_reads_only_its_own_rows(store: Store) -> None:
    # another instance's sites in the same store (README "Several instances"): a window
    # of this instance's share asks for its sites alone, at the start and every cycle
    others = ["zz-fen", "zz-moor"]
    store.add_observations(
        canonical([row(s, m) for s in WATCHED + others for m in range(0, 300, 10)])
    )
    window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD, only_these=True)
    at = T0 + timedelta(minutes=290)
    assert_same_as_a_full_read(store, window, at)
    assert window.last_read == 90, "30 rows of each of the three sites, none of the others'"
    store.add_observations(canonical([row(s, 300, temp=1.0) for s in WATCHED + others]))
    at += timedelta(minutes=10)
    assert_same_as_a_full_read(store, window, at)
    assert window.last_read == 3
    # a reload that keeps the sites keeps the window; one that changes them reads anew,
    # still only its own sites
    assert window.renewed(WATCHED, back=BACK, ahead=AHEAD) is window
    fewer = window.renewed(WATCHED[:2], back=BACK, ahead=AHEAD)
    assert fewer.only_these and fewer.last_read == 2 * 31


def test_forecasts_come_into_view_as_time_moves_on(store: Store) -> None:
    store.add_observations(canonical([row("zz-vale", m, kind="forecast") for m in (60, 600)]))
    window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD)
    at = T0
    assert window.frame(at)["time"].tolist() == [T0 + timedelta(minutes=60)]
    at = T0 + timedelta(hours=7)  # 10:00 is now within 3 h ahead; 01:00 is 6 h back
    assert_same_as_a_full_read(store, window, at)
    assert window.last_read == 0 and len(window.frame(at)) == 2


def test_an_earlier_evaluation_time_reads_the_window_again(store: Store) -> None:
    store.add_observations(canonical([row("zz-quay", m) for m in range(0, 600, 30)]))
    window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD)
    late = T0 + timedelta(hours=9)
    assert_same_as_a_full_read(store, window, late)
    early = T0 + timedelta(hours=4)
    assert_same_as_a_full_read(store, window, early)
    assert window.last_read == len(store.window(None, early - BACK, None))


def test_an_empty_store_and_an_empty_window(store: Store) -> None:
    window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD)
    assert_same_as_a_full_read(store, window, T0)
    store.add_observations(canonical([row("zz-elsewhere", 0)]))
    assert_same_as_a_full_read(store, window, T0)
    assert len(window) == 0


cycles = st.lists(
    st.tuples(
        st.integers(-30, 120),  # minutes the clock moves (sometimes back)
        st.lists(
            st.tuples(
                st.sampled_from([*WATCHED, "zz-elsewhere"]),
                st.integers(-600, 900),  # minutes from the evaluation time
                st.sampled_from(["obs", "forecast"]),
                st.floats(-10.0, 10.0, allow_nan=False),
                st.sampled_from([None, "BR", "FG", "FZFG", "-DZ BR"]),
                st.sampled_from(["drop", "feed"]),
            ),
            max_size=12,
        ),
    ),
    min_size=1,
    max_size=8,
)


@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(cycles=cycles)
def test_random_writes_and_clocks_match_a_full_read(tmp_path_factory: Any, cycles: Any) -> None:
    path = tmp_path_factory.mktemp("window") / "fw.sqlite"
    with Store(f"sqlite:///{path}") as store:
        window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD)
        at = T0
        for step, writes in cycles:
            at += timedelta(minutes=step)
            minute = int((at - T0).total_seconds() // 60)
            records = {}
            for site, offset, kind, temp, weather, source in writes:
                key = (site, minute + offset, kind)  # one row per key in a batch
                records[key] = row(
                    site, minute + offset, kind, temp=round(temp, 2), weather=weather
                ) | {"source": source}
            if records:
                store.add_observations(canonical(list(records.values())))
            assert_same_as_a_full_read(store, window, at)
        assert np.all(np.diff(window._keys) > 0), "held rows stay in key order, no repeats"


def test_the_frame_handed_out_is_read_only_and_the_window_unharmed(store: Store) -> None:
    store.add_observations(canonical([row("zz-vale", m) for m in range(0, 60, 10)]))
    window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD)
    at = T0 + timedelta(minutes=50)
    held = window.frame(at)
    with pytest.raises(ValueError, match="read-only"):
        held.loc[0, "temp_c"] = -99.0
    changed = held.copy()
    changed.loc[0, "temp_c"] = -99.0  # a copy may be changed
    held["extra"] = 1.0  # and new columns added
    assert window.frame(at)["temp_c"].iloc[0] == 2.0
    assert_same_as_a_full_read(store, window, at)


def test_public_names():
    import notifier.storage.window as window_module

    assert window_module.__all__ == ["RollingWindow"]


def test_a_column_no_row_has_is_held_as_one_value(store: Store) -> None:
    """Feeds without a ceiling or rain leave those columns empty: the window holds each
    as one NaN (no memory a row), until a row brings a value, and hands out the same
    table as a full read throughout."""
    store.add_observations(canonical([row(s, m) for s in WATCHED for m in range(0, 120, 10)]))
    window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD)
    at = T0 + timedelta(minutes=110)
    assert_same_as_a_full_read(store, window, at)
    held = window._columns
    assert held is not None and held["ceiling_m"].strides == (0,)
    assert held["temp_c"].strides == (8,), "a column with values is held whole"
    store.add_observations(canonical([row("zz-wold", 120, ceiling_m=150.0)]))
    at += timedelta(minutes=10)
    assert_same_as_a_full_read(store, window, at)
    assert window._columns is not None and window._columns["ceiling_m"].strides == (8,)
    assert window.frame(at)["ceiling_m"].notna().sum() == 1
    # the row with the value falls out of the back: the column is empty again
    store.add_observations(canonical([row(s, m) for s in WATCHED for m in range(130, 500, 10)]))
    assert_same_as_a_full_read(store, window, T0 + timedelta(minutes=130) + BACK)
    assert len(window) > 0 and window._columns["ceiling_m"].strides == (0,)
