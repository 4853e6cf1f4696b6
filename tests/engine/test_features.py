"""Features against outside references (SciPy, NumPy, MetPy, astral, published values)."""

from __future__ import annotations

import datetime as dt
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest

from notifier.engine.catalog import FEATURES
from notifier.engine.features import compute_features
from tests.engine.scenes import site, steady, utc


def one(obs, s, at):
    table = compute_features(obs, [s], at)
    return table.row(0), table


def test_every_feature_has_a_label_and_unit_kind():
    for name, spec in FEATURES.items():
        assert spec.label and spec.kind in ("number", "bool"), name


def test_trend_matches_scipy_theil_sen():
    # SciPy's theilslopes is the reference implementation of Sen's (1968) estimator.
    from scipy.stats import theilslopes

    s = site("trend-site")
    at = utc(2026, 10, 14, 22, 0)
    rng = np.random.default_rng(7)
    depression = np.linspace(3.0, 1.0, 19) + rng.normal(0, 0.15, 19)
    obs = steady(s.id, at, temp_c=8.0, dewpoint_c=8.0 - depression, wind_ms=1.0)
    row, _ = one(obs, s, at)
    hours = np.linspace(-3, 0, 19)
    expected = theilslopes(8.0 - obs["dewpoint_c"].to_numpy(), hours)[0]
    assert row["depression_trend_c_per_h"] == pytest.approx(expected, abs=1e-9)
    # time to saturation = depression / closing rate
    assert row["hours_to_saturation"] == pytest.approx(
        row["dewpoint_depression_c"] / -expected, rel=1e-9
    )


def test_cooling_fit_matches_numpy_least_squares():
    # Brunt's law T = T0 − k√t fitted by ordinary least squares; numpy.polyfit on √t is
    # the reference.
    from notifier import physics

    s = site("fit-site")
    sunset, _ = physics.night_bounds_utc(
        np.array([s.lat]), np.array([s.lon]), np.array([utc(2026, 10, 14, 21).timestamp()])
    )[:2]
    sunset_t = dt.datetime.fromtimestamp(float(sunset[0]), dt.UTC)
    at = sunset_t + timedelta(hours=3, minutes=5)
    times = [sunset_t + timedelta(minutes=10 * i + 5) for i in range(19)]
    hours = np.array([(t - sunset_t).total_seconds() / 3600 for t in times])
    rng = np.random.default_rng(3)
    temp = 9.0 - 1.7 * np.sqrt(hours) + rng.normal(0, 0.05, hours.size)
    obs = pd.DataFrame(
        {
            "site": s.id,
            "time": pd.to_datetime(times, utc=True),
            "kind": "obs",
            "temp_c": temp,
            "dewpoint_c": 4.0,
            "wind_ms": 1.0,
            "cloud_pct": 0.0,
        }
    )
    row, table = one(obs, s, at)
    slope, intercept = np.polyfit(np.sqrt(hours), temp, 1)
    _, next_sunrise, _ = physics.night_bounds_utc(
        np.array([s.lat]), np.array([s.lon]), np.array([at.timestamp()])
    )
    night_h = (float(next_sunrise[0]) - sunset_t.timestamp()) / 3600
    assert table.projection_method[0] == "cooling-fit"
    assert row["projected_min_temp_c"] == pytest.approx(
        intercept + slope * np.sqrt(night_h), abs=1e-6
    )
    # the curve reaches the 4 °C dew point at ((T0 − Td)/k)² hours after sunset
    cross = ((intercept - 4.0) / -slope) ** 2 - (at - sunset_t).total_seconds() / 3600
    assert row["hours_to_crossing"] == pytest.approx(cross, abs=1e-6)


