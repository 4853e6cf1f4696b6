"""The vectorised feature path against the straightforward per-site loop.

``compute_features`` lays every site into one sites × times block and works on column
slices found by binary search; ``compute_features_at`` shares that block between several
evaluation times. Both must give what calling ``compute_features`` one site at a time
gives, on a few hundred invented sites with every kind of awkward data: mixed exposures
and time zones, both hemispheres, gaps, missing sensors, stale and silent stations,
forecasts, present-weather codes, rows out of order, repeated rows, unknown sites and
readings after the evaluation time.
"""

from __future__ import annotations

import functools
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest

from notifier.engine.catalog import FEATURES
from notifier.engine.features import FeatureCache, compute_features, compute_features_at
from tests.engine.scenes import site, utc

ZONES = ("Europe/London", "America/New_York", "Asia/Tokyo", "Australia/Sydney", "UTC")
EXPOSURES = ("open", "valley", "forest", "waterside", "coast", "urban")
WEATHER = ("", " ", "FG", "BR", "-FZFG", "+BR", "BCFG", "RA BR", "fzfg", "MIFG DZ", "HZ")
AT = utc(2026, 10, 14, 23, 0)


def _sites(n: int, rng: np.random.Generator) -> list:
    out = []
    for i in range(n):
        sector = {}
        if i % 4 == 0:  # some sectors wrap through north
            lo = float(rng.integers(0, 360))
            sector = dict(onshore_from_deg=lo, onshore_to_deg=float((lo + 140) % 360))
        out.append(
            site(
                f"s{i:03d}",
                exposure=EXPOSURES[i % len(EXPOSURES)],
                lat=float(rng.uniform(-60, 70)),
                lon=float(rng.uniform(-180, 180)),
                timezone=ZONES[i % len(ZONES)],
                **sector,
            )
        )
    return out


def _frame(sites: list, at, rng: np.random.Generator) -> pd.DataFrame:
    frames = []
    for i, s in enumerate(sites):
        if i % 37 == 5:
            continue  # never reported
        step = int(rng.choice([5, 10, 10, 15, 30]))
        hours = float(rng.uniform(1, 30))
        end = (
            at
            + timedelta(minutes=int(rng.choice([0, 0, 0, 20])))
            - timedelta(
                hours=6 if i % 29 == 3 else 0  # stale
            )
        )
        n = int(hours * 60 / step) + 1
        times = [end - timedelta(minutes=step * k) for k in range(n)][::-1]
        keep = rng.random(n) > 0.1
        times = [t for t, k in zip(times, keep, strict=True) if k]
        m = len(times)
        if m == 0:
            continue
        h = np.arange(m) * step / 60.0
        temp = 12 - 4 * np.sin(h / 5) + rng.normal(0, 0.3, m)
        dep = np.clip(3 - h / 6 + rng.normal(0, 0.3, m), 0, None)

        def sensor(values: np.ndarray, share: float, m: int = m) -> np.ndarray:
            """A sensor only some stations have, with the odd missing reading."""
            if rng.random() > share:
                return np.full(m, np.nan)
            return np.where(rng.random(m) < 0.05, np.nan, values)

        frame = pd.DataFrame(
            {
                "site": s.id,
                "time": pd.to_datetime(times, utc=True),
                "kind": "obs",
                "temp_c": np.where(rng.random(m) < 0.03, np.nan, temp - (i % 7 == 0) * 14),
                "dewpoint_c": sensor(temp - dep - (i % 7 == 0) * 14, 0.95),
                "rh_pct": sensor(np.clip(100 - 5 * dep, 0, 100), 0.9),
                "wind_ms": sensor(np.abs(rng.normal(2.5, 1.5, m)), 0.85),
                "wind_dir_deg": sensor(rng.uniform(0, 360, m), 0.8),
                "cloud_pct": sensor(rng.choice([0.0, 25.0, 50.0, 100.0], m), 0.6),
                "surface_temp_c": sensor(temp - 2, 0.4),
                "water_temp_c": sensor(np.full(m, 9.0), 0.3),
                "visibility_m": sensor(rng.choice([150.0, 800.0, 3000.0, 20000.0], m), 0.5),
                "weather": (
                    list(rng.choice(np.array(WEATHER, dtype=object), m))
                    if rng.random() < 0.4
                    else [None] * m
                ),
            }
        )
        if i % 11 == 0 and m > 3:  # a repeated report
            frame = pd.concat([frame, frame.iloc[[m - 2]]], ignore_index=True)
        frames.append(frame)
        if i % 3 == 0:
            ftimes = pd.date_range(at - timedelta(hours=2), periods=24, freq="1h", tz="UTC")
            frames.append(
                pd.DataFrame(
                    {
                        "site": s.id,
                        "time": ftimes,
                        "kind": "forecast",
                        "temp_c": np.linspace(10, 1, 24) + rng.normal(0, 0.5, 24),
                        "dewpoint_c": np.linspace(6, 2, 24),
                        "cloud_pct": 20.0 if i % 2 else np.nan,
                        "wind_ms": 1.5,
                    }
                )
            )
    stranger = pd.DataFrame(
        {
            "site": "not-a-site",
            "time": pd.to_datetime([at - timedelta(minutes=10)], utc=True),
            "kind": "obs",
            "temp_c": 5.0,
            "dewpoint_c": 5.0,
        }
    )
    obs = pd.concat([*frames, stranger], ignore_index=True)
    # a slice of the table arrives out of order, as rows from several files would
    tail = obs.iloc[-400:].sample(frac=1.0, random_state=1)
    return pd.concat([obs.iloc[:-400], tail], ignore_index=True)


