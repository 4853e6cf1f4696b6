"""Sunrise/sunset and night bounds against check values and astral.

The check values are docs/references.md [Sun check].

astral 3.2 is used only here, as an independent implementation of the same NOAA
equations. Its ``time_of_transit(observer, date, zenith, direction, with_refraction)``
(read from its source in the venv) with zenith 90.833 and ``with_refraction=False``
matches NOAA; its default ``sunrise``/``sunset`` add refraction again and differ by ~20 s.
"""

from __future__ import annotations

import datetime as dt
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from notifier.physics import night_bounds_utc, night_length_h, sunrise_sunset_utc

astral = pytest.importorskip("astral")
astral_sun = pytest.importorskip("astral.sun")

TOLERANCE_S = 60.0


def posix(text: str) -> float:
    return dt.datetime.fromisoformat(text).replace(tzinfo=dt.UTC).timestamp()


def astral_event_s(lat: float, lon: float, day: dt.date, rising: bool) -> float:
    """astral's NOAA event nearest to our definition (astral may label it another date)."""
    direction = astral_sun.SunDirection.RISING if rising else astral_sun.SunDirection.SETTING
    observer = astral.Observer(latitude=lat, longitude=lon)
    nominal_noon = posix(f"{day.isoformat()}T12:00:00") - lon * 240.0
    candidates = []
    for offset in (-1, 0, 1):
        try:
            event = astral_sun.time_of_transit(
                observer, day + dt.timedelta(days=offset), 90.833, direction, with_refraction=False
            )
        except ValueError:  # polar day or night
            continue
        candidates.append(event.timestamp())
    if not candidates:
        return float("nan")
    # The event of the solar day centred on this date's local noon lies within 12 h of it.
    sign = -1.0 if rising else 1.0
    return min(candidates, key=lambda s: abs(s - (nominal_noon + sign * 6 * 3600)))


# docs/references.md [Sun check], ±60 s (and astral agrees to under a second).
REFERENCE_EVENTS = [
    (51.4769, 0.0, dt.date(2024, 6, 21), "2024-06-21T03:42:50", "2024-06-21T20:20:59"),
    (51.4769, 0.0, dt.date(2024, 12, 21), "2024-12-21T08:03:20", "2024-12-21T15:53:18"),
    (0.0, 0.0, dt.date(2024, 3, 20), "2024-03-20T06:04:01", "2024-03-20T18:10:32"),
]


@pytest.mark.parametrize(
    ("lat", "lon", "day", "sunrise", "sunset"),
    REFERENCE_EVENTS,
    ids=["greenwich-june", "greenwich-december", "equator-equinox"],
)
def test_reference_check_values(
    lat: float, lon: float, day: dt.date, sunrise: str, sunset: str
) -> None:
    rise, sset = sunrise_sunset_utc(lat, lon, day)
    assert rise == pytest.approx(posix(sunrise), abs=TOLERANCE_S)
    assert sset == pytest.approx(posix(sunset), abs=TOLERANCE_S)


ASTRAL_CASES = [
    (51.4769, 0.0, dt.date(2024, 6, 21)),  # Greenwich
    (-33.87, 151.21, dt.date(2024, 6, 21)),  # Sydney, southern winter, far east
    (-33.87, 151.21, dt.date(2024, 12, 21)),
    (-54.8, -68.3, dt.date(2024, 6, 21)),  # Ushuaia, southern high latitude
    (-54.8, -68.3, dt.date(2024, 12, 21)),
    (65.0, 25.5, dt.date(2024, 12, 21)),  # Oulu, high latitude in winter
    (65.0, 25.5, dt.date(2024, 2, 15)),
    (61.2, -149.9, dt.date(2024, 12, 21)),  # Anchorage, high latitude far west
    (21.3, -157.86, dt.date(2024, 9, 22)),  # Honolulu
    (-36.85, 174.76, dt.date(2024, 1, 10)),  # Auckland, near the date line
    (35.68, 139.77, dt.date(2024, 11, 5)),  # Tokyo
    (0.0, -179.9, dt.date(2025, 7, 4)),
]


