"""Features at every step of a history in one pass: a block row per site and time.

A replay, or ``fogwatch learn``, asks for the features of its sites at hundreds of
evaluation times at once. Rather than one call of the feature code per time,
:func:`compute_features_steps` lays the history out as one block with a row per
(time, site) pair — row ``k * S + s`` is site ``s`` at ``times[k]`` — each row holding
that site's observed readings in the window before its own time, right-aligned (newest
in the last column), exactly as a block at that one time would hold them. Every row's
window is found at once by merging the (site, time) queries into the site- and
time-sorted rows (one stable sort, no loop over times or sites). The feature families
then run once over all the rows, each with its own evaluation time, sun and UTC offset,
as they run over the sites at one time (``notifier.engine.features.feature_values``);
each time's feature table is a slice of the result. Times are taken in chunks so that
a block stays within ``CELL_BUDGET`` cells, whatever the number of sites.

The values are those of ``compute_features`` at each time alone, bit for bit, but for
the last bits of the least-squares cooling fit and what is derived from it: its sums
run along a row as wide as the widest window of the chunk, and numpy's pairwise
summation groups the terms by position, so a row padded differently can round
differently (``tests/engine/test_steps.py`` checks it to 1e-9, as
``compute_features_at`` is checked against ``compute_features``).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from datetime import datetime
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

import numpy as np

from notifier import physics
from notifier.engine.block import FORECAST_BEFORE_S, Block, SiteArrays
from notifier.engine.catalog import FeatureSettings, FeatureTable
from notifier.engine.features import (
    FeatureCache,
    _empty_obs,
    compute_features_at,
    feature_values,
)
from notifier.engine.sorted_rows import SortedRows
from notifier.physics.sun import tabulated_rows

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.core.config import Site

__all__ = ["CELL_BUDGET", "StepBlock", "compute_features_steps", "features_at", "window_bounds"]

CELL_BUDGET = 4_000_000  # block cells per pass: ~32 MB a value block
_NEAR_S = 3 * 3600  # a forecast up to 3 h ahead stands in for cloud and wind (families)


#: more evaluation times than this take the one pass (fewer: the block at those times)
MANY_TIMES = 8


def features_at(
    obs: pd.DataFrame,
    sites: Sequence[Site],
    times: Sequence[datetime],
    settings: FeatureSettings | None = None,
    *,
    cache: FeatureCache | None = None,
) -> list[FeatureTable]:
    """``compute_features_at`` for a few times (a cycle and its hold steps), one pass
    (:func:`compute_features_steps`) for many (a replay's or ``learn``'s batch)."""
    if len(times) > MANY_TIMES:
        return compute_features_steps(obs, sites, times, settings, cache=cache)
    return compute_features_at(obs, sites, times, settings, cache=cache)


def compute_features_steps(
    obs: pd.DataFrame,
    sites: Sequence[Site],
    times: Sequence[datetime],
    settings: FeatureSettings | None = None,
    *,
    cache: FeatureCache | None = None,
) -> list[FeatureTable]:
    """``compute_features(obs, sites, t)`` for every ``t`` of ``times``, in one pass
    over a block with a row per site and time (see the module docstring)."""
    settings = settings or FeatureSettings()
    cache = cache if cache is not None else FeatureCache()
    st = cache.site_arrays(sites)
    if not times:
        return []
    obs = _empty_obs() if obs is None else obs
    order = sorted(range(len(times)), key=lambda k: times[k].timestamp())
    t_sorted = np.array([times[k].timestamp() for k in order], dtype=float)
    rows = SortedRows(obs, st, t_sorted, settings)
    n = len(st.ids)
    lo, hi = window_bounds(rows.s_sel, rows.t_sel, n, t_sorted, settings.block_hours * 3600)
    widths = (hi - lo).reshape(len(times), n).max(axis=1, initial=0) if n else np.zeros(len(times))
    tables: list[FeatureTable | None] = [None] * len(times)
    for a, b in _chunks(widths, n):
        t_at = np.repeat(t_sorted[a:b], n)
        chunk_st = _tiled(st, b - a)
        sunset, sunrise, night = _sun(st, chunk_st, t_sorted[a:b], t_at)
        with np.errstate(invalid="ignore"):
            ahead = np.nanmax(sunrise - t_at, initial=0.0) + 3600.0
        blk = StepBlock(rows, t_at, lo[a * n : b * n], hi[a * n : b * n], max(ahead, _NEAR_S))
        chunk_times = [times[k] for k in order[a:b]]
        many = settings.model is not None  # the model reads each row's own time
        at_rows = [t for t in chunk_times for _ in range(n)] if many else chunk_times[0]
        found = feature_values(
            blk,
            chunk_st,
            t_at,
            (sunset, sunrise, night),
            settings,
            at_rows,
            _offsets(st, chunk_times),
        )
        for j, k in enumerate(order[a:b]):
            tables[k] = found.table(times[k], st.ids, slice(j * n, (j + 1) * n))
    return [t for t in tables if t is not None]


def window_bounds(
    s_sel: np.ndarray, t_sel: np.ndarray, n: int, t_sorted: np.ndarray, block_s: float
) -> tuple[np.ndarray, np.ndarray]:
    """For each time and site (row ``k * n + s``), the sorted rows of its window:
    ``lo:hi`` are site ``s``'s rows with ``t_sorted[k] - block_s < time <= t_sorted[k]``.

    ``s_sel``/``t_sel`` are the rows' sites and times, sorted by site then time. Both
    ends are a binary search on (site, time) — ``hi`` the first row after (s, t),
    ``lo`` the first after (s, t - block_s) — done for all queries together as one
    stable sort of the queries merged into the rows: a row tied with a query sorts
    before it, so it counts as "at or before".

    >>> window_bounds(np.array([0, 0, 1]), np.array([1.0, 5.0, 2.0]), 2, np.array([5.0]), 4.0)
    (array([1, 2]), array([2, 3]))
    """
    sites = np.tile(np.arange(n), t_sorted.size)
    t_q = np.repeat(t_sorted, n)
    hi = _rows_up_to(s_sel, t_sel, sites, t_q)
    lo = _rows_up_to(s_sel, t_sel, sites, t_q - block_s)
    return lo, hi


def _rows_up_to(
    s_sel: np.ndarray, t_sel: np.ndarray, q_site: np.ndarray, q_t: np.ndarray
) -> np.ndarray:
    """Per query, how many sorted rows come at or before (site, time): searchsorted
    ``side="right"`` on the pair."""
    r = s_sel.size
    site = np.concatenate([s_sel, q_site])
    t = np.concatenate([t_sel, q_t])
    is_query = np.zeros(r + q_site.size, dtype=bool)
    is_query[r:] = True
    merged = np.lexsort((is_query, t, site))
    rows_so_far = np.cumsum(~is_query[merged])
    out = np.empty(q_site.size, dtype=np.intp)
    where = is_query[merged]
    out[merged[where] - r] = rows_so_far[where]
    return out


def _chunks(widths: np.ndarray, n: int) -> list[tuple[int, int]]:
    """Runs of times whose block (times × sites × the widest window) stays within
    ``CELL_BUDGET`` cells; a time on its own may exceed it."""
    out = []
    a = 0
    widest = 1
    for k, width in enumerate(widths.tolist()):
        widest_with = max(widest, int(width), 1)
        if k > a and (k + 1 - a) * n * widest_with > CELL_BUDGET:
            out.append((a, k))
            a, widest_with = k, max(int(width), 1)
        widest = widest_with
    out.append((a, len(widths)))
    return out


def _sun(
    st: SiteArrays, chunk_st: SiteArrays, t_k: np.ndarray, t_at: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``physics.night_bounds_utc`` of every row, as a call per time would give it: the
    times whose call would tabulate the solar terms go together on the grid, the others
    together without it (``physics.sun.tabulated_rows``)."""
    n = len(st.ids)
    sunset, sunrise = np.full(t_at.size, np.nan), np.full(t_at.size, np.nan)
    night = np.zeros(t_at.size, dtype=bool)
    if not n:
        return sunset, sunrise, night
    grid = tabulated_rows(st.lat, st.lon, np.broadcast_to(t_k[:, None], (t_k.size, n)))
    for flag in (True, False):
        rows = np.repeat(grid == flag, n)
        if rows.any():
            found = physics.night_bounds_utc(
                chunk_st.lat[rows], chunk_st.lon[rows], t_at[rows], tabulate=flag
            )
            sunset[rows], sunrise[rows], night[rows] = found
    return sunset, sunrise, night