def test_net_longwave_matches_the_worked_value():
    # docs/references.md [LW check]: 10 °C, e = 10 hPa, clear sky, Brutsaert, ε_s 0.98
    # → 82.5 W/m².
    from notifier.physics import dewpoint_c, saturation_vapor_pressure_hpa

    td = float(dewpoint_c(10.0, 100 * 10.0 / saturation_vapor_pressure_hpa(10.0)))
    s = site("lw-site")
    at = utc(2026, 10, 14, 22)
    row, _ = one(steady(s.id, at, temp_c=10.0, dewpoint_c=td, cloud_pct=0.0, wind_ms=1.0), s, at)
    assert row["net_longwave_wm2"] == pytest.approx(82.5, abs=0.3)
    # overcast: Unsworth & Monteith ε = 0.963 at c = 1 → loss about an order smaller
    row, _ = one(steady(s.id, at, temp_c=10.0, dewpoint_c=td, cloud_pct=100.0, wind_ms=1.0), s, at)
    assert row["net_longwave_wm2"] < 15


def test_rh_matches_metpy():
    from metpy.calc import relative_humidity_from_dewpoint
    from metpy.units import units

    s = site("rh-site")
    at = utc(2026, 10, 14, 22)
    row, _ = one(steady(s.id, at, temp_c=12.0, dewpoint_c=9.0, wind_ms=1.0), s, at)
    ref = relative_humidity_from_dewpoint(12.0 * units.degC, 9.0 * units.degC).to("percent")
    assert row["rh_pct"] == pytest.approx(ref.magnitude, abs=0.3)


def test_frost_point_from_published_check():
    # docs/references.md [Td check]: Td(0 °C, 80 %) = −3.04 °C, frost point −2.68 °C.
    s = site("frost-site")
    at = utc(2026, 12, 1, 5)
    row, _ = one(steady(s.id, at, temp_c=0.0, dewpoint_c=-3.04, surface_temp_c=-4.0), s, at)
    assert row["frost_point_c"] == pytest.approx(-2.68, abs=0.02)
    assert row["surface_minus_frost_point_c"] == pytest.approx(-4.0 - row["frost_point_c"])


def test_sun_features_match_astral():
    # astral 3 with the NOAA zenith of 90.833° (docs/references.md [Sun check]).
    from astral import Observer
    from astral.sun import SunDirection, time_of_transit

    s = site("sun-site", lat=51.4769, lon=0.0)
    at = utc(2024, 12, 21, 22, 0)
    obs = steady(s.id, at, temp_c=3.0, dewpoint_c=1.0)
    row, _ = one(obs, s, at)
    rise = time_of_transit(
        Observer(51.4769, 0.0),
        dt.date(2024, 12, 22),
        90.833,
        SunDirection.RISING,
        with_refraction=False,
    )
    assert row["is_night"] == 1.0
    assert row["hours_to_sunrise"] == pytest.approx((rise - at).total_seconds() / 3600, abs=2 / 60)


@pytest.mark.parametrize(
    ("sector", "direction", "speed", "expected"),
    [
        ((200, 320), 250, 3.0, 1.0),
        ((200, 320), 90, 3.0, 0.0),
        ((300, 60), 10, 3.0, 1.0),
        ((300, 60), 180, 3.0, 0.0),
        ((200, 320), 250, 0.2, 0.0),
    ],
    ids=["inside", "outside", "wraps-north-inside", "wraps-north-outside", "calm"],
)
def test_onshore_sector(sector, direction, speed, expected):
    s = site("quay", exposure="coast", onshore_from_deg=sector[0], onshore_to_deg=sector[1])
    at = utc(2026, 5, 1, 3)
    row, _ = one(
        steady(s.id, at, temp_c=10.0, dewpoint_c=9.0, wind_ms=speed, wind_dir_deg=direction), s, at
    )
    assert row["onshore"] == expected


def test_onshore_unknown_without_a_sector():
    s = site("field")
    at = utc(2026, 5, 1, 3)
    row, _ = one(
        steady(s.id, at, temp_c=10.0, dewpoint_c=9.0, wind_ms=3.0, wind_dir_deg=250.0), s, at
    )
    assert np.isnan(row["onshore"])


