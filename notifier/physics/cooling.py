"""Night-time cooling: Brunt's square-root law, its fit to observations, and simple
minimum-temperature and crossover-temperature estimates.

Temperatures in °C, times in hours after sunset, cooling coefficients in K h^-1/2.
All functions are vectorised; the fitting and window functions work along the last axis
(1-D for one site, 2-D for sites x times). Missing points are NaN. Out-of-range and NaN
input gives NaN.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .constants import (
    CRADDOCK_PRITCHARD_DEWPOINT_COEFFICIENT,
    CRADDOCK_PRITCHARD_OFFSET_C,
    CRADDOCK_PRITCHARD_TEMP_COEFFICIENT,
    CROSSOVER_END_HOUR,
    CROSSOVER_START_HOUR,
    SQRT_SECONDS_PER_HOUR,
)

__all__ = [
    "brunt_cooling_coefficient_k_per_sqrt_h",
    "craddock_pritchard_min_c",
    "crossover_temp_c",
    "fao_square_root_trend_c",
    "fit_sqrt_cooling",
    "project_sqrt_cooling_c",
]

FloatArray = np.float64 | NDArray[np.float64]

# Public functions run under np.errstate(all="ignore"): every invalid or out-of-range
# result is masked to NaN explicitly, so floating-point warnings would only be noise
# (and pytest turns them into errors). Private helpers are only called from them.

# Fewest usable points for a two-parameter fit that still has a residual to speak of.
_MIN_FIT_POINTS = 3


@np.errstate(all="ignore")
def brunt_cooling_coefficient_k_per_sqrt_h(
    net_loss_wm2: ArrayLike, thermal_admittance: ArrayLike
) -> FloatArray:
    """Cooling coefficient k of Brunt's square-root law, K h^-1/2.

    Equation (Brunt's law for a constant net radiative loss R from a semi-infinite
    conducting ground of thermal admittance mu; after Oke, Boundary Layer Climates,
    2nd ed., from memory)::

        T(t) = T0 - k sqrt(t),    k = 2 R / (sqrt(pi) mu)   [K s^-1/2]

    and k [K h^-1/2] = 60 k [K s^-1/2], since sqrt(3600 s) = 60 s^1/2.

    Valid range: R >= 0 W m-2 (a net loss; the law describes cooling) and mu > 0
    J m-2 K-1 s-1/2; otherwise NaN. Typical mu: snow ~130, dry sand ~620, wet sand ~2550
    (Oke, from memory). Screen-level air usually cools at 1-3 K h^-1/2 (from memory), more
    slowly than this surface value.

    Args:
        net_loss_wm2: net long-wave loss R, W m-2 (positive = loss).
        thermal_admittance: ground thermal admittance mu, J m-2 K-1 s^-1/2.

    >>> print(f"{brunt_cooling_coefficient_k_per_sqrt_h(60.0, 1200.0):.3f}")
    3.385
    >>> print(brunt_cooling_coefficient_k_per_sqrt_h(60.0, 0.0))
    nan
    """
    loss = np.asarray(net_loss_wm2, dtype=float)
    admittance = np.asarray(thermal_admittance, dtype=float)
    valid = (loss >= 0.0) & (admittance > 0.0) & np.isfinite(loss) & np.isfinite(admittance)
    k_per_sqrt_s = 2.0 * loss / (np.sqrt(np.pi) * admittance)
    return np.where(valid, k_per_sqrt_s * SQRT_SECONDS_PER_HOUR, np.nan)[()]


@np.errstate(all="ignore")
def fit_sqrt_cooling(
    hours_since_sunset: ArrayLike, temp_c: ArrayLike
) -> tuple[FloatArray, FloatArray]:
    """Least-squares fit of Brunt's square-root law to an observed cooling curve.

    Equation: fit T = T0 - k sqrt(t) by ordinary least squares in x = sqrt(t)::

        k  = -sum((x - xm)(T - Tm)) / sum((x - xm)^2)
        T0 = Tm + k xm

    along the last axis. Inputs broadcast against each other and may be 1-D (one site) or
    N-D (e.g. sites x times). A point is used only where both values are finite and
    t >= 0. A row with fewer than 3 usable points, or with all usable t equal, gives NaN
    for both results. Fully vectorised: no Python loop over rows.

    Args:
        hours_since_sunset: time after sunset, h.
        temp_c: observed temperature, °C.

    Returns:
        ``(t0_c, k_per_sqrt_h)``: the fitted temperature at sunset (°C) and cooling
        coefficient (K h^-1/2, positive when cooling); shape = input shape without the
        last axis.

    >>> t0, k = fit_sqrt_cooling([0.0, 1.0, 4.0, 9.0], [10.0, 8.0, 6.0, 4.0])
    >>> print(f"{t0:.3f} {k:.3f}")
    10.000 2.000
    >>> t0, k = fit_sqrt_cooling([[0.0, 1.0, 4.0], [0.0, 1.0, np.nan]], [[5.0, 4.0, 3.0]] * 2)
    >>> print(np.round(t0, 3), np.round(k, 3))
    [ 5. nan] [ 1. nan]
    """
    hours, temp = np.broadcast_arrays(
        np.atleast_1d(np.asarray(hours_since_sunset, dtype=float)),
        np.atleast_1d(np.asarray(temp_c, dtype=float)),
    )
    usable = np.isfinite(hours) & np.isfinite(temp) & (hours >= 0.0)
    x = np.sqrt(np.where(usable, hours, 0.0))  # 0 where unusable: adds nothing below
    y = np.where(usable, temp, 0.0)
    count = usable.sum(axis=-1)
    # initial= keeps an empty time axis from raising; x >= 0, so the unusable zeros
    # never raise the maximum
    x_max = x.max(axis=-1, initial=0.0)
    x_min = np.where(usable, x, np.inf).min(axis=-1, initial=np.inf)
    spread = x_max - x_min
    ok = (count >= _MIN_FIT_POINTS) & (spread > 0.0)
    # the sums in one pass each; centred afterwards (x <= ~4, T within tens of degrees:
    # no cancellation worth the name in float64)
    sum_x, sum_y = x.sum(axis=-1), y.sum(axis=-1)
    sum_xx = np.einsum("...i,...i->...", x, x)
    sum_xy = np.einsum("...i,...i->...", x, y)
    x_mean = sum_x / count
    y_mean = sum_y / count
    slope = (sum_xy - sum_x * y_mean) / (sum_xx - sum_x * x_mean)
    t0 = y_mean - slope * x_mean
    t0_c = np.where(ok, t0, np.nan)
    k_per_sqrt_h = np.where(ok, -slope, np.nan)
    return t0_c[()], k_per_sqrt_h[()]


@np.errstate(all="ignore")
def project_sqrt_cooling_c(
    t0_c: ArrayLike, k_per_sqrt_h: ArrayLike, hours_since_sunset: ArrayLike
) -> FloatArray:
    """Temperature projected by Brunt's square-root law, °C.

    Equation (Brunt's law, after Oke, Boundary Layer Climates, from memory)::

        T(t) = T0 - k sqrt(t)

    Valid range: t >= 0 h (before sunset the law does not apply): t < 0 gives NaN.

    Args:
        t0_c: temperature at sunset, °C (e.g. from :func:`fit_sqrt_cooling`).
        k_per_sqrt_h: cooling coefficient, K h^-1/2.
        hours_since_sunset: time after sunset, h.

    >>> print(np.round(project_sqrt_cooling_c(10.0, 2.0, [-1.0, 0.0, 4.0, 9.0]), 3))
    [nan 10.  6.  4.]
    """
    hours = np.asarray(hours_since_sunset, dtype=float)
    temp = np.asarray(t0_c, dtype=float) - np.asarray(k_per_sqrt_h, dtype=float) * np.sqrt(hours)
    return np.where(hours >= 0.0, temp, np.nan)[()]


@np.errstate(all="ignore")
def fao_square_root_trend_c(
    t2_c: ArrayLike, tmin_c: ArrayLike, night_hours: ArrayLike, hours_after_sunset: ArrayLike
) -> FloatArray:
    """FAO square-root temperature trend through the night, °C.

    Equation (Snyder & de Melo-Abreu 2005, *Frost Protection: fundamentals, practice and
    economics*, Vol. 1, FAO, the square-root trend model; equation number not recorded)::

        T_i = T_2 + b' sqrt(i - 2),    b' = (T_min - T_2) / sqrt(n - 2)

    where i is hours after sunset, T_2 the temperature 2 h after sunset, n the night
    length (h) and T_min the minimum, reached at sunrise (i = n).

    Valid range: n > 2 and 2 <= i <= n; otherwise NaN.

    Args:
        t2_c: temperature two hours after sunset, °C.
        tmin_c: forecast minimum temperature at sunrise, °C.
        night_hours: night length n (sunset to sunrise), h.
        hours_after_sunset: i, h.

    >>> print(np.round(fao_square_root_trend_c(0.95, -5.45, 15.0, [3.0, 9.0, 15.0, 16.0]), 3))
    [-0.825 -3.746 -5.45     nan]
    """
    t2 = np.asarray(t2_c, dtype=float)
    tmin = np.asarray(tmin_c, dtype=float)
    night = np.asarray(night_hours, dtype=float)
    hour = np.asarray(hours_after_sunset, dtype=float)
    valid = (night > 2.0) & (hour >= 2.0) & (hour <= night)
    b_prime = (tmin - t2) / np.sqrt(night - 2.0)
    temp = t2 + b_prime * np.sqrt(hour - 2.0)
    return np.where(valid, temp, np.nan)[()]


@np.errstate(all="ignore")
def craddock_pritchard_min_c(
    temp_c: ArrayLike, dewpoint_c: ArrayLike, k_c: ArrayLike = 0.0
) -> FloatArray:
    """Night minimum temperature by Craddock & Pritchard (1951), °C.

    Equation (Craddock & Pritchard 1951, Met Office; from a secondary source)::

        T_min = 0.316 T + 0.548 Td - 1.24 + K

    with T and Td the midday (12 UTC) screen temperature and dew point, and K a correction
    for the expected night-time wind and cloud, about -2.2 for calm clear nights to +2..3
    for windy cloudy ones. Derived for inland sites in England; a regression, so
    no range check is applied beyond NaN propagation, and Td > T is not rejected.

    Args:
        temp_c: midday air temperature, °C.
        dewpoint_c: midday dew point, °C.
        k_c: wind/cloud correction K, °C.

    >>> print(f"{craddock_pritchard_min_c(12.0, 6.0):.2f}")
    5.84
    """
    return (
        CRADDOCK_PRITCHARD_TEMP_COEFFICIENT * np.asarray(temp_c, dtype=float)
        + CRADDOCK_PRITCHARD_DEWPOINT_COEFFICIENT * np.asarray(dewpoint_c, dtype=float)
        + CRADDOCK_PRITCHARD_OFFSET_C
        + np.asarray(k_c, dtype=float)
    )[()]


@np.errstate(all="ignore")
def crossover_temp_c(
    dewpoint_c: ArrayLike,
    local_hour: ArrayLike,
    start_hour: float = CROSSOVER_START_HOUR,
    end_hour: float = CROSSOVER_END_HOUR,
) -> FloatArray:
    """Crossover temperature: the lowest dew point in the afternoon window, °C.

    Method (the "crossover temperature" forecasting rule, from memory): take the lowest
    dew point observed during the afternoon; radiation fog is likely if the night's
    minimum temperature is forecast to fall to it, and dense fog if about 2 °C below::

        T_x = min { Td_j : start_hour <= local_hour_j < end_hour }

    along the last axis (1-D for one site, N-D for sites x times). NaN dew points are
    ignored; a row with no finite dew point in the window gives NaN. A window with
    ``start_hour > end_hour`` wraps past midnight. The caller supplies local hour-of-day
    floats (0 <= h < 24).

    Args:
        dewpoint_c: dew point series, °C.
        local_hour: local hour of day of each observation.
        start_hour: window start (inclusive), h; default 12.
        end_hour: window end (exclusive), h; default 18.

    >>> print(crossover_temp_c([8.0, 6.5, 7.0, 5.0], [11.0, 13.0, 17.5, 18.0]))
    6.5
    >>> print(crossover_temp_c([8.0, np.nan], [9.0, 14.0]))
    nan
    """
    dewpoint, hour = np.broadcast_arrays(
        np.atleast_1d(np.asarray(dewpoint_c, dtype=float)),
        np.atleast_1d(np.asarray(local_hour, dtype=float)),
    )
    if start_hour <= end_hour:
        in_window = (hour >= start_hour) & (hour < end_hour)
    else:
        in_window = (hour >= start_hour) | (hour < end_hour)
    usable = in_window & np.isfinite(dewpoint)
    lowest = np.where(usable, dewpoint, np.inf).min(axis=-1, initial=np.inf)
    return np.where(usable.any(axis=-1), lowest, np.nan)[()]