def _tiled(st: SiteArrays, times: int) -> SiteArrays:
    """The sites repeated for ``times`` times: row ``k * n + s`` is site ``s``."""
    # every per-site array, whatever fields SiteArrays grows
    tiled: dict[str, Any] = {
        f.name: np.tile(arr, (times,) + (1,) * (arr.ndim - 1))  # along the sites' axis
        for f in dataclasses.fields(st)
        if isinstance(arr := getattr(st, f.name), np.ndarray)
    }
    return dataclasses.replace(st, ids=st.ids * times, _index=None, **tiled)


def _offsets(st: SiteArrays, times: Sequence[datetime]) -> np.ndarray:
    """Each row's UTC offset (seconds) at its own time, as ``SiteArrays.zone_offsets_s``."""
    zones = [ZoneInfo(name) for name in st.zones]
    table = np.empty((len(times), len(zones)))
    for k, at in enumerate(times):
        for z, zone in enumerate(zones):
            off = at.astimezone(zone).utcoffset()
            table[k, z] = off.total_seconds() if off else 0.0
    return table[:, st.zone_code].reshape(-1)


class StepBlock(Block):
    """A :class:`Block` with a row per (time, site): row ``r`` holds the sorted rows
    ``lo[r]:hi[r]`` right-aligned, and forecast rows are paired with each row whose
    time they can serve (from ``FORECAST_BEFORE_S`` before it to ``ahead_s`` after).
    It keeps no ``src``: a row's cells are one run of the sorted rows, read as such
    (:meth:`_span`, :meth:`runs`)."""

    def __init__(
        self, rows: SortedRows, t_at: np.ndarray, lo: np.ndarray, hi: np.ndarray, ahead_s: float
    ) -> None:
        n = t_at.size
        self.n = n
        self.rows = np.arange(n)
        self.obs = rows.obs
        self._columns = {}
        self._full = {}
        self._reports = {}
        self._empty = rows.nrows == 0
        if self._empty:
            self._lay_out_nothing()
            return
        counts = hi - lo
        width = max(int(counts.max(initial=0)), 1)
        cols = np.arange(width)
        self.pad = cols[None, :] < (width - counts)[:, None]
        self.width = width
        self._sorted = rows
        # A cell's source is its position among the sorted rows (not its row of the
        # table, as in Block): a block row's cells are neighbours there, sorted
        # positions hi - width … hi - 1, so each row is one run of a column (a window
        # view of it) and no index is kept per cell; padding reads the fill.
        self._first_pos = hi - width  # the sorted row of column 0, per block row
        self._lo, self._hi = lo, hi
        # every cell outside the padding is in its row's window (window_bounds), so the
        # window's columns need no search: what bounds would find, padding failing
        self._window = (width - counts, np.full(n, width, dtype=np.intp))
        self.t = self._span(rows.t_sel, 0, width, np.nan)
        self.weather_code = rows.weather_code[rows.rows_sorted]  # per sorted row
        self.weather_flags = rows.weather_flags
        self.forecast = self._paired(rows, t_at, ahead_s)

    def _span(self, values: np.ndarray, start: int, stop: int, fill: float) -> np.ndarray:
        """Columns ``start:stop`` of the cells of ``values`` (one per sorted row, or one
        more: the padding's NaN, not read here), ``fill`` in the padding: row ``r`` is
        the run of sorted rows from ``hi[r] - width + start``, read through a window
        view of the column with ``width`` fills before it (where a run starts before
        the first row; those cells are padding)."""
        span = stop - start
        if span <= 0:
            return np.empty((self.n, 0), dtype=values.dtype)
        rows = self._sorted.rows_sorted.size
        padded = np.concatenate((np.full(self.width, fill, dtype=values.dtype), values[:rows]))
        out = np.lib.stride_tricks.sliding_window_view(padded, span)[self._hi + start]
        np.putmask(out, self.pad[:, start:stop], fill)
        return out

    def runs(
        self, names: Sequence[str], lo: np.ndarray, hi: np.ndarray
    ) -> tuple[np.ndarray, list[np.ndarray], np.ndarray] | None:
        """:meth:`Block.runs`: each row's sorted rows from ``hi[r] - width + lo[r]``, as
        long as the longest ``lo:hi``, read through a window view of each column; the
        cells past a row's own ``hi`` are outside the mask."""
        if self._empty:
            return None
        counts = np.where(lo < hi, hi - lo, 0)
        length = int(counts.max(initial=0))
        inside = np.arange(length)[None, :] < counts[:, None]
        rows = self._sorted.rows_sorted.size
        start = np.clip(self._first_pos + lo, 0, rows)

        def run(values: np.ndarray) -> np.ndarray:
            padded = np.concatenate((values[:rows], np.full(length, np.nan)))
            return np.lib.stride_tricks.sliding_window_view(padded, length)[start]

        columns = []
        for name in names:
            values = self.column(name)
            columns.append(np.full((self.n, length), np.nan) if values is None else run(values))
        return run(self._sorted.t_sel), columns, inside

    def column(self, name: str) -> np.ndarray | None:
        return None if self._empty else self._sorted.sorted_column(name)

    def laid_out_window(self) -> tuple[np.ndarray, np.ndarray] | None:
        return None if self._empty else self._window

    def reports(self, name: str) -> np.ndarray:
        """:meth:`Block.reports` from a count of each sorted column's values, without
        gathering the block: a row's cells outside the padding are its sorted rows
        ``lo:hi``, so it reports ``name`` when that run holds a value."""
        if name not in self._reports:
            counts = None if self._empty else self._sorted.value_counts(name)
            self._reports[name] = (
                np.zeros(0, dtype=np.intp)
                if counts is None
                else np.flatnonzero(counts[self._hi] > counts[self._lo])
            )
        return self._reports[name]

    def newest(
        self,
        name: str,
        start: int,
        stop: int,
        lo: np.ndarray,
        hi: np.ndarray,
        valid: np.ndarray,
    ) -> np.ndarray:
        """:meth:`Block.newest` from the sorted rows, without the cells: a row's columns
        ``lo:hi`` are its sorted rows from ``hi[r] - width + lo``, and the newest value
        among them is the last valued row at or before the run's end."""
        last = None if self._empty or stop <= start else self._sorted.last_valued(name)
        values = self.column(name)
        if last is None or values is None:
            return np.full(self.n, np.nan)
        some = lo < hi
        at = last[np.where(some, self._first_pos + hi - 1, 0)]
        found = some & (at >= self._first_pos + lo)
        return np.where(found, values[at], np.nan)

    def smallest_step(self, lo: np.ndarray, hi: np.ndarray, noise: float) -> np.ndarray | None:
        """``families._depression_step`` from the sorted rows (see
        :meth:`SortedRows.step_table`), without the cells: the same numbers."""
        if self._empty:
            return None
        first_ok, table = self._sorted.step_table(noise)
        start = self._first_pos + lo
        stop = self._first_pos + hi
        after = first_ok[np.clip(start, 0, first_ok.size - 1)] + 1  # rows after the first
        count = np.where(lo < hi, stop - after, 0)
        out = np.full(self.n, np.inf)
        some = np.flatnonzero(count > 0)
        if some.size:
            level = np.floor(np.log2(count[some])).astype(np.intp)
            a = after[some]
            b = stop[some] - (1 << level)
            out[some] = np.minimum(table[level, a], table[level, b])
        return np.where(np.isinf(out), np.nan, out)

    @staticmethod
    def _paired(
        rows: SortedRows, t_at: np.ndarray, ahead_s: float
    ) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
        """Each forecast row once per block row of its site whose time it can serve,
        in input order within a block row (as ``Block.forecast`` holds them)."""
        fsite, ft, fcols = rows.forecast
        n_sites = rows.n
        t_k = t_at[::n_sites] if n_sites else np.zeros(0)  # the chunk's times, ascending
        k_lo = np.searchsorted(t_k, ft - ahead_s, side="left")
        k_hi = np.searchsorted(t_k, ft + FORECAST_BEFORE_S, side="right")
        per = np.maximum(k_hi - k_lo, 0)
        which = np.repeat(np.arange(ft.size), per)
        first = np.repeat(np.cumsum(per) - per, per)
        k = k_lo[which] + (np.arange(which.size) - first)
        block_row = (k * n_sites + fsite[which]).astype(np.int64)
        return block_row, ft[which], {c: v[which] for c, v in fcols.items()}
