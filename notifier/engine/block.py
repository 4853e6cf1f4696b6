"""The recent observations laid out as a sites × times block.

Everything is computed for all sites at once. The observed rows are laid out as a
sites × times block (right-aligned: each site's newest row in the last column, NaN
padding on the left), and every feature is a masked reduction over that block — there
is no Python loop over sites.

The block is built once per call (once for several evaluation times with
``compute_features_at``) as an index from cells to rows, with value blocks gathered
only where they are needed. Each evaluation time's windows (the last 3 h, tonight since
sunset, around midday, …) are found per site by a binary search over the time-sorted
rows (:meth:`Block.bounds`), and each reduction runs on the narrowest column slice that
holds them (:func:`column_span`, :func:`in_range`).

>>> import numpy as np
>>> column_span(np.array([2, 5, 4]), np.array([4, 5, 7]))  # the middle range is empty
(2, 7)
>>> latest(np.array([[1.0, 2.0, np.nan], [np.nan, np.nan, np.nan]]), np.ones((2, 3), bool))
(array([ 2., nan]), array([ 1, -1]))
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

import numpy as np

from notifier.engine.catalog import EXPOSURE_EFFECTS
from notifier.engine.readings import (
    epoch_seconds,
    float_column,
    row_kinds,
    site_index,
    weather_codes,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.core.config import Site

__all__ = ["FORECAST_BEFORE_S", "Block", "SiteArrays", "column_span", "in_range", "latest"]

FORECAST_BEFORE_S = 1800  # a forecast for up to 30 min ago still stands in for cloud, wind
_FORECAST_COLUMNS = ("temp_c", "dewpoint_c", "cloud_pct", "wind_ms")
# a column boundary test for Block.bounds: (t | h, minus, > | >=, limit)
_Bound = tuple[str, "float | np.ndarray", str, "float | np.ndarray"]
_WIDE_COLUMNS = ("temp_c", "dewpoint_c")  # read over many hours (trend, fit, midday)


@dataclass
class SiteArrays:
    """Per-site constants as arrays, read from the ``Site`` objects once."""

    ids: list[str]
    pos: dict[str, int]
    lat: np.ndarray
    lon: np.ndarray
    sky_view: np.ndarray
    cooling_factor: np.ndarray
    min_offset: np.ndarray
    onshore_lo: np.ndarray
    onshore_hi: np.ndarray
    zones: list[str]  # distinct time zones
    zone_code: np.ndarray  # index into ``zones`` per site
    # the operator's monthly water temperature per site (sites × 12, NaN where none)
    water_monthly: np.ndarray | None = None
    _index: pd.Index | None = None

    @classmethod
    def of(cls, sites: Sequence[Site]) -> SiteArrays:
        ids = [s.id for s in sites]
        eff = [EXPOSURE_EFFECTS[s.exposure] for s in sites]
        zone_index: dict[str, int] = {}
        zone_code = np.array(
            [zone_index.setdefault(s.timezone, len(zone_index)) for s in sites], dtype=np.intp
        )
        nan = np.nan
        return cls(
            ids=ids,
            pos={sid: i for i, sid in enumerate(ids)},
            lat=np.array([s.lat for s in sites], dtype=float),
            lon=np.array([s.lon for s in sites], dtype=float),
            sky_view=np.array([e.sky_view for e in eff], dtype=float),
            cooling_factor=np.array([e.cooling_factor for e in eff], dtype=float),
            min_offset=np.array([e.min_offset_c for e in eff], dtype=float),
            onshore_lo=np.array(
                [nan if s.onshore_from_deg is None else s.onshore_from_deg for s in sites],
                dtype=float,
            ),
            onshore_hi=np.array(
                [nan if s.onshore_to_deg is None else s.onshore_to_deg for s in sites],
                dtype=float,
            ),
            zones=list(zone_index),
            zone_code=zone_code,
            water_monthly=np.array(
                [
                    [nan] * 12 if s.water_temp_monthly_c is None else s.water_temp_monthly_c
                    for s in sites
                ],
                dtype=float,
            ).reshape(len(sites), 12),
        )

    @property
    def index(self) -> pd.Index:
        """The site ids as an index (what a window's site categories are compared to)."""
        import pandas as pd

        if self._index is None:
            self._index = pd.Index(self.ids, dtype=object)
        return self._index

    def zone_offsets_s(self, at: datetime) -> np.ndarray:
        offsets = np.empty(len(self.zones))
        for i, name in enumerate(self.zones):
            off = at.astimezone(ZoneInfo(name)).utcoffset()
            offsets[i] = off.total_seconds() if off else 0.0
        return offsets[self.zone_code]


class Block:
    """Observed rows laid out as a right-aligned sites × times block.

    ``src[i, j]`` is the row of ``obs`` in cell (site i, column j), each site's rows in
    time order with the newest in the last column; ``pad`` marks the empty cells on the
    left. ``t`` holds each cell's POSIX seconds (NaN in padding). Value blocks are
    gathered from ``obs`` on demand, whole or as a column slice, so a feature that only
    looks at the last hours never touches the rest.
    """

    width: int
    src: np.ndarray
    pad: np.ndarray
    t: np.ndarray
    # forecast rows (site index, POSIX seconds, values by column), in input order
    forecast: tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]
    weather_code: np.ndarray  # per row of obs
    weather_flags: np.ndarray  # per code: reported, FG, FZFG, BR

    def __init__(
        self,
        obs: pd.DataFrame,
        st: SiteArrays,
        t_first: float,
        t_last: float,
        t_weather: float,
        t_forecast: float,
    ):
        """Observed rows with ``t_first < time <= t_last`` for the sites in ``st``;
        present weather is read for rows from ``t_weather`` on, forecast rows from
        ``t_forecast`` on (earlier ones never count)."""
        n = len(st.ids)
        self.n = n
        self.rows = np.arange(n)
        self.obs = obs
        self._columns: dict[str, np.ndarray | None] = {}
        self._full: dict[str, np.ndarray] = {}
        self._reports: dict[str, np.ndarray] = {}
        self._empty = len(obs) == 0
        if self._empty:
            self._lay_out_nothing()
        else:
            self._lay_out(st, t_first, t_last, t_weather, t_forecast)

    def _lay_out_nothing(self) -> None:
        n = self.n
        self.width = 1
        self.src = np.zeros((n, 1), dtype=np.intp)
        self.pad = np.ones((n, 1), dtype=bool)
        self.t = np.full((n, 1), np.nan)
        self.forecast = (
            np.zeros(0, dtype=np.int64),
            np.zeros(0),
            {name: np.zeros(0) for name in _FORECAST_COLUMNS},
        )
        self.weather_code = np.full(1, -1, dtype=np.intp)
        self.weather_flags = np.zeros((1, 4), dtype=bool)

    def _lay_out(
        self, st: SiteArrays, t_first: float, t_last: float, t_weather: float, t_forecast: float
    ) -> None:
        obs, n = self.obs, self.n
        nrows = len(obs)
        t_all = epoch_seconds(obs["time"])
        window = (t_all <= t_last) & (t_all > t_first)
        # Only rows in the observed window, or late enough to be a forecast that counts,
        # are read any further: the text columns are the slow part of the table.
        wanted = window | (t_all >= t_forecast)
        rows = None if wanted.all() else np.flatnonzero(wanted)
        site_idx = site_index(obs["site"], st.pos, rows, st.index)
        known = site_idx >= 0
        if "kind" in obs:
            is_obs_kind, is_fc = row_kinds(obs["kind"], known, rows)
        else:
            is_obs_kind = np.ones(nrows, dtype=bool)
            is_fc = np.zeros(nrows, dtype=bool)

        # forecast rows keep their input order: the per-site picks below depend on it
        frows = np.flatnonzero(is_fc)
        self.forecast = (
            site_idx[frows].astype(np.int64),
            t_all[frows],
            {name: self._nan_or(name, frows) for name in _FORECAST_COLUMNS},
        )

        rows_sorted, s_sel, t_sel = _site_time_order(site_idx, t_all, known & is_obs_kind & window)

        # s_sel is sorted: each site's count from where its run starts (no full pass)
        counts = np.diff(np.searchsorted(s_sel, np.arange(n + 1)))
        width = int(counts.max()) if counts.size and counts.max() > 0 else 1
        starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
        # cell (s, j) holds sorted row start_s + j - (width - count_s), or is padding when
        # j < width - count_s: gathered cell by cell (a broadcast), not scattered by row
        empty = width - counts
        cols = np.arange(width)
        self.pad = cols[None, :] < empty[:, None]
        if rows_sorted.size:
            which = (starts - empty)[:, None] + cols[None, :]
            np.clip(which, 0, rows_sorted.size - 1, out=which)
            src = rows_sorted.take(which)
            np.putmask(src, self.pad, nrows)
        else:
            src = np.full((n, width), nrows, dtype=np.intp)
        self.width = width
        self.src = src
        self.t = self._gather(t_all, self.src, self.pad)

        wrows = rows_sorted[t_sel >= t_weather]
        self.weather_code = np.full(nrows, -1, dtype=np.intp)
        if "weather" in obs and wrows.size:
            codes, self.weather_flags = weather_codes(obs["weather"], wrows)
            self.weather_code[wrows] = codes
        else:
            self.weather_flags = np.zeros((1, 4), dtype=bool)

    @staticmethod
    def _gather(values: np.ndarray, src: np.ndarray, pad: np.ndarray) -> np.ndarray:
        out = np.take(values, src, mode="clip")
        np.putmask(out, pad, np.nan)
        return out

    def column(self, name: str) -> np.ndarray | None:
        if name not in self._columns:
            self._columns[name] = None if self._empty else float_column(self.obs, name)
        return self._columns[name]

    def _nan_or(self, name: str, rows: np.ndarray) -> np.ndarray:
        values = self.column(name)
        return np.full(rows.size, np.nan) if values is None else values[rows]

    def block(self, name: str, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Columns ``start:stop`` of the value block of ``name`` (NaN where empty)."""
        stop = self.width if stop is None else stop
        if name in self._full:
            return self._full[name][:, start:stop]
        values = self.column(name)
        if values is None:
            return np.full((self.n, max(stop - start, 0)), np.nan)
        if name in _WIDE_COLUMNS or (start == 0 and stop == self.width):
            # looked at over many hours, often several times: gathered whole, once
            self._full[name] = self._span(values, 0, self.width, np.nan)
            return self._full[name][:, start:stop]
        return self._span(values, start, stop, np.nan)

    def _span(self, values: np.ndarray, start: int, stop: int, fill: float) -> np.ndarray:
        """Columns ``start:stop`` of the cells of ``values`` (one per row of ``obs``),
        ``fill`` in the padding."""
        out = np.take(values, self.src[:, start:stop], mode="clip")
        np.putmask(out, self.pad[:, start:stop], fill)
        return out

    def newest(
        self,
        name: str,
        start: int,
        stop: int,
        lo: np.ndarray,
        hi: np.ndarray,
        valid: np.ndarray,
    ) -> np.ndarray:
        """The newest value of ``name`` in each row's columns ``lo:hi`` (``valid``, a mask
        over ``start:stop``), NaN if none: what :func:`latest` gives on the slice, read
        without the slice where it can be. The newest reading is usually in a row's last
        column, so only the rows where that one is missing are searched; padding cells
        are never inside ``lo:hi``, so they are not masked first."""
        values = self.column(name)
        if values is None or self._empty or stop <= start:
            return np.full(self.n, np.nan)
        some = lo < hi
        last = np.take(values, self.src[self.rows, np.maximum(hi - 1, 0)], mode="clip")
        found = some & ~np.isnan(last)
        out = np.where(found, last, np.nan)
        search = np.flatnonzero(some & ~found)
        if search.size:
            cells = np.take(values, self.src[search, start:stop], mode="clip")
            out[search], _ = latest(cells, valid[search])
        return out

    def laid_out_window(self) -> tuple[np.ndarray, np.ndarray] | None:
        """Each row's first and end column of its observed window, where the layout
        fixes them (a history's block holds nothing else); None: :meth:`bounds` finds
        them."""
        return None

    def smallest_step(self, lo: np.ndarray, hi: np.ndarray, noise: float) -> np.ndarray | None:
        """The depression's reporting step over each row's columns ``lo:hi``, where the
        block can give it without the cells (``notifier.engine.steps``); None here."""
        return None

    def runs(
        self, names: Sequence[str], lo: np.ndarray, hi: np.ndarray
    ) -> tuple[np.ndarray, list[np.ndarray], np.ndarray] | None:
        """Each row's columns ``lo:hi`` left-aligned — column ``c`` of row ``r`` is the
        block's column ``lo[r] + c`` — as (cell times, a block per name of ``names``,
        the mask of cells inside ``lo:hi``), where the block can read them so (a
        history's, whose rows' windows lie at different columns); None here: the
        caller reads :func:`column_span`'s slice."""
        return None

    def weather(self, start: int, stop: int) -> np.ndarray:
        """Weather code of the cells in columns ``start:stop`` (-1: none); its flags are
        ``weather_flags[code]`` (reported, FG, FZFG, BR)."""
        return self._span(self.weather_code, start, stop, -1)

    def reports(self, name: str) -> np.ndarray:
        """The sites (indices) with at least one value of ``name`` in the block."""
        if name not in self._reports:
            values = self.block(name)
            self._reports[name] = np.flatnonzero(~np.isnan(values).all(axis=1))
        return self._reports[name]

    def bounds(self, t_at: float | np.ndarray, tests: Sequence[_Bound]) -> list[np.ndarray]:
        """Per test and site, the first column that passes it (width if none).

        A test ``(of, minus, op, limit)`` compares ``value - minus`` with ``limit``
        (``op`` ">" or ">="), where the value is the cell's time (``of="t"``, POSIX
        seconds) or its hours from ``t_at`` (``of="h"``, as ``(t - t_at) / 3600``);
        ``minus`` and ``limit`` are numbers or one per site (``t_at`` too: a history's
        block has a row per site and time). Every such test is monotone
        along a row (False … True), as the rows are in time order and padding (NaN)
        fails it, so a binary search finds each boundary in log2(width) steps without
        touching the whole block: the number of failing columns, built up from the
        largest power of two down (a step is taken while its last column still fails).
        """
        width = self.width
        flat = self.t.reshape(-1)
        last_of_row = self.rows * width - 1  # a row's column c - 1 is at this + c
        top = 1 << (width.bit_length() - 1)
        out = []
        with np.errstate(invalid="ignore"):
            for of, minus, op, limit in tests:
                failing = np.zeros(self.n, dtype=np.intp)
                step = top
                while step:
                    after = failing + step
                    within = after <= width
                    t = flat[last_of_row + np.minimum(after, width)]
                    value = ((t - t_at) / 3600.0 if of == "h" else t) - minus
                    passed = value > limit if op == ">" else value >= limit
                    failing = np.where(within & ~passed, after, failing)
                    step >>= 1
                out.append(failing)
        return out


