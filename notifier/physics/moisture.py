"""Saturation vapour pressure, dew point and frost point (Magnus forms, WMO CIMO Guide).

All functions take array-likes (or scalars), broadcast them, and return numpy arrays;
a scalar input gives a numpy float. Input outside a formula's valid range, and NaN input,
gives NaN, never an extrapolated number and never a warning.

Relative humidity is with respect to water at all temperatures, as in WMO practice
(CIMO Guide, Vol. I, ch. 4).
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .constants import (
    MAGNUS_E0_HPA,
    MAGNUS_ICE_A,
    MAGNUS_ICE_B_C,
    MAGNUS_ICE_MAX_C,
    MAGNUS_ICE_MIN_C,
    MAGNUS_WATER_A,
    MAGNUS_WATER_B_C,
    MAGNUS_WATER_MAX_C,
    MAGNUS_WATER_MIN_C,
)

__all__ = [
    "dewpoint_c",
    "frost_point_c",
    "frost_point_from_dewpoint_c",
    "relative_humidity_pct",
    "saturation_vapor_pressure_hpa",
    "vapor_pressure_hpa",
]

FloatArray = np.float64 | NDArray[np.float64]

# Public functions run under np.errstate(all="ignore"): every invalid or out-of-range
# result is masked to NaN explicitly, so floating-point warnings would only be noise
# (and pytest turns them into errors). Private helpers are only called from them.


def _magnus_hpa(
    temp_c: NDArray[np.float64], a: float, b_c: float, min_c: float, max_c: float
) -> NDArray[np.float64]:
    """e = 6.112 exp(a t / (b + t)) where min_c <= t <= max_c, else NaN."""
    valid = (temp_c >= min_c) & (temp_c <= max_c)
    e_hpa = MAGNUS_E0_HPA * np.exp(a * temp_c / (b_c + temp_c))
    return np.where(valid, e_hpa, np.nan)


def _inverse_magnus_c(e_hpa: NDArray[np.float64], a: float, b_c: float) -> NDArray[np.float64]:
    """Temperature at which the Magnus form (a, b) gives e; NaN for e <= 0."""
    gamma = np.log(e_hpa / MAGNUS_E0_HPA)
    temp_c = b_c * gamma / (a - gamma)
    return np.where(e_hpa > 0, temp_c, np.nan)


def _in_range(temp_c: NDArray[np.float64], min_c: float, max_c: float) -> NDArray[np.float64]:
    return np.where((temp_c >= min_c) & (temp_c <= max_c), temp_c, np.nan)


@np.errstate(all="ignore")
def saturation_vapor_pressure_hpa(
    temp_c: ArrayLike, over: Literal["water", "ice"] = "water"
) -> FloatArray:
    """Saturation vapour pressure over a plane surface of water or ice, hPa.

    Equation (WMO-No. 8, CIMO Guide, Vol. I, Annex 4.B, Magnus forms)::

        water:  e_w(t) = 6.112 exp(17.62 t / (243.12 + t))     valid -45 <= t <= 60 °C
        ice:    e_i(t) = 6.112 exp(22.46 t / (272.62 + t))     valid -65 <= t <= 0 °C

    Outside the valid range the result is NaN. The moist-air enhancement factor f(p)
    (about 1.005 near 1013 hPa) is not applied: this is the pure-phase value.

    Args:
        temp_c: air temperature, °C.
        over: ``"water"`` (also for supercooled water below 0 °C) or ``"ice"``.

    Raises:
        ValueError: if ``over`` is neither ``"water"`` nor ``"ice"``.

    >>> print(f"{saturation_vapor_pressure_hpa(20.0):.3f}")
    23.326
    >>> print(f"{saturation_vapor_pressure_hpa(-10.0, over='ice'):.4f}")
    2.5987
    >>> print(np.round(saturation_vapor_pressure_hpa([-50.0, 0.0, 10.0]), 3))
    [   nan  6.112 12.26 ]
    """
    temp = np.asarray(temp_c, dtype=float)
    if over == "water":
        result = _magnus_hpa(
            temp, MAGNUS_WATER_A, MAGNUS_WATER_B_C, MAGNUS_WATER_MIN_C, MAGNUS_WATER_MAX_C
        )
    elif over == "ice":
        result = _magnus_hpa(temp, MAGNUS_ICE_A, MAGNUS_ICE_B_C, MAGNUS_ICE_MIN_C, MAGNUS_ICE_MAX_C)
    else:
        raise ValueError(f"over must be 'water' or 'ice', got: {over!r}")
    # [()] turns a 0-d result into a numpy scalar and leaves arrays alone.
    return result[()]


@np.errstate(all="ignore")
def vapor_pressure_hpa(dewpoint_c: ArrayLike) -> FloatArray:
    """Actual vapour pressure from the dew point, hPa.

    Equation: e = e_w(Td), the CIMO Guide (WMO-No. 8, Annex 4.B) Magnus form over water,
    valid for -45 <= Td <= 60 °C (NaN outside).

    Args:
        dewpoint_c: dew point, °C.

    >>> print(f"{vapor_pressure_hpa(10.0):.3f}")
    12.260
    """
    dewpoint = np.asarray(dewpoint_c, dtype=float)
    return _magnus_hpa(
        dewpoint, MAGNUS_WATER_A, MAGNUS_WATER_B_C, MAGNUS_WATER_MIN_C, MAGNUS_WATER_MAX_C
    )[()]


def _vapor_pressure_from_rh_hpa(
    temp_c: NDArray[np.float64], rh_pct: NDArray[np.float64]
) -> NDArray[np.float64]:
    """e = RH/100 e_w(t) for 0 < RH <= 100 and t in the water range, else NaN."""
    e_sat = _magnus_hpa(
        temp_c, MAGNUS_WATER_A, MAGNUS_WATER_B_C, MAGNUS_WATER_MIN_C, MAGNUS_WATER_MAX_C
    )
    valid = (rh_pct > 0) & (rh_pct <= 100)
    return np.where(valid, rh_pct / 100.0 * e_sat, np.nan)


@np.errstate(all="ignore")
def dewpoint_c(temp_c: ArrayLike, rh_pct: ArrayLike) -> FloatArray:
    """Dew point from temperature and relative humidity (with respect to water), °C.

    Equation: the inverse of the CIMO Guide (WMO-No. 8, Annex 4.B) Magnus form over water,
    a = 17.62, b = 243.12 °C::

        gamma = ln(RH/100) + a t / (b + t)
        Td    = b gamma / (a - gamma)

    Valid range: -45 <= t <= 60 °C and 0 < RH <= 100 %; a dew point below -45 °C lies
    outside the formula's range too. Anything else gives NaN.

    Args:
        temp_c: air temperature, °C.
        rh_pct: relative humidity with respect to water, %.

    >>> print(f"{dewpoint_c(20.0, 50.0):.3f}")
    9.255
    >>> print(np.round(dewpoint_c([10.0, 10.0, 10.0], [90.0, 0.0, 101.0]), 2))
    [8.43  nan  nan]
    """
    temp = np.asarray(temp_c, dtype=float)
    rh = np.asarray(rh_pct, dtype=float)
    valid = (temp >= MAGNUS_WATER_MIN_C) & (temp <= MAGNUS_WATER_MAX_C) & (rh > 0) & (rh <= 100)
    gamma = np.log(rh / 100.0) + MAGNUS_WATER_A * temp / (MAGNUS_WATER_B_C + temp)
    dewpoint = MAGNUS_WATER_B_C * gamma / (MAGNUS_WATER_A - gamma)
    dewpoint = np.where(valid, dewpoint, np.nan)
    return _in_range(dewpoint, MAGNUS_WATER_MIN_C, MAGNUS_WATER_MAX_C)[()]


@np.errstate(all="ignore")
def relative_humidity_pct(temp_c: ArrayLike, dewpoint_c: ArrayLike) -> FloatArray:
    """Relative humidity with respect to water from temperature and dew point, %.

    Equation: RH = 100 e_w(Td) / e_w(t), with the CIMO Guide (WMO-No. 8, Annex 4.B)
    Magnus form over water. Valid for t and Td in -45..60 °C (NaN outside). No check is
    made that Td <= t: a dew point above the air temperature gives RH > 100 %, and
    callers decide whether that is supersaturation or a sensor fault.

    Args:
        temp_c: air temperature, °C.
        dewpoint_c: dew point, °C.

    >>> print(f"{relative_humidity_pct(20.0, 9.255):.2f}")
    50.00
    """
    temp = np.asarray(temp_c, dtype=float)
    dewpoint = np.asarray(dewpoint_c, dtype=float)
    args = (MAGNUS_WATER_A, MAGNUS_WATER_B_C, MAGNUS_WATER_MIN_C, MAGNUS_WATER_MAX_C)
    return (100.0 * _magnus_hpa(dewpoint, *args) / _magnus_hpa(temp, *args))[()]


@np.errstate(all="ignore")
def frost_point_c(temp_c: ArrayLike, rh_pct: ArrayLike) -> FloatArray:
    """Frost point from temperature and relative humidity (with respect to water), °C.

    Equation: e = RH/100 e_w(t), then solve e_i(Tf) = e analytically by inverting the CIMO
    Guide (WMO-No. 8, Annex 4.B) Magnus form over ice, a = 22.46, b = 272.62 °C::

        gamma = ln(e / 6.112)
        Tf    = b gamma / (a - gamma)

    Valid range: -45 <= t <= 60 °C, 0 < RH <= 100 %, and the result must lie in the ice
    formula's range -65 <= Tf <= 0 °C. The frost point is undefined above 0 °C (vapour
    would condense as liquid first), so a result above 0 °C is NaN, as is anything else
    outside the range.

    Args:
        temp_c: air temperature, °C.
        rh_pct: relative humidity with respect to water, %.

    >>> print(f"{frost_point_c(-5.0, 90.0):.2f}")
    -5.65
    >>> print(frost_point_c(10.0, 90.0))
    nan
    """
    temp = np.asarray(temp_c, dtype=float)
    rh = np.asarray(rh_pct, dtype=float)
    e_hpa = _vapor_pressure_from_rh_hpa(temp, rh)
    frost = _inverse_magnus_c(e_hpa, MAGNUS_ICE_A, MAGNUS_ICE_B_C)
    return _in_range(frost, MAGNUS_ICE_MIN_C, MAGNUS_ICE_MAX_C)[()]


@np.errstate(all="ignore")
def frost_point_from_dewpoint_c(dewpoint_c: ArrayLike) -> FloatArray:
    """Frost point from the dew point, °C.

    Equation: e = e_w(Td), then solve e_i(Tf) = e by inverting the CIMO Guide
    (WMO-No. 8, Annex 4.B) ice Magnus form (see :func:`frost_point_c`).

    Valid range: -45 <= Td <= 60 °C with a result in -65..0 °C; a dew point above 0 °C
    has no frost point and gives NaN. Below 0 °C the frost point lies above the dew point.

    Args:
        dewpoint_c: dew point, °C.

    >>> print(f"{frost_point_from_dewpoint_c(-14.44):.2f}")
    -12.87
    >>> print(frost_point_from_dewpoint_c(2.0))
    nan
    """
    e_hpa = _magnus_hpa(
        np.asarray(dewpoint_c, dtype=float),
        MAGNUS_WATER_A,
        MAGNUS_WATER_B_C,
        MAGNUS_WATER_MIN_C,
        MAGNUS_WATER_MAX_C,
    )
    frost = _inverse_magnus_c(e_hpa, MAGNUS_ICE_A, MAGNUS_ICE_B_C)
    return _in_range(frost, MAGNUS_ICE_MIN_C, MAGNUS_ICE_MAX_C)[()]
