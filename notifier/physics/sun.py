"""Sunrise, sunset and night bounds from the NOAA solar calculator equations (after Meeus).

Implemented directly in numpy and vectorised over latitude, longitude and date/time
arrays (which broadcast against each other). Times are POSIX seconds (UTC) as floats.
Where the sun does not cross the horizon that day (polar day or night), or an input is
NaN or out of range, the result is NaN.

Equations: NOAA Global Monitoring Laboratory solar calculator, which follows Meeus,
*Astronomical Algorithms* (2nd ed., 1998), ch. 7 (Julian day), ch. 22 (obliquity),
ch. 25 (solar coordinates, low accuracy) and ch. 28 (equation of time). NOAA states an
accuracy of about a minute within +-72° latitude (checked; the chapter numbers and the
34' + 16' split are from memory: docs/references.md [NOAA calculator], [Meeus 1998]).
Sunrise and sunset use the zenith 90.833° (refraction 34' at the horizon plus the solar
semidiameter 16').
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .constants import (
    DAYS_PER_JULIAN_CENTURY,
    J2000_JULIAN_DATE,
    MINUTES_PER_DEGREE,
    SECONDS_PER_DAY,
    SECONDS_PER_HOUR,
    SECONDS_PER_MINUTE,
    SUNRISE_ZENITH_DEG,
    UNIX_EPOCH_JULIAN_DATE,
)

__all__ = ["night_bounds_utc", "night_length_h", "sunrise_sunset_utc", "tabulated_rows"]

FloatArray = np.float64 | NDArray[np.float64]

# Public functions run under np.errstate(all="ignore"): every invalid or out-of-range
# result is masked to NaN explicitly, so floating-point warnings would only be noise
# (and pytest turns them into errors). Private helpers are only called from them.
DayLike = dt.date | np.datetime64 | ArrayLike

# Refinements of the event time: each re-evaluates declination and the equation of time
# at the previous estimate. Two already agree to well under a second away from the poles.
_ITERATIONS = 4
_NOON_MINUTES = 720.0
# Dates supported, as in NOAA's calculator (1901-2099; from memory: NOAA's archived page
# calls its equations very good for 1800-2100, docs/references.md [NOAA calculator]).
# Outside, NaN.
_FIRST_DAY_S = float(np.datetime64("1901-01-01", "D").astype(np.int64)) * SECONDS_PER_DAY
_LAST_DAY_S = float(np.datetime64("2099-12-31", "D").astype(np.int64)) * SECONDS_PER_DAY
# Many instants at once (thousands of sites): declination and the equation of time, which
# depend on the instant alone and change smoothly, are evaluated on a grid of whole
# 10-minute steps spanning the instants and interpolated linearly. The interpolation
# error is h^2/8 times the second derivative: below 1e-7 deg of declination and 1e-6 min
# of equation of time for h = 10 min, a few milliseconds of event time at most, far under
# the method's one-minute accuracy. The grid points are absolute (multiples of 600 s from
# the epoch), so a site's answer does not depend on which others share the call; fewer
# than _GRID_FROM instants are evaluated directly, which differs by microseconds.
_GRID_STEP_S = 600.0
_GRID_FROM = 64  # instants; fewer are evaluated directly
_COS_SUNRISE_ZENITH = float(np.cos(np.radians(SUNRISE_ZENITH_DEG)))


def _solar_declination_and_equation_of_time(
    posix_s: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Solar declination (deg) and equation of time (min) at the given instants.

    NOAA solar calculator, Julian century through equation of time (Meeus, ch. 22, 25, 28).
    """
    julian_date = posix_s / SECONDS_PER_DAY + UNIX_EPOCH_JULIAN_DATE
    jc = (julian_date - J2000_JULIAN_DATE) / DAYS_PER_JULIAN_CENTURY
    mean_longitude = np.radians((280.46646 + jc * (36000.76983 + jc * 0.0003032)) % 360.0)
    mean_anomaly = np.radians(357.52911 + jc * (35999.05029 - 0.0001537 * jc))
    eccentricity = 0.016708634 - jc * (0.000042037 + 0.0000001267 * jc)
    equation_of_centre = (
        np.sin(mean_anomaly) * (1.914602 - jc * (0.004817 + 0.000014 * jc))
        + np.sin(2.0 * mean_anomaly) * (0.019993 - 0.000101 * jc)
        + np.sin(3.0 * mean_anomaly) * 0.000289
    )
    true_longitude = np.degrees(mean_longitude) + equation_of_centre
    omega = np.radians(125.04 - 1934.136 * jc)
    apparent_longitude = np.radians(true_longitude - 0.00569 - 0.00478 * np.sin(omega))
    mean_obliquity = (
        23.0 + (26.0 + (21.448 - jc * (46.815 + jc * (0.00059 - jc * 0.001813))) / 60.0) / 60.0
    )
    obliquity = np.radians(mean_obliquity + 0.00256 * np.cos(omega))
    declination = np.degrees(np.arcsin(np.sin(obliquity) * np.sin(apparent_longitude)))
    y = np.tan(obliquity / 2.0) ** 2
    equation_of_time_min = MINUTES_PER_DEGREE * np.degrees(
        y * np.sin(2.0 * mean_longitude)
        - 2.0 * eccentricity * np.sin(mean_anomaly)
        + 4.0 * eccentricity * y * np.sin(mean_anomaly) * np.cos(2.0 * mean_longitude)
        - 0.5 * y * y * np.sin(4.0 * mean_longitude)
        - 1.25 * eccentricity * eccentricity * np.sin(2.0 * mean_anomaly)
    )
    return declination, equation_of_time_min


