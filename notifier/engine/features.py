"""Observations → one row of forecaster's features per site at an evaluation time.

Everything is computed for all sites at once. The recent observations are laid out as a
sites × times block (right-aligned: each site's newest row in the last column, NaN
padding on the left), and every feature is a masked reduction over that block — there
is no Python loop over sites.

How it stays fast (10,000 sites × 144 rows in a few tenths of a second): the block is
built once per call — once for several evaluation times with ``compute_features_at`` —
as an index from cells to rows, with value blocks gathered only where they are needed.
Each evaluation time's windows (the last 3 h, tonight since sunset, around midday, …)
are found per site by a binary search over the time-sorted rows, and each reduction runs
on the narrowest column slice that holds them. The answers are those of the plain
masked reductions over the whole block, bit for bit (``tests/engine/test_fast_path.py``
checks the vectorised path against the site-by-site one).

A feature that cannot be computed from the data present is NaN ("unknown"); rules that
need it do not fire and ``explain`` says so. The one exception is ``data_age_min``,
which is +inf for a site that has never reported: no data is the loudest kind of stale.

How site exposure shapes the physics (each factor is deliberately simple and shown in
``explain``):

- valley: cold air drains downslope and pools on calm clear nights, so the floor cools
  more than open ground (2–5 K colder is typical — Whiteman 2000, *Mountain
  Meteorology*, from memory); walls also hide part of the sky (sky view 0.85).
  Fog forms first and thickest in the lowest ground.
- forest: the canopy returns long-wave radiation, so the sky view is small (0.45) and
  the air under it cools less (Oke 1987, *Boundary Layer Climates*, from memory).
- waterside: moist air, and water that cools far more slowly than land, moderate the
  night's fall (cooling ×0.8, +1 K on a projected minimum; common practice).
- coast: like waterside for cooling; sea and advection fog rules apply.
- urban: stored heat and reduced sky view keep nights 1–3 K warmer (Oke 1982, QJRMS
  108, from memory): sky view 0.7, cooling ×0.75, +1.5 K.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING, cast
from zoneinfo import ZoneInfo

import numpy as np

from notifier import physics

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.core.config import Site

__all__ = [
    "EXPOSURE_EFFECTS",
    "FEATURES",
    "FeatureSettings",
    "FeatureSpec",
    "FeatureTable",
    "compute_features",
    "compute_features_at",
]


@dataclass(frozen=True)
class FeatureSpec:
    label: str
    unit: str
    kind: str = "number"  # number | bool
    decimals: int = 1
    description: str = ""


FEATURES: dict[str, FeatureSpec] = {
    "temp_c": FeatureSpec("air temperature", "°C", description="latest screen temperature"),
    "dewpoint_c": FeatureSpec("dew point", "°C"),
    "rh_pct": FeatureSpec("relative humidity", "%", decimals=0),
    "dewpoint_depression_c": FeatureSpec(
        "dew-point depression", "°C", description="air temperature minus dew point"
    ),
    "depression_trend_c_per_h": FeatureSpec(
        "depression trend",
        "°C/h",
        decimals=2,
        description="Theil–Sen slope of the depression over the last 3 h; negative = closing",
    ),
    "hours_to_saturation": FeatureSpec(
        "time to saturation", "h", description="depression ÷ closing rate (trend)"
    ),
    "hours_to_crossing": FeatureSpec(
        "time to dew-point crossing",
        "h",
        description="when the night's cooling curve reaches the dew point",
    ),
    "hours_to_fog": FeatureSpec(
        "time to fog", "h", description="the sooner of saturation and crossing"
    ),
    "projected_min_temp_c": FeatureSpec(
        "projected minimum",
        "°C",
        description="forecast rows, else the square-root cooling fit since sunset, "
        "else Craddock–Pritchard from midday values",
    ),
    "min_margin_c": FeatureSpec(
        "projected minimum above dew point", "°C", description="projected minimum minus dew point"
    ),
    "crossover_temp_c": FeatureSpec(
        "crossover temperature", "°C", description="lowest dew point of the afternoon"
    ),
    "min_minus_crossover_c": FeatureSpec("projected minimum above crossover", "°C"),
    "cloud_pct": FeatureSpec("cloud cover", "%", decimals=0),
    "wind_ms": FeatureSpec("wind", "m/s"),
    "net_longwave_wm2": FeatureSpec(
        "net long-wave loss",
        "W/m²",
        decimals=0,
        description="Brutsaert clear sky, Unsworth–Monteith cloud, sky view by exposure",
    ),
    "cooling_potential": FeatureSpec(
        "cooling potential",
        "",
        decimals=2,
        description="0–1: radiative loss × light-wind factor × exposure factor",
    ),
    "is_night": FeatureSpec("night", "", kind="bool"),
    "hours_to_sunrise": FeatureSpec("time to sunrise", "h"),
    "hours_since_sunset": FeatureSpec("time since sunset", "h"),
    "surface_temp_c": FeatureSpec("surface temperature", "°C"),
    "frost_point_c": FeatureSpec("frost point", "°C"),
    "surface_minus_frost_point_c": FeatureSpec(
        "surface above frost point",
        "°C",
        description="surface temperature minus frost point (minus dew point above 0 °C)",
    ),
    "water_temp_c": FeatureSpec("water temperature", "°C"),
    "dewpoint_minus_water_c": FeatureSpec("dew point above water temperature", "°C"),
    "water_minus_air_c": FeatureSpec("water above air temperature", "°C"),
    "onshore": FeatureSpec("onshore wind", "", kind="bool"),
    "visibility_m": FeatureSpec("visibility", "m", decimals=0),
    "observed_fog": FeatureSpec("fog observed", "", kind="bool"),
    "observed_mist": FeatureSpec("mist observed", "", kind="bool"),
    "observed_freezing_fog": FeatureSpec("freezing fog observed", "", kind="bool"),
    "data_age_min": FeatureSpec("data age", "min", decimals=0),
}


@dataclass(frozen=True)
class ExposureEffect:
    sky_view: float
    cooling_factor: float
    min_offset_c: float  # added to projections not made from the site's own night curve


EXPOSURE_EFFECTS: dict[str, ExposureEffect] = {
    "open": ExposureEffect(1.0, 1.0, 0.0),
    "valley": ExposureEffect(0.85, 1.2, -2.0),
    "forest": ExposureEffect(0.45, 1.0, 0.5),
    "waterside": ExposureEffect(1.0, 0.8, 1.0),
    "coast": ExposureEffect(1.0, 0.85, 0.5),
    "urban": ExposureEffect(0.7, 0.75, 1.5),
}


@dataclass(frozen=True)
class FeatureSettings:
    current_max_age_h: float = 3.0  # older readings are not "current"
    trend_window_h: float = 3.0
    trend_min_span_h: float = 0.75
    fit_min_span_h: float = 0.75
    evening_transition_h: float = 1.5
    min_closing_c_per_h: float = 0.02
    water_max_age_h: float = 24.0  # water temperature changes slowly
    block_hours: float = 24.0
    # Radiation fog needs light wind: calm to ~3 m/s is typical, stronger wind mixes the
    # cooled layer away (EUMETrain / UCAR MetEd conceptual models; numbers common practice).
    wind_full_cooling_ms: float = 2.5
    wind_no_cooling_ms: float = 7.0
    # Clear-sky net loss on a calm night is ~70–100 W/m² (REFERENCES: 82.5 W/m² at 10 °C);
    # 80 W/m² is taken as "full" radiative cooling.
    full_loss_wm2: float = 80.0
    surface_emissivity: float = 0.98


@dataclass
class FeatureTable:
    """Features for ``site_ids`` at ``at``: ``values[name]`` is an array over sites."""

    at: datetime
    site_ids: list[str]
    values: dict[str, np.ndarray]
    projection_method: np.ndarray  # str per site: forecast | cooling-fit | midday-estimate
    last_time: np.ndarray  # POSIX seconds of the newest observation, NaN if none
    fit_t0_c: np.ndarray  # tonight's square-root cooling fit (NaN where none)
    fit_k_per_sqrt_h: np.ndarray
    last_sunset: np.ndarray  # POSIX seconds

    def row(self, i: int) -> dict[str, float]:
        return {name: float(arr[i]) for name, arr in self.values.items()}

    def index(self, site_id: str) -> int:
        return self.site_ids.index(site_id)

    def __getitem__(self, name: str) -> np.ndarray:
        return self.values[name]


_OBS_COLUMNS = (
    "temp_c",
    "dewpoint_c",
    "rh_pct",
    "wind_ms",
    "wind_dir_deg",
    "cloud_pct",
    "surface_temp_c",
    "water_temp_c",
    "visibility_m",
)
_FORECAST_COLUMNS = ("temp_c", "dewpoint_c", "cloud_pct", "wind_ms")
_FORECAST_BEFORE_S = 1800  # a forecast for up to 30 min ago still stands in for cloud, wind
# a column boundary test for _Block.bounds: (t | h, minus, > | >=, limit)
_Bound = tuple[str, "float | np.ndarray", str, "float | np.ndarray"]
_WIDE_COLUMNS = ("temp_c", "dewpoint_c")  # read over many hours (trend, fit, midday)
# Below this share of sites needing a per-row fit, only those rows are passed on (copying
# the rows out costs more than it saves when nearly all need it).
_SUBSET_SHARE = 0.6


def epoch_seconds(times: pd.Series) -> np.ndarray:
    """Tz-aware timestamps → float POSIX seconds."""
    import pandas as pd

    if isinstance(times.dtype, pd.DatetimeTZDtype):
        # already parsed: read the UTC instants straight out, in one pass; whole seconds
        # come out exact (both operands are exact doubles)
        utc = times.to_numpy(dtype=f"datetime64[{times.dtype.unit}]").view(np.int64)
        return utc / float({"s": 1, "ms": 10**3, "us": 10**6, "ns": 10**9}[times.dtype.unit])
    t = pd.to_datetime(times, utc=True)
    return t.dt.tz_localize(None).to_numpy().astype("datetime64[ms]").astype(np.int64) / 1000.0


# ---- the parts that do not depend on the evaluation time -------------------------------


@dataclass
class _Sites:
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
    _index: pd.Index | None = None

    @classmethod
    def of(cls, sites: Sequence[Site]) -> _Sites:
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


_SITES_CACHE: OrderedDict[tuple[int, ...], tuple[Sequence[Site], _Sites]] = OrderedDict()
_SITES_LOCK = threading.Lock()


def _sites_of(sites: Sequence[Site]) -> _Sites:
    """``_Sites.of(sites)``, remembered for the last few site lists (a service passes the
    same configured sites every cycle; reading 10,000 of them costs milliseconds). Keyed
    by the objects' identities: the entry holds the objects, so no id is reused while it
    lives, and a ``Site`` is frozen, so its arrays stay true. Nothing changes them."""
    key = tuple(map(id, sites))
    with _SITES_LOCK:
        hit = _SITES_CACHE.get(key)
        if hit is not None:
            _SITES_CACHE.move_to_end(key)
            return hit[1]
    st = _Sites.of(sites)
    with _SITES_LOCK:
        _SITES_CACHE[key] = (list(sites), st)
        while len(_SITES_CACHE) > 4:
            _SITES_CACHE.popitem(last=False)
    return st


def _site_index(
    column: pd.Series,
    pos: Mapping[str, int],
    rows: np.ndarray | None = None,
    index: pd.Index | None = None,
) -> np.ndarray:
    """Row → index into the site list (-1 for an unknown site).

    Rows usually come grouped by site (the store returns them sorted), so equal
    neighbours are found with one vectorised comparison and only the first row of each
    run is looked up; any order gives the same answer, just more slowly. With ``rows``,
    only those rows need be read: the others get -1, or their index where that costs
    nothing (categories that are the site list itself).
    """
    import pandas as pd

    if isinstance(column.dtype, pd.CategoricalDtype):  # one lookup per category
        categories = column.cat.categories
        codes = column.cat.codes.to_numpy()
        if len(categories) == len(pos) and categories.equals(
            pd.Index(pos) if index is None else index
        ):
            # the categories are the sites in order (the service's rolling window): the
            # codes are the indices already, for every row (-1, a missing site, stays)
            return codes.astype(np.intp)
        lookup = [pos.get(c, -1) if isinstance(c, str) else -1 for c in categories]
        table = np.array([*lookup, -1], dtype=np.intp)
        if rows is None:
            return table[codes]
        out = np.full(len(column), -1, dtype=np.intp)
        out[rows] = table[codes[rows]]
        return out
    if rows is not None:
        out = np.full(len(column), -1, dtype=np.intp)
        out[rows] = _site_index(column.iloc[rows], pos)
        return out
    values = column.to_numpy(dtype=object)
    if values.size == 0:
        return np.zeros(0, dtype=np.intp)
    with np.errstate(invalid="ignore"):
        change = np.asarray(values[1:] != values[:-1], dtype=bool)
    starts = np.concatenate(([0], np.flatnonzero(change) + 1))
    heads = np.fromiter(
        (pos.get(v, -1) if isinstance(v, str) else -1 for v in values[starts]),
        dtype=np.intp,
        count=starts.size,
    )
    return np.repeat(heads, np.diff(np.append(starts, values.size)))


def _kinds(
    column: pd.Series, known: np.ndarray, rows: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """(kind is obs, kind is forecast) per row; forecast only for known sites. With
    ``rows``, only those rows are read (the others are neither)."""
    import pandas as pd

    if rows is not None:
        is_obs = np.zeros(len(column), dtype=bool)
        is_fc = np.zeros(len(column), dtype=bool)
        is_obs[rows], is_fc[rows] = _kinds(column.iloc[rows], known[rows])
        return is_obs, is_fc
    if isinstance(column.dtype, pd.CategoricalDtype):
        cats = list(column.cat.categories)
        codes = column.cat.codes.to_numpy()
        is_obs = codes == (cats.index("obs") if "obs" in cats else -2)
        is_fc = known & (codes == (cats.index("forecast") if "forecast" in cats else -2))
        return is_obs, is_fc
    kind = column.to_numpy()
    is_obs = np.asarray(kind == "obs", dtype=bool)
    is_fc = np.zeros(kind.size, dtype=bool)
    other = np.flatnonzero(known & ~is_obs)
    if other.size:
        is_fc[other] = np.asarray(kind[other] == "forecast", dtype=bool)
    return is_obs, is_fc


def _float_column(obs: pd.DataFrame, name: str) -> np.ndarray | None:
    if name not in obs:
        return None
    series = obs[name]
    if series.dtype == np.float64:
        return series.to_numpy()
    return series.to_numpy(dtype=float, na_value=np.nan)


def _weather_flags(column: pd.Series, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Present-weather text of ``rows`` → (code per row, flags per code).

    The flags (reported, FG, FZFG, BR — see :func:`_observed_now`) are worked out once
    per distinct text; code -1 (no text) picks the all-false last row of ``flags``.
    """
    import pandas as pd

    if isinstance(column.dtype, pd.CategoricalDtype):  # coded already
        codes = column.cat.codes.to_numpy()[rows]
        uniques = column.cat.categories
    else:
        codes, uniques = pd.factorize(column.to_numpy()[rows], use_na_sentinel=True)
    flags = np.zeros((len(uniques) + 1, 4), dtype=bool)
    for i, value in enumerate(uniques):
        text = str(value).upper()
        tokens = set(text.replace("+", " ").replace("-", " ").split())
        flags[i] = (
            text != "",
            any(tok.endswith("FG") for tok in tokens),
            "FZFG" in tokens,
            "BR" in tokens,
        )
    return codes.astype(np.intp, copy=False), flags


