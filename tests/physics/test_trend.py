"""Theil–Sen slope and hours-to-zero."""

from __future__ import annotations

import time
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from notifier.physics import hours_to_zero, robust_slope_per_h

finite = st.floats(-50.0, 50.0)


def test_exact_line() -> None:
    hours = np.arange(10.0)
    assert robust_slope_per_h(hours, 3.0 - 0.4 * hours) == pytest.approx(-0.4, abs=1e-12)


def test_single_outlier_does_not_move_the_slope() -> None:
    hours = np.arange(12.0)
    values = 5.0 - 0.5 * hours
    values[7] = 40.0
    assert robust_slope_per_h(hours, values) == pytest.approx(-0.5, abs=1e-12)
    # Ordinary least squares, for contrast, is pulled well off.
    assert abs(np.polyfit(hours, values, 1)[0] + 0.5) > 0.3


def test_against_scipy_theilslopes() -> None:
    # scipy.stats.theilslopes implements Sen (1968): median over pairs with distinct x.
    stats = pytest.importorskip("scipy.stats")
    rng = np.random.default_rng(1968)
    for _ in range(20):
        n = int(rng.integers(2, 40))
        hours = np.round(rng.uniform(0.0, 12.0, n), 1)  # rounding makes some ties
        values = rng.normal(0.0, 2.0, n)
        if np.ptp(hours) == 0:
            continue
        expected = stats.theilslopes(values, hours).slope
        assert robust_slope_per_h(hours, values) == pytest.approx(expected, rel=1e-12, abs=1e-12)


def test_nan_points_are_skipped_and_too_few_give_nan() -> None:
    hours = np.array([0.0, 1.0, 2.0, 3.0])
    assert robust_slope_per_h(hours, [1.0, np.nan, 3.0, np.nan]) == pytest.approx(1.0)
    assert np.isnan(robust_slope_per_h(hours, [1.0, np.nan, np.nan, np.nan]))
    assert np.isnan(robust_slope_per_h([1.0, 1.0, 1.0], [1.0, 2.0, 3.0]))  # all tied times
    assert np.isnan(robust_slope_per_h([1.0], [1.0]))
    assert np.isnan(robust_slope_per_h(1.0, 1.0))
    assert robust_slope_per_h(np.full((4, 0), 1.0), np.full((4, 0), 1.0)).shape == (4,)


def test_tied_times_are_skipped() -> None:
    # Sen (1968) excludes pairs with equal x; the remaining slopes are all 2.
    assert robust_slope_per_h([0.0, 0.0, 1.0, 2.0], [0.0, 0.0, 2.0, 4.0]) == pytest.approx(2.0)


def test_shared_time_axis_broadcasts() -> None:
    hours = np.arange(5.0)
    values = np.stack([hours * 1.0, hours * -2.0, np.full(5, 3.0)])
    np.testing.assert_allclose(robust_slope_per_h(hours, values), [1.0, -2.0, 0.0])


@settings(max_examples=100, deadline=None)
@given(
    intercept=finite,
    slope=st.floats(-5.0, 5.0),
    n=st.integers(3, 40),
    outlier_index=st.integers(0, 39),
    outlier=st.floats(-1e3, 1e3),
)
def test_recovers_exact_line_and_resists_one_outlier(
    intercept: float, slope: float, n: int, outlier_index: int, outlier: float
) -> None:
    hours = np.arange(n) * 0.25
    values = intercept + slope * hours
    assert robust_slope_per_h(hours, values) == pytest.approx(slope, abs=1e-9)
    if n >= 5:
        values[outlier_index % n] = outlier
        # With n >= 5 one point spoils at most n-1 of n(n-1)/2 pairs, fewer than half,
        # and the unspoilt pairs all give the true slope, so the median is unchanged.
        assert robust_slope_per_h(hours, values) == pytest.approx(slope, abs=1e-9)


@st.composite
def gappy_rows(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray]:
    rows = draw(st.integers(1, 6))
    n = draw(st.integers(0, 25))
    hours = draw(hnp.arrays(float, (rows, n), elements=st.floats(0.0, 12.0)))
    values = draw(hnp.arrays(float, (rows, n), elements=finite))
    missing = draw(hnp.arrays(bool, (rows, n)))
    return hours, np.where(missing, np.nan, values)


@settings(max_examples=100, deadline=None)
@given(data=gappy_rows())
def test_2d_equals_row_by_row(data: tuple[np.ndarray, np.ndarray]) -> None:
    hours, values = data
    together = robust_slope_per_h(hours, values)
    one_by_one = [robust_slope_per_h(hours[i], values[i]) for i in range(hours.shape[0])]
    np.testing.assert_array_equal(together, one_by_one)