@pytest.mark.parametrize(
    ("visibility", "weather", "temp", "fog", "mist", "freezing"),
    [
        (800.0, "", 3.0, 1, 0, 0),
        (3000.0, "BR", 3.0, 0, 1, 0),
        (200.0, "FZFG", -2.0, 1, 0, 1),
        (900.0, "", -1.0, 1, 0, 1),
        (9999.0, "", 3.0, 0, 0, 0),
        # WMO-No. 306 FM 15 (code table 4678) and docs/references.md [FMH-1]: VC is in
        # the vicinity, not at the station; MI, BC and PR fog are reported only while
        # the visibility at the station is 1000 m or more: their text is not fog here
        (np.nan, "BCFG", 3.0, 0, 0, 0),
        (9999.0, "VCFG", 3.0, 0, 0, 0),
        (np.nan, "MIFG", 3.0, 0, 0, 0),
        (3000.0, "PRFG BR", 3.0, 0, 1, 0),
        (800.0, "MIFG", 3.0, 1, 0, 0),  # WMO-No. 8: below 1000 m is fog whatever the text
        (np.nan, "FG", 3.0, 1, 0, 0),
        (np.nan, "-DZ FG", 3.0, 1, 0, 0),
    ],
    ids=["vis-800-fog", "BR-mist", "FZFG", "fog-below-zero", "clear", "patches-BCFG",
         "vicinity-VCFG", "shallow-MIFG", "partial-PRFG-mist", "MIFG-with-800-m", "FG",
         "drizzle-and-FG"],
)  # fmt: skip
def test_observed_flags_follow_wmo_definitions(visibility, weather, temp, fog, mist, freezing):
    # WMO-No. 8: fog below 1000 m; WMO-No. 306 FM 15: BR, FG, FZFG (fog below 0 °C).
    s = site("obs-site")
    at = utc(2026, 11, 3, 4)
    row, _ = one(
        steady(
            s.id,
            at,
            hours=0.5,
            temp_c=temp,
            dewpoint_c=temp - 0.3,
            visibility_m=visibility,
            weather=weather,
        ),
        s,
        at,
    )
    assert (row["observed_fog"], row["observed_mist"], row["observed_freezing_fog"]) == (
        fog,
        mist,
        freezing,
    )


def test_no_data_is_infinitely_old_and_everything_else_unknown():
    s = site("silent")
    row, _ = one(pd.DataFrame(), s, utc(2026, 11, 3, 4))
    assert row["data_age_min"] == np.inf
    assert np.isnan(row["temp_c"]) and np.isnan(row["dewpoint_depression_c"])


def test_old_readings_are_not_current():
    s = site("old")
    at = utc(2026, 11, 3, 4)
    obs = steady(s.id, at - timedelta(hours=5), temp_c=3.0, dewpoint_c=2.0)
    row, _ = one(obs, s, at)
    assert row["data_age_min"] == pytest.approx(300.0)
    assert np.isnan(row["temp_c"])


def test_forecast_rows_give_the_projected_minimum():
    s = site("fc-site")
    at = utc(2026, 10, 14, 15)
    obs = steady(s.id, at, temp_c=12.0, dewpoint_c=6.0, wind_ms=2.0, cloud_pct=10.0)
    times = pd.date_range(at, periods=18, freq="1h", tz="UTC")
    fc = pd.DataFrame(
        {
            "site": s.id,
            "time": times,
            "kind": "forecast",
            "temp_c": np.r_[np.linspace(12, 4.5, 12), np.linspace(5, 9, 6)],
            "dewpoint_c": 5.0,
        }
    )
    row, table = one(pd.concat([obs, fc]), s, at)
    assert table.projection_method[0] == "forecast"
    assert row["projected_min_temp_c"] == pytest.approx(4.5)  # open site: no offset
    assert row["min_margin_c"] == pytest.approx(-0.5)