class _Block:
    """Observed rows laid out as a right-aligned sites × times block.

    ``src[i, j]`` is the row of ``obs`` in cell (site i, column j), each site's rows in
    time order with the newest in the last column; ``pad`` marks the empty cells on the
    left. ``t`` holds each cell's POSIX seconds (NaN in padding). Value blocks are
    gathered from ``obs`` on demand, whole or as a column slice, so a feature that only
    looks at the last hours never touches the rest.
    """

    def __init__(
        self,
        obs: pd.DataFrame,
        st: _Sites,
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
        nrows = len(obs)
        self._empty = nrows == 0
        if self._empty:
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
            self._steps = 1
            return
        t_all = epoch_seconds(obs["time"])
        window = (t_all <= t_last) & (t_all > t_first)
        # Only rows in the observed window, or late enough to be a forecast that counts,
        # are read any further: the text columns are the slow part of the table.
        wanted = window | (t_all >= t_forecast)
        rows = None if wanted.all() else np.flatnonzero(wanted)
        site_idx = _site_index(obs["site"], st.pos, rows, st.index)
        known = site_idx >= 0
        if "kind" in obs:
            is_obs_kind, is_fc = _kinds(obs["kind"], known, rows)
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

        taken = known & is_obs_kind & window
        sel = np.flatnonzero(taken)
        s_sel = site_idx[taken]  # a mask compresses faster than an index gathers
        t_sel = t_all[taken]
        order = None
        if s_sel.size > 1 and bool(np.any(s_sel[1:] < s_sel[:-1])):
            order = np.argsort(s_sel, kind="stable")
            s_sel, t_sel = s_sel[order], t_sel[order]
        if s_sel.size > 1 and not bool(
            np.all((s_sel[1:] != s_sel[:-1]) | (t_sel[1:] >= t_sel[:-1]))
        ):
            # times out of order within a site: the general (slower) sort
            s_raw, t_raw = site_idx[sel], t_all[sel]
            order = np.lexsort((t_raw, s_raw))
            s_sel, t_sel = s_raw[order], t_raw[order]
        rows_sorted = sel if order is None else sel[order]

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
        self._steps = width.bit_length()

        wrows = rows_sorted[t_sel >= t_weather]
        self.weather_code = np.full(nrows, -1, dtype=np.intp)
        if "weather" in obs and wrows.size:
            codes, self.weather_flags = _weather_flags(obs["weather"], wrows)
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
            self._columns[name] = None if self._empty else _float_column(self.obs, name)
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
            self._full[name] = self._gather(values, self.src, self.pad)
            return self._full[name][:, start:stop]
        return self._gather(values, self.src[:, start:stop], self.pad[:, start:stop])

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
        over ``start:stop``), NaN if none: what :func:`_latest` gives on the slice, read
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
            out[search], _ = _latest(cells, valid[search])
        return out

    def weather(self, start: int, stop: int) -> np.ndarray:
        """Weather code of the cells in columns ``start:stop`` (-1: none); its flags are
        ``weather_flags[code]`` (reported, FG, FZFG, BR)."""
        code = np.take(self.weather_code, self.src[:, start:stop], mode="clip")
        np.putmask(code, self.pad[:, start:stop], -1)
        return code

    def reports(self, name: str) -> np.ndarray:
        """The sites (indices) with at least one value of ``name`` in the block."""
        if name not in self._reports:
            values = self.block(name)
            self._reports[name] = np.flatnonzero(~np.isnan(values).all(axis=1))
        return self._reports[name]

    def bounds(self, t_at: float, tests: Sequence[_Bound]) -> list[np.ndarray]:
        """Per test and site, the first column that passes it (width if none).

        A test ``(of, minus, op, limit)`` compares ``value - minus`` with ``limit``
        (``op`` ">" or ">="), where the value is the cell's time (``of="t"``, POSIX
        seconds) or its hours from ``t_at`` (``of="h"``, as ``(t - t_at) / 3600``);
        ``minus`` and ``limit`` are numbers or one per site. Every such test is monotone
        along a row (False … True), as the rows are in time order and padding (NaN)
        fails it, so a binary search finds each boundary in log2(width) steps without
        touching the whole block — all the tests at once.
        """
        n, k = self.n, len(tests)
        of_hours = np.array([test[0] == "h" for test in tests])[:, None]
        strict = np.array([test[2] == ">" for test in tests])[:, None]
        minus = np.empty((k, n))
        limit = np.empty((k, n))
        for i, (_, sub, _, lim) in enumerate(tests):
            minus[i] = sub
            limit[i] = lim
        flat = self.t.reshape(-1)
        base = self.rows * self.width
        last = self.width - 1
        lo = np.zeros((k, n), dtype=np.intp)
        hi = np.full((k, n), self.width, dtype=np.intp)
        with np.errstate(invalid="ignore"):
            for _ in range(self._steps):
                mid = (lo + hi) >> 1
                t = flat[base + np.minimum(mid, last)]
                value = np.where(of_hours, (t - t_at) / 3600.0, t) - minus
                passed = np.where(strict, value > limit, value >= limit)
                open_ = lo < hi
                hi = np.where(open_ & passed, mid, hi)
                lo = np.where(open_ & ~passed, mid + 1, lo)
        return list(lo)


