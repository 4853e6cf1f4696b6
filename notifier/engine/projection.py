"""Feature families, part two: the night ahead.

The sun sets the windows (tonight since sunset, around local midday, the afternoon);
in them the night's minimum is projected — from forecast rows, else Brunt's square-root
law fitted to tonight's own readings, else Craddock & Pritchard (1951) from the
readings nearest midday — beside the crossover temperature and the time to fog. Every
step works on all sites at once, on the narrowest column slice that holds its window.

>>> import numpy as np
>>> _min_per_site(np.array([0, 0, 1]), np.array([4.0, 2.0, 7.0]), np.array([1.0, 0.5, 3.0]), 3)
(array([ 2.,  7., nan]), array([0.5, 3. , nan]))
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

import numpy as np

from notifier import physics
from notifier.engine.block import SiteArrays, column_span, in_range
from notifier.engine.catalog import FeatureSettings
from notifier.engine.families import SUBSET_SHARE, Current, Window, radiation

__all__ = [
    "Night",
    "Projection",
    "crossover",
    "data_age_min",
    "hours_to_fog",
    "night_windows",
    "projected_minimum",
]


@dataclass(frozen=True)
class Night:
    """Each site's sun at an evaluation time, and the windows it sets (columns)."""

    night: np.ndarray  # bool
    last_sunset: np.ndarray  # POSIX seconds
    next_sunrise: np.ndarray
    is_night: np.ndarray  # 1.0 / 0.0, NaN where the sun is unknown
    hours_to_sunrise: np.ndarray
    hours_since_sunset: np.ndarray  # NaN by day
    sunset_h: np.ndarray  # relative to at; negative at night
    noon_h: np.ndarray  # local midday of the day the coming or current night began
    since_lo: np.ndarray  # tonight's readings: columns since_lo:hi
    noon_lo: np.ndarray  # within 1.5 h of midday: noon_lo:noon_hi
    noon_hi: np.ndarray
    aft_start: np.ndarray  # the afternoon (midday + 6 h): aft_start:aft_stop
    aft_stop: np.ndarray


def night_windows(
    w: Window,
    st: SiteArrays,
    at: datetime,
    last_sunset: np.ndarray,
    next_sunrise: np.ndarray,
    night: np.ndarray,
    offsets_s: np.ndarray | None = None,
) -> Night:
    """Sun and night timing, and tonight's, midday's and the afternoon's columns.

    ``offsets_s`` is each row's UTC offset at its evaluation time where the rows are not
    all at ``at`` (a history's rows, one per site and time); by default, the sites'
    offsets at ``at``."""
    t_at = w.t_at
    is_night = np.where(np.isnan(next_sunrise), np.nan, night.astype(float))
    hours_to_sunrise = (next_sunrise - t_at) / 3600.0
    hours_since_sunset = np.where(night, (t_at - last_sunset) / 3600.0, np.nan)
    sunset_h = (last_sunset - t_at) / 3600.0  # relative to at; negative at night
    # local midday of the day the coming or current night began (for Craddock–Pritchard
    # and the crossover temperature)
    offsets = st.zone_offsets_s(at) if offsets_s is None else offsets_s
    ref = np.where(np.isnan(last_sunset), t_at, np.where(night, last_sunset, t_at))
    local_midnight = np.floor((ref + offsets) / 86400.0) * 86400.0 - offsets
    noon_h = (local_midnight + 12 * 3600 - t_at) / 3600.0
    aft_lo = noon_h
    aft_hi = noon_h + 6.0
    since_lo, noon_lo, noon_hi, aft_start, aft_stop = w.blk.bounds(
        t_at,
        [
            ("h", 0.0, ">=", sunset_h),
            ("h", noon_h, ">=", -1.5),
            ("h", noon_h, ">", 1.5),
            ("h", 0.0, ">=", aft_lo),
            ("h", 0.0, ">=", aft_hi),
        ],
    )
    since_lo = np.where(night, np.maximum(w.lo, since_lo), w.hi)
    return Night(
        night=night,
        last_sunset=last_sunset,
        next_sunrise=next_sunrise,
        is_night=is_night,
        hours_to_sunrise=hours_to_sunrise,
        hours_since_sunset=hours_since_sunset,
        sunset_h=sunset_h,
        noon_h=noon_h,
        since_lo=since_lo,
        noon_lo=noon_lo,
        noon_hi=noon_hi,
        aft_start=aft_start,
        aft_stop=aft_stop,
    )


