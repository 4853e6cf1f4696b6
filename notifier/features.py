"""Observations → one row of forecaster's features per site at an evaluation time.

Everything is computed for all sites at once. The recent observations are laid out as a
sites × times block (right-aligned: each site's newest row in the last column, NaN
padding on the left), and every feature is a masked reduction over that block — there
is no Python loop over sites.

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

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

import numpy as np

from notifier import physics

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.config import Site

__all__ = [
    "EXPOSURE_EFFECTS",
    "FEATURES",
    "FeatureSettings",
    "FeatureSpec",
    "FeatureTable",
    "compute_features",
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


def epoch_seconds(times: pd.Series) -> np.ndarray:
    """Tz-aware timestamps → float POSIX seconds."""
    import pandas as pd

    t = pd.to_datetime(times, utc=True)
    return t.dt.tz_localize(None).to_numpy().astype("datetime64[ms]").astype(np.int64) / 1000.0


def _block(
    site_idx: np.ndarray, values: Mapping[str, np.ndarray], n_sites: int
) -> dict[str, np.ndarray]:
    """Scatter rows sorted by (site, time) into right-aligned sites × times arrays."""
    counts = np.bincount(site_idx, minlength=n_sites)
    width = int(counts.max()) if counts.size and counts.max() > 0 else 1
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    rank = np.arange(site_idx.size) - starts[site_idx]
    col = width - counts[site_idx] + rank
    out = {}
    for name, arr in values.items():
        block = np.full((n_sites, width), np.nan)
        block[site_idx, col] = arr
        out[name] = block
    return out


def _latest(block: np.ndarray, valid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Value and column of the right-most valid entry of each row (NaN / -1 if none)."""
    ok = valid & ~np.isnan(block)
    width = block.shape[1]
    rev = np.argmax(ok[:, ::-1], axis=1)
    col = width - 1 - rev
    has = ok.any(axis=1)
    val = np.where(has, block[np.arange(block.shape[0]), col], np.nan)
    return val, np.where(has, col, -1)


