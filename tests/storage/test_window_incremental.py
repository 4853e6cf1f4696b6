"""The incremental window (issue 19) equals a fresh full read after any run of batches.

The reference is ``Store.window`` on the same store (see test_window.py): after random
sequences of batches — new readings at the end of each site, late rows far behind,
rows repeated within a batch and across batches, rows dropped from the store by
housekeeping, the clock moving on — ``RollingWindow.frame`` holds the same rows in the
same order. Beside that: the update sorts only the new rows, never the whole window,
and a reload keeps the window unless the sites or its length change.
"""

from __future__ import annotations

from datetime import timedelta
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from notifier.storage.store import Store
from notifier.storage.window import RollingWindow
from tests.storage.test_window import AHEAD, BACK, T0, WATCHED, canonical, row
from tests.storage.test_window import assert_same_as_a_full_read as same_as_full_read

MANY = [f"zz-plot-{i:02d}" for i in range(23, -1, -1)]  # 24 sites, configured in reverse


def assert_matches(store: Store, window: RollingWindow, at: Any, sites: list[str]) -> None:
    """As test_window's check, for any list of watched sites."""
    import tests.storage.test_window as base

    saved = base.WATCHED
    base.WATCHED = sites
    try:
        same_as_full_read(store, window, at)
    finally:
        base.WATCHED = saved


batches = st.lists(
    st.tuples(
        st.integers(0, 40),  # minutes the clock moves on
        st.integers(0, 24),  # sites reporting a new reading now
        st.lists(  # late rows and repeats: (site, minutes before now, kind)
            st.tuples(
                st.integers(0, 25),  # 24, 25: sites nobody watches
                st.integers(0, 500),  # up to beyond the back of the window (6 h)
                st.sampled_from(["obs", "forecast"]),
            ),
            max_size=10,
        ),
        st.booleans(),  # housekeeping drops the rows behind the window from the store
        st.booleans(),  # the batch repeats its last row (the last one written wins)
    ),
    min_size=2,
    max_size=10,
)


@settings(
    max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(batches=batches, seed=st.integers(0, 2**16))
def test_random_batches_late_rows_repeats_and_drops_match_a_full_read(
    tmp_path_factory: Any, batches: Any, seed: int
) -> None:
    rng = np.random.default_rng(seed)
    path = tmp_path_factory.mktemp("window") / "fw.sqlite"
    names = [*MANY, "zz-else-1", "zz-else-2"]
    with Store(f"sqlite:///{path}") as store:
        # three hours of readings every 10 min to start from, forecasts ahead for some
        start = [row(s, m, temp=float(rng.normal(3, 2))) for s in MANY for m in range(0, 180, 10)]
        start += [row(s, m, kind="forecast") for s in MANY[::5] for m in range(180, 600, 60)]
        store.add_observations(canonical(start))
        window = RollingWindow(store, MANY, back=BACK, ahead=AHEAD)
        at = T0 + timedelta(minutes=180)
        assert_matches(store, window, at, MANY)
        for step, reporting, late, housekeeping, repeat in batches:
            at += timedelta(minutes=step)
            minute = int((at - T0).total_seconds() // 60)
            records = [
                row(s, minute, temp=float(rng.normal(2, 2)))
                for s in rng.choice(MANY, size=reporting, replace=False)
            ]
            for site, back, kind in late:
                records.append(row(names[site], minute - back, kind, temp=float(rng.normal())))
            if repeat and records:
                records.append({**records[-1], "temp_c": -7.5, "weather": "FZFG"})
            if records:
                store.add_observations(canonical(records))
            if housekeeping:
                store.trim_observations(at - BACK)
            assert_matches(store, window, at, MANY)
        held = window._keys
        assert np.all(np.diff(held) > 0), "held rows stay in key order, without repeats"


def test_an_update_sorts_only_the_new_rows(
    store_file: Store, monkeypatch: pytest.MonkeyPatch
) -> None:
    store = store_file
    store.add_observations(canonical([row(s, m) for s in MANY for m in range(0, 300, 10)]))
    window = RollingWindow(store, MANY, back=BACK, ahead=AHEAD)
    at = T0 + timedelta(minutes=290)
    window.frame(at)
    held = len(window)
    sorted_sizes: list[int] = []
    original = np.argsort

    def counting(values: Any, *args: Any, **kwargs: Any) -> Any:
        sorted_sizes.append(int(np.size(values)))
        return original(values, *args, **kwargs)

    monkeypatch.setattr(np, "argsort", counting)
    # the next poll: a reading per site, one late row, one replaced row
    store.add_observations(
        canonical([row(s, 300) for s in MANY] + [row(MANY[3], 95), row(MANY[0], 200, temp=-3.0)])
    )
    at += timedelta(minutes=10)
    window.frame(at)
    assert window.last_read == len(MANY) + 2
    assert sorted_sizes and max(sorted_sizes) <= window.last_read, (
        f"sorted {sorted_sizes} rows for a window of {held}: only the new rows may be sorted"
    )
    monkeypatch.undo()
    assert_matches(store, window, at, MANY)


@pytest.fixture
def store_file(tmp_path: Any) -> Any:
    with Store(f"sqlite:///{tmp_path / 'fw.sqlite'}") as store:
        yield store


def test_a_reload_keeps_the_window_unless_sites_or_length_change(store_file: Store) -> None:
    store = store_file
    store.add_observations(canonical([row(s, m) for s in WATCHED for m in range(0, 300, 10)]))
    window = RollingWindow(store, WATCHED, back=BACK, ahead=AHEAD)
    at = T0 + timedelta(minutes=290)
    window.frame(at)
    assert window.renewed(list(WATCHED), back=BACK, ahead=AHEAD) is window
    # a site more: a new window, read whole already (at the old one's last time)
    more = [*WATCHED, "zz-marsh"]
    store.add_observations(canonical([row("zz-marsh", m) for m in range(0, 300, 10)]))
    grown = window.renewed(more, back=BACK, ahead=AHEAD)
    assert grown is not window and grown.last_at == at and grown.last_read == 4 * 30
    store.add_observations(canonical([row(s, 300) for s in more]))
    at += timedelta(minutes=10)
    assert_matches(store, grown, at, more)
    assert grown.last_read == 4, "after the re-read, only what came since"
    # another order of the same sites, or a longer window: a new one too
    assert window.renewed(WATCHED[::-1], back=BACK, ahead=AHEAD) is not window
    longer = window.renewed(WATCHED, back=BACK * 2, ahead=AHEAD)
    assert longer is not window and longer.back == BACK * 2