@functools.cache
def _world(at) -> tuple[list, pd.DataFrame]:
    rng = np.random.default_rng(20261014)
    sites = _sites(240, rng)
    return sites, _frame(sites, at, rng)


@pytest.fixture(scope="module")
def world():
    return _world(AT)


_EXTRA = ("last_time", "fit_t0_c", "fit_k_per_sqrt_h", "last_sunset")


def _columns(table, order=None) -> dict[str, np.ndarray]:
    """Every feature, and the table's other per-site arrays, by name."""
    cols = {name: table.values[name] for name in FEATURES}
    cols.update({name: getattr(table, name) for name in _EXTRA})
    cols["projection_method"] = np.asarray(table.projection_method, dtype=object)
    if order is not None:
        cols = {name: values[order] for name, values in cols.items()}
    return cols


def _assert_same(fast: dict, slow: dict, ids: list[str], atol: float) -> None:
    """To ``atol`` for every number; NaN equals NaN and inf equals inf."""
    for name, expected in slow.items():
        got = fast[name]
        if name == "projection_method":
            bad = np.flatnonzero(got != expected)
        else:
            close = np.isclose(got, expected, rtol=0, atol=atol, equal_nan=True)
            bad = np.flatnonzero(~(close | (got == expected)))
        assert bad.size == 0, (
            f"{name}: {bad.size} sites differ, first {ids[bad[0]]}: "
            f"{got[bad[0]]!r} != {expected[bad[0]]!r}"
        )


def _stack(tables) -> dict[str, np.ndarray]:
    """One-site tables → arrays over the sites."""
    cols = [_columns(t) for t in tables]
    return {name: np.concatenate([c[name] for c in cols]) for name in cols[0]}


@pytest.mark.parametrize(
    "at",
    [AT, utc(2026, 10, 15, 13, 0), utc(2026, 10, 14, 19, 5)],
    ids=["late-evening-utc", "midday-utc", "off-the-grid"],
)
def test_all_sites_at_once_equal_one_site_at_a_time(at):
    sites, obs = _world(at)
    together = compute_features(obs, sites, at)
    by_site = dict(tuple(obs.groupby("site", sort=False)))
    one_by_one = [compute_features(by_site.get(s.id, obs.iloc[:0]), [s], at) for s in sites]
    ids = [s.id for s in sites]
    _assert_same(_columns(together), _stack(one_by_one), ids, 1e-6)
    # the invented world exercises every projection method and every data state
    methods = set(together.projection_method)
    assert {"forecast", "cooling-fit", "midday-estimate", ""} <= methods
    ages = together.values["data_age_min"]
    assert np.isinf(ages).any() and (ages > 300).any() and (ages < 30).any()
    for flag in ("observed_fog", "observed_mist", "observed_freezing_fog", "onshore"):
        values = together.values[flag]
        assert (values == 1).any() and (values == 0).any() and np.isnan(values).any(), flag


def test_row_and_site_order_do_not_matter(world):
    sites, obs = world
    reference = compute_features(obs, sites, AT)
    shuffled = obs.sample(frac=1.0, random_state=7).reset_index(drop=True)
    reordered = sites[::-1]
    fast = compute_features(shuffled, reordered, AT)
    back = np.arange(len(sites))[::-1]
    _assert_same(_columns(fast, back), _columns(reference), [s.id for s in sites], 1e-6)


def test_categorical_site_and_kind_columns_give_the_same(world):
    # a store may hand the text columns over as categoricals (codes, not strings)
    sites, obs = world
    reference = compute_features(obs, sites, AT)
    coded = obs.astype({"site": "category", "kind": "category"})
    fast = compute_features(coded, sites, AT)
    _assert_same(_columns(fast), _columns(reference), [s.id for s in sites], 0.0)