def test_crossover_is_the_lowest_afternoon_dewpoint():
    s = site("xo-site")
    at = utc(2026, 10, 14, 20)
    obs = steady(s.id, at, hours=10, step_min=30, temp_c=10.0, dewpoint_c=(6.0, 7.0), wind_ms=1.0)
    row, _ = one(obs, s, at)
    local = obs["time"].dt.tz_convert("Europe/London")
    afternoon = obs.loc[(local.dt.hour >= 12) & (local.dt.hour < 18), "dewpoint_c"]
    assert row["crossover_temp_c"] == pytest.approx(afternoon.min())


def test_vectorised_over_sites_equals_site_by_site():
    sites = [
        site("a"),
        site("b", exposure="valley"),
        site("c", exposure="forest"),
        site("d", exposure="coast", onshore_from_deg=180, onshore_to_deg=300),
        site("e", exposure="urban"),
    ]
    at = utc(2026, 10, 14, 23)
    frames = [
        steady(
            s.id,
            at,
            hours=12,
            temp_c=(14.0 - i, 5.0 - i / 2),
            dewpoint_c=(6.0, 4.0 + i / 3),
            wind_ms=1.0 + i,
            cloud_pct=10.0 * i,
            wind_dir_deg=200.0,
            water_temp_c=9.0,
            visibility_m=5000.0 - 900 * i,
        )
        for i, s in enumerate(sites)
    ]
    together = compute_features(pd.concat(frames), sites, at)
    for i, s in enumerate(sites):
        alone = compute_features(frames[i], [s], at)
        for name in FEATURES:
            np.testing.assert_allclose(
                together.values[name][i],
                alone.values[name][0],
                rtol=0,
                atol=1e-12,
                err_msg=f"{s.id} {name}",
            )


def test_a_flat_depression_is_not_closing():
    # readings at 0.01 °C resolution, depression constant: the Theil–Sen slope is a
    # rounding residue, and no saturation time may be projected from it
    s = site("flat")
    at = utc(2026, 11, 20, 3)
    obs = steady(s.id, at, temp_c=5.37, dewpoint_c=3.21, wind_ms=1.0, cloud_pct=0.0)
    row, _ = one(obs, s, at)
    assert abs(row["depression_trend_c_per_h"]) < 1e-9
    assert np.isnan(row["hours_to_saturation"])


def test_many_times_at_once_equal_each_time_alone():
    # more than a handful of times takes the batched sun path (a replay's day of steps)
    from notifier.engine.features import compute_features_at

    sites = [
        site("a"),
        site("b", exposure="valley", lat=60.1, lon=10.0),
        site("c", lat=-33.9, lon=18.4, timezone="Africa/Johannesburg"),
    ]
    end = utc(2026, 10, 15, 6)
    frames = [
        steady(
            s.id,
            end,
            hours=30,
            temp_c=(12.0, 4.0),
            dewpoint_c=(6.0, 3.5),
            wind_ms=1.0,
            cloud_pct=10.0,
        )
        for s in sites
    ]
    obs = pd.concat(frames)
    times = [end - timedelta(minutes=50 * k) for k in range(14)]
    batched = compute_features_at(obs, sites, times)
    for t, table in zip(times, batched, strict=True):
        alone = compute_features(obs, sites, t)
        for name in FEATURES:
            np.testing.assert_allclose(
                table.values[name], alone.values[name], rtol=0, atol=1e-9, err_msg=f"{t} {name}"
            )