def _tail(block: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The narrowest right-hand slice of ``block`` that holds every masked entry."""
    cols = np.flatnonzero(mask.any(axis=0))
    start = int(cols[0]) if cols.size else block.shape[1]
    return block[:, start:], mask[:, start:]


def _zone_offsets_s(sites: Sequence[Site], at: datetime) -> np.ndarray:
    cache: dict[str, float] = {}
    out = np.empty(len(sites))
    for i, site in enumerate(sites):
        if site.timezone not in cache:
            off = at.astimezone(ZoneInfo(site.timezone)).utcoffset()
            cache[site.timezone] = off.total_seconds() if off else 0.0
        out[i] = cache[site.timezone]
    return out


def compute_features(
    obs: pd.DataFrame,
    sites: Sequence[Site],
    at: datetime,
    settings: FeatureSettings | None = None,
) -> FeatureTable:
    """Compute every feature in ``FEATURES`` for ``sites`` at time ``at`` (tz-aware).

    ``obs`` is the canonical observation table (see ``notifier.observations``) holding
    observed rows up to ``at`` and any forecast rows; later observed rows are ignored.
    """
    import pandas as pd

    settings = settings or FeatureSettings()
    n = len(sites)
    t_at = at.timestamp()
    ids = [s.id for s in sites]
    pos = {sid: i for i, sid in enumerate(ids)}
    lat = np.array([s.lat for s in sites], dtype=float)
    lon = np.array([s.lon for s in sites], dtype=float)
    eff = [EXPOSURE_EFFECTS[s.exposure] for s in sites]
    sky_view = np.array([e.sky_view for e in eff])
    cooling_factor = np.array([e.cooling_factor for e in eff])
    min_offset = np.array([e.min_offset_c for e in eff])

    if obs is None or len(obs) == 0:
        obs = pd.DataFrame(
            {
                "site": pd.Series([], dtype=object),
                "time": pd.Series([], dtype="datetime64[ns, UTC]"),
                "kind": pd.Series([], dtype=object),
            }
        )
    site_idx_all = obs["site"].map(pos)
    known = site_idx_all.notna().to_numpy()
    t_all = epoch_seconds(obs["time"])
    kind = obs["kind"].to_numpy() if "kind" in obs else np.full(len(obs), "obs")
    is_obs = (
        known & (kind == "obs") & (t_all <= t_at) & (t_all > t_at - settings.block_hours * 3600)
    )
    is_fc = known & (kind == "forecast")

    def col(name: str, mask: np.ndarray) -> np.ndarray:
        if name in obs:
            return obs[name].to_numpy(dtype=float, na_value=np.nan)[mask]
        return np.full(int(mask.sum()), np.nan)

    # ---- the observed block ----------------------------------------------------------
    sidx = site_idx_all.to_numpy()[is_obs].astype(np.int64)
    tt = t_all[is_obs]
    order = np.lexsort((tt, sidx))
    sidx, tt = sidx[order], tt[order]
    cols = {name: col(name, is_obs)[order] for name in _OBS_COLUMNS}
    cols["hours"] = (tt - t_at) / 3600.0
    blk = _block(sidx, cols, n)
    hours = blk["hours"]
    present = ~np.isnan(hours)
    recent = present & (hours >= -settings.current_max_age_h)

    cur: dict[str, np.ndarray] = {}
    for name in _OBS_COLUMNS:
        cur[name], _ = _latest(blk[name], recent)
    water_recent = present & (hours >= -settings.water_max_age_h)
    cur["water_temp_c"], _ = _latest(blk["water_temp_c"], water_recent)

    # a reading with both temperature and dew point is the basis for moisture features
    pair = recent & ~np.isnan(blk["temp_c"]) & ~np.isnan(blk["dewpoint_c"])
    temp_c, pair_col = _latest(blk["temp_c"], pair)
    rows = np.arange(n)
    dewpoint_c = np.where(pair_col >= 0, blk["dewpoint_c"][rows, np.maximum(pair_col, 0)], np.nan)
    last_any, _ = _latest(hours, present)
    last_time = t_at + last_any * 3600.0

    # ---- fall back to forecast rows for cloud and wind when the station has none ------
    fsidx = (
        site_idx_all.to_numpy()[is_fc].astype(np.int64)
        if is_fc.any()
        else np.array([], dtype=np.int64)
    )
    ft = t_all[is_fc]
    fcols = {name: col(name, is_fc) for name in ("temp_c", "dewpoint_c", "cloud_pct", "wind_ms")}
    near = (ft >= t_at - 1800) & (ft <= t_at + 3 * 3600)
    for name in ("cloud_pct", "wind_ms"):
        fill = _first_per_site(fsidx[near], ft[near], fcols[name][near], n)
        cur[name] = np.where(np.isnan(cur[name]), fill, cur[name])

    with np.errstate(invalid="ignore"):
        depression = temp_c - dewpoint_c
        rh_pct = physics.relative_humidity_pct(temp_c, dewpoint_c)
        rh_pct = np.where(np.isnan(rh_pct), cur["rh_pct"], rh_pct)

    # ---- trend of the depression over the last hours (Theil–Sen) ----------------------
    tmask = present & (hours >= -settings.trend_window_h)
    dep_blk = blk["temp_c"] - blk["dewpoint_c"]
    tmask &= ~np.isnan(dep_blk)
    h_tail, m_tail = _tail(hours, tmask)
    d_tail, _ = _tail(dep_blk, tmask)
    h_use = np.where(m_tail, h_tail, np.nan)
    d_use = np.where(m_tail, d_tail, np.nan)
    span = np.nanmax(h_use, axis=1, initial=-np.inf) - np.nanmin(h_use, axis=1, initial=np.inf)
    trend = physics.robust_slope_per_h(h_use, d_use) if h_use.shape[1] >= 2 else np.full(n, np.nan)
    trend = np.where((m_tail.sum(axis=1) >= 3) & (span >= settings.trend_min_span_h), trend, np.nan)
    hours_to_saturation = physics.hours_to_zero(depression, trend)

    # ---- sun --------------------------------------------------------------------------
    last_sunset, next_sunrise, night = physics.night_bounds_utc(lat, lon, np.full(n, t_at))
    is_night = np.where(np.isnan(next_sunrise), np.nan, night.astype(float))
    hours_to_sunrise = (next_sunrise - t_at) / 3600.0
    hours_since_sunset = np.where(night, (t_at - last_sunset) / 3600.0, np.nan)
    sunset_h = (last_sunset - t_at) / 3600.0  # relative to at; negative at night

    # ---- radiation and cooling potential ------------------------------------------------
    vp = physics.vapor_pressure_hpa(dewpoint_c)
    eps_clear = physics.clear_sky_emissivity(temp_c, vp)
    eps = physics.cloudy_sky_emissivity(eps_clear, cur["cloud_pct"])
    net_lw = physics.net_longwave_loss_wm2(
        temp_c,
        eps,
        surface_temp_c=np.where(np.isnan(cur["surface_temp_c"]), temp_c, cur["surface_temp_c"]),
        surface_emissivity=settings.surface_emissivity,
        sky_view_factor=sky_view,
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
            np.clip(net_lw / settings.full_loss_wm2, 0.0, 1.0) * wind_factor * cooling_factor,
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
    since = present & night[:, None] & (hours >= sunset_h[:, None]) & ~np.isnan(blk["temp_c"])
    h_tail, m_tail = _tail(hours, since)
    tc_tail, _ = _tail(blk["temp_c"], since)
    x = np.where(m_tail, h_tail - sunset_h[:, None], np.nan)
    y = np.where(m_tail, tc_tail, np.nan)
    if x.shape[1] >= 3:
        t0, k = physics.fit_sqrt_cooling(x, y)
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
    offsets = _zone_offsets_s(sites, at)
    ref = np.where(np.isnan(last_sunset), t_at, np.where(night, last_sunset, t_at))
    local_midnight = np.floor((ref + offsets) / 86400.0) * 86400.0 - offsets
    noon_h = (local_midnight + 12 * 3600 - t_at) / 3600.0
    near_noon = (
        present
        & (np.abs(hours - noon_h[:, None]) <= 1.5)
        & ~np.isnan(blk["temp_c"])
        & ~np.isnan(blk["dewpoint_c"])
    )
    dist = np.where(near_noon, np.abs(hours - noon_h[:, None]), np.inf)
    best = np.argmin(dist, axis=1)
    has_noon = np.isfinite(dist[rows, best])
    t12 = np.where(has_noon, blk["temp_c"][rows, best], np.nan)
    td12 = np.where(has_noon, blk["dewpoint_c"][rows, best], np.nan)
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
    aft_lo = noon_h
    aft_hi = noon_h + 6.0
    aft = present & (hours >= aft_lo[:, None]) & (hours < aft_hi[:, None])
    dew_aft = np.where(aft, blk["dewpoint_c"], np.nan)
    with np.errstate(invalid="ignore"):
        crossover = np.where(
            aft.any(axis=1) & ~np.all(np.isnan(dew_aft), axis=1),
            np.nanmin(np.where(np.isnan(dew_aft), np.inf, dew_aft), axis=1),
            np.nan,
        )
        crossover = np.where(np.isinf(crossover), np.nan, crossover)

    # ---- surfaces, water, wind sector ----------------------------------------------------
    frost_point = physics.frost_point_from_dewpoint_c(dewpoint_c)
    with np.errstate(invalid="ignore"):
        deposit_ref = np.where(dewpoint_c <= 0, frost_point, dewpoint_c)
        surface_margin = cur["surface_temp_c"] - deposit_ref
        dew_minus_water = dewpoint_c - cur["water_temp_c"]
        water_minus_air = cur["water_temp_c"] - temp_c
    onshore = _onshore(sites, cur["wind_dir_deg"], wind)

    # ---- what is being observed -------------------------------------------------------
    fog, mist, fzfg = _observed(obs, is_obs, pos, n, t_at, settings, cur["temp_c"], rh_pct)

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
    return FeatureTable(
        at=at,
        site_ids=ids,
        values=values,
        projection_method=method,
        last_time=last_time,
        fit_t0_c=fit_t0,
        fit_k_per_sqrt_h=fit_k,
        last_sunset=last_sunset,
    )


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


def _onshore(sites: Sequence[Site], wind_dir: np.ndarray, wind_ms: np.ndarray) -> np.ndarray:
    lo = np.array([np.nan if s.onshore_from_deg is None else s.onshore_from_deg for s in sites])
    hi = np.array([np.nan if s.onshore_to_deg is None else s.onshore_to_deg for s in sites])
    with np.errstate(invalid="ignore"):
        d = np.mod(wind_dir, 360.0)
        inside = np.where(lo <= hi, (d >= lo) & (d <= hi), (d >= lo) | (d <= hi))
        # a calm wind has no direction to come from (below 0.5 m/s, common practice)
        out = np.where(wind_ms < 0.5, 0.0, inside.astype(float))
    unknown = np.isnan(lo) | np.isnan(d) | np.isnan(wind_ms)
    return np.where(unknown, np.nan, out)


def _observed(
    obs: pd.DataFrame,
    is_obs: np.ndarray,
    pos: Mapping[str, int],
    n: int,
    t_at: float,
    settings: FeatureSettings,
    temp_c: np.ndarray,
    rh_pct: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Fog, mist and freezing fog from the newest report that carries weather or visibility.

    Fog is visibility below 1000 m or a reported FG; mist is BR, or 1–5 km with RH ≥ 95 %
    (WMO-No. 8 / WMO-No. 306 FM 15); freezing fog is FZFG, or fog below 0 °C.
    """
    fog = np.full(n, np.nan)
    mist = np.full(n, np.nan)
    fzfg = np.full(n, np.nan)
    if "visibility_m" not in obs and "weather" not in obs:
        return fog, mist, fzfg
    sub = obs.loc[is_obs, [c for c in ("site", "time", "visibility_m", "weather") if c in obs]]
    t = epoch_seconds(sub["time"])
    recent = t >= t_at - settings.current_max_age_h * 3600
    sub = sub.loc[recent]
    vis = (
        sub["visibility_m"].to_numpy(dtype=float, na_value=np.nan)
        if "visibility_m" in sub
        else np.full(len(sub), np.nan)
    )
    wx = (
        sub["weather"].fillna("").astype(str).str.upper().to_numpy()
        if "weather" in sub
        else np.full(len(sub), "", dtype=object)
    )
    has = ~np.isnan(vis) | (wx != "")
    if not has.any():
        return fog, mist, fzfg
    sidx = sub["site"].map(pos).to_numpy()[has].astype(np.int64)
    tt = t[recent][has]
    vis, wx = vis[has], wx[has]
    order = np.lexsort((tt, sidx))
    sidx, vis, wx = sidx[order], vis[order], wx[order]
    last = np.r_[sidx[1:] != sidx[:-1], True]
    sidx, vis, wx = sidx[last], vis[last], wx[last]
    tokens = [set(w.replace("+", " ").replace("-", " ").split()) for w in wx]
    has_fg = np.array([any(tok.endswith("FG") for tok in toks) for toks in tokens])
    has_fz = np.array(["FZFG" in toks for toks in tokens])
    has_br = np.array(["BR" in toks for toks in tokens])
    with np.errstate(invalid="ignore"):
        fog_now = has_fg | (vis < 1000)
        mist_now = ~fog_now & (has_br | ((vis >= 1000) & (vis < 5000) & (rh_pct[sidx] >= 95)))
        fz_now = has_fz | (fog_now & (temp_c[sidx] < 0))
    fog[sidx] = fog_now
    mist[sidx] = mist_now
    fzfg[sidx] = fz_now
    return fog, mist, fzfg


def feature_rows(table: FeatureTable) -> list[dict[str, Any]]:
    """One plain dict per site (for JSON output)."""
    return [table.row(i) for i in range(len(table.site_ids))]
