"""Night cooling: Brunt's law, its fit, FAO trend, Craddock–Pritchard, crossover."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from notifier.physics import (
    brunt_cooling_coefficient_k_per_sqrt_h,
    craddock_pritchard_min_c,
    crossover_temp_c,
    fao_square_root_trend_c,
    fit_sqrt_cooling,
    project_sqrt_cooling_c,
)

# --- Brunt's law -----------------------------------------------------------------------


def test_brunt_coefficient_check_value() -> None:
    # docs/references.md [Brunt k check]: R = 60 W/m2, mu = 1200 -> k = 3.39 K h^-1/2
    # (Brunt's law after Oke, Boundary Layer Climates, from memory). 2*60/(sqrt(pi)*1200)*60
    # = 3.3851.
    assert brunt_cooling_coefficient_k_per_sqrt_h(60.0, 1200.0) == pytest.approx(3.385, abs=5e-4)


def test_brunt_coefficient_scales_as_published() -> None:
    # k is proportional to R and inversely to mu (the law's form, Oke from memory).
    base = brunt_cooling_coefficient_k_per_sqrt_h(60.0, 1200.0)
    assert brunt_cooling_coefficient_k_per_sqrt_h(120.0, 1200.0) == pytest.approx(2 * base)
    assert brunt_cooling_coefficient_k_per_sqrt_h(60.0, 2400.0) == pytest.approx(base / 2)
    assert brunt_cooling_coefficient_k_per_sqrt_h(0.0, 1200.0) == 0.0


@pytest.mark.parametrize(
    ("net_loss_wm2", "admittance"),
    [(-10.0, 1200.0), (60.0, 0.0), (60.0, -5.0), (np.nan, 1200.0), (60.0, np.nan), (np.inf, 1.0)],
    ids=["net-gain", "zero-admittance", "negative-admittance", "nan-loss", "nan-mu", "inf"],
)
def test_brunt_coefficient_undefined_is_nan(net_loss_wm2: float, admittance: float) -> None:
    assert np.isnan(brunt_cooling_coefficient_k_per_sqrt_h(net_loss_wm2, admittance))


# --- Fit and projection ------------------------------------------------------------------


def test_fit_recovers_exact_curve_1d() -> None:
    hours = np.array([0.0, 0.5, 1.0, 2.0, 4.0, 6.0, 9.0])
    temps = 8.0 - 1.7 * np.sqrt(hours)
    t0, k = fit_sqrt_cooling(hours, temps)
    assert t0 == pytest.approx(8.0, abs=1e-12)
    assert k == pytest.approx(1.7, abs=1e-12)
    assert isinstance(t0, np.floating)


def test_fit_ignores_negative_hours_and_nan() -> None:
    hours = np.array([-2.0, -1.0, 0.0, 1.0, np.nan, 4.0, 9.0])
    temps = np.array([15.0, 14.0, 10.0, 8.0, 7.0, np.nan, 4.0])
    t0, k = fit_sqrt_cooling(hours, temps)
    assert t0 == pytest.approx(10.0, abs=1e-12)
    assert k == pytest.approx(2.0, abs=1e-12)


@pytest.mark.parametrize(
    ("hours", "temps"),
    [
        ([0.0, 1.0], [10.0, 9.0]),
        ([0.0, 1.0, np.nan], [10.0, 9.0, 8.0]),
        ([1.0, 1.0, 1.0, 1.0], [10.0, 9.0, 8.0, 7.0]),
        ([-3.0, -2.0, 0.0, 1.0], [10.0, 9.0, 8.0, 7.0]),
        ([np.nan] * 4, [np.nan] * 4),
    ],
    ids=["two-points", "two-usable", "no-spread", "only-two-after-sunset", "all-missing"],
)
def test_fit_underdetermined_is_nan(hours: list[float], temps: list[float]) -> None:
    t0, k = fit_sqrt_cooling(hours, temps)
    assert np.isnan(t0) and np.isnan(k)


def test_fit_broadcasts_shared_time_axis() -> None:
    hours = np.array([0.0, 1.0, 4.0, 9.0])
    temps = np.array([[10.0, 9.0, 8.0, 7.0], [5.0, 3.0, 1.0, -1.0]])
    t0, k = fit_sqrt_cooling(hours, temps)
    np.testing.assert_allclose(t0, [10.0, 5.0], atol=1e-12)
    np.testing.assert_allclose(k, [1.0, 2.0], atol=1e-12)


@st.composite
def cooling_curves(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sites x times of exact square-root curves with random gaps."""
    sites = draw(st.integers(1, 8))
    times = draw(st.integers(3, 30))
    t0 = draw(hnp.arrays(float, sites, elements=st.floats(-20.0, 25.0)))
    k = draw(hnp.arrays(float, sites, elements=st.floats(0.0, 4.0)))
    hours = np.sort(draw(hnp.arrays(float, (sites, times), elements=st.floats(0.0, 14.0))))
    missing = draw(hnp.arrays(bool, (sites, times)))
    temps = t0[:, np.newaxis] - k[:, np.newaxis] * np.sqrt(hours)
    temps = np.where(missing, np.nan, temps)
    return hours, temps, t0, k