@dataclass
class Projection:
    """The projected minimum, built in steps: each step fills only the sites the steps
    before it left unknown (``proj`` NaN) and says how (``method``)."""

    method: np.ndarray  # str per site: forecast | cooling-fit | midday-estimate
    proj: np.ndarray
    proj_dew: np.ndarray  # the dew point the minimum is compared with
    hours_to_crossing: np.ndarray
    fit_t0: np.ndarray  # tonight's square-root cooling fit (NaN where none)
    fit_k: np.ndarray
    fit_points: np.ndarray | None = None  # readings behind a trusted fit (0: none)

    @property
    def min_margin(self) -> np.ndarray:
        with np.errstate(invalid="ignore"):
            return self.proj - self.proj_dew


def projected_minimum(
    w: Window,
    sun: Night,
    now: Current,
    cooling_potential: np.ndarray,
    st: SiteArrays,
    settings: FeatureSettings,
    crossover_c: np.ndarray | None = None,
) -> Projection:
    """The night's minimum: forecast, else the cooling fit, else the midday estimate.
    ``crossover_c`` is :func:`crossover` where the caller has it already (it is a
    feature of its own, and over a history's block a pass over every cell)."""
    n = w.blk.n
    p = Projection(
        method=np.full(n, "", dtype=object),
        proj=np.full(n, np.nan),
        proj_dew=now.dewpoint_c.copy(),
        hours_to_crossing=np.full(n, np.nan),
        fit_t0=np.full(n, np.nan),
        fit_k=np.full(n, np.nan),
    )
    _from_forecast(p, w, sun, cooling_potential, st.min_offset)
    crossover_c = crossover(w, sun) if crossover_c is None else crossover_c
    _from_cooling_fit(p, w, sun, now, st, settings, crossover_c)
    _from_midday(p, w, sun, now, cooling_potential, st.min_offset)
    return p


def _from_forecast(
    p: Projection, w: Window, sun: Night, cooling_potential: np.ndarray, min_offset: np.ndarray
) -> None:
    """(1) forecast rows for the coming or current night"""
    fsidx, ft, fcols = w.blk.forecast
    if not fsidx.size:
        return
    horizon = sun.next_sunrise[fsidx] + 3600.0
    inwin = (ft >= w.t_at_of(fsidx)) & (ft <= horizon) & ~np.isnan(fcols["temp_c"])
    fmin, fdew = _min_per_site(
        fsidx[inwin], fcols["temp_c"][inwin], fcols["dewpoint_c"][inwin], w.blk.n
    )
    has_fc = ~np.isnan(fmin)
    with np.errstate(invalid="ignore"):
        shifted = fmin + min_offset * np.nan_to_num(cooling_potential)
    p.proj = np.where(has_fc, shifted, p.proj)
    p.proj_dew = np.where(has_fc & ~np.isnan(fdew), fdew, p.proj_dew)
    p.method[has_fc] = "forecast"