def test_expected_size_is_quick() -> None:
    # 10,000 sites x 40 points (the expected size) in well under the budget; chunking keeps
    # the pairwise arrays to ~8 MB each.
    rng = np.random.default_rng(0)
    hours = np.arange(40) * 0.25
    values = rng.normal(size=(10_000, 40))
    values[rng.random(values.shape) < 0.1] = np.nan
    start = time.perf_counter()
    slopes = robust_slope_per_h(hours, values)
    assert time.perf_counter() - start < 5.0
    assert slopes.shape == (10_000,) and np.isfinite(slopes).all()


# --- hours_to_zero -------------------------------------------------------------------


@pytest.mark.parametrize(
    ("value", "slope", "expected"),
    [
        (3.0, -1.5, 2.0),
        (3.0, 0.0, np.nan),
        (3.0, 0.5, np.nan),
        (0.0, 0.5, 0.0),
        (-1.0, np.nan, 0.0),
        (3.0, np.nan, np.nan),
        (np.nan, -1.0, np.nan),
        (np.inf, -1.0, np.nan),
    ],
    ids=[
        "closing",
        "steady",
        "opening",
        "closed",
        "closed-unknown-rate",
        "unknown-rate",
        "unknown-value",
        "infinite-value",
    ],
)
def test_hours_to_zero(value: float, slope: float, expected: float) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = hours_to_zero(value, slope)
    if np.isnan(expected):
        assert np.isnan(result)
    else:
        assert result == pytest.approx(expected)


def test_no_warning_for_bad_input() -> None:
    bad = np.array([np.nan, -1e300, 1e300, 0.0, -np.inf, np.inf, 2.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        robust_slope_per_h(bad, bad)
        robust_slope_per_h(np.zeros(7), bad)
        hours_to_zero(bad, bad)
    # and what comes out (house rule: physically undefined input gives NaN). The slope
    # uses only the finite points (-1e300, 1e300, 0, 2 against themselves: slope 1);
    # with every time equal there is no slope at all.
    assert robust_slope_per_h(bad, bad) == 1.0
    assert np.isnan(robust_slope_per_h(np.zeros(7), bad))
    # element by element: NaN in, NaN out; -1e300 and 0 are already closed (0 h); 1e300
    # and 2 are rising, not closing (NaN); ±inf gives NaN (see the test below)
    result = hours_to_zero(bad, bad)
    np.testing.assert_array_equal(
        result[[0, 1, 2, 3, 5, 6]], [np.nan, 0.0, np.nan, 0.0, np.nan, np.nan]
    )


def test_an_infinite_negative_value_is_undefined() -> None:
    # physically undefined input gives NaN (house style), never "already closed"
    assert np.isnan(hours_to_zero(-np.inf, -np.inf))


def _sorted_median_of_pairs(hours: np.ndarray, values: np.ndarray) -> np.ndarray:
    """The definition written out plainly: every pairwise slope of a row at distinct
    times, fully sorted, the mean of the two middle ones (Sen 1968; from memory)."""
    out = np.full(hours.shape[0], np.nan)
    for r in range(hours.shape[0]):
        ok = np.isfinite(hours[r]) & np.isfinite(values[r])
        h, v = hours[r, ok], values[r, ok]
        i, j = np.triu_indices(h.size, k=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            s = (v[j] - v[i]) / (h[j] - h[i])
        s = np.sort(s[np.isfinite(s)])
        if s.size:
            out[r] = 0.5 * (s[(s.size - 1) // 2] + s[s.size // 2])
    return out


def test_selection_gives_the_sorted_median_bit_for_bit() -> None:
    # rows of every length and gap pattern, with tied times: the median found by
    # np.partition must be the very number a full sort gives (no tolerance)
    rng = np.random.default_rng(19)
    for width in (2, 3, 4, 7, 18, 40):
        hours = np.round(rng.uniform(0.0, 6.0, (300, width)), 1)
        values = rng.normal(3.0, 2.0, (300, width))
        values[rng.random((300, width)) < 0.25] = np.nan
        got = robust_slope_per_h(hours, values)
        expected = _sorted_median_of_pairs(hours, values)
        np.testing.assert_array_equal(got, expected)


def test_selection_against_scipy_on_many_rows() -> None:
    # scipy.stats.theilslopes (Sen 1968: the median over pairs with distinct x), one row
    # at a time, against rows of different usable counts solved together
    stats = pytest.importorskip("scipy.stats")
    rng = np.random.default_rng(7)
    hours = np.tile(np.arange(12.0) / 2.0, (50, 1))
    values = rng.normal(0.0, 1.0, (50, 12)) - 0.3 * hours
    values[rng.random((50, 12)) < 0.3] = np.nan
    got = robust_slope_per_h(hours, values)
    for r in range(50):
        ok = ~np.isnan(values[r])
        if ok.sum() < 2:
            assert np.isnan(got[r])
            continue
        expected = stats.theilslopes(values[r, ok], hours[r, ok]).slope
        assert got[r] == pytest.approx(expected, rel=1e-12, abs=1e-12)