@settings(max_examples=150, deadline=None)
@given(curves=cooling_curves())
def test_fit_recovers_synthetic_2d_with_gaps_and_matches_row_by_row(
    curves: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray],
) -> None:
    hours, temps, t0_true, k_true = curves
    t0, k = fit_sqrt_cooling(hours, temps)
    assert t0.shape == k.shape == (hours.shape[0],)
    for row in range(hours.shape[0]):
        usable = np.isfinite(temps[row])
        x = np.sqrt(hours[row][usable])
        enough = usable.sum() >= 3 and x.max() - x.min() > 1e-3
        row_t0, row_k = fit_sqrt_cooling(hours[row], temps[row])
        # 2-D equals 1-D row by row (same arithmetic, so bit-for-bit up to summation order).
        np.testing.assert_allclose([t0[row], k[row]], [row_t0, row_k], rtol=1e-12, atol=1e-12)
        if enough:
            assert t0[row] == pytest.approx(t0_true[row], abs=1e-6)
            assert k[row] == pytest.approx(k_true[row], abs=1e-6)
        elif usable.sum() < 3:
            assert np.isnan(t0[row]) and np.isnan(k[row])


def test_projection_round_trip_and_before_sunset_is_nan() -> None:
    hours = np.array([-1.0, 0.0, 1.0, 4.0, 9.0, np.nan])
    projected = project_sqrt_cooling_c(10.0, 2.0, hours)
    np.testing.assert_allclose(projected, [np.nan, 10.0, 8.0, 6.0, 4.0, np.nan])
    t0, k = fit_sqrt_cooling(hours, projected)
    assert (t0, k) == (pytest.approx(10.0), pytest.approx(2.0))


# --- FAO square-root trend -------------------------------------------------------------


@pytest.mark.parametrize(
    ("hour", "expected_c"),
    [(3.0, -0.825), (9.0, -3.746), (2.0, 0.95), (15.0, -5.45)],
    ids=["i3", "i9", "i2-is-t2", "i15-is-tmin"],
)
def test_fao_square_root_trend_check_values(hour: float, expected_c: float) -> None:
    # Snyder & de Melo-Abreu 2005 (FAO Frost Protection), docs/references.md [FAO check]:
    # T_min -5.45, T2 0.95, n 15 -> -0.825 at i = 3 and -3.746 at i = 9. The end points
    # follow from the formula.
    result = fao_square_root_trend_c(0.95, -5.45, 15.0, hour)
    assert result == pytest.approx(expected_c, abs=5e-4)


@pytest.mark.parametrize(
    ("night_hours", "hour"),
    [(15.0, 1.5), (15.0, 15.5), (2.0, 2.0), (1.0, 1.0), (np.nan, 5.0), (15.0, np.nan)],
    ids=["before-i2", "after-sunrise", "night-2h", "night-1h", "nan-n", "nan-i"],
)
def test_fao_trend_out_of_range_is_nan(night_hours: float, hour: float) -> None:
    assert np.isnan(fao_square_root_trend_c(0.95, -5.45, night_hours, hour))


# --- Craddock & Pritchard --------------------------------------------------------------


@pytest.mark.parametrize(
    ("temp_c", "dewpoint_c", "k_c", "expected_c"),
    [
        (12.0, 6.0, 0.0, 5.84),  # docs/references.md [C&P check]
        (12.0, 6.0, -2.2, 3.64),  # calm clear K = -2.2 (same source), by hand
        (0.0, 0.0, 0.0, -1.24),  # the regression's constant
    ],
    ids=["reference", "calm-clear", "zero"],
)
def test_craddock_pritchard_check_values(
    temp_c: float, dewpoint_c: float, k_c: float, expected_c: float
) -> None:
    assert craddock_pritchard_min_c(temp_c, dewpoint_c, k_c) == pytest.approx(expected_c, abs=1e-9)


def test_craddock_pritchard_propagates_nan() -> None:
    assert np.isnan(craddock_pritchard_min_c([np.nan, 12.0], [6.0, np.nan])).all()


# --- Crossover temperature -------------------------------------------------------------


def test_crossover_is_lowest_afternoon_dewpoint() -> None:
    # Crossover-temperature method (from memory): lowest dew point 12:00-18:00 local.
    hours = np.array([9.0, 11.9, 12.0, 14.0, 16.0, 17.9, 18.0, 21.0])
    dewpoints = np.array([1.0, 2.0, 6.0, 5.5, np.nan, 5.8, 3.0, 0.0])
    assert crossover_temp_c(dewpoints, hours) == 5.5


def test_crossover_2d_rows_and_empty_window() -> None:
    hours = np.array([10.0, 13.0, 15.0, 19.0])
    dewpoints = np.array(
        [[4.0, 6.0, 5.0, 3.0], [4.0, np.nan, np.nan, 3.0], [np.nan, 7.0, 8.0, np.nan]]
    )
    np.testing.assert_array_equal(crossover_temp_c(dewpoints, hours), [5.0, np.nan, 7.0])


def test_crossover_custom_and_wrapping_windows() -> None:
    hours = np.array([1.0, 10.0, 14.0, 23.0])
    dewpoints = np.array([2.0, 9.0, 8.0, 4.0])
    assert crossover_temp_c(dewpoints, hours, start_hour=9.0, end_hour=15.0) == 8.0
    assert crossover_temp_c(dewpoints, hours, start_hour=22.0, end_hour=2.0) == 2.0


# --- Warnings --------------------------------------------------------------------------


def test_no_warning_for_bad_input() -> None:
    bad = np.array([np.nan, -1e6, 1e6, 0.0, -np.inf, np.inf, 2.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        brunt_cooling_coefficient_k_per_sqrt_h(bad, bad)
        fit_sqrt_cooling(bad, bad)
        fit_sqrt_cooling(np.full((3, 0), 1.0), np.full((3, 0), 1.0))
        project_sqrt_cooling_c(bad, bad, bad)
        fao_square_root_trend_c(bad, bad, bad, bad)
        craddock_pritchard_min_c(bad, bad, bad)
        crossover_temp_c(bad, bad)
        crossover_temp_c(np.full((2, 3), np.nan), np.full((2, 3), 13.0))
        crossover_temp_c(np.full((2, 0), 1.0), np.full((2, 0), 13.0))
