"""Features at many times in one pass against one call per time.

``compute_features_steps`` (through ``steps.features_at`` with many times, which replay
and ``fogwatch learn`` reach through ``assess_times``) lays a history out as one block
with a row per site and time. Each time's table must be what ``compute_features`` at
that time alone gives: bit for bit for every feature but the least-squares cooling fit
and what is derived from it, and those to 1e-9 — the fit's sums run along rows padded
to a different width, and numpy's pairwise summation groups the terms by position, so
only the last bits may move (the same bound ``test_fast_path.py`` holds
``compute_features_at`` to). Checked on the invented world of ``test_fast_path.py``
(every kind of awkward data), on invented scenes, and on the real station nights in
``tests/data/stations/``.
"""

from __future__ import annotations

import csv
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from notifier.engine import steps
from notifier.engine.catalog import FeatureSettings
from notifier.engine.features import compute_features
from notifier.engine.model import FogModel, example_model
from notifier.engine.steps import compute_features_steps, window_bounds
from tests.engine.scenes import site, steady, utc
from tests.engine.test_fast_path import AT, _columns, _world

STATIONS = Path(__file__).resolve().parents[1] / "data" / "stations"
# the cooling fit's least squares and what is computed from it: equal to 1e-9 (module
# docstring); every other number bit for bit
FIT = {
    "fit_t0_c",
    "fit_k_per_sqrt_h",
    "projected_min_temp_c",
    "min_margin_c",
    "min_minus_crossover_c",
    "hours_to_crossing",
    "hours_to_fog",
    "fog_probability",
}


def _assert_same(many, one, ids: list[str]) -> None:
    got, expected = _columns(many), _columns(one)
    assert many.at == one.at and many.site_ids == one.site_ids
    for name, want in expected.items():
        have = got[name]
        if name == "projection_method":
            bad = np.flatnonzero(have != want)
        elif name in FIT:
            close = np.isclose(have, want, rtol=1e-9, atol=1e-9, equal_nan=True)
            bad = np.flatnonzero(~(close | (have == want)))
        else:
            same = (have == want) | (np.isnan(have) & np.isnan(want))
            bad = np.flatnonzero(~same)
        assert bad.size == 0, (
            f"{name} at {one.at}: {bad.size} sites differ, first {ids[bad[0]]}: "
            f"{have[bad[0]]!r} != {want[bad[0]]!r}"
        )


def _check(obs, sites, times, settings=None) -> list:
    many = compute_features_steps(obs, sites, times, settings)
    assert [t.at for t in many] == list(times)
    ids = [s.id for s in sites]
    for table, when in zip(many, times, strict=True):
        _assert_same(table, compute_features(obs, sites, when, settings), ids)
    return many


def test_random_world_at_many_times():
    # hold steps, an evening across sunset, the small hours and the next midday, in no
    # particular order (the tables come back in the order asked)
    sites, obs = _world(AT)
    times = [AT - timedelta(minutes=10 * k) for k in range(0, 36, 5)]
    times += [AT + timedelta(hours=h) for h in (1.5, 4, 14)] + [AT - timedelta(hours=5)]
    many = _check(obs, sites, times[::-1])
    methods = {m for t in many for m in t.projection_method}
    assert {"forecast", "cooling-fit", "midday-estimate", ""} <= methods
    # the reporting step comes from the sorted rows in the one pass, not from the cells
    steps_c = np.concatenate([t.values["depression_step_c"] for t in many])
    assert np.isfinite(steps_c).any() and np.isnan(steps_c).any()


def test_chunks_give_what_one_pass_gives(monkeypatch):
    # a small cell budget splits the times into many blocks: the same tables
    sites, obs = _world(AT)
    sites = sites[:60]
    times = [AT - timedelta(minutes=10 * k) for k in range(12)]
    monkeypatch.setattr(steps, "CELL_BUDGET", 3000)
    assert len(steps._chunks(np.full(12, 30), 60)) == 12  # one time a block
    _check(obs, sites, times)


def test_many_times_through_features_at(monkeypatch):
    # more than a few times (a replay's batch) takes the one-pass path
    sites, obs = _world(AT)
    sites = sites[:40]
    times = [AT - timedelta(minutes=10 * k) for k in range(20)]
    monkeypatch.setattr(steps, "compute_features_at", None)  # the per-time path: not taken
    tables = steps.features_at(obs, sites, times)
    ids = [s.id for s in sites]
    for table, when in zip(tables, times, strict=True):
        _assert_same(table, compute_features(obs, sites, when), ids)


def test_invented_scenes():
    # a clear calm night closing on its dew point, a windy one, a silent site, a site
    # whose readings stop, and forecast rows for one of them
    evening = utc(2026, 10, 14, 17, 0)
    frames = [
        steady(
            "calm",
            evening + timedelta(hours=10),
            hours=26,
            temp_c=(14.0, 3.0),
            dewpoint_c=(6.0, 2.8),
            wind_ms=0.8,
            cloud_pct=0.0,
        ),
        steady(
            "windy",
            evening + timedelta(hours=10),
            hours=26,
            temp_c=(12.0, 9.0),
            dewpoint_c=5.0,
            wind_ms=7.0,
            cloud_pct=90.0,
            visibility_m=(20000.0, 600.0),
        ),
        steady(
            "stops",
            evening + timedelta(hours=3),
            hours=12,
            step_min=30,
            temp_c=(11.0, 6.0),
            dewpoint_c=(7.0, 5.5),
            weather="BR",
        ),
        steady(
            "calm",
            evening + timedelta(hours=20),
            hours=20,
            step_min=60,
            temp_c=(8.0, 1.0),
            dewpoint_c=2.0,
            cloud_pct=10.0,
            wind_ms=1.0,
        ).assign(kind="forecast"),
    ]
    obs = pd.concat(frames, ignore_index=True)
    sites = [
        site("calm"),
        site("windy", exposure="coast"),
        site("stops", exposure="valley"),
        site("silent"),
    ]
    times = [evening + timedelta(minutes=20 * k) for k in range(40)]
    many = _check(obs, sites, times)
    assert {m for t in many for m in t.projection_method} >= {"forecast", "cooling-fit"}