class _SolarTerms:
    """Declination (deg) and equation of time (min) for the instants of one
    :func:`_events_s` call.

    For many instants the terms are tabulated once, on the 10-minute grid (see
    ``_GRID_STEP_S``), over every instant the call can ask about — an event lies within
    12.3 h before and 36.3 h after its UTC day start (noon at 720 - 4 lon minutes, the
    hour angle at most 720, the equation of time at most 17) — and each iteration only
    interpolates. Fewer instants are evaluated directly.
    """

    def __init__(self, day_start_s: NDArray[np.float64], tabulate: bool | None = None):
        self.grid: tuple[float, NDArray[np.float64], NDArray[np.float64]] | None = None
        span = _grid_span(day_start_s)
        if span is None or not (_worth_a_grid(day_start_s, span) if tabulate is None else tabulate):
            return
        first, last = span
        points = int(last - first) + 1
        grid = np.asarray((first + np.arange(points + 1)) * _GRID_STEP_S, dtype=np.float64)
        declination, equation_of_time = _solar_declination_and_equation_of_time(grid)
        self.grid = (float(first), declination, equation_of_time)

    def __call__(
        self, posix_s: NDArray[np.float64]
    ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        if self.grid is None:
            return _solar_declination_and_equation_of_time(posix_s)
        first, declination, equation_of_time = self.grid
        # a uniform grid: each instant's cell by division, no search; the fraction is
        # taken from the absolute step (first + cell is a whole number, exact), so it
        # does not depend on where this call's grid begins
        position = posix_s / _GRID_STEP_S
        cell = np.clip(np.floor(np.nan_to_num(position)) - first, 0, declination.size - 2)
        frac = position - (first + cell)  # NaN stays NaN
        cell = cell.astype(np.intp)
        return (
            declination[cell] + frac * (declination[cell + 1] - declination[cell]),
            equation_of_time[cell] + frac * (equation_of_time[cell + 1] - equation_of_time[cell]),
        )


def _grid_span(day_start_s: NDArray[np.float64]) -> tuple[float, float] | None:
    """The first and last grid step (whole ``_GRID_STEP_S`` from the epoch) the events
    of these UTC day starts can ask about; None if no day start is known."""
    finite = day_start_s[np.isfinite(day_start_s)]
    if not finite.size:
        return None
    first = np.floor((finite.min() - SECONDS_PER_DAY) / _GRID_STEP_S)
    last = np.ceil((finite.max() + 2 * SECONDS_PER_DAY) / _GRID_STEP_S)
    return float(first), float(last)


def _worth_a_grid(day_start_s: NDArray[np.float64], span: tuple[float, float]) -> bool:
    """Many instants, not spread over many days: the grid saves work."""
    first, last = span
    return day_start_s.size >= _GRID_FROM and int(last - first) + 1 <= day_start_s.size // 2


def tabulated_rows(
    lat_deg: NDArray[np.float64], lon_deg: NDArray[np.float64], t_posix_s: NDArray[np.float64]
) -> NDArray[np.bool_]:
    """For each row of ``t_posix_s`` (times × sites), whether ``night_bounds_utc`` of the
    sites at that row's instants alone would tabulate the solar terms (see
    ``_GRID_STEP_S``). A caller working out many such rows in one call passes each
    group to ``night_bounds_utc(..., tabulate=...)`` to get, bit for bit, what one call
    per row would give: the grid's points and fractions are absolute, so only this
    choice depends on which instants share a call.

    >>> lat, lon = np.full(100, 52.0), np.linspace(-1.0, 1.0, 100)
    >>> tabulated_rows(lat, lon, np.full((2, 100), 1.8e9)).tolist()
    [False, False]
    """
    t = np.atleast_2d(np.asarray(t_posix_s, dtype=float))
    local_day = np.floor((t + lon_deg * MINUTES_PER_DEGREE * SECONDS_PER_MINUTE) / SECONDS_PER_DAY)
    day_start = local_day * SECONDS_PER_DAY - SECONDS_PER_DAY  # the first events' call
    valid = (
        (np.abs(lat_deg) <= 90.0)
        & (np.abs(lon_deg) <= 180.0)
        & (day_start >= _FIRST_DAY_S)
        & (day_start <= _LAST_DAY_S)
    )
    day_start = np.where(valid, day_start, np.nan)
    out = np.zeros(t.shape[0], dtype=bool)
    for k in range(t.shape[0]) if t.shape[1] >= _GRID_FROM else ():
        span = _grid_span(day_start[k])
        out[k] = span is not None and _worth_a_grid(day_start[k], span)
    return out


def _sunrise_hour_angle_deg(
    cos_lat: NDArray[np.float64], tan_lat: NDArray[np.float64], declination_deg: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Hour angle of sunrise at zenith 90.833°, deg; NaN where the sun never crosses.
    The latitude comes as its cosine and tangent (constant over the iterations)."""
    declination = np.radians(declination_deg)
    cos_hour_angle = _COS_SUNRISE_ZENITH / (cos_lat * np.cos(declination)) - tan_lat * np.tan(
        declination
    )
    return np.degrees(np.arccos(cos_hour_angle))


def _day_start_s(day: DayLike) -> NDArray[np.float64]:
    """POSIX seconds of 00:00 UTC on each date; NaN for NaT."""
    if isinstance(day, dt.datetime):
        day = day.date()
    days = np.asarray(day, dtype="datetime64[D]")
    start = days.astype(np.int64).astype(float) * SECONDS_PER_DAY
    return np.where(np.isnat(days), np.nan, start)


def _events_s(
    lat_deg: NDArray[np.float64],
    lon_deg: NDArray[np.float64],
    day_start_s: NDArray[np.float64],
    *,
    rise: bool = True,
    set_: bool = True,
    tabulate: bool | None = None,
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """(sunrise, sunset, solar noon) in POSIX s for the solar day centred near
    ``day_start_s`` + 12 h - lon/15 h; iterated at each event's own time. An event not
    wanted (``rise`` / ``set_`` False) is not worked out and comes back as None."""
    valid = (
        (np.abs(lat_deg) <= 90.0)
        & (np.abs(lon_deg) <= 180.0)
        & (day_start_s >= _FIRST_DAY_S)
        & (day_start_s <= _LAST_DAY_S)
    )
    lat = np.where(valid, lat_deg, np.nan)
    lon = np.where(valid, lon_deg, np.nan)
    day_start_s = np.where(valid, day_start_s, np.nan)
    terms = _SolarTerms(day_start_s, tabulate)
    cos_lat, tan_lat = np.cos(np.radians(lat)), np.tan(np.radians(lat))
    # Solar noon (NOAA): 720 - 4 lon - EoT minutes after 00:00 UTC.
    base_min = _NOON_MINUTES - MINUTES_PER_DEGREE * lon
    noon = day_start_s + base_min * SECONDS_PER_MINUTE
    for _ in range(2):
        _, equation_of_time = terms(noon)
        noon = day_start_s + (base_min - equation_of_time) * SECONDS_PER_MINUTE
    events: list[Any] = []
    for sign, wanted in ((-1.0, rise), (1.0, set_)):  # sunrise, then sunset
        if not wanted:
            events.append(None)
            continue
        event = noon
        for _ in range(_ITERATIONS):
            declination, equation_of_time = terms(event)
            hour_angle = _sunrise_hour_angle_deg(cos_lat, tan_lat, declination)
            minutes = base_min - equation_of_time + sign * MINUTES_PER_DEGREE * hour_angle
            event = day_start_s + minutes * SECONDS_PER_MINUTE
        events.append(event)
    return events[0], events[1], noon


def _broadcast_float(*arrays: ArrayLike) -> list[NDArray[np.float64]]:
    return list(np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in arrays)))


@np.errstate(all="ignore")
def sunrise_sunset_utc(
    lat_deg: ArrayLike, lon_deg: ArrayLike, day: DayLike
) -> tuple[FloatArray, FloatArray]:
    """Sunrise and sunset (POSIX seconds, UTC) of the given local date.

    Equations (NOAA solar calculator after Meeus; see the module docstring)::

        cos H0 = cos(90.833°) / (cos phi cos delta) - tan phi tan delta
        sunrise = 720 - 4 lon - EoT - 4 H0    [minutes after 00:00 UTC of ``day``]
        sunset  = 720 - 4 lon - EoT + 4 H0

    (lon east-positive, degrees), with declination delta and the equation of time EoT
    re-evaluated at each event's own time (four iterations). The events belong to the
    solar day centred on local solar noon of ``day`` at that longitude, about
    12:00 UTC - lon/15 h, so for a site far east the sunrise may fall on the previous
    UTC date.

    Valid range: |lat| <= 90, |lon| <= 180, dates 1901-01-01..2099-12-31 (else NaN).
    Polar day or night gives NaN. Accuracy about a minute within +-72° latitude.

    Args:
        lat_deg: latitude, degrees north.
        lon_deg: longitude, degrees east.
        day: a :class:`datetime.date` (or ``numpy.datetime64``/array of them, in days).

    Returns:
        ``(sunrise_s, sunset_s)`` as float POSIX seconds.

    >>> rise, sset = sunrise_sunset_utc(51.4769, 0.0, dt.date(2024, 6, 21))
    >>> print(np.datetime64(int(rise), "s"), np.datetime64(int(sset), "s"))
    2024-06-21T03:42:50 2024-06-21T20:20:59
    >>> rise, sset = sunrise_sunset_utc(78.2, 15.6, dt.date(2024, 12, 21))  # polar night
    >>> print(np.isnan(rise), np.isnan(sset))
    True True
    """
    lat, lon, start = _broadcast_float(lat_deg, lon_deg, _day_start_s(day))
    sunrise, sunset, _ = _events_s(lat, lon, start)
    return sunrise[()], sunset[()]


@np.errstate(all="ignore")
def night_length_h(lat_deg: ArrayLike, lon_deg: ArrayLike, day: DayLike) -> FloatArray:
    """Hours from the sunset of ``day`` to the sunrise of the next day.

    Equation: (sunrise(day + 1) - sunset(day)) / 3600 s, both from
    :func:`sunrise_sunset_utc`. Polar day or night on either date gives NaN.

    Args:
        lat_deg: latitude, degrees north.
        lon_deg: longitude, degrees east.
        day: the date whose evening starts the night.

    >>> print(f"{night_length_h(51.4769, 0.0, dt.date(2024, 12, 21)):.2f}")
    16.18
    """
    lat, lon, start = _broadcast_float(lat_deg, lon_deg, _day_start_s(day))
    _, sunset, _ = _events_s(lat, lon, start, rise=False)
    sunrise_next, _, _ = _events_s(lat, lon, start + SECONDS_PER_DAY, set_=False)
    return ((sunrise_next - sunset) / SECONDS_PER_HOUR)[()]


def _day_events(
    lat: NDArray[np.float64],
    lon: NDArray[np.float64],
    day_start: NDArray[np.float64],
    tabulate: bool | None,
) -> list[NDArray[np.float64]]:
    """The events :func:`night_bounds_utc` reads around each UTC day start: the sunset
    before, that day's sunrise, sunset and noon, the next day's sunrise and sunset and
    the sunrise after. They depend on the place and the day alone, so where the caller
    has chosen the grid (``tabulate`` not None: every instant's terms are then what
    they would be in any other call) each distinct (lat, lon, day) is worked out once
    — a history's times fall on a few days — and the answers are the same numbers."""
    if tabulate is not None and lat.size > 1:
        key = np.stack([lat, lon, day_start], axis=1)
        with np.errstate(invalid="ignore"):
            ordered = np.lexsort((day_start, lon, lat))
            key_sorted = key[ordered]
            new = np.ones(lat.size, dtype=bool)
            new[1:] = np.any(
                (key_sorted[1:] != key_sorted[:-1])
                & ~(np.isnan(key_sorted[1:]) & np.isnan(key_sorted[:-1])),
                axis=1,
            )
        group = np.cumsum(new) - 1
        if group[-1] + 1 < lat.size:  # worth it: fewer distinct days than instants
            first = ordered[new]
            inverse = np.empty(lat.size, dtype=np.intp)
            inverse[ordered] = group
            once = _day_events(lat[first], lon[first], day_start[first], tabulate)
            return [values[inverse] for values in once]
    _, sunset_prev, _ = _events_s(
        lat, lon, day_start - SECONDS_PER_DAY, rise=False, tabulate=tabulate
    )
    sunrise_day, sunset_day, noon_day = _events_s(lat, lon, day_start, tabulate=tabulate)
    sunrise_next, sunset_next, _ = _events_s(
        lat, lon, day_start + SECONDS_PER_DAY, tabulate=tabulate
    )
    sunrise_after, _, _ = _events_s(
        lat, lon, day_start + 2 * SECONDS_PER_DAY, set_=False, tabulate=tabulate
    )
    return [
        sunset_prev,
        sunrise_day,
        sunset_day,
        noon_day,
        sunrise_next,
        sunset_next,
        sunrise_after,
    ]


@np.errstate(all="ignore")
def night_bounds_utc(
    lat_deg: ArrayLike, lon_deg: ArrayLike, t_posix_s: ArrayLike, *, tabulate: bool | None = None
) -> tuple[FloatArray, FloatArray, np.bool_ | NDArray[np.bool_]]:
    """The night containing each time, or in daytime the coming night.

    For each time t: if the sun is down (last sunset <= t < next sunrise), return that
    sunset and sunrise with ``is_night`` True; if the sun is up, return the coming
    sunset and the sunrise that ends that night, with ``is_night`` False. A time exactly
    at sunset counts as night, exactly at sunrise as day. Events come from
    :func:`sunrise_sunset_utc` for the local mean solar date of t and its neighbours,
    split at solar noon.

    Valid range as for :func:`sunrise_sunset_utc`. Where a needed event does not exist
    (polar day or night) or an input is NaN, both times are NaN and ``is_night`` is False:
    "unknown", not "day".

    Args:
        lat_deg: latitude, degrees north.
        lon_deg: longitude, degrees east.
        t_posix_s: times, POSIX seconds (UTC).
        tabulate: tabulate the solar terms on the grid (True) or not (False) rather
            than as the number and spread of the instants decide (see
            :func:`tabulated_rows`).

    Returns:
        ``(last_sunset_s, next_sunrise_s, is_night)``; in daytime the first element is
        the coming sunset.

    >>> t = float(np.datetime64("2024-12-21T22:00", "s").astype(int))
    >>> sset, rise, is_night = night_bounds_utc(51.4769, 0.0, t)
    >>> print(np.datetime64(int(sset), "s"), np.datetime64(int(rise), "s"), is_night)
    2024-12-21T15:53:18 2024-12-22T08:03:48 True
    """
    lat, lon, t = _broadcast_float(lat_deg, lon_deg, t_posix_s)
    # Local mean solar date: shift UTC by lon/15 h.
    local_day = np.floor((t + lon * MINUTES_PER_DEGREE * SECONDS_PER_MINUTE) / SECONDS_PER_DAY)
    day_start = local_day * SECONDS_PER_DAY
    events = _day_events(lat, lon, day_start, tabulate)
    sunset_prev, sunrise_day, sunset_day, noon_day, sunrise_next, sunset_next, sunrise_after = (
        events
    )

    morning = t < noon_day
    # Morning: the night before (sunset_prev, sunrise_day) if the sun has not yet risen;
    # before sunset_prev can only happen near polar day, when the sun is still up.
    morning_pair_known = np.isfinite(sunset_prev) & np.isfinite(sunrise_day)
    morning_night = morning_pair_known & (t >= sunset_prev) & (t < sunrise_day)
    morning_after_rise = morning_pair_known & (t >= sunrise_day)
    # Afternoon: the coming night (sunset_day, sunrise_next) unless t is past sunrise_next,
    # which again can only happen near polar day.
    afternoon_pair_known = np.isfinite(sunset_day) & np.isfinite(sunrise_next)
    afternoon_night = afternoon_pair_known & (t >= sunset_day) & (t < sunrise_next)
    afternoon_after_rise = afternoon_pair_known & (t >= sunrise_next)

    sunset_out = np.where(
        morning,
        np.where(morning_after_rise, sunset_day, sunset_prev),
        np.where(afternoon_after_rise, sunset_next, sunset_day),
    )
    sunrise_out = np.where(
        morning,
        np.where(morning_after_rise, sunrise_next, sunrise_day),
        np.where(afternoon_after_rise, sunrise_after, sunrise_next),
    )
    pair_known = np.where(morning, morning_pair_known, afternoon_pair_known)
    known = pair_known & np.isfinite(sunset_out) & np.isfinite(sunrise_out) & np.isfinite(t)
    is_night = known & np.where(morning, morning_night, afternoon_night)
    sunset_out = np.where(known, sunset_out, np.nan)
    sunrise_out = np.where(known, sunrise_out, np.nan)
    return sunset_out[()], sunrise_out[()], is_night[()]
