"""Feature families, part one: what the readings say now.

Each family works on every site at once, over one evaluation time's view of the block
(:class:`Window`: each site's observed readings are the columns ``lo:hi`` of its row,
found by :meth:`Block.bounds`): the current values, moisture and the depression's
trend, radiation and cooling potential, surfaces, water and wind sector, and the
weather being observed. The night ahead (sun, projected minimum, time to fog) is
``notifier.engine.projection``; ``notifier.engine.features`` puts them together.

>>> import numpy as np
>>> _onshore(np.array([300.0]), np.array([60.0]), np.array([10.0]), np.array([3.0]))
array([1.])
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from notifier import physics
from notifier.core import columns
from notifier.engine.block import (
    FORECAST_BEFORE_S,
    Block,
    SiteArrays,
    column_span,
    in_range,
    latest,
)
from notifier.engine.catalog import FeatureSettings

__all__ = [
    "SUBSET_SHARE",
    "CellHours",
    "Current",
    "Window",
    "current_values",
    "moisture",
    "observed_weather",
    "observed_window",
    "radiation",
    "surfaces_and_water",
    "trend_of",
]

# every measured column of the canonical table but pressure, which no feature reads
_OBS_COLUMNS = tuple(c for c in columns.FLOAT_COLUMNS if c != "pressure_hpa")
# Below this share of sites needing a per-row fit, only those rows are passed on (copying
# the rows out costs more than it saves when nearly all need it).
SUBSET_SHARE = 0.6


class CellHours:
    """Each cell's hours from its row's evaluation time, ``(t - t_at) / 3600``, worked
    out only for the cells asked for (``hours[:, a:b]``, ``hours[rows, cols]``): the
    families read a few columns each, not the whole window. The same arithmetic cell
    by cell as over the whole block, so the same numbers."""

    def __init__(self, t: np.ndarray, t_at: float | np.ndarray) -> None:
        self.t = t
        self.t_at = t_at
        self._spans: dict[tuple[int | None, int | None], np.ndarray] = {}

    def __getitem__(self, key: tuple[slice | np.ndarray, slice | np.ndarray]) -> np.ndarray:
        rows, cols = key
        whole_rows = isinstance(rows, slice) and rows == slice(None)
        if whole_rows and isinstance(cols, slice) and cols.step is None:
            # several families read the same span (read-only, as the whole block was)
            span = (cols.start, cols.stop)
            if span not in self._spans:
                self._spans[span] = self._cells(key)
            return self._spans[span]
        return self._cells(key)

    def _cells(self, key: tuple[slice | np.ndarray, slice | np.ndarray]) -> np.ndarray:
        rows, _ = key
        t = self.t[key]
        at = self.t_at[rows] if isinstance(self.t_at, np.ndarray) else self.t_at
        if isinstance(at, np.ndarray) and t.ndim == 2:
            at = at[:, None]
        return (t - at) / 3600.0


@dataclass(frozen=True)
class Window:
    """One evaluation time's columns of the block, per site: the observed readings are
    ``lo:hi``, the last hours of each kind start at the ``*_lo`` columns."""

    blk: Block
    t_at: float | np.ndarray  # POSIX seconds: one for all rows, or one per row
    hours: CellHours  # each cell's hours from t_at
    lo: np.ndarray
    hi: np.ndarray
    recent_lo: np.ndarray  # current values (current_max_age_h)
    trend_lo: np.ndarray  # trend_window_h
    water_lo: np.ndarray  # water_max_age_h
    report_lo: np.ndarray  # weather and visibility reports (current_max_age_h)
    last_any: np.ndarray  # hours from t_at of the newest reading, NaN if none

    def t_at_of(self, rows: np.ndarray) -> float | np.ndarray:
        """The evaluation time of each of ``rows`` (a block row per site and time in a
        history, see ``notifier.engine.steps``; otherwise the one time)."""
        return self.t_at[rows] if isinstance(self.t_at, np.ndarray) else self.t_at


def observed_window(blk: Block, t_at: float | np.ndarray, settings: FeatureSettings) -> Window:
    """The observed window of each row at ``t_at`` (one time, or one per row), and where
    its last hours begin."""
    hours = CellHours(blk.t, t_at)
    last_hours: list[tuple[str, float | np.ndarray, str, float | np.ndarray]] = [
        ("h", 0.0, ">=", -settings.current_max_age_h),
        ("h", 0.0, ">=", -settings.trend_window_h),
        ("h", 0.0, ">=", -settings.water_max_age_h),
        ("t", 0.0, ">=", t_at - settings.current_max_age_h * 3600),
    ]
    known = blk.laid_out_window()
    if known is None:
        window = [("t", 0.0, ">", t_at), ("t", 0.0, ">", t_at - settings.block_hours * 3600)]
        hi, lo, recent_lo, trend_lo, water_lo, report_lo = blk.bounds(t_at, window + last_hours)
    else:
        lo, hi = known
        recent_lo, trend_lo, water_lo, report_lo = blk.bounds(t_at, last_hours)
    lo = np.minimum(lo, hi)
    recent_lo, trend_lo, water_lo, report_lo = (
        np.maximum(lo, bound) for bound in (recent_lo, trend_lo, water_lo, report_lo)
    )
    present_any = lo < hi
    last_col = np.maximum(hi - 1, 0)
    last_any = np.where(present_any, hours[blk.rows, last_col], np.nan)
    return Window(blk, t_at, hours, lo, hi, recent_lo, trend_lo, water_lo, report_lo, last_any)


@dataclass(frozen=True)
class Current:
    """The newest reading of each observed column in the last hours (``values``), and
    the newest temperature and dew point read together."""

    values: dict[str, np.ndarray]
    temp_c: np.ndarray
    dewpoint_c: np.ndarray


def current_values(w: Window) -> Current:
    """Current values, with forecast cloud and wind where the station reports none."""
    blk, n, rows = w.blk, w.blk.n, w.blk.rows
    a, b = column_span(w.recent_lo, w.hi)
    recent = in_range(a, b, w.recent_lo, w.hi)
    cur: dict[str, np.ndarray] = {}
    for name in _OBS_COLUMNS:
        if name != "water_temp_c":
            cur[name] = blk.newest(name, a, b, w.recent_lo, w.hi, recent)
    # water changes slowly: its newest reading in the whole window, if young enough;
    # only the sites with a water sensor at all are looked at
    cur["water_temp_c"] = np.full(n, np.nan)
    wet = blk.reports("water_temp_c")
    if wet.size:
        water_lo = w.water_lo[wet]
        wa, wb = column_span(water_lo, w.hi[wet])
        cur["water_temp_c"][wet], _ = latest(
            blk.block("water_temp_c")[wet, wa:wb], in_range(wa, wb, water_lo, w.hi[wet])
        )

    # a reading with both temperature and dew point is the basis for moisture features
    temp_recent = blk.block("temp_c", a, b)
    dew_recent = blk.block("dewpoint_c", a, b)
    pair = recent & ~np.isnan(temp_recent) & ~np.isnan(dew_recent)
    temp_c, pair_col = latest(temp_recent, pair)
    if b > a:
        dewpoint_c = np.where(pair_col >= 0, dew_recent[rows, np.maximum(pair_col, 0)], np.nan)
    else:
        dewpoint_c = np.full(n, np.nan)

    # fall back to forecast rows for cloud and wind when the station has none
    fsidx, ft, fcols = blk.forecast
    ft_at = w.t_at_of(fsidx)
    near = (ft >= ft_at - FORECAST_BEFORE_S) & (ft <= ft_at + 3 * 3600)
    for name in ("cloud_pct", "wind_ms"):
        fill = _first_per_site(fsidx[near], ft[near], fcols[name][near], n)
        cur[name] = np.where(np.isnan(cur[name]), fill, cur[name])
    return Current(cur, temp_c, dewpoint_c)


def moisture(w: Window, now: Current, settings: FeatureSettings) -> dict[str, np.ndarray]:
    """Depression, relative humidity, the depression's trend and the time to saturation."""
    with np.errstate(invalid="ignore"):
        depression = now.temp_c - now.dewpoint_c
        rh_pct = physics.relative_humidity_pct(now.temp_c, now.dewpoint_c)
        rh_pct = np.where(np.isnan(rh_pct), now.values["rh_pct"], rh_pct)
    trend = _depression_trend(w, settings)
    step = _depression_step(w, settings)
    # "Closing" means closing by more than the data can resolve: a depression reported
    # in steps of q (whole °F step it by 5/9 °C) can move one step within the trend
    # window without any real change, so the slope must beat q over the window, and
    # at least min_closing_c_per_h (0.1 °C/h, common practice). Without this a flat or
    # one-step-jittering series reads as "closing" and a saturation time is projected.
    with np.errstate(invalid="ignore"):
        min_rate = np.fmax(settings.min_closing_c_per_h, step / settings.trend_window_h)
        is_closing = trend <= -min_rate
    closing = np.where(is_closing, trend, 0.0)
    closing = np.where(np.isnan(trend), np.nan, closing)
    return {
        "rh_pct": rh_pct,
        "dewpoint_depression_c": depression,
        "depression_trend_c_per_h": trend,
        "depression_step_c": step,
        "depression_closing": np.where(np.isnan(trend), np.nan, is_closing.astype(float)),
        "hours_to_saturation": physics.hours_to_zero(depression, closing),
    }


