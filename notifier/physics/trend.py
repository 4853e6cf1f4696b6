"""Robust trends and time-to-closure for overnight series.

Vectorised along the last axis (1-D for one site, N-D for sites x times); NaN marks a
missing point.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["hours_to_zero", "robust_slope_per_h"]

FloatArray = np.float64 | NDArray[np.float64]

# Public functions run under np.errstate(all="ignore"): every invalid or out-of-range
# result is masked to NaN explicitly, so floating-point warnings would only be noise
# (and pytest turns them into errors). Private helpers are only called from them.

# Upper bound on the number of pairwise slopes held in memory at once (800 kB per
# array: the several passes over a chunk find it in the cache; 1,000,000 took about
# half as long again over a replay's 144,000 rows of 19 points).
_MAX_PAIRS_PER_CHUNK = 100_000


def _theil_sen_rows(hours: NDArray[np.float64], values: NDArray[np.float64]) -> NDArray[np.float64]:
    """Theil–Sen slope of each row of 2-D (rows, n) arrays."""
    rows, n = hours.shape
    result = np.full(rows, np.nan)
    if n < 2 or rows == 0:
        return result
    first, second = np.triu_indices(n, k=1)
    rows_per_chunk = max(1, _MAX_PAIRS_PER_CHUNK // first.size)
    for start in range(0, rows, rows_per_chunk):
        stop = min(rows, start + rows_per_chunk)
        # the pairs are formed point by point across the rows (each point a contiguous
        # line of the transposed chunk, copied whole), then turned back to a row each
        # for the median: about half the time of gathering them cell by cell
        h_by_point = np.ascontiguousarray(hours[start:stop].T)
        v_by_point = np.ascontiguousarray(values[start:stop].T)
        dx = h_by_point[second] - h_by_point[first]
        dy = v_by_point[second]
        dy -= v_by_point[first]
        slopes = np.ascontiguousarray(np.divide(dy, dx, out=dy).T)
        # Pairs at equal times carry no slope (Sen 1968 excludes tied x): their quotient
        # is ±inf or NaN, so "finite" excludes them along with the missing points.
        usable = np.isfinite(slopes)
        result[start:stop] = _median_of_leading(slopes, usable)
    return result


def _median_of_leading(
    slopes: NDArray[np.float64], usable: NDArray[np.bool_]
) -> NDArray[np.float64]:
    """Per row, the median of the ``usable`` entries of ``slopes`` (changed in place),
    NaN where none: the mean of the two middle order statistics, (count - 1) // 2 and
    count // 2.

    The unusable entries become +inf, so the usable ones are the row's ``count``
    smallest; rows are grouped by their count (few distinct counts: a night's readings
    come at a steady rate), each group sorted along its rows. numpy's sort of floats
    (vectorised) is several times faster here than ``np.partition`` about two ranks,
    and the order statistics are the same numbers — but for the sign of a zero: 0.0
    and -0.0 are equal to both, and which one lands at a rank depends on the
    algorithm. So the rows whose middle is a zero take ``np.partition`` as before,
    and the median is bit for bit what it gave (each row is selected on its own).

    >>> s = np.array([[3.0, 1.0, np.nan, 2.0], [5.0, np.nan, np.nan, np.nan]])
    >>> _median_of_leading(s, np.isfinite(s))
    array([2., 5.])
    """
    np.copyto(slopes, np.inf, where=~usable)
    count = np.count_nonzero(usable, axis=1)
    out = np.full(slopes.shape[0], np.nan)
    # the distinct counts, ascending (a tally: np.unique sorts or hashes every row's)
    for c in (np.flatnonzero(np.bincount(count)[1:]) + 1).tolist():
        lower, upper = (c - 1) // 2, c // 2
        group = np.flatnonzero(count == c)
        picked = slopes[group]  # a copy, sorted in place: slopes keep their order
        picked.sort(axis=1)
        low, high = picked[:, lower], picked[:, upper]
        out[group] = 0.5 * (low + high)
        zero = np.flatnonzero((low == 0.0) | (high == 0.0))
        if zero.size:
            again = np.partition(slopes[group[zero]], sorted({lower, upper}), axis=1)
            out[group[zero]] = 0.5 * (again[:, lower] + again[:, upper])
    return out


@np.errstate(all="ignore")
def robust_slope_per_h(hours: ArrayLike, values: ArrayLike) -> FloatArray:
    """Theil–Sen slope: the median of all pairwise slopes, per hour.

    Equation (Theil 1950, Proc. Kon. Ned. Akad. Wetensch. 53; Sen 1968, J. Amer. Statist.
    Assoc. 63, 1379-1389)::

        slope = median { (v_j - v_i) / (t_j - t_i) : i < j, t_i != t_j }

    along the last axis. Inputs broadcast against each other (e.g. one time axis shared
    by many sites). Only points where both are finite are used; pairs at equal times
    are skipped. Fewer than two usable points (or no pair at distinct times) gives NaN.
    Resists outliers: up to ~29 % of the points can be wild without moving the slope far.

    Vectorised: pairs are built with index arrays and rows are processed in chunks so
    memory stays bounded (~10,000 rows of 40 points is the expected size). The median
    is read from each row's sorted slopes (numpy's vectorised sort of a few hundred
    floats beats ``np.partition`` about the two middle ranks, which this used before;
    rows whose middle is a zero still take it, see :func:`_median_of_leading`): the
    same numbers (checked against ``scipy.stats.theilslopes``).

    Args:
        hours: observation times, h (any origin).
        values: observed values (units per hour in the result).

    >>> one_outlier = [5.0, 4.5, 4.0, 9.0, 3.0]
    >>> print(f"{robust_slope_per_h([0.0, 1.0, 2.0, 3.0, 4.0], one_outlier):.2f}")
    -0.50
    >>> two_sites = [[1.0, 2.0, 3.0], [1.0, np.nan, np.nan]]
    >>> print(np.round(robust_slope_per_h([0.0, 1.0, 2.0], two_sites), 2))
    [ 1. nan]
    """
    hours_array, values_array = np.broadcast_arrays(
        np.atleast_1d(np.asarray(hours, dtype=float)),
        np.atleast_1d(np.asarray(values, dtype=float)),
    )
    leading_shape = hours_array.shape[:-1]
    n = hours_array.shape[-1]
    rows = int(np.prod(leading_shape))  # explicit, so an empty time axis still reshapes
    slopes = _theil_sen_rows(hours_array.reshape(rows, n), values_array.reshape(rows, n))
    return slopes.reshape(leading_shape)[()]


@np.errstate(all="ignore")
def hours_to_zero(value: ArrayLike, slope_per_h: ArrayLike) -> FloatArray:
    """Hours until a closing quantity reaches zero at its current rate.

    Meant for quantities that close towards zero, such as the dew-point depression
    (T - Td) before saturation::

        value <= 0                 -> 0.0    (already closed)
        value > 0 and slope < 0    -> value / -slope
        otherwise                  -> NaN    ("not closing / unknown"; ±inf too)

    NaN never means "far away": it means the quantity is not closing at the current
    rate, or an input is missing. A linear extrapolation; no published source needed.

    Args:
        value: current value (e.g. dew-point depression, K).
        slope_per_h: its rate of change per hour (e.g. from :func:`robust_slope_per_h`).

    >>> depression_k = [3.0, 3.0, -0.5, 3.0, np.nan]
    >>> print(np.round(hours_to_zero(depression_k, [-1.5, 0.2, 0.2, np.nan, -1.0]), 2))
    [ 2. nan  0. nan nan]
    """
    current = np.asarray(value, dtype=float)
    slope = np.asarray(slope_per_h, dtype=float)
    hours = current / -slope
    closing = (current > 0.0) & (slope < 0.0) & np.isfinite(current)
    result = np.where(closing, hours, np.nan)
    # an infinite value is no measurement: unknown, not "already closed"
    return np.where((current <= 0.0) & np.isfinite(current), 0.0, result)[()]