@pytest.mark.parametrize(
    ("lat", "lon", "day"), ASTRAL_CASES, ids=[f"{c[0]}_{c[1]}_{c[2]}" for c in ASTRAL_CASES]
)
def test_matches_astral(lat: float, lon: float, day: dt.date) -> None:
    rise, sset = sunrise_sunset_utc(lat, lon, day)
    assert rise == pytest.approx(astral_event_s(lat, lon, day, rising=True), abs=TOLERANCE_S)
    assert sset == pytest.approx(astral_event_s(lat, lon, day, rising=False), abs=TOLERANCE_S)
    nominal_noon = posix(f"{day.isoformat()}T12:00:00") - lon * 240.0
    assert nominal_noon - 12 * 3600 < rise < nominal_noon < sset < nominal_noon + 12 * 3600


def test_vectorised_over_sites_and_dates_matches_scalar_calls() -> None:
    lats = np.array([c[0] for c in ASTRAL_CASES])
    lons = np.array([c[1] for c in ASTRAL_CASES])
    days = np.array([c[2].isoformat() for c in ASTRAL_CASES], dtype="datetime64[D]")
    rises, sets = sunrise_sunset_utc(lats, lons, days)
    assert rises.shape == sets.shape == (len(ASTRAL_CASES),)
    for i, (lat, lon, day) in enumerate(ASTRAL_CASES):
        rise, sset = sunrise_sunset_utc(lat, lon, day)
        assert rises[i] == pytest.approx(rise, abs=1e-3)
        assert sets[i] == pytest.approx(sset, abs=1e-3)


def test_datetime_and_datetime64_days_are_accepted() -> None:
    from_date = sunrise_sunset_utc(51.4769, 0.0, dt.date(2024, 6, 21))
    from_datetime = sunrise_sunset_utc(51.4769, 0.0, dt.datetime(2024, 6, 21, 23, 59))
    from_numpy = sunrise_sunset_utc(51.4769, 0.0, np.datetime64("2024-06-21"))
    assert from_date == from_datetime == from_numpy


@pytest.mark.parametrize(
    ("lat", "lon", "day"),
    [
        (78.22, 15.65, dt.date(2024, 12, 21)),  # Longyearbyen, polar night
        (78.22, 15.65, dt.date(2024, 6, 21)),  # polar day
        (-77.85, 166.67, dt.date(2024, 6, 21)),  # McMurdo, polar night
        (91.0, 0.0, dt.date(2024, 3, 20)),  # out of range
        (0.0, 181.0, dt.date(2024, 3, 20)),
        (np.nan, 0.0, dt.date(2024, 3, 20)),
        (0.0, 0.0, np.datetime64("NaT")),
    ],
    ids=["polar-night", "polar-day", "south-polar-night", "lat-91", "lon-181", "nan", "nat"],
)
def test_no_sunrise_is_nan(lat: float, lon: float, day: dt.date) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        rise, sset = sunrise_sunset_utc(lat, lon, day)
        length = night_length_h(lat, lon, day)
    assert np.isnan(rise) and np.isnan(sset) and np.isnan(length)


@pytest.mark.parametrize(
    ("lat", "lon"),
    [(78.22, 15.65), (-77.85, 166.67), (91.0, 0.0), (0.0, 181.0), (np.nan, 0.0)],
    ids=["polar-day", "polar-night", "lat-91", "lon-181", "nan"],
)
def test_night_bounds_unknown_is_nan_and_not_night(lat: float, lon: float) -> None:
    # On 21 June 78 N has polar day and 78 S polar night: the night is "unknown".
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        sunset_s, sunrise_s, is_night = night_bounds_utc(lat, lon, posix("2024-06-21T00:00:00"))
    assert np.isnan(sunset_s) and np.isnan(sunrise_s) and not is_night