@pytest.mark.parametrize("seed", range(4))
def test_the_sun_carried_from_another_time_equals_the_sun_worked_out(seed):
    # A cycle reuses the sun of the cycle before (or a later hold time's) for every site
    # whose sun has neither set nor risen in between; the reference is
    # physics.night_bounds_utc at the new time, itself checked against astral
    # (tests/physics/test_sun.py). Offsets span sunsets and sunrises in both directions.
    from notifier import physics
    from notifier.engine.block import SiteArrays
    from notifier.engine.features import _carried

    rng = np.random.default_rng(seed)
    n = 400
    sites = [
        site(f"s{i}", lat=float(rng.uniform(-60.0, 66.0)), lon=float(rng.uniform(-180, 180)))
        for i in range(n)
    ]
    st = SiteArrays.of(sites)
    t_known = utc(2026, 11, 20, 3).timestamp() + float(rng.uniform(0, 86400))
    known = physics.night_bounds_utc(st.lat, st.lon, np.full(n, t_known))
    for hours in (-14.0, -5.0, -0.5, 0.0, 0.2, 3.0, 9.0, 16.0, 30.0):
        t_at = t_known + hours * 3600.0
        carried = _carried(st, t_at, t_known, *(np.array(a, copy=True) for a in known))
        direct = physics.night_bounds_utc(st.lat, st.lon, np.full(n, t_at))
        np.testing.assert_array_equal(carried[2], direct[2], err_msg=f"night at {hours} h")
        for got, want in zip(carried[:2], direct[:2], strict=True):
            np.testing.assert_allclose(got, want, rtol=0, atol=0.01, err_msg=f"{hours} h")


# -- data resolution, trusted cooling fits, visibility -------------------------------------


def _f_to_c(f):
    # the definition of the Fahrenheit scale: t/°C = (t/°F − 32) × 5/9 (SI Brochure 2019)
    return (np.asarray(f, dtype=float) - 32.0) * 5.0 / 9.0


def test_whole_fahrenheit_readings_have_a_five_ninths_step_and_a_jitter_is_not_closing():
    # Temperatures in whole °F (US METAR/ASOS practice) move the depression in steps of
    # 5/9 °C. Over 3 h one step down (a trend of −0.19 °C/h at most) is within the
    # data's resolution: not closing, whatever the slope's sign.
    s = site("whole-f")
    at = utc(2026, 11, 20, 3)
    temp_f = [41, 41, 41, 40]  # hourly, the last step one °F down at a fixed dew point
    obs = pd.DataFrame(
        {
            "site": s.id,
            "time": pd.to_datetime([at - timedelta(hours=3 - i) for i in range(4)], utc=True),
            "kind": "obs",
            "temp_c": _f_to_c(temp_f),
            "dewpoint_c": float(_f_to_c(39)),
            "wind_ms": 1.0,
        }
    )
    row, _ = one(obs, s, at)
    assert row["depression_step_c"] == pytest.approx(5.0 / 9.0, abs=1e-9)
    assert row["depression_trend_c_per_h"] <= 0.0
    assert row["depression_closing"] == 0.0
    assert np.isnan(row["hours_to_saturation"])


def test_a_depression_closing_by_several_steps_is_closing():
    s = site("closing-f")
    at = utc(2026, 11, 20, 3)
    temp_f = [44, 43, 42, 41, 40]  # one °F an hour: −0.56 °C/h, three times q / 3 h
    obs = pd.DataFrame(
        {
            "site": s.id,
            "time": pd.to_datetime([at - timedelta(hours=4 - i) for i in range(5)], utc=True),
            "kind": "obs",
            "temp_c": _f_to_c(temp_f),
            "dewpoint_c": float(_f_to_c(39)),
            "wind_ms": 1.0,
        }
    )
    row, _ = one(obs, s, at)
    assert row["depression_trend_c_per_h"] == pytest.approx(-5.0 / 9.0, abs=1e-9)
    assert row["depression_closing"] == 1.0
    assert row["hours_to_saturation"] == pytest.approx((5.0 / 9.0) / (5.0 / 9.0), abs=1e-9)


