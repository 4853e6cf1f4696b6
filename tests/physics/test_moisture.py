"""Saturation vapour pressure, dew point and frost point against published values,
MetPy and psychrolib.

Reference values in the tables are entries of docs/references.md, each marked there as
checked (a stored copy of the source was read), computed (worked out from the published
formula) or from memory; the entry is named beside every case.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

import notifier.physics as physics
from notifier.physics import (
    dewpoint_c,
    frost_point_c,
    frost_point_from_dewpoint_c,
    relative_humidity_pct,
    saturation_vapor_pressure_hpa,
    vapor_pressure_hpa,
)

# --- Public API guard ----------------------------------------------------------------------

EXPECTED_PUBLIC_NAMES = {
    "saturation_vapor_pressure_hpa",
    "vapor_pressure_hpa",
    "dewpoint_c",
    "relative_humidity_pct",
    "frost_point_c",
    "frost_point_from_dewpoint_c",
    "clear_sky_emissivity",
    "cloudy_sky_emissivity",
    "downwelling_longwave_wm2",
    "net_longwave_loss_wm2",
    "brunt_cooling_coefficient_k_per_sqrt_h",
    "fit_sqrt_cooling",
    "project_sqrt_cooling_c",
    "fao_square_root_trend_c",
    "craddock_pritchard_min_c",
    "crossover_temp_c",
    "robust_slope_per_h",
    "hours_to_zero",
    "sunrise_sunset_utc",
    "night_bounds_utc",
    "night_length_h",
}


def test_public_all_of_the_physics_package() -> None:
    assert set(physics.__all__) == EXPECTED_PUBLIC_NAMES
    assert len(physics.__all__) == len(EXPECTED_PUBLIC_NAMES)
    for name in physics.__all__:
        assert callable(getattr(physics, name))


# --- Saturation vapour pressure ----------------------------------------------------------

# WMO CIMO Guide (WMO-No. 8) Annex 4.B Magnus forms, values in hPa computed in
# docs/references.md [SVP check]; the tolerance covers their last printed digit.
CIMO_TABLE = [
    # (t °C, over, e hPa, tolerance hPa)
    (-20.0, "water", 1.2597, 5e-5),
    (-10.0, "water", 2.8703, 5e-5),
    (0.0, "water", 6.1120, 5e-5),
    (10.0, "water", 12.260, 5e-4),
    (20.0, "water", 23.326, 5e-4),
    (30.0, "water", 42.337, 5e-4),
    (-20.0, "ice", 1.0326, 5e-5),
    (-10.0, "ice", 2.5987, 5e-5),
    (0.0, "ice", 6.1120, 5e-5),
]


@pytest.mark.parametrize(
    ("temp_c", "over", "expected_hpa", "tolerance_hpa"),
    CIMO_TABLE,
    ids=[f"{row[1]}{row[0]:+.0f}C" for row in CIMO_TABLE],
)
def test_saturation_vapor_pressure_matches_cimo_table(
    temp_c: float, over: str, expected_hpa: float, tolerance_hpa: float
) -> None:
    result = saturation_vapor_pressure_hpa(temp_c, over=over)  # type: ignore[arg-type]
    assert result == pytest.approx(expected_hpa, abs=tolerance_hpa)


# Goff–Gratch values, hPa, docs/references.md [SVP check]: the CIMO Magnus form should stay
# within 0.5 % of the reference-grade formula over this range.
GOFF_GRATCH_TABLE = [
    (-20.0, "water", 1.2540),
    (-10.0, "water", 2.8627),
    (0.0, "water", 6.1078),
    (10.0, "water", 12.272),
    (20.0, "water", 23.373),
    (30.0, "water", 42.430),
    (-20.0, "ice", 1.0317),
    (-10.0, "ice", 2.5970),
    (0.0, "ice", 6.1071),
]


@pytest.mark.parametrize(
    ("temp_c", "over", "goff_gratch_hpa"),
    GOFF_GRATCH_TABLE,
    ids=[f"{row[1]}{row[0]:+.0f}C" for row in GOFF_GRATCH_TABLE],
)
def test_saturation_vapor_pressure_close_to_goff_gratch(
    temp_c: float, over: str, goff_gratch_hpa: float
) -> None:
    result = saturation_vapor_pressure_hpa(temp_c, over=over)  # type: ignore[arg-type]
    assert result == pytest.approx(goff_gratch_hpa, rel=5e-3)


def test_saturation_vapor_pressure_against_metpy_ambaum() -> None:
    # MetPy 1.7 uses Ambaum (2020). Differences from the Magnus form, measured here:
    # <= 0.45 % over -30..40 °C (water), <= 0.3 % over -40..0 °C (ice), and <= 1.1 %
    # out to the ends of the CIMO ranges.
    metpy_calc = pytest.importorskip("metpy.calc")
    units = pytest.importorskip("metpy.units").units

    water_c = np.arange(-45.0, 60.5, 1.0)
    metpy_water = metpy_calc.saturation_vapor_pressure(units.Quantity(water_c, "degC")).to("hPa").m
    ours_water = saturation_vapor_pressure_hpa(water_c)
    core = (water_c >= -30) & (water_c <= 40)
    np.testing.assert_allclose(ours_water[core], metpy_water[core], rtol=4.5e-3)
    np.testing.assert_allclose(ours_water, metpy_water, rtol=1.1e-2)

    ice_c = np.arange(-65.0, 0.5, 1.0)
    metpy_ice = (
        metpy_calc.saturation_vapor_pressure(units.Quantity(ice_c, "degC"), phase="solid")
        .to("hPa")
        .m
    )
    ours_ice = saturation_vapor_pressure_hpa(ice_c, over="ice")
    np.testing.assert_allclose(ours_ice[ice_c >= -40], metpy_ice[ice_c >= -40], rtol=3e-3)
    np.testing.assert_allclose(ours_ice, metpy_ice, rtol=1.1e-2)


def test_saturation_vapor_pressure_against_psychrolib_hyland_wexler() -> None:
    # psychrolib (ASHRAE Handbook, Hyland & Wexler 1983) returns Pa, over ice at or
    # below 0.01 °C and over water above. Measured agreement: 0.3 % water, 0.15 % ice.
    psychrolib = pytest.importorskip("psychrolib")
    psychrolib.SetUnitSystem(psychrolib.SI)

    water_c = np.arange(1.0, 60.5, 1.0)
    reference_water = np.array([psychrolib.GetSatVapPres(t) for t in water_c]) / 100.0
    np.testing.assert_allclose(saturation_vapor_pressure_hpa(water_c), reference_water, rtol=3e-3)

    ice_c = np.arange(-60.0, -0.5, 1.0)
    reference_ice = np.array([psychrolib.GetSatVapPres(t) for t in ice_c]) / 100.0
    np.testing.assert_allclose(
        saturation_vapor_pressure_hpa(ice_c, over="ice"), reference_ice, rtol=1.5e-3
    )


@pytest.mark.parametrize(
    ("temp_c", "over"),
    [(-45.5, "water"), (60.5, "water"), (-65.5, "ice"), (0.5, "ice"), (np.nan, "water")],
    ids=["water-too-cold", "water-too-hot", "ice-too-cold", "ice-above-zero", "nan"],
)
def test_saturation_vapor_pressure_out_of_range_is_nan(temp_c: float, over: str) -> None:
    assert np.isnan(saturation_vapor_pressure_hpa(temp_c, over=over))  # type: ignore[arg-type]


def test_saturation_vapor_pressure_range_ends_are_valid() -> None:
    assert np.isfinite(saturation_vapor_pressure_hpa([-45.0, 60.0])).all()
    assert np.isfinite(saturation_vapor_pressure_hpa([-65.0, 0.0], over="ice")).all()


def test_saturation_vapor_pressure_rejects_unknown_phase() -> None:
    with pytest.raises(ValueError, match="over must be 'water' or 'ice', got: 'steam'"):
        saturation_vapor_pressure_hpa(10.0, over="steam")  # type: ignore[arg-type]


def test_scalar_in_numpy_float_out_and_shape_preserved() -> None:
    scalar = saturation_vapor_pressure_hpa(10.0)
    assert isinstance(scalar, np.floating)
    grid = dewpoint_c(np.full((3, 4), 10.0), 80.0)
    assert grid.shape == (3, 4)


def test_vapor_pressure_is_saturation_at_the_dewpoint() -> None:
    dewpoints_c = np.array([-30.0, -5.0, 0.0, 12.5, 25.0])
    np.testing.assert_array_equal(
        vapor_pressure_hpa(dewpoints_c), saturation_vapor_pressure_hpa(dewpoints_c)
    )


def test_vapor_pressure_near_metpy_docs_example() -> None:
    # MetPy docs [checked]: dewpoint(22 hPa) = 19.029 °C. MetPy inverts Bolton (1980),
    # whose e_w differs from the CIMO form by ~0.2 % here: 0.05 hPa tolerance.
    assert vapor_pressure_hpa(19.029) == pytest.approx(22.0, abs=0.05)


# --- Dew point and frost point -------------------------------------------------------

# docs/references.md [Td check], from the CIMO Magnus inverse (Td(20, 50) also matches MetPy's
# 9.256 to 0.001 K); tolerance covers the printed rounding.
DEWPOINT_TABLE = [
    # (t °C, RH %, Td °C, frost point °C or None, tolerance K)
    (20.0, 50.0, 9.255, None, 5e-4),
    (10.0, 90.0, 8.43, None, 5e-3),
    (0.0, 80.0, -3.04, -2.68, 5e-3),
    (-5.0, 90.0, -6.39, -5.65, 5e-3),
    (-10.0, 70.0, -14.44, -12.87, 5e-3),
]


@pytest.mark.parametrize(
    ("temp_c", "rh_pct", "expected_dewpoint_c", "expected_frost_c", "tolerance_k"),
    DEWPOINT_TABLE,
    ids=[f"{row[0]:+.0f}C-{row[1]:.0f}pct" for row in DEWPOINT_TABLE],
)
def test_dewpoint_and_frost_point_check_values(
    temp_c: float,
    rh_pct: float,
    expected_dewpoint_c: float,
    expected_frost_c: float | None,
    tolerance_k: float,
) -> None:
    assert dewpoint_c(temp_c, rh_pct) == pytest.approx(expected_dewpoint_c, abs=tolerance_k)
    frost = frost_point_c(temp_c, rh_pct)
    if expected_frost_c is None:
        assert np.isnan(frost)  # frost point undefined above 0 °C
    else:
        assert frost == pytest.approx(expected_frost_c, abs=tolerance_k)
        assert frost_point_from_dewpoint_c(expected_dewpoint_c) == pytest.approx(
            expected_frost_c, abs=0.01
        )


def test_dewpoint_against_metpy() -> None:
    # MetPy inverts Bolton (1980) after computing e_s with Ambaum (2020); at 15 °C and 100 %
    # it gives 14.991 °C (docs/references.md [MetPy]). Measured: within 0.05 K for -40..30 °C,
    # within 0.25 K up to 50 °C.
    metpy_calc = pytest.importorskip("metpy.calc")
    units = pytest.importorskip("metpy.units").units

    temp_grid_c, rh_grid_pct = np.meshgrid(
        np.arange(-40.0, 50.5, 2.5), [5.0, 10.0, 20.0, 40.0, 60.0, 80.0, 95.0, 100.0]
    )
    ours = dewpoint_c(temp_grid_c, rh_grid_pct)
    theirs = (
        metpy_calc.dewpoint_from_relative_humidity(
            units.Quantity(temp_grid_c, "degC"), units.Quantity(rh_grid_pct, "percent")
        )
        .to("degC")
        .m
    )
    both = np.isfinite(ours)
    core = both & (temp_grid_c <= 30.0)
    assert core.sum() > 100
    np.testing.assert_allclose(ours[core], theirs[core], atol=0.05)
    np.testing.assert_allclose(ours[both], theirs[both], atol=0.25)


def test_dewpoint_and_frost_point_against_psychrolib() -> None:
    # psychrolib inverts Hyland–Wexler over water above 0.01 °C and over ice below, so for
    # air above freezing its "dew point" below 0 °C is the frost point. Measured agreement
    # 0.045 K (dew point) and 0.035 K (frost point); tolerance 0.05 K.
    psychrolib = pytest.importorskip("psychrolib")
    psychrolib.SetUnitSystem(psychrolib.SI)

    for temp in np.arange(1.0, 50.5, 3.0):
        for rh in (5.0, 15.0, 30.0, 50.0, 70.0, 90.0, 100.0):
            reference = psychrolib.GetTDewPointFromRelHum(float(temp), rh / 100.0)
            ours_dew = dewpoint_c(temp, rh)
            if ours_dew > 0.5:
                assert ours_dew == pytest.approx(reference, abs=0.05), (temp, rh)
            elif ours_dew < -0.5 and np.isfinite(ours_dew):
                assert frost_point_c(temp, rh) == pytest.approx(reference, abs=0.05), (temp, rh)


@pytest.mark.parametrize(
    ("temp_c", "rh_pct"),
    [
        (10.0, 0.0),
        (10.0, -5.0),
        (10.0, 100.5),
        (-46.0, 50.0),
        (61.0, 50.0),
        (np.nan, 50.0),
        (10.0, np.nan),
        (-44.0, 1.0),  # Td about -70 °C: below the water formula's range
    ],
    ids=[
        "rh-zero",
        "rh-negative",
        "rh-over-100",
        "too-cold",
        "too-hot",
        "nan-t",
        "nan-rh",
        "td-below-range",
    ],
)
def test_dewpoint_out_of_range_is_nan(temp_c: float, rh_pct: float) -> None:
    assert np.isnan(dewpoint_c(temp_c, rh_pct))


@pytest.mark.parametrize(
    ("temp_c", "rh_pct"),
    [(5.0, 95.0), (0.0, 100.0 + 1e-9), (10.0, 0.0), (np.nan, 80.0), (-45.0, 0.5)],
    ids=["above-freezing", "rh-over-100", "rh-zero", "nan", "below-ice-range"],
)
def test_frost_point_undefined_is_nan(temp_c: float, rh_pct: float) -> None:
    assert np.isnan(frost_point_c(temp_c, rh_pct))


def test_frost_point_at_zero_and_saturation_is_zero() -> None:
    # e_w(0) = e_i(0) = 6.112 hPa in the CIMO forms, so saturation at 0 °C is a frost
    # point of exactly 0 °C.
    assert frost_point_c(0.0, 100.0) == pytest.approx(0.0, abs=1e-12)
    assert frost_point_from_dewpoint_c(0.0) == pytest.approx(0.0, abs=1e-12)


def test_frost_point_from_dewpoint_above_freezing_is_nan() -> None:
    assert np.isnan(frost_point_from_dewpoint_c([0.5, 10.0, np.nan])).all()


def test_relative_humidity_is_not_capped() -> None:
    # Kept pure: a dew point above the air temperature gives RH > 100 %; callers decide.
    assert relative_humidity_pct(10.0, 11.0) > 100.0
    assert relative_humidity_pct(10.0, 10.0) == pytest.approx(100.0)
    assert np.isnan(relative_humidity_pct(10.0, -50.0))


def test_no_warning_for_bad_or_missing_input() -> None:
    bad_temps = np.array([np.nan, -300.0, 1e6, -243.12, -272.62, np.inf, -np.inf])
    bad_rh = np.array([np.nan, -1.0, 0.0, 1e6, 50.0, np.inf, -np.inf])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for over in ("water", "ice"):
            assert np.isnan(saturation_vapor_pressure_hpa(bad_temps, over=over)).all()
        assert np.isnan(dewpoint_c(bad_temps, bad_rh)).all()
        assert np.isnan(frost_point_c(bad_temps, bad_rh)).all()
        assert np.isnan(relative_humidity_pct(bad_temps, bad_temps)).all()
        assert np.isnan(frost_point_from_dewpoint_c(bad_temps)).all()
        assert np.isnan(vapor_pressure_hpa(bad_temps)).all()


# --- Properties ----------------------------------------------------------------------

temps_c = st.floats(-45.0, 60.0)
rhs_pct = st.floats(0.5, 100.0)


@settings(max_examples=200, deadline=None)
@given(temp_c=temps_c, rh_pct=rhs_pct)
def test_rh_dewpoint_rh_round_trip(temp_c: float, rh_pct: float) -> None:
    dewpoint = dewpoint_c(temp_c, rh_pct)
    assume(np.isfinite(dewpoint))
    assert relative_humidity_pct(temp_c, dewpoint) == pytest.approx(rh_pct, rel=1e-9)


@settings(max_examples=200, deadline=None)
@given(temp_c=temps_c, rh_low=rhs_pct, rh_high=rhs_pct)
def test_dewpoint_monotone_in_rh_and_not_above_temperature(
    temp_c: float, rh_low: float, rh_high: float
) -> None:
    rh_low, rh_high = sorted((rh_low, rh_high))
    low, high = dewpoint_c(temp_c, [rh_low, rh_high])
    assume(np.isfinite(low))
    assert low <= high
    assert high <= temp_c + 1e-9


@settings(max_examples=200, deadline=None)
@given(temp_c=st.floats(-45.0, 0.0), rh_pct=rhs_pct)
def test_frost_point_at_or_above_dewpoint_below_freezing(temp_c: float, rh_pct: float) -> None:
    dewpoint = dewpoint_c(temp_c, rh_pct)
    frost = frost_point_c(temp_c, rh_pct)
    assume(np.isfinite(dewpoint) and np.isfinite(frost))
    assert frost >= dewpoint - 1e-9
    assert frost <= 0.0
    assert frost_point_from_dewpoint_c(dewpoint) == pytest.approx(frost, abs=1e-9)