def _station_frame(name: str) -> tuple[pd.DataFrame, list]:
    """A station night from tests/data/stations/ as the canonical table (°F, mph and
    statute miles converted as the file reader converts them)."""
    from notifier.cli.commands import read_data
    from notifier.core.config import Config

    sid = name.split("_")[0]
    # coordinates to about a kilometre (common practice for an airport's position)
    lat, lon = {"ewr": (40.69, -74.17), "lga": (40.78, -73.87)}[sid]
    sites = [site(sid, lat=lat, lon=lon, timezone="America/New_York")]
    batch = read_data([str(STATIONS / name)], Config(sites=tuple(sites)), datetime.now(UTC))
    return batch.frame, sites


@pytest.mark.parametrize(
    "name", sorted(p.name for p in STATIONS.glob("*_2013-*.csv")), ids=lambda n: n[:14]
)
def test_station_nights_every_ten_minutes(name):
    obs, sites = _station_frame(name)
    with (STATIONS / name).open(newline="") as f:
        first = datetime.fromisoformat(next(csv.DictReader(f))["time"]).astimezone(UTC)
    times = [first + timedelta(hours=6, minutes=10 * k) for k in range(6 * 29)]
    _check(obs, sites, times)


def test_the_model_reads_each_rows_own_time():
    # the chance of fog and its drivers per row, with the season of the row's own day
    sites, obs = _world(AT)
    sites = sites[:30]
    model = FogModel.from_dict(example_model())
    fitted = sorted(model.sites)
    named = [
        site(fitted[i % len(fitted)] if i < len(fitted) else s.id, lat=s.lat, lon=s.lon)
        for i, s in enumerate(sites)
    ]
    renamed = obs.replace({"site": {s.id: n.id for s, n in zip(sites, named, strict=True)}})
    settings = FeatureSettings(model=model)
    times = [AT - timedelta(days=40), *(AT - timedelta(minutes=10 * k) for k in range(10))]
    many = _check(renamed, named, times, settings)
    assert any(np.isfinite(t.values["fog_probability"]).any() for t in many)
    singles = [compute_features(renamed, named, t, settings) for t in times]
    for table, single in zip(many, singles, strict=True):
        assert list(table.drivers) == list(single.drivers)


def test_window_bounds_against_numpy_searchsorted():
    # per site, np.searchsorted on its own times (side "right" both ends: t - block < time
    # <= t) is the reference for the merged search over all sites and times at once
    rng = np.random.default_rng(5)
    n = 7
    s_sel = np.sort(rng.integers(0, n, 400))
    t_sel = np.concatenate(
        [np.sort(rng.choice(np.arange(0.0, 300.0, 2.5), (s_sel == s).sum())) for s in range(n)]
    )
    t_sorted = np.sort(rng.choice(np.arange(0.0, 320.0, 2.5), 25))
    lo, hi = window_bounds(s_sel, t_sel, n, t_sorted, 30.0)
    for k, t in enumerate(t_sorted):
        for s in range(n):
            start = np.searchsorted(s_sel, s)
            mine = t_sel[s_sel == s]
            assert hi[k * n + s] == start + np.searchsorted(mine, t, side="right")
            assert lo[k * n + s] == start + np.searchsorted(mine, t - 30.0, side="right")


def test_no_data_and_no_times():
    quiet = site("quiet")
    assert compute_features_steps(pd.DataFrame(), [quiet], []) == []
    times = [AT - timedelta(minutes=10 * k) for k in range(3)]
    tables = compute_features_steps(pd.DataFrame(), [quiet], times)
    assert [t.values["data_age_min"][0] for t in tables] == [np.inf] * 3
    # no sites: a table per time all the same, each over no sites (as compute_features)
    _, obs = _world(AT)
    none = compute_features_steps(obs, [], times)
    assert [t.at for t in none] == times
    assert all(t.values["temp_c"].shape == (0,) for t in none)


def test_water_climatology_takes_each_rows_own_month():
    # two sites, one with a monthly water climatology (the config's water_temp_monthly_c,
    # invented values), across a month's end: each row reads its own time's month
    end = utc(2026, 11, 1, 6, 0)
    clim = tuple(float(m) for m in range(1, 13))
    sites = [site("quay", use="port", water_temp_monthly_c=clim), site("field")]
    obs = pd.concat(
        [
            steady(sid, end, hours=30, temp_c=(12.0, 8.0), dewpoint_c=7.0, wind_ms=2.0)
            for sid in ("quay", "field")
        ],
        ignore_index=True,
    )
    times = [end - timedelta(hours=h) for h in range(0, 12)]
    many = _check(obs, sites, times)
    months = {t.at.month: t.values["water_temp_c"][0] for t in many}
    # October's value before midnight UTC, November's after (the site list's order)
    assert months == {10: 10.0, 11: 11.0}
    assert all(t.values["water_temp_estimated"][1] == 0.0 for t in many)