def _depression_step(w: Window, settings: FeatureSettings) -> np.ndarray:
    """The reporting step of the depression over the window (°C, NaN if it never moves):
    the smallest change between successive readings that is larger than float noise."""
    blk = w.blk
    known = blk.smallest_step(w.lo, w.hi, settings.step_noise_c)
    if known is not None:  # a history's block answers from its sorted rows
        return known
    a, b = column_span(w.lo, w.hi)
    step = np.full(blk.n, np.nan)
    if b - a < 2:
        return step
    d = blk.block("temp_c", a, b) - blk.block("dewpoint_c", a, b)
    d = np.where(in_range(a, b, w.lo, w.hi), d, np.nan)
    # successive readings: each reading against the last one before it (gaps skipped)
    ok = ~np.isnan(d)
    idx = np.where(ok, np.arange(b - a), -1)
    prev_idx = np.maximum.accumulate(idx, axis=1)
    prev = np.empty_like(d)
    prev[:, 0] = np.nan
    prev_col = prev_idx[:, :-1]
    prev[:, 1:] = np.where(
        prev_col >= 0, np.take_along_axis(d, np.maximum(prev_col, 0), axis=1), np.nan
    )
    with np.errstate(invalid="ignore"):
        change = np.abs(d - prev)
        change = np.where(change > settings.step_noise_c, change, np.inf)
        smallest = change.min(axis=1)
    return np.where(np.isinf(smallest), np.nan, smallest)