def column_span(lo: np.ndarray, hi: np.ndarray) -> tuple[int, int]:
    """The narrowest column slice holding every site's range ``lo:hi``."""
    some = lo < hi
    if not some.any():
        return 0, 0
    return int(lo[some].min()), int(hi[some].max())


def in_range(start: int, stop: int, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Mask over columns ``start:stop``: True inside each site's ``lo:hi``."""
    cols = np.arange(start, stop)
    return (cols >= lo[:, None]) & (cols < hi[:, None])


def latest(block: np.ndarray, valid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Value and column of the right-most valid entry of each row (NaN / -1 if none)."""
    ok = ~np.isnan(block)
    ok &= valid
    width = block.shape[1]
    if width == 0:
        return np.full(block.shape[0], np.nan), np.full(block.shape[0], -1)
    col = width - 1 - np.argmax(ok[:, ::-1], axis=1)
    rows = np.arange(block.shape[0])
    has = ok[rows, col]  # argmax of a row with no True is its first cell, which is False
    val = np.where(has, block[rows, col], np.nan)
    return val, np.where(has, col, -1)


def _site_time_order(
    site_idx: np.ndarray, t_all: np.ndarray, taken: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The ``taken`` rows sorted by site, then time: (rows, their sites, their times)."""
    sel = np.flatnonzero(taken)
    s_sel = site_idx[taken]  # a mask compresses faster than an index gathers
    t_sel = t_all[taken]
    order = None
    if s_sel.size > 1 and bool(np.any(s_sel[1:] < s_sel[:-1])):
        order = np.argsort(s_sel, kind="stable")
        s_sel, t_sel = s_sel[order], t_sel[order]
    if s_sel.size > 1 and not bool(np.all((s_sel[1:] != s_sel[:-1]) | (t_sel[1:] >= t_sel[:-1]))):
        # times out of order within a site: the general (slower) sort
        s_raw, t_raw = site_idx[sel], t_all[sel]
        order = np.lexsort((t_raw, s_raw))
        s_sel, t_sel = s_raw[order], t_raw[order]
    rows_sorted = sel if order is None else sel[order]
    return rows_sorted, s_sel, t_sel