# --- night_length_h ------------------------------------------------------------------


def test_night_length() -> None:
    # astral (NOAA) Greenwich: sunset 2024-12-21 15:53:18, sunrise 2024-12-22 08:03:48.
    expected_h = (posix("2024-12-22T08:03:48") - posix("2024-12-21T15:53:18")) / 3600.0
    assert night_length_h(51.4769, 0.0, dt.date(2024, 12, 21)) == pytest.approx(
        expected_h, abs=2 * TOLERANCE_S / 3600.0
    )
    # At the equator the night is about 11.9 h all year (refraction and semidiameter
    # lengthen the day by ~7 min).
    assert night_length_h(0.0, 0.0, dt.date(2024, 3, 20)) == pytest.approx(11.87, abs=0.05)


# --- night_bounds_utc ----------------------------------------------------------------

GREENWICH = (51.4769, 0.0)
DEC21_SUNSET = "2024-12-21T15:53:18"  # docs/references.md [Sun check]
DEC22_SUNRISE = "2024-12-22T08:03:48"  # astral, NOAA zenith, no extra refraction
DEC21_SUNRISE = "2024-12-21T08:03:20"  # docs/references.md [Sun check]


@pytest.mark.parametrize(
    ("when", "sunset", "sunrise", "night"),
    [
        ("2024-12-21T22:00:00", DEC21_SUNSET, DEC22_SUNRISE, True),
        ("2024-12-22T03:00:00", DEC21_SUNSET, DEC22_SUNRISE, True),
        ("2024-12-21T12:00:00", DEC21_SUNSET, DEC22_SUNRISE, False),
        ("2024-12-21T09:00:00", DEC21_SUNSET, DEC22_SUNRISE, False),
        # 2024-12-20 sunset 15:52:49 from astral (NOAA zenith, no extra refraction).
        ("2024-12-21T07:00:00", "2024-12-20T15:52:49", DEC21_SUNRISE, True),
        ("2024-12-21T23:59:59", DEC21_SUNSET, DEC22_SUNRISE, True),
        ("2024-12-22T00:00:01", DEC21_SUNSET, DEC22_SUNRISE, True),
    ],
    ids=[
        "evening",
        "small-hours",
        "noon",
        "morning",
        "before-dawn",
        "before-midnight",
        "after-midnight",
    ],
)
def test_night_bounds_greenwich(when: str, sunset: str, sunrise: str, night: bool) -> None:
    sunset_s, sunrise_s, is_night = night_bounds_utc(*GREENWICH, posix(when))
    assert sunset_s == pytest.approx(posix(sunset), abs=TOLERANCE_S)
    assert sunrise_s == pytest.approx(posix(sunrise), abs=TOLERANCE_S)
    assert bool(is_night) is night


def test_night_bounds_at_the_events() -> None:
    rise, sset = sunrise_sunset_utc(*GREENWICH, dt.date(2024, 12, 21))
    at_sunset = night_bounds_utc(*GREENWICH, sset)
    at_sunrise = night_bounds_utc(*GREENWICH, rise)
    assert at_sunset[2] and at_sunset[0] == sset  # sunset itself counts as night
    assert not at_sunrise[2] and at_sunrise[0] == sset  # sunrise itself counts as day


def test_night_bounds_far_east_uses_local_night() -> None:
    # Sydney 2024-06-21 10:00 UTC is 20:00 local: the night began at local sunset
    # (~06:54 UTC) and ends at the next local sunrise (~20:00 UTC).
    lat, lon = -33.87, 151.21
    sunset_s, sunrise_s, is_night = night_bounds_utc(lat, lon, posix("2024-06-21T10:00:00"))
    assert is_night
    assert sunset_s == pytest.approx(astral_event_s(lat, lon, dt.date(2024, 6, 21), False), abs=60)
    assert sunrise_s == pytest.approx(astral_event_s(lat, lon, dt.date(2024, 6, 22), True), abs=60)