def _from_cooling_fit(
    p: Projection,
    w: Window,
    sun: Night,
    now: Current,
    st: SiteArrays,
    settings: FeatureSettings,
    crossover_c: np.ndarray,
) -> None:
    """(2) Brunt's square-root law fitted to tonight's own readings, where they can be
    trusted: past the evening transition, with ``fit_min_points`` readings over
    ``fit_min_span_h`` hours. Two or three points right after sunset, when the air cools
    fastest and the surface layer is still settling, fit almost any curve: projected to
    sunrise they gave most of the false alarms on a real station year. The fitted k is
    capped by Brunt's own coefficient for the night's net long-wave loss (the air cannot
    cool faster than the ground under it), and the curve is run to the crossover
    temperature where it is known (dew deposition stalls cooling near the afternoon's
    lowest dew point; docs/references.md [Crossover method]), else the dew point."""
    blk, n = w.blk, w.blk.n
    temp_c, dewpoint_c = now.temp_c, now.dewpoint_c
    a, b = column_span(sun.since_lo, w.hi)
    if b - a < 3:
        return
    # Only the rows with readings since sunset are read (by day there are none; in a
    # history's block that is most rows): every other row's x and y are all NaN, so
    # its points are 0 and its span -inf, written as such.
    tonight = np.flatnonzero(sun.since_lo < w.hi)
    tc_tail = blk.block("temp_c", a, b)[tonight]
    m_tail = in_range(a, b, sun.since_lo[tonight], w.hi[tonight]) & ~np.isnan(tc_tail)
    x_tonight = np.where(m_tail, w.hours[tonight, a:b] - sun.sunset_h[tonight, None], np.nan)
    y_tonight = np.where(m_tail, tc_tail, np.nan)
    # per row again: a site with a forecast minimum or too few points needs no fit
    t0 = np.full(n, np.nan)
    k = np.full(n, np.nan)
    points = np.zeros(n, dtype=np.intp)
    points[tonight] = m_tail.sum(axis=1)
    with np.errstate(invalid="ignore"):
        past_transition = sun.hours_since_sunset >= settings.evening_transition_h
    need = np.isnan(p.proj) & (points >= settings.fit_min_points) & past_transition
    if need.any() and need.mean() < SUBSET_SHARE:
        picked = need[tonight]  # every row that needs a fit has readings tonight
        t0[need], k[need] = physics.fit_sqrt_cooling(x_tonight[picked], y_tonight[picked])
    elif need.any():
        # the fit over every row, as wide as every row's, NaN where no readings: its
        # sums then run as they always have, so the numbers are the same to the bit
        x, y = np.full((n, b - a), np.nan), np.full((n, b - a), np.nan)
        x[tonight], y[tonight] = x_tonight, y_tonight
        t0[:], k[:] = physics.fit_sqrt_cooling(x, y)
    fit_span = np.full(n, -np.inf)
    fit_span[tonight] = np.nanmax(x_tonight, axis=1, initial=-np.inf) - np.nanmin(
        x_tonight, axis=1, initial=np.inf
    )
    fit_ok = need & ~np.isnan(k) & (fit_span >= settings.fit_min_span_h)
    p.fit_points = np.where(fit_ok, points, 0)
    night_len = (sun.next_sunrise - sun.last_sunset) / 3600.0
    # Brunt's coefficient for tonight's net loss (docs/references.md [Oke 1987],
    # [Brunt k check]). Where no cloud is reported the clear-sky loss, the largest there
    # can be, still bounds the cooling; an unknown loss leaves the fit uncapped.
    cloud = now.values["cloud_pct"]
    clear_if_unknown = Current(
        {**now.values, "cloud_pct": np.where(np.isnan(cloud), 0.0, cloud)},
        now.temp_c,
        now.dewpoint_c,
    )
    net_lw, _ = radiation(clear_if_unknown, st, settings)
    k_cap = physics.brunt_cooling_coefficient_k_per_sqrt_h(
        np.maximum(net_lw, 0.0), settings.cap_thermal_admittance
    )
    with np.errstate(invalid="ignore"):
        capped = k > k_cap
        # a capped curve runs from the temperature now at Brunt's rate
        t0 = np.where(capped, temp_c + k_cap * np.sqrt(sun.hours_since_sunset), t0)
        k = np.where(capped, k_cap, k)
        target = np.where(np.isnan(crossover_c), dewpoint_c, np.fmin(crossover_c, dewpoint_c))
        at_sunrise = physics.project_sqrt_cooling_c(t0, np.maximum(k, 0.0), night_len)
        fitted = np.fmin(at_sunrise, temp_c)
        cross_h = np.where(
            (k > 0) & (temp_c > target),
            ((t0 - target) / np.where(k > 0, k, np.nan)) ** 2,
            np.nan,
        )
        cross_from_now = cross_h - sun.hours_since_sunset
        cross_ok = fit_ok & (cross_from_now >= 0) & (cross_h <= night_len)
    p.proj = np.where(fit_ok, fitted, p.proj)
    p.method[fit_ok] = "cooling-fit"
    p.fit_t0 = np.where(fit_ok, t0, np.nan)
    p.fit_k = np.where(fit_ok, k, np.nan)
    p.hours_to_crossing = np.where(cross_ok, cross_from_now, np.nan)