def _evening(s, hours_after_sunset, step_min, cloud_pct, k=1.7, dewpoint_c=4.0):
    """Readings from sunset on, cooling by Brunt's law T = 9 − k√t (t in h)."""
    from notifier import physics

    sunset, _ = physics.night_bounds_utc(
        np.array([s.lat]), np.array([s.lon]), np.array([utc(2026, 10, 14, 21).timestamp()])
    )[:2]
    sunset_t = dt.datetime.fromtimestamp(float(sunset[0]), dt.UTC)
    n = int(hours_after_sunset * 60 / step_min) + 1
    times = [sunset_t + timedelta(minutes=step_min * i) for i in range(n)]
    hours = np.array([(t - sunset_t).total_seconds() / 3600 for t in times])
    obs = pd.DataFrame(
        {
            "site": s.id,
            "time": pd.to_datetime(times, utc=True),
            "kind": "obs",
            "temp_c": 9.0 - k * np.sqrt(hours),
            "dewpoint_c": dewpoint_c,
            "wind_ms": 1.0,
            "cloud_pct": cloud_pct,
        }
    )
    return obs, times[-1]


@pytest.mark.parametrize(
    ("hours", "step_min"),
    [(1.0, 10), (2.0, 60), (1.75, 10)],
    ids=["within-the-evening-transition", "three-hourly-points", "span-under-two-hours"],
)
def test_a_cooling_fit_is_not_trusted_on_too_little_evening(hours, step_min):
    # 2–3 points after sunset fit almost any curve: no fit, no crossing time from it
    s = site("early-evening")
    obs, at = _evening(s, hours, step_min, cloud_pct=0.0)
    row, table = one(obs, s, at)
    assert table.projection_method[0] != "cooling-fit"
    assert np.isnan(row["hours_to_crossing"])
    assert np.isnan(table.fit_k_per_sqrt_h[0])


def test_a_fitted_cooling_rate_is_capped_by_brunts_law_for_the_nights_loss():
    # Overcast: the net long-wave loss is ~13 W/m² (docs/references.md [LW check]), so
    # Brunt's law (docs/references.md [Oke 1987], [Brunt k check]) allows at most
    # k = 60 · 2R / (√π μ) K h^-½ with μ = 1200 — well under the 1.7 K h^-½ the readings
    # show (cooling by advection or rain, not radiation, which the night will not keep).
    s = site("overcast-evening")
    obs, at = _evening(s, 3.0, 10, cloud_pct=100.0)
    row, table = one(obs, s, at)
    assert table.projection_method[0] == "cooling-fit"
    r = row["net_longwave_wm2"]
    assert 5.0 < r < 20.0
    k_cap = 60.0 * 2.0 * r / (np.sqrt(np.pi) * 1200.0)
    assert table.fit_k_per_sqrt_h[0] == pytest.approx(k_cap, rel=1e-9)
    # the capped curve runs on from the temperature now
    t_now = row["temp_c"]
    assert row["projected_min_temp_c"] > t_now - k_cap * 12  # well above an uncapped fall


def test_the_cooling_curve_runs_to_the_crossover_temperature():
    # docs/references.md [Crossover method]: the afternoon's lowest dew point, not the
    # dew point now, is the temperature the night must reach
    s = site("crossover-evening")
    obs, at = _evening(s, 3.0, 10, cloud_pct=0.0)
    row0, _ = one(obs, s, at)
    noon = utc(2026, 10, 14, 15)
    afternoon = steady(s.id, noon, hours=3.0, temp_c=14.0, dewpoint_c=3.0, wind_ms=2.0)
    row, table = one(pd.concat([afternoon, obs]), s, at)
    assert row["crossover_temp_c"] == pytest.approx(3.0)
    t0, k = table.fit_t0_c[0], table.fit_k_per_sqrt_h[0]
    since = row["hours_since_sunset"]
    assert row["hours_to_crossing"] == pytest.approx(((t0 - 3.0) / k) ** 2 - since, abs=1e-6)
    assert row["hours_to_crossing"] > row0["hours_to_crossing"]