def _depression_trend(w: Window, settings: FeatureSettings) -> np.ndarray:
    """Theil–Sen slope of the depression over the last hours (°C/h, NaN if too few)."""
    blk = w.blk
    a, b = column_span(w.trend_lo, w.hi)
    return _trend(w, blk.block("temp_c", a, b) - blk.block("dewpoint_c", a, b), a, b, settings)


def _trend(w: Window, d_tail: np.ndarray, a: int, b: int, settings: FeatureSettings) -> np.ndarray:
    """Theil–Sen slope per hour of ``d_tail`` (columns ``a:b``) over the trend window."""
    blk = w.blk
    h_tail = w.hours[:, a:b]
    m_tail = in_range(a, b, w.trend_lo, w.hi) & ~np.isnan(d_tail)
    h_use = np.where(m_tail, h_tail, np.nan)
    span = np.nanmax(h_use, axis=1, initial=-np.inf) - np.nanmin(h_use, axis=1, initial=np.inf)
    usable = (m_tail.sum(axis=1) >= 3) & (span >= settings.trend_min_span_h)
    trend = np.full(blk.n, np.nan)
    if h_tail.shape[1] >= 2 and usable.any():
        # the slope is per row: when few rows will use it, only those are worked out
        pick = usable if usable.mean() < SUBSET_SHARE else slice(None)
        d_use = np.where(m_tail[pick], d_tail[pick], np.nan)
        trend[pick] = physics.robust_slope_per_h(h_use[pick], d_use)
        trend = np.where(usable, trend, np.nan)
    return trend


# the slope of any column's block over the trend window, for the other families
trend_of = _trend


def radiation(
    now: Current, st: SiteArrays, settings: FeatureSettings
) -> tuple[np.ndarray, np.ndarray]:
    """Net long-wave loss (W/m²) and the cooling potential (0–1) it gives in this wind."""
    temp_c, cur = now.temp_c, now.values
    vp = physics.vapor_pressure_hpa(now.dewpoint_c)
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
    return np.asarray(net_lw), cooling_potential