def _span(lo: np.ndarray, hi: np.ndarray) -> tuple[int, int]:
    """The narrowest column slice holding every site's range ``lo:hi``."""
    some = lo < hi
    if not some.any():
        return 0, 0
    return int(lo[some].min()), int(hi[some].max())


def _in_range(start: int, stop: int, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Mask over columns ``start:stop``: True inside each site's ``lo:hi``."""
    cols = np.arange(start, stop)
    return (cols >= lo[:, None]) & (cols < hi[:, None])


def _latest(block: np.ndarray, valid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
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


# ---- the public entry points -------------------------------------------------------------


def compute_features(
    obs: pd.DataFrame,
    sites: Sequence[Site],
    at: datetime,
    settings: FeatureSettings | None = None,
) -> FeatureTable:
    """Compute every feature in ``FEATURES`` for ``sites`` at time ``at`` (tz-aware).

    ``obs`` is the canonical observation table (see ``notifier.core.observations``) holding
    observed rows up to ``at`` and any forecast rows; later observed rows are ignored.
    """
    return compute_features_at(obs, sites, [at], settings)[0]


def compute_features_at(
    obs: pd.DataFrame,
    sites: Sequence[Site],
    times: Sequence[datetime],
    settings: FeatureSettings | None = None,
) -> list[FeatureTable]:
    """:func:`compute_features` at each of ``times`` (tz-aware), sharing the work.

    The observation block is built once for all the times (the hold windows of the
    rules look 10, 20 … minutes back), so each extra time costs only the per-time
    reductions; at night an earlier time also reuses the later time's sunset and
    sunrise. ``result[k]`` equals ``compute_features(obs, sites, times[k])`` but for
    rounding in the last bits (the shared block can be a column or two wider, which
    reorders a least-squares sum; tested to 1e-9).
    """
    settings = settings or FeatureSettings()
    st = _sites_of(sites)
    if not times:
        return []
    t_ats = [t.timestamp() for t in times]
    if obs is None:
        obs = _empty_obs()
    block = _Block(
        obs,
        st,
        t_first=min(t - settings.block_hours * 3600 for t in t_ats),
        t_last=max(t_ats),
        t_weather=min(t - settings.current_max_age_h * 3600 for t in t_ats),
        t_forecast=min(t_ats) - _FORECAST_BEFORE_S,
    )
    night: tuple[float, np.ndarray, np.ndarray, np.ndarray] | None = None
    suns: dict[float, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    if len(times) > _SUN_BATCH_FROM:
        # many times (a replay's day of steps): the sun of all of them in one pass
        n = len(st.ids)
        ts = np.repeat(np.asarray(t_ats, dtype=float), n)
        sunset, sunrise, is_night = (
            np.asarray(a).reshape(len(times), n)
            for a in physics.night_bounds_utc(
                np.tile(st.lat, len(times)), np.tile(st.lon, len(times)), ts
            )
        )
        suns = {t: (sunset[k], sunrise[k], is_night[k]) for k, t in enumerate(t_ats)}
    out = []
    # latest first: an earlier time in the same night can reuse its sun (see _sun)
    for k in sorted(range(len(times)), key=lambda k: -t_ats[k]):
        known = suns.get(t_ats[k])
        if known is not None:
            night = cast(
                tuple[float, np.ndarray, np.ndarray, np.ndarray],
                (t_ats[k], *(a.copy() for a in known)),
            )
        table, night = _features_at(block, st, times[k], settings, night)
        out.append((k, table))
    return [table for _, table in sorted(out, key=lambda kt: kt[0])]


def _empty_obs() -> pd.DataFrame:
    import pandas as pd

    return pd.DataFrame(
        {
            "site": pd.Series([], dtype=object),
            "time": pd.Series([], dtype="datetime64[ns, UTC]"),
            "kind": pd.Series([], dtype=object),
        }
    )


_SUN_CACHE: OrderedDict[tuple[float, bytes, bytes], tuple[np.ndarray, ...]] = OrderedDict()
_SUN_CACHE_SIZE = 16  # evaluation times; the hold windows of a few cycles
_SUN_BATCH_FROM = 8  # more evaluation times than this: the sun of all in one call
_SUN_LOCK = threading.Lock()


def _night_bounds(st: _Sites, t_at: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``physics.night_bounds_utc`` for every site at ``t_at``, remembered.

    It is a pure function of the coordinates and the time, and the hold windows of one
    cycle (10 and 20 minutes back) are the evaluation times of the cycles before, so
    the few most recent answers are kept. A new time starts from the latest answer
    before it (the cycle before): only the sites whose sun has set or risen since are
    worked out again. Copies go out: callers may change theirs.
    """
    key = (t_at, st.lat.tobytes(), st.lon.tobytes())
    earlier = None
    with _SUN_LOCK:
        hit = _SUN_CACHE.get(key)
        if hit is not None:
            _SUN_CACHE.move_to_end(key)
        else:
            before = [k for k in _SUN_CACHE if k[0] < t_at and k[1:] == key[1:]]
            if before:
                earlier = (max(before)[0], _SUN_CACHE[max(before)])
    if hit is None:
        if earlier is not None:
            t_known, answer = earlier
            hit = _carried(st, t_at, t_known, *(a.copy() for a in answer))
        else:
            n = len(st.ids)
            hit = tuple(
                np.asarray(a) for a in physics.night_bounds_utc(st.lat, st.lon, np.full(n, t_at))
            )
        with _SUN_LOCK:
            _SUN_CACHE[key] = hit
            while len(_SUN_CACHE) > _SUN_CACHE_SIZE:
                _SUN_CACHE.popitem(last=False)
    sunset, sunrise, night = (a.copy() for a in hit)
    return sunset, sunrise, night


def _carried(
    st: _Sites,
    t_at: float,
    t_known: float,
    sunset: np.ndarray,
    sunrise: np.ndarray,
    night: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``physics.night_bounds_utc`` at ``t_at`` from its answer at ``t_known`` (changed
    in place and returned).

    Later than ``t_known``, a site at night stays in the same night until its sunrise,
    and a site by day keeps the same coming night until its sunset (a time exactly at
    sunset is night, at sunrise day, as there). Earlier, a site at night whose sunset had
    come by ``t_at`` is in that same night. Those keep the answer; the others (an event
    passed, unknown, or by day earlier) are worked out again.
    """
    with np.errstate(invalid="ignore"):
        if t_at >= t_known:
            ahead = np.where(night, t_at < sunrise, t_at < sunset)
            still = np.isfinite(sunset) & np.isfinite(sunrise) & ahead
        else:
            still = night & (sunset <= t_at)
    redo = ~still
    if redo.any():
        s2, r2, n2 = physics.night_bounds_utc(st.lat[redo], st.lon[redo], np.full(redo.sum(), t_at))
        sunset[redo], sunrise[redo], night[redo] = s2, r2, n2
    return sunset, sunrise, night


def _sun(
    st: _Sites,
    t_at: float,
    later: tuple[float, np.ndarray, np.ndarray, np.ndarray] | None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``physics.night_bounds_utc`` for every site at ``t_at``; ``later`` is the result
    for a later time of the same call, which most sites can keep (see :func:`_carried`)."""
    if later is None:
        return _night_bounds(st, t_at)
    t_later, sunset, sunrise, night = later
    return _carried(st, t_at, t_later, sunset.copy(), sunrise.copy(), night.copy())


def _features_at(
    blk: _Block,
    st: _Sites,
    at: datetime,
    settings: FeatureSettings,
    later_sun: tuple[float, np.ndarray, np.ndarray, np.ndarray] | None,
) -> tuple[FeatureTable, tuple[float, np.ndarray, np.ndarray, np.ndarray]]:
    n = blk.n
    rows = blk.rows
    t_at = at.timestamp()

    hours = (blk.t - t_at) / 3600.0

    # ---- the observed window: columns lo:hi of each row ---------------------------------
    # and where, within it, the last hours of each kind begin (see _Block.bounds)
    hi, lo, recent_lo, trend_lo, water_lo, report_lo = blk.bounds(
        t_at,
        [
            ("t", 0.0, ">", t_at),
            ("t", 0.0, ">", t_at - settings.block_hours * 3600),
            ("h", 0.0, ">=", -settings.current_max_age_h),
            ("h", 0.0, ">=", -settings.trend_window_h),
            ("h", 0.0, ">=", -settings.water_max_age_h),
            ("t", 0.0, ">=", t_at - settings.current_max_age_h * 3600),
        ],
    )
    lo = np.minimum(lo, hi)
    recent_lo, trend_lo, water_lo, report_lo = (
        np.maximum(lo, bound) for bound in (recent_lo, trend_lo, water_lo, report_lo)
    )
    present_any = lo < hi
    last_col = np.maximum(hi - 1, 0)
    last_any = np.where(present_any, hours[rows, last_col], np.nan)
    last_time = t_at + last_any * 3600.0

    # ---- current values: the newest reading of each in the last hours -------------------
    a, b = _span(recent_lo, hi)
    recent = _in_range(a, b, recent_lo, hi)
    cur: dict[str, np.ndarray] = {}
    for name in _OBS_COLUMNS:
        if name != "water_temp_c":
            cur[name] = blk.newest(name, a, b, recent_lo, hi, recent)
    # water changes slowly: its newest reading in the whole window, if young enough;
    # only the sites with a water sensor at all are looked at
    cur["water_temp_c"] = np.full(n, np.nan)
    wet = blk.reports("water_temp_c")
    if wet.size:
        water_lo = water_lo[wet]
        wa, wb = _span(water_lo, hi[wet])
        cur["water_temp_c"][wet], _ = _latest(
            blk.block("water_temp_c")[wet, wa:wb], _in_range(wa, wb, water_lo, hi[wet])
        )

    # a reading with both temperature and dew point is the basis for moisture features
    temp_recent = blk.block("temp_c", a, b)
    dew_recent = blk.block("dewpoint_c", a, b)
    pair = recent & ~np.isnan(temp_recent) & ~np.isnan(dew_recent)
    temp_c, pair_col = _latest(temp_recent, pair)
    if b > a:
        dewpoint_c = np.where(pair_col >= 0, dew_recent[rows, np.maximum(pair_col, 0)], np.nan)
    else:
        dewpoint_c = np.full(n, np.nan)

    # ---- fall back to forecast rows for cloud and wind when the station has none ------
    fsidx, ft, fcols = blk.forecast
    near = (ft >= t_at - _FORECAST_BEFORE_S) & (ft <= t_at + 3 * 3600)
    for name in ("cloud_pct", "wind_ms"):
        fill = _first_per_site(fsidx[near], ft[near], fcols[name][near], n)
        cur[name] = np.where(np.isnan(cur[name]), fill, cur[name])

    with np.errstate(invalid="ignore"):
        depression = temp_c - dewpoint_c
        rh_pct = physics.relative_humidity_pct(temp_c, dewpoint_c)
        rh_pct = np.where(np.isnan(rh_pct), cur["rh_pct"], rh_pct)

    # ---- trend of the depression over the last hours (Theil–Sen) ----------------------
    a, b = _span(trend_lo, hi)
    h_tail = hours[:, a:b]
    d_tail = blk.block("temp_c", a, b) - blk.block("dewpoint_c", a, b)
    m_tail = _in_range(a, b, trend_lo, hi) & ~np.isnan(d_tail)
    h_use = np.where(m_tail, h_tail, np.nan)
    span = np.nanmax(h_use, axis=1, initial=-np.inf) - np.nanmin(h_use, axis=1, initial=np.inf)
    usable = (m_tail.sum(axis=1) >= 3) & (span >= settings.trend_min_span_h)
    trend = np.full(n, np.nan)
    if h_tail.shape[1] >= 2 and usable.any():
        # the slope is per row: when few rows will use it, only those are worked out
        pick = usable if usable.mean() < _SUBSET_SHARE else slice(None)
        d_use = np.where(m_tail[pick], d_tail[pick], np.nan)
        trend[pick] = physics.robust_slope_per_h(h_use[pick], d_use)
        trend = np.where(usable, trend, np.nan)
    # A slope below the sensors' resolution over the window is no trend (0.06 °C in
    # 3 h, common practice): without this a flat series reads as "saturation in 10^15 h".
    closing = np.where(trend <= -settings.min_closing_c_per_h, trend, 0.0)
    closing = np.where(np.isnan(trend), np.nan, closing)
    hours_to_saturation = physics.hours_to_zero(depression, closing)

    # ---- sun --------------------------------------------------------------------------
    last_sunset, next_sunrise, night = _sun(st, t_at, later_sun)
    sun = (t_at, last_sunset, next_sunrise, night)
    is_night = np.where(np.isnan(next_sunrise), np.nan, night.astype(float))
    hours_to_sunrise = (next_sunrise - t_at) / 3600.0
    hours_since_sunset = np.where(night, (t_at - last_sunset) / 3600.0, np.nan)
    sunset_h = (last_sunset - t_at) / 3600.0  # relative to at; negative at night
    # local midday of the day the coming or current night began (for Craddock–Pritchard
    # and the crossover temperature)
    offsets = st.zone_offsets_s(at)
    ref = np.where(np.isnan(last_sunset), t_at, np.where(night, last_sunset, t_at))
    local_midnight = np.floor((ref + offsets) / 86400.0) * 86400.0 - offsets
    noon_h = (local_midnight + 12 * 3600 - t_at) / 3600.0
    aft_lo = noon_h
    aft_hi = noon_h + 6.0
    since_lo, noon_lo, noon_hi, aft_start, aft_stop = blk.bounds(
        t_at,
        [
            ("h", 0.0, ">=", sunset_h),
            ("h", noon_h, ">=", -1.5),
            ("h", noon_h, ">", 1.5),
            ("h", 0.0, ">=", aft_lo),
            ("h", 0.0, ">=", aft_hi),
        ],
    )
    since_lo = np.where(night, np.maximum(lo, since_lo), hi)

    # ---- radiation and cooling potential ------------------------------------------------
    vp = physics.vapor_pressure_hpa(dewpoint_c)
    eps_clear = physics.clear_sky_emissivity(temp_c, vp)
    eps = physics.cloudy_sky_emissivity(eps_clear, cur["cloud_pct"])
    net_lw = physics.net_longwave_loss_wm2(
        temp_c,
        eps,
        surface_temp_c=np.where(np.isnan(cur["surface_temp_c"]), temp_c, cur["surface_temp_c"]),
        surface_emissivity=settings.surface_emissivity,
        sky_view_factor=st.sky_view,
    )
    wind = cur["wind_ms"]
    with np.errstate(invalid="ignore"):
        wind_factor = np.clip(
            (settings.wind_no_cooling_ms - wind)
            / (settings.wind_no_cooling_ms - settings.wind_full_cooling_ms),
            0.0,
            1.0,
        )
        cooling_potential = np.clip(
            np.clip(net_lw / settings.full_loss_wm2, 0.0, 1.0) * wind_factor * st.cooling_factor,
            0.0,
            1.0,
        )

    # ---- projected minimum -------------------------------------------------------------
    method = np.full(n, "", dtype=object)
    proj = np.full(n, np.nan)
    proj_dew = dewpoint_c.copy()
    hours_to_crossing = np.full(n, np.nan)
    fit_t0 = np.full(n, np.nan)
    fit_k = np.full(n, np.nan)
    min_offset = st.min_offset

    # (1) forecast rows for the coming or current night
    if fsidx.size:
        horizon = next_sunrise[fsidx] + 3600.0
        inwin = (ft >= t_at) & (ft <= horizon) & ~np.isnan(fcols["temp_c"])
        fmin, fdew = _min_per_site(
            fsidx[inwin], fcols["temp_c"][inwin], fcols["dewpoint_c"][inwin], n
        )
        has_fc = ~np.isnan(fmin)
        with np.errstate(invalid="ignore"):
            shifted = fmin + min_offset * np.nan_to_num(cooling_potential)
        proj = np.where(has_fc, shifted, proj)
        proj_dew = np.where(has_fc & ~np.isnan(fdew), fdew, proj_dew)
        method[has_fc] = "forecast"

    # (2) Brunt's square-root law fitted to tonight's own readings
    a, b = _span(since_lo, hi)
    h_tail = hours[:, a:b]
    tc_tail = blk.block("temp_c", a, b)
    m_tail = _in_range(a, b, since_lo, hi) & ~np.isnan(tc_tail)
    x = np.where(m_tail, h_tail - sunset_h[:, None], np.nan)
    y = np.where(m_tail, tc_tail, np.nan)
    if x.shape[1] >= 3:
        # per row again: a site with a forecast minimum or too few points needs no fit
        t0 = np.full(n, np.nan)
        k = np.full(n, np.nan)
        need = np.isnan(proj) & (m_tail.sum(axis=1) >= 3)
        if need.any():
            pick = need if need.mean() < _SUBSET_SHARE else slice(None)
            t0[pick], k[pick] = physics.fit_sqrt_cooling(x[pick], y[pick])
        fit_span = np.nanmax(x, axis=1, initial=-np.inf) - np.nanmin(x, axis=1, initial=np.inf)
        fit_ok = ~np.isnan(k) & (fit_span >= settings.fit_min_span_h) & np.isnan(proj)
        night_len = (next_sunrise - last_sunset) / 3600.0
        with np.errstate(invalid="ignore"):
            at_sunrise = physics.project_sqrt_cooling_c(t0, np.maximum(k, 0.0), night_len)
            fitted = np.fmin(at_sunrise, temp_c)
            cross_h = np.where(
                (k > 0) & (temp_c > dewpoint_c),
                ((t0 - dewpoint_c) / np.where(k > 0, k, np.nan)) ** 2,
                np.nan,
            )
            cross_from_now = cross_h - hours_since_sunset
            cross_ok = fit_ok & (cross_from_now >= 0) & (cross_h <= night_len)
        proj = np.where(fit_ok, fitted, proj)
        method[fit_ok] = "cooling-fit"
        fit_t0 = np.where(fit_ok, t0, np.nan)
        fit_k = np.where(fit_ok, k, np.nan)
        hours_to_crossing = np.where(cross_ok, cross_from_now, np.nan)

    # (3) Craddock & Pritchard (1951) from the readings nearest local midday
    noon_lo = np.maximum(lo, noon_lo)
    noon_hi = np.minimum(hi, noon_hi)
    a, b = _span(noon_lo, noon_hi)
    t12 = np.full(n, np.nan)
    td12 = np.full(n, np.nan)
    if b > a:
        h_band = hours[:, a:b]
        temp_band = blk.block("temp_c", a, b)
        dew_band = blk.block("dewpoint_c", a, b)
        near_noon = _in_range(a, b, noon_lo, noon_hi) & ~np.isnan(temp_band) & ~np.isnan(dew_band)
        dist = np.where(near_noon, np.abs(h_band - noon_h[:, None]), np.inf)
        best = np.argmin(dist, axis=1)
        has_noon = np.isfinite(dist[rows, best])
        t12 = np.where(has_noon, temp_band[rows, best], np.nan)
        td12 = np.where(has_noon, dew_band[rows, best], np.nan)
    # K from −2.2 (calm, clear) to +2.5 (windy, cloudy) — the published end members,
    # interpolated by cooling potential (our choice).
    k_cp = 2.5 - 4.7 * cooling_potential
    with np.errstate(invalid="ignore"):
        cp_min = physics.craddock_pritchard_min_c(t12, td12, k_cp) + min_offset * np.nan_to_num(
            cooling_potential
        )
        cp_min = np.fmin(cp_min, np.where(night, temp_c, np.nan))
    use_cp = np.isnan(proj) & ~np.isnan(cp_min)
    proj = np.where(use_cp, cp_min, proj)
    method[use_cp] = "midday-estimate"

    with np.errstate(invalid="ignore"):
        min_margin = proj - proj_dew

    # ---- crossover temperature: the afternoon's lowest dew point ---------------------------
    aft_start = np.maximum(lo, aft_start)
    aft_stop = np.minimum(hi, aft_stop)
    a, b = _span(aft_start, aft_stop)
    crossover = np.full(n, np.nan)
    if b > a:
        dew_band = blk.block("dewpoint_c", a, b)
        aft = _in_range(a, b, aft_start, aft_stop) & ~np.isnan(dew_band)
        lowest = np.where(aft, dew_band, np.inf).min(axis=1)
        # none in the window (or an infinite reading) is unknown
        crossover = np.where(np.isinf(lowest), np.nan, lowest)

    # ---- surfaces, water, wind sector ----------------------------------------------------
    frost_point = physics.frost_point_from_dewpoint_c(dewpoint_c)
    with np.errstate(invalid="ignore"):
        deposit_ref = np.where(dewpoint_c <= 0, frost_point, dewpoint_c)
        surface_margin = cur["surface_temp_c"] - deposit_ref
        dew_minus_water = dewpoint_c - cur["water_temp_c"]
        water_minus_air = cur["water_temp_c"] - temp_c
    onshore = _onshore(st.onshore_lo, st.onshore_hi, cur["wind_dir_deg"], wind)

    # ---- what is being observed -------------------------------------------------------
    fog, mist, fzfg = _observed(blk, report_lo, hi, cur["temp_c"], rh_pct)

    with np.errstate(invalid="ignore"):
        # Once tonight's cooling curve is fitted it says when the air meets the dew point
        # (NaN: not before sunrise); a straight-line trend over the first hours after
        # sunset would overshoot, as cooling is fastest then (Brunt's law), so the trend
        # is used only before sunset or once the evening transition is over.
        has_fit = ~np.isnan(fit_k)
        transition = night & (hours_since_sunset < settings.evening_transition_h)
        hours_to_fog = np.where(
            has_fit, hours_to_crossing, np.where(transition, np.nan, hours_to_saturation)
        )
        # a closed depression is saturation now, whatever the curve says
        hours_to_fog = np.where(hours_to_saturation == 0.0, 0.0, hours_to_fog)
        data_age = np.where(np.isnan(last_any), np.inf, 0.0 - last_any * 60.0)

    values = {
        "temp_c": temp_c,
        "dewpoint_c": dewpoint_c,
        "rh_pct": rh_pct,
        "dewpoint_depression_c": depression,
        "depression_trend_c_per_h": trend,
        "hours_to_saturation": hours_to_saturation,
        "hours_to_crossing": hours_to_crossing,
        "hours_to_fog": hours_to_fog,
        "projected_min_temp_c": proj,
        "min_margin_c": min_margin,
        "crossover_temp_c": crossover,
        "min_minus_crossover_c": proj - crossover,
        "cloud_pct": cur["cloud_pct"],
        "wind_ms": wind,
        "net_longwave_wm2": net_lw,
        "cooling_potential": cooling_potential,
        "is_night": is_night,
        "hours_to_sunrise": hours_to_sunrise,
        "hours_since_sunset": hours_since_sunset,
        "surface_temp_c": cur["surface_temp_c"],
        "frost_point_c": frost_point,
        "surface_minus_frost_point_c": surface_margin,
        "water_temp_c": cur["water_temp_c"],
        "dewpoint_minus_water_c": dew_minus_water,
        "water_minus_air_c": water_minus_air,
        "onshore": onshore,
        "visibility_m": cur["visibility_m"],
        "observed_fog": fog,
        "observed_mist": mist,
        "observed_freezing_fog": fzfg,
        "data_age_min": data_age,
    }
    values = {k: np.asarray(v, dtype=float) for k, v in values.items()}
    table = FeatureTable(
        at=at,
        site_ids=st.ids,
        values=values,
        projection_method=method,
        last_time=last_time,
        fit_t0_c=fit_t0,
        fit_k_per_sqrt_h=fit_k,
        last_sunset=last_sunset,
    )
    return table, sun


def _first_per_site(sidx: np.ndarray, t: np.ndarray, v: np.ndarray, n: int) -> np.ndarray:
    """The earliest finite value per site (NaN where none)."""
    out = np.full(n, np.nan)
    ok = ~np.isnan(v)
    if not ok.any():
        return out
    s, tt, vv = sidx[ok], t[ok], v[ok]
    order = np.lexsort((-tt, s))  # latest first per site, so the earliest is written last
    out[s[order]] = vv[order]
    return out


def _min_per_site(
    sidx: np.ndarray, temp: np.ndarray, dew: np.ndarray, n: int
) -> tuple[np.ndarray, np.ndarray]:
    """Per site: the lowest temperature, and the dew point on that same row."""
    tmin = np.full(n, np.nan)
    dmin = np.full(n, np.nan)
    if sidx.size == 0:
        return tmin, dmin
    order = np.lexsort((-temp, sidx))  # per site, coldest last so it is written last
    tmin[sidx[order]] = temp[order]
    dmin[sidx[order]] = dew[order]
    return tmin, dmin


def _onshore(
    lo: np.ndarray, hi: np.ndarray, wind_dir: np.ndarray, wind_ms: np.ndarray
) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        d = np.mod(wind_dir, 360.0)
        inside = np.where(lo <= hi, (d >= lo) & (d <= hi), (d >= lo) | (d <= hi))
        # a calm wind has no direction to come from (below 0.5 m/s, common practice)
        out = np.where(wind_ms < 0.5, 0.0, inside.astype(float))
    unknown = np.isnan(lo) | np.isnan(d) | np.isnan(wind_ms)
    return np.where(unknown, np.nan, out)


def _observed(
    blk: _Block,
    start: np.ndarray,
    hi: np.ndarray,
    temp_c: np.ndarray,
    rh_pct: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Fog, mist and freezing fog from the newest report that carries weather or visibility.

    Fog is visibility below 1000 m or a reported FG; mist is BR, or 1–5 km with RH ≥ 95 %
    (WMO-No. 8 / WMO-No. 306 FM 15); freezing fog is FZFG, or fog below 0 °C.
    """
    n = blk.n
    fog = np.full(n, np.nan)
    mist = np.full(n, np.nan)
    fzfg = np.full(n, np.nan)
    if "visibility_m" not in blk.obs and "weather" not in blk.obs:
        return fog, mist, fzfg
    a, b = _span(start, hi)  # the reports of the last hours (current_max_age_h)
    if b <= a:
        return fog, mist, fzfg
    vis_band = blk.block("visibility_m", a, b)
    code = blk.weather(a, b)
    reported = blk.weather_flags[:, 0][code]
    has = _in_range(a, b, start, hi) & (~np.isnan(vis_band) | reported)
    any_report = has.any(axis=1)
    if not any_report.any():
        return fog, mist, fzfg
    sidx = np.flatnonzero(any_report)
    col = (b - a) - 1 - np.argmax(has[sidx, ::-1], axis=1)
    vis = vis_band[sidx, col]
    flags = blk.weather_flags[code[sidx, col]]
    has_fg, has_fz, has_br = flags[:, 1], flags[:, 2], flags[:, 3]
    with np.errstate(invalid="ignore"):
        fog_now = has_fg | (vis < 1000)
        mist_now = ~fog_now & (has_br | ((vis >= 1000) & (vis < 5000) & (rh_pct[sidx] >= 95)))
        fz_now = has_fz | (fog_now & (temp_c[sidx] < 0))
    fog[sidx] = fog_now
    mist[sidx] = mist_now
    fzfg[sidx] = fz_now
    return fog, mist, fzfg