def test_night_bounds_vectorised() -> None:
    lats = np.array([51.4769, 51.4769, -33.87, 78.22])
    lons = np.array([0.0, 0.0, 151.21, 15.65])
    times = np.array([posix("2024-12-21T22:00:00"), posix("2024-12-21T12:00:00")] * 2)
    sunset_s, sunrise_s, is_night = night_bounds_utc(lats, lons, times)
    assert sunset_s.shape == sunrise_s.shape == is_night.shape == (4,)
    np.testing.assert_array_equal(is_night, [True, False, False, False])
    assert np.isfinite(sunset_s[:3]).all() and np.isnan(sunset_s[3])  # 78 N: polar night
    for i in range(4):
        one = night_bounds_utc(lats[i], lons[i], times[i])
        np.testing.assert_array_equal([sunset_s[i], sunrise_s[i]], [one[0], one[1]])


@settings(max_examples=100, deadline=None)
@given(
    lat=st.floats(-65.0, 65.0),
    lon=st.floats(-180.0, 180.0),
    t=st.floats(posix("2024-01-01T00:00:00"), posix("2026-01-01T00:00:00")),
)
def test_night_bounds_are_consistent_with_sun_position(lat: float, lon: float, t: float) -> None:
    sunset_s, sunrise_s, is_night = night_bounds_utc(lat, lon, t)
    if not np.isfinite(sunset_s):
        return  # polar: "unknown" (can only happen above ~66.5°, but be safe)
    assert sunset_s < sunrise_s < sunset_s + 24 * 3600
    if is_night:
        assert sunset_s <= t < sunrise_s
    else:
        assert t < sunset_s
    # Independent check with astral's own solar position: the sun's centre is more than
    # 0.833° below the horizon exactly at night (away from the events themselves).
    if min(abs(t - sunset_s), abs(t - sunrise_s)) > 180.0:
        observer = astral.Observer(latitude=lat, longitude=lon)
        when = dt.datetime.fromtimestamp(t, tz=dt.UTC)
        zenith = astral_sun.zenith(observer, when, with_refraction=False)
        assert (zenith > 90.833) == bool(is_night)


def test_no_warning_for_bad_input() -> None:
    bad = np.array([np.nan, 1e9, -1e9, 90.0, -90.0, np.inf, -np.inf, 1e308, -1e308])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        sunrise_sunset_utc(bad, bad, dt.date(2024, 1, 1))
        night_bounds_utc(bad, bad, bad)
        night_bounds_utc(0.0, 0.0, bad)
        night_length_h(bad, bad, np.datetime64("2024-01-01"))
    # and what comes out (house rule: physically undefined input gives NaN): no such
    # latitude or longitude, or a pole in polar night/day, has no sunrise or sunset
    for result in (*sunrise_sunset_utc(bad, bad, dt.date(2024, 1, 1)),
                   *night_bounds_utc(bad, bad, bad)[:2],
                   night_length_h(bad, bad, np.datetime64("2024-01-01"))):  # fmt: skip
        assert np.isnan(result).all(), result
    assert not night_bounds_utc(bad, bad, bad)[2].any()  # unknown, not "night"
    # at 0°N 0°E, times of 1938..2001 (±1e9 s, ±90 s) have a night; NaN, ±inf and
    # ±1e308 s (far outside 1901..2099) do not
    sunset, sunrise, is_night = night_bounds_utc(0.0, 0.0, bad)
    defined = np.array([False, True, True, True, True, False, False, False, False])
    assert np.isfinite(sunset[defined]).all() and np.isfinite(sunrise[defined]).all()
    assert np.isnan(sunset[~defined]).all() and np.isnan(sunrise[~defined]).all()
    assert not is_night[~defined].any()