def test_visibility_trend_matches_scipy_theil_sen_and_known_flags():
    from scipy.stats import theilslopes

    s = site("vis-site")
    at = utc(2026, 10, 14, 22, 0)
    rng = np.random.default_rng(11)
    vis = np.linspace(9000.0, 3000.0, 19) + rng.normal(0, 200, 19)
    obs = steady(s.id, at, temp_c=8.0, dewpoint_c=7.0, wind_ms=1.0, visibility_m=vis)
    row, _ = one(obs, s, at)
    expected = theilslopes(obs["visibility_m"].to_numpy(), np.linspace(-3, 0, 19))[0]
    assert row["visibility_trend_m_per_h"] == pytest.approx(expected, abs=1e-6)
    assert row["visibility_known"] == 1.0
    assert row["water_temp_known"] == 0.0
    bare = steady(s.id, at, temp_c=8.0, dewpoint_c=7.0, wind_ms=1.0, water_temp_c=6.0)
    row, _ = one(bare, s, at)
    assert row["visibility_known"] == 0.0 and np.isnan(row["visibility_trend_m_per_h"])
    assert row["water_temp_known"] == 1.0
    assert row["cloud_known"] == 0.0
    row, _ = one(steady(s.id, at, temp_c=8.0, dewpoint_c=7.0, cloud_pct=90.0), s, at)
    assert row["cloud_known"] == 1.0


def test_without_a_cloud_report_the_clear_sky_loss_still_caps_the_cooling_fit():
    # No cloud reported: the clear-sky loss is the largest there can be, so it still
    # bounds the fit. Ending at 10 °C with e = 10 hPa the loss is 82.5 W/m²
    # (docs/references.md [LW check]) and the cap 4.655 K h^-½ (docs/references.md
    # [Brunt cap check]); the readings fall at 6 K h^-½.
    from notifier.physics import dewpoint_c, saturation_vapor_pressure_hpa

    td = float(dewpoint_c(10.0, 100 * 10.0 / saturation_vapor_pressure_hpa(10.0)))
    s = site("no-cloud-sensor")
    obs, at = _evening(s, 3.0, 10, cloud_pct=0.0, k=6.0, dewpoint_c=td)
    obs["temp_c"] += 10.0 + 6.0 * np.sqrt(3.0) - 9.0  # 10 °C at the last reading
    obs = obs.drop(columns=["cloud_pct"])
    row, table = one(obs, s, at)
    assert np.isnan(row["net_longwave_wm2"]) and row["cloud_known"] == 0.0
    assert row["temp_c"] == pytest.approx(10.0)
    assert table.fit_k_per_sqrt_h[0] == pytest.approx(4.655, abs=0.01)


def test_ceiling_trend_matches_scipy_theil_sen_with_no_ceiling_counted_as_low_cloud_top():
    # SciPy's theilslopes is the reference for Sen's (1968) slope; heights above the low
    # étage (2000 m, docs/references.md [WMO cloud atlas]) and "no ceiling" count as 2000 m
    from scipy.stats import theilslopes

    s = site("ceiling-site")
    at = utc(2026, 10, 14, 22, 0)
    ceiling = np.linspace(900.0, 120.0, 19)
    ceiling[:3] = 30000.0  # no ceiling at first, then a deck forming and lowering
    obs = steady(s.id, at, temp_c=8.0, dewpoint_c=7.5, wind_ms=5.0, ceiling_m=ceiling)
    row, _ = one(obs, s, at)
    expected = theilslopes(np.minimum(ceiling, 2000.0), np.linspace(-3, 0, 19))[0]
    assert row["ceiling_m"] == pytest.approx(120.0)
    assert row["ceiling_trend_m_per_h"] == pytest.approx(expected, abs=1e-6)
    assert row["ceiling_trend_m_per_h"] < 0