def _from_midday(
    p: Projection,
    w: Window,
    sun: Night,
    now: Current,
    cooling_potential: np.ndarray,
    min_offset: np.ndarray,
) -> None:
    """(3) Craddock & Pritchard (1951) from the readings nearest local midday"""
    blk, n, rows = w.blk, w.blk.n, w.blk.rows
    noon_lo = np.maximum(w.lo, sun.noon_lo)
    noon_hi = np.minimum(w.hi, sun.noon_hi)
    a, b = column_span(noon_lo, noon_hi)
    t12 = np.full(n, np.nan)
    td12 = np.full(n, np.nan)
    runs = blk.runs(("temp_c", "dewpoint_c"), noon_lo, noon_hi) if b > a else None
    if runs is not None:
        # a history's rows: each row's own midday cells, in their order (so the first
        # nearest is the same cell), not the span of every row's
        t_cells, (temp_band, dew_band), inside = runs
        h_band = _hours(t_cells, w.t_at)
        near_noon = inside & ~np.isnan(temp_band) & ~np.isnan(dew_band)
    elif b > a:
        h_band = w.hours[:, a:b]
        temp_band = blk.block("temp_c", a, b)
        dew_band = blk.block("dewpoint_c", a, b)
        near_noon = in_range(a, b, noon_lo, noon_hi) & ~np.isnan(temp_band) & ~np.isnan(dew_band)
    if b > a:
        dist = np.where(near_noon, np.abs(h_band - sun.noon_h[:, None]), np.inf)
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
        cp_min = np.fmin(cp_min, np.where(sun.night, now.temp_c, np.nan))
    use_cp = np.isnan(p.proj) & ~np.isnan(cp_min)
    p.proj = np.where(use_cp, cp_min, p.proj)
    p.method[use_cp] = "midday-estimate"


def crossover(w: Window, sun: Night) -> np.ndarray:
    """The crossover temperature: the afternoon's lowest dew point (NaN if none)."""
    aft_start = np.maximum(w.lo, sun.aft_start)
    aft_stop = np.minimum(w.hi, sun.aft_stop)
    a, b = column_span(aft_start, aft_stop)
    out = np.full(w.blk.n, np.nan)
    if b > a:
        dew_band = w.blk.block("dewpoint_c", a, b)
        aft = in_range(a, b, aft_start, aft_stop) & ~np.isnan(dew_band)
        lowest = np.where(aft, dew_band, np.inf).min(axis=1)
        # none in the window (or an infinite reading) is unknown. (Over a history's rows
        # this is not read as each row's own run, as the midday is: the minimum of a
        # 0.0 and a -0.0 depends on where they fall in the SIMD lanes, and the feature
        # must stay bit for bit.)
        out = np.where(np.isinf(lowest), np.nan, lowest)
    return out


def hours_to_fog(
    p: Projection, sun: Night, hours_to_saturation: np.ndarray, settings: FeatureSettings
) -> np.ndarray:
    """The sooner of saturation and crossing, as far as each can be trusted now."""
    with np.errstate(invalid="ignore"):
        # Once tonight's cooling curve is fitted it says when the air meets the dew point
        # (NaN: not before sunrise); a straight-line trend over the first hours after
        # sunset would overshoot, as cooling is fastest then (Brunt's law), so the trend
        # is used only before sunset or once the evening transition is over.
        has_fit = ~np.isnan(p.fit_k)
        transition = sun.night & (sun.hours_since_sunset < settings.evening_transition_h)
        out = np.where(
            has_fit, p.hours_to_crossing, np.where(transition, np.nan, hours_to_saturation)
        )
        # a closed depression is saturation now, whatever the curve says
        return np.where(hours_to_saturation == 0.0, 0.0, out)


def data_age_min(w: Window) -> np.ndarray:
    """Minutes since the newest reading; +inf for a site that has never reported."""
    with np.errstate(invalid="ignore"):
        return np.where(np.isnan(w.last_any), np.inf, 0.0 - w.last_any * 60.0)


def _hours(t: np.ndarray, t_at: float | np.ndarray) -> np.ndarray:
    """Cells' hours from their rows' evaluation times, as ``families.CellHours`` works
    them out."""
    at = t_at[:, None] if isinstance(t_at, np.ndarray) else t_at
    return (t - at) / 3600.0


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
