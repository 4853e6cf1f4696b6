"""A history's observation table read once for all its steps (``notifier.engine.steps``).

The observed rows of the configured sites sorted by site and time, the forecast rows,
and the present-weather codes: what a ``Block`` reads for one evaluation time, laid out
once so that every chunk of a history's steps gathers its cells from it, together with
the running tables (value counts, last valued row, the depression's reporting step)
that let a step read a run of sorted rows without building its cells.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from notifier.engine.block import FORECAST_BEFORE_S, SiteArrays, _site_time_order
from notifier.engine.catalog import FeatureSettings
from notifier.engine.readings import (
    epoch_seconds,
    float_column,
    row_kinds,
    site_index,
    weather_codes,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["FORECAST_COLUMNS", "SortedRows"]

#: the forecast columns a history's block reads (cloud and wind stand in near the time)
FORECAST_COLUMNS = ("temp_c", "dewpoint_c", "cloud_pct", "wind_ms")


class SortedRows:
    """The observation table read once for every chunk of a history: the observed rows
    of the configured sites sorted by site and time, the forecast rows, and the
    present-weather codes (what ``Block`` reads for one evaluation time)."""

    def __init__(
        self, obs: pd.DataFrame, st: SiteArrays, t_sorted: np.ndarray, settings: FeatureSettings
    ) -> None:
        self.obs = obs
        self.nrows = len(obs)
        self.n = len(st.ids)
        self._steps: dict[float, tuple[np.ndarray, np.ndarray]] = {}
        self._counts: dict[str, np.ndarray | None] = {}
        self._last_valued: dict[str, np.ndarray | None] = {}
        self._sorted_columns: dict[str, np.ndarray | None] = {}
        empty = np.zeros(0)
        self.rows_sorted = np.zeros(0, dtype=np.intp)
        self.s_sel, self.t_sel = np.zeros(0, dtype=np.intp), empty
        self.forecast = (np.zeros(0, dtype=np.int64), empty, {c: empty for c in FORECAST_COLUMNS})
        self.weather_code = np.full(max(self.nrows, 1), -1, dtype=np.intp)
        self.weather_flags = np.zeros((1, 4), dtype=bool)
        if not self.nrows:
            return
        t_first = float(t_sorted[0]) - settings.block_hours * 3600
        t_last = float(t_sorted[-1])
        t_all = epoch_seconds(obs["time"])
        self.t_all = t_all
        window = (t_all <= t_last) & (t_all > t_first)
        wanted = window | (t_all >= float(t_sorted[0]) - FORECAST_BEFORE_S)
        rows = None if wanted.all() else np.flatnonzero(wanted)
        site_idx = site_index(obs["site"], st.pos, rows, st.index)
        known = site_idx >= 0
        if "kind" in obs:
            is_obs_kind, is_fc = row_kinds(obs["kind"], known, rows)
        else:
            is_obs_kind = np.ones(self.nrows, dtype=bool)
            is_fc = np.zeros(self.nrows, dtype=bool)
        frows = np.flatnonzero(is_fc)  # input order: the per-site picks depend on it
        columns = {c: float_column(obs, c) for c in FORECAST_COLUMNS}
        self.forecast = (
            site_idx[frows].astype(np.int64),
            t_all[frows],
            {c: np.full(frows.size, np.nan) if v is None else v[frows] for c, v in columns.items()},
        )
        self.rows_sorted, self.s_sel, self.t_sel = _site_time_order(
            site_idx, t_all, known & is_obs_kind & window
        )
        t_weather = float(t_sorted[0]) - settings.current_max_age_h * 3600
        wrows = self.rows_sorted[self.t_sel >= t_weather]
        if "weather" in obs and wrows.size:
            codes, self.weather_flags = weather_codes(obs["weather"], wrows)
            self.weather_code[wrows] = codes

    def sorted_column(self, name: str) -> np.ndarray | None:
        """Column ``name`` of the sorted observed rows, with a NaN after them (what a
        padding cell reads): a block's cells gather from it in runs of neighbours, not
        from across the whole table."""
        if name not in self._sorted_columns:
            values = float_column(self.obs, name) if self.nrows else None
            self._sorted_columns[name] = (
                None if values is None else np.append(values[self.rows_sorted], np.nan)
            )
        return self._sorted_columns[name]

    def value_counts(self, name: str) -> np.ndarray | None:
        """How many sorted rows before each position have a value of ``name`` (one
        more entry than rows): a run ``lo:hi`` holds ``counts[hi] - counts[lo]``."""
        if name not in self._counts:
            values = self.sorted_column(name)
            self._counts[name] = (
                None if values is None else np.concatenate(([0], np.cumsum(~np.isnan(values[:-1]))))
            )
        return self._counts[name]

    def last_valued(self, name: str) -> np.ndarray | None:
        """For each sorted row, the last sorted row at or before it with a value of
        ``name`` (-1 where none): a run ``lo:hi``'s newest value is at
        ``last[hi - 1]``, if that is ``lo`` or after."""
        if name not in self._last_valued:
            values = self.sorted_column(name)
            self._last_valued[name] = (
                None
                if values is None
                else np.maximum.accumulate(np.where(np.isnan(values), -1, np.arange(values.size)))
            )
        return self._last_valued[name]

    def step_table(self, noise: float) -> tuple[np.ndarray, np.ndarray]:
        """For the depression's reporting step (``families._depression_step``) over any
        run of sorted rows: (the first row with a depression at or after each row, a
        range-minimum table of each row's change from the reading before it).

        A row's change is |d - d_before| against the site's previous row with a
        depression d, +inf where it is within ``noise`` or there is none; level j of the
        table holds the minimum over rows i … i + 2**j - 1, enough levels for the
        widest window. Within a window, every reading but the first has its previous
        reading in the window too, so the window's step is the minimum over the rows
        after its first reading: two table reads, the same numbers as the cells give.
        """
        if noise in self._steps:
            return self._steps[noise]
        r = self.rows_sorted.size
        temp, dew = float_column(self.obs, "temp_c"), float_column(self.obs, "dewpoint_c")
        if temp is None or dew is None:
            d = np.full(r, np.nan)
        else:
            d = temp[self.rows_sorted] - dew[self.rows_sorted]
        ok = ~np.isnan(d)
        at = np.arange(r)
        last_ok = np.maximum.accumulate(np.where(ok, at, -1)) if r else at
        before = np.full(r, -1)
        before[1:] = last_ok[:-1]
        site_start = np.searchsorted(self.s_sel, self.s_sel, side="left")
        before = np.where(before >= site_start, before, -1)
        with np.errstate(invalid="ignore"):
            change = np.abs(d - np.where(before >= 0, d[np.maximum(before, 0)], np.nan))
            change = np.where(change > noise, change, np.inf)
        first_ok = np.minimum.accumulate(np.where(ok, at, r)[::-1])[::-1] if r else at
        widest = int(np.diff(np.searchsorted(self.s_sel, np.arange(self.n + 1))).max(initial=1))
        levels = [change]
        while (1 << len(levels)) <= widest:
            half = 1 << (len(levels) - 1)
            prev = levels[-1]
            levels.append(np.minimum(prev, np.append(prev[half:], np.full(half, np.inf))))
        self._steps[noise] = (np.append(first_ok, r), np.stack(levels))
        return self._steps[noise]