@pytest.mark.parametrize(
    "day",
    [dt.date(1900, 12, 31), dt.date(2100, 1, 1), np.datetime64("9999-12-31"), dt.date(1, 1, 1)],
    ids=["1900", "2100", "9999", "year-1"],
)
def test_dates_outside_supported_years_are_nan(day: dt.date) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        rise, sset = sunrise_sunset_utc(51.4769, 0.0, day)
    assert np.isnan(rise) and np.isnan(sset)


def test_many_sites_at_once_match_each_alone() -> None:
    """Thousands of sites take the interpolated declination/EoT grid; each alone takes
    the direct equations. The interpolation error bound (h²/8 · f'', see
    ``notifier.physics.sun._GRID_STEP_S``) allows a few milliseconds of event time."""
    rng = np.random.default_rng(11)
    n = 2000
    lats = rng.uniform(-60.0, 65.0, n)
    lons = rng.uniform(-180.0, 180.0, n)
    times = posix("2025-11-20T03:00:00") + rng.uniform(-3 * 86400, 3 * 86400, n)
    sunset_s, sunrise_s, is_night = night_bounds_utc(lats, lons, times)
    for i in rng.choice(n, 60, replace=False):
        one = night_bounds_utc(lats[i], lons[i], times[i])
        np.testing.assert_allclose([sunset_s[i], sunrise_s[i]], [one[0], one[1]], atol=0.005)
        assert bool(is_night[i]) == bool(one[2])
    # and the many-site answer still agrees with astral's NOAA events (±60 s,
    # docs/references.md [Sun check])
    for i in rng.choice(n, 10, replace=False):
        day = dt.datetime.fromtimestamp(sunset_s[i] + lons[i] * 240.0, tz=dt.UTC).date()
        assert abs(sunset_s[i] - astral_event_s(lats[i], lons[i], day, rising=False)) < 1.0


def test_a_chosen_grid_gives_each_instant_the_same_answer_in_any_call() -> None:
    """With the grid chosen (``tabulate``), an instant's events do not depend on which
    others share the call: the grid's points and fractions are absolute, and repeated
    (place, day) pairs are worked out once. A history's pass over many times leans on
    this to equal one call per time bit for bit (tests/engine/test_steps.py)."""
    from notifier.physics.sun import tabulated_rows

    rng = np.random.default_rng(19)
    n = 300
    lats = rng.uniform(-60.0, 65.0, n)
    lons = rng.uniform(-180.0, 180.0, n)
    t = posix("2025-11-20T03:00:00")
    for tabulate in (True, False):
        alone = night_bounds_utc(lats, lons, np.full(n, t), tabulate=tabulate)
        # the same instants among others days away, and each site twice over
        times = np.concatenate([np.full(n, t), t + rng.uniform(-9 * 86400, 9 * 86400, n)])
        mixed = night_bounds_utc(np.tile(lats, 2), np.tile(lons, 2), times, tabulate=tabulate)
        for got, want in zip(mixed, alone, strict=True):
            np.testing.assert_array_equal(got[:n], want)
    # a few hundred sites at one time: the default call evaluates directly, as the rows
    # report; and the two ways agree to the interpolation bound (a few ms, see above)
    assert not tabulated_rows(lats, lons, np.full((1, n), t))[0]
    direct = night_bounds_utc(lats, lons, np.full(n, t))
    gridded = night_bounds_utc(lats, lons, np.full(n, t), tabulate=True)
    np.testing.assert_allclose(gridded[0], direct[0], atol=0.005, equal_nan=True)
    # and the gridded answer still agrees with astral's NOAA events (±60 s,
    # docs/references.md [Sun check])
    for i in rng.choice(n, 5, replace=False):
        if np.isnan(gridded[0][i]):
            continue
        day = dt.datetime.fromtimestamp(gridded[0][i] + lons[i] * 240.0, tz=dt.UTC).date()
        assert abs(gridded[0][i] - astral_event_s(lats[i], lons[i], day, rising=False)) < 1.0