def test_the_rolling_windows_coding_gives_the_same(world):
    # notifier.storage.window hands out site categories that are the configured sites in order
    # (read as indices directly, unknown sites coded as missing) and weather as codes
    sites, obs = world
    reference = compute_features(obs, sites, AT)
    ids = [s.id for s in sites]
    coded = obs.assign(
        site=pd.Categorical(obs["site"].where(obs["site"].isin(ids)), categories=ids),
        kind=obs["kind"].astype("category"),
        weather=obs["weather"].astype("category"),
    )
    assert list(coded["site"].cat.categories) == ids and coded["site"].isna().any()
    fast = compute_features(coded, sites, AT)
    _assert_same(_columns(fast), _columns(reference), ids, 0.0)


def test_several_times_equal_one_time_each(world):
    # Hold windows step back 10 minutes at a time; a few hours back crosses sunset
    # for some sites, where the shared sun results must not be reused.
    sites, obs = world
    times = [AT - timedelta(minutes=m) for m in (0, 10, 20, 190)] + [AT + timedelta(hours=14)]
    tables = compute_features_at(obs, sites, times)
    assert [t.at for t in tables] == times
    ids = [s.id for s in sites]
    for table, when in zip(tables, times, strict=True):
        single = compute_features(obs, sites, when)
        _assert_same(_columns(table), _columns(single), ids, 1e-9)


def test_no_times_and_no_data():
    s = site("quiet")
    assert compute_features_at(pd.DataFrame(), [s], []) == []
    (table,) = compute_features_at(pd.DataFrame(), [s], [AT])
    assert table.values["data_age_min"][0] == np.inf


def test_a_kept_cache_gives_what_a_fresh_one_gives(world):
    # A service keeps one cache from cycle to cycle: the next cycle's sun is carried
    # from the cycle before (to within the last bits of a sunrise, see the sun test in
    # test_features.py) and a repeated time is answered from the cache.
    sites, obs = world
    cache = FeatureCache()
    ids = [s.id for s in sites]
    times = [AT - timedelta(minutes=m) for m in (30, 20, 10, 0, 10)]
    for when in times:
        kept = compute_features(obs, sites, when, cache=cache)
        fresh = compute_features(obs, sites, when)
        _assert_same(_columns(kept), _columns(fresh), ids, 1e-5)
        np.testing.assert_array_equal(kept.values["is_night"], fresh.values["is_night"])
    assert cache.site_arrays(sites) is cache.site_arrays(list(sites))


def test_a_cache_shared_between_threads(world):
    # the service's cycle and a command may run on different threads
    from concurrent.futures import ThreadPoolExecutor

    sites, obs = world
    cache = FeatureCache()
    times = [AT - timedelta(minutes=10 * k) for k in range(6)]
    alone = {t: compute_features(obs, sites, t) for t in times}
    with ThreadPoolExecutor(4) as pool:
        shared = list(pool.map(lambda t: compute_features(obs, sites, t, cache=cache), times * 2))
    ids = [s.id for s in sites]
    for t, table in zip(times * 2, shared, strict=True):
        _assert_same(_columns(table), _columns(alone[t]), ids, 1e-5)


def test_the_cache_keeps_only_a_few_entries(world):
    sites, _ = world
    cache = FeatureCache()
    for k in range(1, 8):
        cache.site_arrays(sites[:k])
    st = cache.site_arrays(sites)
    for k in range(40):
        cache.night_bounds(st, AT.timestamp() + 600.0 * k)
    assert len(cache._sites) == 4 and len(cache._sun) == 16


# module-level tables the engine reads and never writes
READ_ONLY_TABLES = ("FEATURES", "EXPOSURE_EFFECTS", "OPS", "_LEVEL_RANK", "_RULE_KEYS")


def test_no_module_level_mutable_state():
    # what is remembered between calls is the caller's (a FeatureCache), not the module's
    import importlib
    import pkgutil
    import threading
    from collections import OrderedDict

    import notifier.engine

    modules = [
        importlib.import_module(f"notifier.engine.{info.name}")
        for info in pkgutil.iter_modules(notifier.engine.__path__)
    ]
    assert len(modules) >= 11  # every module of the engine, not a chosen few
    lock_type = type(threading.Lock())
    for module in modules:
        for name, value in vars(module).items():
            assert not isinstance(value, OrderedDict | lock_type), f"{module.__name__}.{name}"
            if isinstance(value, dict | list | set) and not name.startswith("__"):
                # the catalogue of features and exposures and the rules' test symbols are
                # read, never written
                assert name in READ_ONLY_TABLES, f"{module.__name__}.{name}"


def test_public_names():
    from notifier.engine import block, catalog, families, features, projection, readings

    assert set(features.__all__) == {"FeatureCache", "compute_features", "compute_features_at"}
    assert set(catalog.__all__) == {
        "EXPOSURE_EFFECTS",
        "FEATURES",
        "NOW_FEATURES",
        "SHOWN_FEATURES",
        "format_value",
        "ExposureEffect",
        "FeatureSettings",
        "FeatureSpec",
        "FeatureTable",
    }
    for module in (block, catalog, families, features, projection, readings):
        for name in module.__all__:
            assert hasattr(module, name), f"{module.__name__}.{name}"
