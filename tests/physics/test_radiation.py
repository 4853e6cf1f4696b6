"""Sky emissivity and long-wave fluxes against published formulas and check values."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from notifier.physics import (
    clear_sky_emissivity,
    cloudy_sky_emissivity,
    downwelling_longwave_wm2,
    net_longwave_loss_wm2,
    saturation_vapor_pressure_hpa,
)
from notifier.physics.constants import STEFAN_BOLTZMANN

# Check case from docs/references.md [LW check]: air 10 °C, e = 10 hPa.
CHECK_TEMP_C = 10.0
CHECK_E_HPA = 10.0

CLEAR_SKY_TABLE = [
    # (method, expected emissivity, tolerance, source)
    ("brutsaert", 0.7691, 5e-5),  # docs/references.md [LW check], from Brutsaert 1975
    ("brunt", 0.7255, 5e-5),  # docs/references.md [LW check], from Brunt 1932
    # Swinbank 1963: 9.37e-6 * 283.15^2 = 0.75123 (docs/references.md [LW check]); an earlier
    # note printed 0.7508, which would need T = 283.07 K. The formula is trusted here.
    ("swinbank", 0.7512, 5e-5),
    # Idso 1981: 0.70 + 5.95e-5 * 10 * exp(1500/283.15) (docs/references.md [LW check]).
    ("idso", 0.8189, 5e-5),
]


def test_stefan_boltzmann_is_codata_2018() -> None:
    # CODATA 2018 recommended value (exact in the 2019 SI).
    assert STEFAN_BOLTZMANN == 5.670374419e-8


@pytest.mark.parametrize(
    ("method", "expected", "tolerance"), CLEAR_SKY_TABLE, ids=[r[0] for r in CLEAR_SKY_TABLE]
)
def test_clear_sky_emissivity_check_values(method: str, expected: float, tolerance: float) -> None:
    result = clear_sky_emissivity(CHECK_TEMP_C, CHECK_E_HPA, method=method)  # type: ignore[arg-type]
    assert result == pytest.approx(expected, abs=tolerance)


def test_downwelling_and_net_longwave_check_values() -> None:
    # docs/references.md [LW check]: L_down = 280.3 W/m2 and net loss 82.5 W/m2 (eps_s 0.98,
    # Ts = Ta) with the Brutsaert sky at 10 °C, 10 hPa. Tolerance: the printed rounding.
    sky = clear_sky_emissivity(CHECK_TEMP_C, CHECK_E_HPA)
    assert downwelling_longwave_wm2(CHECK_TEMP_C, sky) == pytest.approx(280.3, abs=0.05)
    assert net_longwave_loss_wm2(CHECK_TEMP_C, sky) == pytest.approx(82.5, abs=0.05)


def test_black_body_at_freezing() -> None:
    # Black-body flux at 0 °C: 5.670374419e-8 * 273.15^4 = 315.66 W/m2 (by hand).
    assert downwelling_longwave_wm2(0.0, 1.0) == pytest.approx(315.66, abs=0.005)


def test_overcast_sky_check_values() -> None:
    sky = clear_sky_emissivity(CHECK_TEMP_C, CHECK_E_HPA)
    # docs/references.md [LW check]: Unsworth & Monteith 1975 with c = 1 gives 0.963.
    overcast = cloudy_sky_emissivity(sky, 100.0)
    assert overcast == pytest.approx(0.963, abs=5e-4)
    # Maykut & Church 1973: 0.7691 * 1.22 = 0.9383 (by hand).
    assert cloudy_sky_emissivity(sky, 100.0, method="maykut_church") == pytest.approx(
        0.9383, abs=5e-4
    )
    # An earlier note said overcast net loss "≈ 0"; the formula gives 0.98 * 0.037 * 364.5
    # = 13.2 W/m2 (docs/references.md [LW check]), a sixth of the clear-sky loss. Test what
    # the formula gives.
    assert net_longwave_loss_wm2(CHECK_TEMP_C, overcast) == pytest.approx(13.2, abs=0.05)
    # Clear sky (c = 0) is unchanged by either cloud correction.
    assert cloudy_sky_emissivity(sky, 0.0) == pytest.approx(sky)
    assert cloudy_sky_emissivity(sky, 0.0, method="maykut_church") == pytest.approx(sky)


def test_sky_view_factor_scales_the_loss() -> None:
    # docs/references.md [LW check]: with Ts = Ta the loss scales with the sky-view factor.
    sky = clear_sky_emissivity(CHECK_TEMP_C, CHECK_E_HPA)
    full = net_longwave_loss_wm2(CHECK_TEMP_C, sky)
    factors = np.array([0.0, 0.25, 0.5, 1.0])
    np.testing.assert_allclose(
        net_longwave_loss_wm2(CHECK_TEMP_C, sky, sky_view_factor=factors),
        full * factors,
        rtol=1e-12,
        atol=1e-12,
    )


def test_surface_colder_than_air_loses_less() -> None:
    sky = clear_sky_emissivity(CHECK_TEMP_C, CHECK_E_HPA)
    same = net_longwave_loss_wm2(CHECK_TEMP_C, sky)
    colder = net_longwave_loss_wm2(CHECK_TEMP_C, sky, surface_temp_c=5.0)
    assert colder < same
    # Stefan–Boltzmann by hand: 0.98 * sigma * (278.15^4 - 0.7691 * 283.15^4).
    by_hand = 0.98 * STEFAN_BOLTZMANN * (278.15**4 - sky * 283.15**4)
    assert colder == pytest.approx(by_hand, rel=1e-12)


@pytest.mark.parametrize(
    "kwargs",
    [
        {"sky_view_factor": 1.5},
        {"sky_view_factor": -0.1},
        {"surface_emissivity": 0.0},
        {"surface_emissivity": 1.2},
        {"surface_temp_c": -300.0},
        {"surface_temp_c": np.nan},
    ],
    ids=["svf-high", "svf-negative", "eps-s-zero", "eps-s-high", "below-absolute-zero", "nan-ts"],
)
def test_net_longwave_out_of_range_is_nan(kwargs: dict[str, float]) -> None:
    assert np.isnan(net_longwave_loss_wm2(CHECK_TEMP_C, 0.77, **kwargs))  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("temp_c", "e_hpa"),
    [(10.0, -1.0), (10.0, np.nan), (np.nan, 10.0), (-50.0, 1.0), (61.0, 10.0), (10.0, np.inf)],
    ids=["e-negative", "e-nan", "t-nan", "too-cold", "too-hot", "e-inf"],
)
@pytest.mark.parametrize("method", ["brutsaert", "brunt", "swinbank", "idso"])
def test_clear_sky_out_of_range_is_nan(temp_c: float, e_hpa: float, method: str) -> None:
    assert np.isnan(clear_sky_emissivity(temp_c, e_hpa, method=method))  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("clear", "cloud_pct"),
    [(0.77, 120.0), (0.77, -1.0), (1.2, 50.0), (-0.1, 50.0), (np.nan, 50.0), (0.77, np.nan)],
    ids=["cloud-high", "cloud-negative", "eps-high", "eps-negative", "nan-eps", "nan-cloud"],
)
@pytest.mark.parametrize("method", ["unsworth_monteith", "maykut_church"])
def test_cloudy_sky_out_of_range_is_nan(clear: float, cloud_pct: float, method: str) -> None:
    assert np.isnan(cloudy_sky_emissivity(clear, cloud_pct, method=method))  # type: ignore[arg-type]


def test_downwelling_out_of_range_is_nan() -> None:
    assert np.isnan(downwelling_longwave_wm2([10.0, -300.0, np.nan], [1.1, 0.8, 0.8])).all()


def test_unknown_methods_raise() -> None:
    with pytest.raises(ValueError, match="method must be one of .*got: 'prata'"):
        clear_sky_emissivity(10.0, 10.0, method="prata")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="got: 'kimball'"):
        cloudy_sky_emissivity(0.77, 50.0, method="kimball")  # type: ignore[arg-type]


def test_swinbank_is_capped_at_one() -> None:
    # 9.37e-6 T^2 exceeds 1 above ~53.5 °C; the result is capped.
    assert clear_sky_emissivity(58.0, 50.0, method="swinbank") == 1.0


def test_no_warning_for_bad_input() -> None:
    bad = np.array([np.nan, -1e6, 1e6, -273.15, np.inf, -np.inf, 0.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for method in ("brutsaert", "brunt", "swinbank", "idso"):
            clear_sky_emissivity(bad, bad, method=method)  # type: ignore[arg-type]
        for method in ("unsworth_monteith", "maykut_church"):
            cloudy_sky_emissivity(bad, bad, method=method)  # type: ignore[arg-type]
        downwelling_longwave_wm2(bad, bad)
        net_longwave_loss_wm2(bad, bad, surface_temp_c=bad, sky_view_factor=bad)
    # and what comes out: NaN for every undefined input (house rule: physically
    # undefined input gives NaN), a number for the one defined case, 0 °C and dry air
    clear_methods = ("brutsaert", "brunt", "swinbank", "idso")
    cloud_methods = ("unsworth_monteith", "maykut_church")
    results = [
        *(clear_sky_emissivity(bad, bad, method=m) for m in clear_methods),  # type: ignore[arg-type]
        *(cloudy_sky_emissivity(bad, bad, method=m) for m in cloud_methods),  # type: ignore[arg-type]
        downwelling_longwave_wm2(bad, bad),
        net_longwave_loss_wm2(bad, bad, surface_temp_c=bad, sky_view_factor=bad),
    ]
    for result in results:
        assert np.isnan(result[:-1]).all(), result
        assert np.isfinite(result[-1]), result


# --- Properties ----------------------------------------------------------------------

methods = st.sampled_from(["brutsaert", "brunt", "swinbank", "idso"])
cloud_methods = st.sampled_from(["unsworth_monteith", "maykut_church"])


@settings(max_examples=200, deadline=None)
@given(
    temp_c=st.floats(-45.0, 60.0),
    saturation_fraction=st.floats(0.001, 1.0),
    method=methods,
    cloud_pct=st.floats(0.0, 100.0),
    cloud_method=cloud_methods,
)
def test_emissivity_in_unit_interval(
    temp_c: float, saturation_fraction: float, method: str, cloud_pct: float, cloud_method: str
) -> None:
    e_hpa = saturation_fraction * saturation_vapor_pressure_hpa(temp_c)
    clear = clear_sky_emissivity(temp_c, e_hpa, method=method)  # type: ignore[arg-type]
    assert 0.0 < clear <= 1.0
    cloudy = cloudy_sky_emissivity(clear, cloud_pct, method=cloud_method)  # type: ignore[arg-type]
    assert clear - 1e-12 <= cloudy <= 1.0


@settings(max_examples=100, deadline=None)
@given(
    temp_c=st.floats(-30.0, 35.0),
    saturation_fraction=st.floats(0.05, 1.0),
    cloud_method=cloud_methods,
    surface_offset_k=st.floats(-5.0, 5.0),
    sky_view_factor=st.floats(0.0, 1.0),
)
def test_net_loss_decreases_with_cloud(
    temp_c: float,
    saturation_fraction: float,
    cloud_method: str,
    surface_offset_k: float,
    sky_view_factor: float,
) -> None:
    clear = clear_sky_emissivity(
        temp_c, saturation_fraction * saturation_vapor_pressure_hpa(temp_c)
    )
    sky = cloudy_sky_emissivity(clear, np.linspace(0.0, 100.0, 21), method=cloud_method)  # type: ignore[arg-type]
    loss = net_longwave_loss_wm2(
        temp_c, sky, surface_temp_c=temp_c + surface_offset_k, sky_view_factor=sky_view_factor
    )
    assert np.all(np.diff(loss) <= 1e-9)


@settings(max_examples=100, deadline=None)
@given(
    temp_c=st.floats(-30.0, 35.0),
    sky_emissivity=st.floats(0.5, 1.0),
    surface_offset_k=st.floats(-5.0, 5.0),
)
def test_net_loss_increases_with_sky_view(
    temp_c: float, sky_emissivity: float, surface_offset_k: float
) -> None:
    # Opening the sky swaps black-body canopy/walls at air temperature for a sky of
    # emissivity <= 1, so the loss cannot fall.
    loss = net_longwave_loss_wm2(
        temp_c,
        sky_emissivity,
        surface_temp_c=temp_c + surface_offset_k,
        sky_view_factor=np.linspace(0.0, 1.0, 11),
    )
    assert np.all(np.diff(loss) >= -1e-9)