def surfaces_and_water(
    now: Current, st: SiteArrays, month: int | np.ndarray = 0
) -> dict[str, np.ndarray]:
    """Frost point and the surface above it, water against dew point and air, onshore.

    Where no water temperature is reported, the site's monthly climatology (config
    ``water_temp_monthly_c``; ``month`` 1–12, one for all rows or one per row, 0 for
    none) stands in for it, flagged
    ``water_temp_estimated`` (``water_temp_known`` stays false: it means measured).
    Marine forecasters fall back on the climatological sea surface temperature when no
    observation is near (common practice).
    """
    dewpoint_c, cur = now.dewpoint_c, now.values
    measured = ~np.isnan(cur["water_temp_c"])
    estimated = np.zeros(len(measured), dtype=bool)
    months = np.broadcast_to(np.asarray(month, dtype=int), measured.shape)
    if st.water_monthly is not None and len(measured) and months.any():
        rows = np.arange(len(measured))
        climate = st.water_monthly[rows, np.clip(months - 1, 0, 11)]
        estimated = ~measured & ~np.isnan(climate) & (months > 0)
        cur["water_temp_c"] = np.where(estimated, climate, cur["water_temp_c"])
    frost_point = physics.frost_point_from_dewpoint_c(dewpoint_c)
    with np.errstate(invalid="ignore"):
        deposit_ref = np.where(dewpoint_c <= 0, frost_point, dewpoint_c)
        surface_margin = cur["surface_temp_c"] - deposit_ref
        dew_minus_water = dewpoint_c - cur["water_temp_c"]
        water_minus_air = cur["water_temp_c"] - now.temp_c
    return {
        "frost_point_c": frost_point,
        "surface_minus_frost_point_c": surface_margin,
        "dewpoint_minus_water_c": dew_minus_water,
        # never unknown, so a rule can ask for sites without a water temperature
        "water_temp_known": measured.astype(float),
        "water_temp_estimated": estimated.astype(float),
        "cloud_known": (~np.isnan(cur["cloud_pct"])).astype(float),
        "water_minus_air_c": water_minus_air,
        "onshore": _onshore(st.onshore_lo, st.onshore_hi, cur["wind_dir_deg"], cur["wind_ms"]),
    }


def observed_weather(
    w: Window, now: Current, rh_pct: np.ndarray, settings: FeatureSettings | None = None
) -> dict[str, np.ndarray]:
    """Fog, mist and freezing fog from the newest report that carries weather or visibility.

    Fog is visibility below 1000 m or a reported FG at the site (not VCFG, MIFG, BCFG or
    PRFG: ``readings.FOG_NOT_AT_SITE``); mist is BR, or 1–5 km with RH ≥ 95 %
    (WMO-No. 8 / WMO-No. 306 FM 15); freezing fog is FZFG, or fog below 0 °C.
    """
    blk, start, hi = w.blk, w.report_lo, w.hi
    n = blk.n
    fog = np.full(n, np.nan)
    mist = np.full(n, np.nan)
    fzfg = np.full(n, np.nan)
    found = {
        "observed_fog": fog,
        "observed_mist": mist,
        "observed_freezing_fog": fzfg,
        **_visibility_trend(w, now, settings),
    }
    if "visibility_m" not in blk.obs and "weather" not in blk.obs:
        return found
    a, b = column_span(start, hi)  # the reports of the last hours (current_max_age_h)
    if b <= a:
        return found
    vis_band = blk.block("visibility_m", a, b)
    code = blk.weather(a, b)
    reported = blk.weather_flags[:, 0][code]
    has = in_range(a, b, start, hi) & (~np.isnan(vis_band) | reported)
    any_report = has.any(axis=1)
    if not any_report.any():
        return found
    sidx = np.flatnonzero(any_report)
    col = (b - a) - 1 - np.argmax(has[sidx, ::-1], axis=1)
    vis = vis_band[sidx, col]
    flags = blk.weather_flags[code[sidx, col]]
    has_fg, has_fz, has_br = flags[:, 1], flags[:, 2], flags[:, 3]
    temp_c = now.values["temp_c"]  # the newest temperature, with or without a dew point
    with np.errstate(invalid="ignore"):
        fog_now = has_fg | (vis < 1000)
        mist_now = ~fog_now & (has_br | ((vis >= 1000) & (vis < 5000) & (rh_pct[sidx] >= 95)))
        fz_now = has_fz | (fog_now & (temp_c[sidx] < 0))
    fog[sidx] = fog_now
    mist[sidx] = mist_now
    fzfg[sidx] = fz_now
    return found


def _visibility_trend(
    w: Window, now: Current, settings: FeatureSettings | None
) -> dict[str, np.ndarray]:
    """Whether visibility is reported now (never unknown: a rule may ask for either
    answer), and its Theil–Sen trend over the trend window (m/h, NaN if too few)."""
    settings = settings or FeatureSettings()
    n = w.blk.n
    known = (~np.isnan(now.values["visibility_m"])).astype(float)
    trend = np.full(n, np.nan)
    has = w.blk.reports("visibility_m") if "visibility_m" in w.blk.obs else np.array([], int)
    if has.size:
        a, b = column_span(w.trend_lo, w.hi)
        if b > a:
            trend = _trend(w, w.blk.block("visibility_m", a, b), a, b, settings)
    return {"visibility_known": known, "visibility_trend_m_per_h": trend}


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