def test_rain_features_from_hourly_amounts():
    # Each report is the last hour's amount (docs/references.md [FMH-1], Prrrr): three
    # hourly reports in the last 3 h sum to the 3-hour amount; the last report of 0.1 mm
    # or more dates the rain (0.1 mm, the smallest gauge amount: common practice).
    s = site("rain-site")
    at = utc(2026, 10, 14, 22, 0)
    precip = np.zeros(13)
    precip[[5, 6]] = [2.0, 0.4]  # rain ending 6 h before `at`; traces (0) after
    obs = steady(s.id, at, hours=12, step_min=60, temp_c=8.0, dewpoint_c=7.5, precip_mm=precip)
    row, _ = one(obs, s, at)
    assert row["hours_since_precip"] == pytest.approx(6.0)
    assert row["precip_last_3h_mm"] == pytest.approx(float(precip[-4:].mean() * 3))
    wet = obs.assign(precip_mm=np.r_[np.zeros(10), 1.0, 0.5, 0.2])
    row, _ = one(wet, s, at)
    # hours -3 … 0 hold 0, 1.0, 0.5, 0.2 mm: the window's mean hourly amount × 3 h
    assert row["precip_last_3h_mm"] == pytest.approx((0.0 + 1.0 + 0.5 + 0.2) / 4 * 3)
    assert row["hours_since_precip"] == 0.0
    dry = obs.assign(precip_mm=0.0)
    assert one(dry, s, at)[0]["hours_since_precip"] == 24.0  # none in the window


def test_without_ceiling_or_rain_reports_they_are_unknown():
    s = site("bare-site")
    at = utc(2026, 10, 14, 22, 0)
    row, _ = one(steady(s.id, at, temp_c=8.0, dewpoint_c=7.5), s, at)
    for name in ("ceiling_m", "ceiling_trend_m_per_h", "precip_last_3h_mm", "hours_since_precip"):
        assert np.isnan(row[name]), name
    assert row["ceiling_known"] == 0.0 and row["precip_known"] == 0.0
    both = steady(s.id, at, temp_c=8.0, dewpoint_c=7.5, ceiling_m=300.0, precip_mm=0.0)
    row, _ = one(both, s, at)
    assert row["ceiling_known"] == 1.0 and row["precip_known"] == 1.0


def test_a_monthly_water_climatology_stands_in_for_a_missing_water_temperature():
    # The operator's climatology for the evaluation time's month (November: the 11th
    # value) is the water temperature when none is reported, flagged estimated; a
    # measured one wins (common practice: climatological SST where no observation).
    from notifier.core.config import Site

    s = Site(
        id="quay-clim", name="Q", lat=55.3, lon=-160.5, timezone="UTC", exposure="coast",
        water_temp_monthly_c=tuple(float(m) for m in range(1, 13)),
    )  # fmt: skip
    at = utc(2026, 11, 3, 4)
    row, _ = one(steady(s.id, at, temp_c=12.0, dewpoint_c=11.5), s, at)
    assert row["water_temp_c"] == 11.0 and row["water_temp_estimated"] == 1.0
    assert row["water_temp_known"] == 0.0
    assert row["dewpoint_minus_water_c"] == pytest.approx(0.5)
    row, _ = one(steady(s.id, at, temp_c=12.0, dewpoint_c=11.5, water_temp_c=9.0), s, at)
    assert row["water_temp_c"] == 9.0 and row["water_temp_estimated"] == 0.0
    with pytest.raises(ValueError, match="needs 12 values"):
        Site(id="q", name="Q", lat=1, lon=1, timezone="UTC", water_temp_monthly_c=(5.0,))
    with pytest.raises(ValueError, match="-2 to 40"):
        Site(id="q", name="Q", lat=1, lon=1, timezone="UTC", water_temp_monthly_c=(-5.0,) * 12)
