"""Night-time long-wave radiation: sky emissivity, downwelling and net long-wave flux.

Air temperature in °C, vapour pressure in hPa (the empirical emissivity fits use hPa and
kelvin), fluxes in W m-2, cloud cover in percent. Out-of-range or NaN input gives NaN.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .constants import (
    BRUNT_A,
    BRUNT_B_PER_SQRT_HPA,
    BRUTSAERT_COEFFICIENT,
    BRUTSAERT_EXPONENT,
    DEFAULT_SURFACE_EMISSIVITY,
    IDSO_A,
    IDSO_B_PER_HPA,
    IDSO_T_SCALE_K,
    MAGNUS_WATER_MAX_C,
    MAGNUS_WATER_MIN_C,
    MAYKUT_CHURCH_COEFFICIENT,
    MAYKUT_CHURCH_EXPONENT,
    STEFAN_BOLTZMANN,
    SWINBANK_COEFFICIENT_PER_K2,
    UNSWORTH_MONTEITH_CLOUD_COEFFICIENT,
    ZERO_CELSIUS_K,
)

__all__ = [
    "clear_sky_emissivity",
    "cloudy_sky_emissivity",
    "downwelling_longwave_wm2",
    "net_longwave_loss_wm2",
]

FloatArray = np.float64 | NDArray[np.float64]

# Public functions run under np.errstate(all="ignore"): every invalid or out-of-range
# result is masked to NaN explicitly, so floating-point warnings would only be noise
# (and pytest turns them into errors). Private helpers are only called from them.

ClearSkyMethod = Literal["brutsaert", "brunt", "swinbank", "idso"]
CloudMethod = Literal["unsworth_monteith", "maykut_church"]


def _is_fraction(x: NDArray[np.float64]) -> NDArray[np.bool_]:
    return (x >= 0.0) & (x <= 1.0)


def _kelvin_if_physical(temp_c: NDArray[np.float64]) -> NDArray[np.float64]:
    """Temperature in K where finite and above absolute zero, else NaN."""
    temp_k = temp_c + ZERO_CELSIUS_K
    return np.where((temp_k > 0.0) & np.isfinite(temp_k), temp_k, np.nan)


@np.errstate(all="ignore")
def clear_sky_emissivity(
    temp_c: ArrayLike, vapor_pressure_hpa: ArrayLike, method: ClearSkyMethod = "brutsaert"
) -> FloatArray:
    """Effective emissivity of a cloudless sky from screen-level air temperature and humidity.

    Equations (T in K, e in hPa; as compared by Flerchinger et al. 2009, Water Resour.
    Res. 45, W03423; equation numbers in the originals not recorded here)::

        "brutsaert"  Brutsaert (1975), WRR 11:           eps = 1.24 (e / T)^(1/7)
        "brunt"      Brunt (1932), QJRMS 58:             eps = 0.52 + 0.065 sqrt(e)
        "swinbank"   Swinbank (1963), QJRMS 89:          eps = 9.37e-6 T^2
        "idso"       Idso (1981), WRR 17:                eps = 0.70 + 5.95e-5 e exp(1500 / T)

    Valid range: -45 <= t <= 60 °C (the range of the CIMO Magnus form from which e is
    normally derived) and e >= 0 hPa; otherwise NaN. The result is capped at 1.0
    (Swinbank exceeds 1 above about 53 °C). NaN in either input gives NaN for every method,
    including Swinbank, which does not use e.

    Args:
        temp_c: screen-level air temperature, °C.
        vapor_pressure_hpa: screen-level vapour pressure, hPa.
        method: one of ``"brutsaert"``, ``"brunt"``, ``"swinbank"``, ``"idso"``.

    Raises:
        ValueError: for an unknown ``method``.

    >>> print(f"{clear_sky_emissivity(10.0, 10.0):.4f}")
    0.7691
    >>> print(f"{clear_sky_emissivity(10.0, 10.0, method='brunt'):.4f}")
    0.7255
    >>> print(f"{clear_sky_emissivity(10.0, -1.0):.4f}")
    nan
    """
    temp = np.asarray(temp_c, dtype=float)
    e_hpa = np.asarray(vapor_pressure_hpa, dtype=float)
    valid = (
        (temp >= MAGNUS_WATER_MIN_C)
        & (temp <= MAGNUS_WATER_MAX_C)
        & (e_hpa >= 0.0)
        & np.isfinite(e_hpa)
    )
    temp_k = temp + ZERO_CELSIUS_K
    if method == "brutsaert":
        emissivity = BRUTSAERT_COEFFICIENT * (e_hpa / temp_k) ** BRUTSAERT_EXPONENT
    elif method == "brunt":
        emissivity = BRUNT_A + BRUNT_B_PER_SQRT_HPA * np.sqrt(e_hpa)
    elif method == "swinbank":
        emissivity = SWINBANK_COEFFICIENT_PER_K2 * temp_k**2
    elif method == "idso":
        emissivity = IDSO_A + IDSO_B_PER_HPA * e_hpa * np.exp(IDSO_T_SCALE_K / temp_k)
    else:
        raise ValueError(
            f"method must be one of 'brutsaert', 'brunt', 'swinbank', 'idso', got: {method!r}"
        )
    return np.where(valid, np.minimum(emissivity, 1.0), np.nan)[()]


@np.errstate(all="ignore")
def cloudy_sky_emissivity(
    clear_emissivity: ArrayLike,
    cloud_pct: ArrayLike,
    method: CloudMethod = "unsworth_monteith",
) -> FloatArray:
    """Sky emissivity with cloud, from the clear-sky value and the cloud cover.

    Equations (c = cloud_pct / 100, the cloud fraction)::

        "unsworth_monteith"  Unsworth & Monteith (1975), QJRMS 101:
                             eps = (1 - 0.84 c) eps_clear + 0.84 c
        "maykut_church"      Maykut & Church (1973), J. Appl. Meteor. 12:
                             eps = eps_clear (1 + 0.22 c^2.75)

    Valid range: 0 <= cloud_pct <= 100 and 0 <= clear_emissivity <= 1; otherwise NaN.
    The result is capped at 1.0.

    Args:
        clear_emissivity: clear-sky emissivity (see :func:`clear_sky_emissivity`).
        cloud_pct: total cloud cover, % (okta x 12.5).
        method: ``"unsworth_monteith"`` or ``"maykut_church"``.

    Raises:
        ValueError: for an unknown ``method``.

    >>> print(f"{cloudy_sky_emissivity(0.7691, 100.0):.3f}")
    0.963
    >>> print(f"{cloudy_sky_emissivity(0.7691, 100.0, method='maykut_church'):.4f}")
    0.9383
    >>> print(cloudy_sky_emissivity(0.7691, 120.0))
    nan
    """
    clear = np.asarray(clear_emissivity, dtype=float)
    cloud_fraction = np.asarray(cloud_pct, dtype=float) / 100.0
    valid = _is_fraction(clear) & _is_fraction(cloud_fraction)
    if method == "unsworth_monteith":
        coefficient = UNSWORTH_MONTEITH_CLOUD_COEFFICIENT
        emissivity = (1.0 - coefficient * cloud_fraction) * clear + coefficient * cloud_fraction
    elif method == "maykut_church":
        emissivity = clear * (
            1.0 + MAYKUT_CHURCH_COEFFICIENT * np.abs(cloud_fraction) ** MAYKUT_CHURCH_EXPONENT
        )
    else:
        raise ValueError(f"method must be 'unsworth_monteith' or 'maykut_church', got: {method!r}")
    return np.where(valid, np.minimum(emissivity, 1.0), np.nan)[()]


@np.errstate(all="ignore")
def downwelling_longwave_wm2(temp_c: ArrayLike, sky_emissivity: ArrayLike) -> FloatArray:
    """Downwelling long-wave radiation at the surface, W m-2.

    Equation (Stefan–Boltzmann law with an effective sky emissivity, as in Flerchinger
    et al. 2009, Water Resour. Res. 45, W03423)::

        L_down = eps sigma T^4,    sigma = 5.670374419e-8 W m-2 K-4 (CODATA 2018)

    Valid range: T > 0 K and 0 <= eps <= 1; otherwise NaN.

    Args:
        temp_c: screen-level air temperature, °C.
        sky_emissivity: effective sky emissivity.

    >>> print(f"{downwelling_longwave_wm2(10.0, 0.7691):.1f}")
    280.3
    """
    temp_k = _kelvin_if_physical(np.asarray(temp_c, dtype=float))
    emissivity = np.asarray(sky_emissivity, dtype=float)
    flux = emissivity * STEFAN_BOLTZMANN * temp_k**4
    return np.where(_is_fraction(emissivity), flux, np.nan)[()]


@np.errstate(all="ignore")
def net_longwave_loss_wm2(
    air_temp_c: ArrayLike,
    sky_emissivity: ArrayLike,
    surface_temp_c: ArrayLike | None = None,
    surface_emissivity: ArrayLike = DEFAULT_SURFACE_EMISSIVITY,
    sky_view_factor: ArrayLike = 1.0,
) -> FloatArray:
    """Net long-wave loss from the surface (positive = losing energy), W m-2.

    Equation (Stefan–Boltzmann; Kirchhoff's law for the surface's absorptivity; the part of
    the hemisphere hidden by canopy or valley walls, 1 - svf, radiates as a black body at
    air temperature, after Oke, Boundary Layer Climates, ch. on sky-view factor, from
    memory)::

        L* = eps_s sigma Ts^4 - eps_s [svf eps sigma Ta^4 + (1 - svf) sigma Ta^4]

    With Ts = Ta this is eps_s svf (1 - eps) sigma Ta^4, so the loss scales with the
    sky-view factor and vanishes under a sky of emissivity 1.

    Valid range: temperatures above 0 K, 0 <= eps <= 1, 0 < eps_s <= 1, 0 <= svf <= 1;
    otherwise NaN.

    Args:
        air_temp_c: screen-level air temperature, °C.
        sky_emissivity: effective sky emissivity (clear or cloudy).
        surface_temp_c: radiating surface temperature, °C; ``None`` means equal to the air.
        surface_emissivity: long-wave emissivity of the surface (default 0.98).
        sky_view_factor: fraction of the hemisphere that is open sky, 0..1.

    >>> print(f"{net_longwave_loss_wm2(10.0, 0.7691):.1f}")
    82.5
    >>> print(f"{net_longwave_loss_wm2(10.0, 0.7691, sky_view_factor=0.5):.1f}")
    41.2
    >>> print(net_longwave_loss_wm2(10.0, 0.7691, sky_view_factor=1.5))
    nan
    """
    air_k = _kelvin_if_physical(np.asarray(air_temp_c, dtype=float))
    if surface_temp_c is None:
        surface_k = air_k
    else:
        surface_k = _kelvin_if_physical(np.asarray(surface_temp_c, dtype=float))
    emissivity = np.asarray(sky_emissivity, dtype=float)
    surface_eps = np.asarray(surface_emissivity, dtype=float)
    svf = np.asarray(sky_view_factor, dtype=float)
    valid = (
        _is_fraction(emissivity) & (surface_eps > 0.0) & (surface_eps <= 1.0) & _is_fraction(svf)
    )
    air_black_body = STEFAN_BOLTZMANN * air_k**4
    incoming = svf * emissivity * air_black_body + (1.0 - svf) * air_black_body
    loss = surface_eps * STEFAN_BOLTZMANN * surface_k**4 - surface_eps * incoming
    return np.where(valid, loss, np.nan)[()]
