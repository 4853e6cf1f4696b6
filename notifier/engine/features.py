"""Observations → one row of forecaster's features per site at an evaluation time.

Everything is computed for all sites at once, with no Python loop over sites: the
recent observations are laid out as a sites × times block (``notifier.engine.block``,
reading the table with ``notifier.engine.readings``), and every feature is a masked
reduction over that block, in families (``notifier.engine.families``: what the
readings say now; ``notifier.engine.projection``: the night ahead). What the features
are, how they are shown and how exposure shapes them is ``notifier.engine.catalog``.

How it stays fast (10,000 sites × 144 rows in a few tenths of a second): the block is
built once per call — once for several evaluation times with ``compute_features_at``,
and for a history's many times as one block with a row per site and time
(``notifier.engine.steps``, which replay and ``fogwatch learn`` reach) —
as an index from cells to rows, with value blocks gathered only where they are needed.
Each evaluation time's windows (the last 3 h, tonight since sunset, around midday, …)
are found per site by a binary search over the time-sorted rows, and each reduction runs
on the narrowest column slice that holds them. The answers are those of the plain
masked reductions over the whole block, bit for bit (``tests/engine/test_fast_path.py``
checks the vectorised path against the site-by-site one).

What is worth keeping between calls (the sites as arrays, the sun of recent evaluation
times) is kept in a :class:`FeatureCache` that the caller owns and passes in: the
service keeps one for as long as it runs, a replay for its run.

A feature that cannot be computed from the data present is NaN ("unknown"); rules that
need it do not fire and ``explain`` says so. The one exception is ``data_age_min``,
which is +inf for a site that has never reported: no data is the loudest kind of stale.

>>> from datetime import UTC, datetime
>>> import pandas as pd
>>> from notifier.core.config import Site
>>> site = Site(id="a", name="A", lat=52.0, lon=0.0, timezone="UTC")
>>> table = compute_features(pd.DataFrame(), [site], datetime(2026, 11, 20, 3, tzinfo=UTC))
>>> float(table["data_age_min"][0]), float(table["is_night"][0])
(inf, 1.0)
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING

import numpy as np

from notifier import physics
from notifier.engine import cloud_rain, families, projection
from notifier.engine.block import FORECAST_BEFORE_S, Block, SiteArrays
from notifier.engine.catalog import FEATURES, FeatureSettings, FeatureTable

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.core.config import Site

__all__ = ["FeatureCache", "compute_features", "compute_features_at"]

_SITE_LISTS = 4  # site lists remembered; a service passes the same one every cycle
_SUN_CACHE_SIZE = 16  # evaluation times; the hold windows of a few cycles
# an evaluation time's sun, for the earlier times of the same call: (t, sunset, sunrise,
# night)
_Sun = tuple[float, np.ndarray, np.ndarray, np.ndarray]


class FeatureCache:
    """What the feature code remembers between calls, for a caller that owns it.

    It holds the sites as arrays for the last few site lists, and the sun of the last few
    evaluation times. A fresh one (what ``cache=None`` uses) gives the same features,
    only more slowly — bar the last bits of sunrise and sunset times, which a sun carried
    from an earlier time can differ in (see :func:`_carried`). A lock guards it, so it
    may be shared between threads.

    >>> cache = FeatureCache()
    >>> cache.site_arrays([]) is cache.site_arrays([])
    True
    """

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._sites: OrderedDict[tuple[int, ...], tuple[Sequence[Site], SiteArrays]] = OrderedDict()
        self._sun: OrderedDict[tuple[float, bytes, bytes], tuple[np.ndarray, ...]] = OrderedDict()

    def site_arrays(self, sites: Sequence[Site]) -> SiteArrays:
        """``SiteArrays.of(sites)``, remembered for the last few site lists (a service
        passes the same configured sites every cycle; reading 10,000 of them costs
        milliseconds). Keyed by the objects' identities: the entry holds the objects, so
        no id is reused while it lives, and a ``Site`` is frozen, so its arrays stay
        true. Nothing changes them."""
        key = tuple(map(id, sites))
        with self._lock:
            hit = self._sites.get(key)
            if hit is not None:
                self._sites.move_to_end(key)
                return hit[1]
        st = SiteArrays.of(sites)
        with self._lock:
            self._sites[key] = (list(sites), st)
            while len(self._sites) > _SITE_LISTS:
                self._sites.popitem(last=False)
        return st

    def night_bounds(
        self, st: SiteArrays, t_at: float
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``physics.night_bounds_utc`` for every site at ``t_at``, remembered.

        It is a pure function of the coordinates and the time, and the hold windows of
        one cycle (10 and 20 minutes back) are the evaluation times of the cycles before,
        so the few most recent answers are kept. A new time starts from the latest answer
        before it (the cycle before): only the sites whose sun has set or risen since are
        worked out again. Copies go out: callers may change theirs.
        """
        key = (t_at, st.lat.tobytes(), st.lon.tobytes())
        earlier = None
        with self._lock:
            hit = self._sun.get(key)
            if hit is not None:
                self._sun.move_to_end(key)
            else:
                before = [k for k in self._sun if k[0] < t_at and k[1:] == key[1:]]
                if before:
                    earlier = (max(before)[0], self._sun[max(before)])
        if hit is None:
            if earlier is not None:
                t_known, answer = earlier
                hit = _carried(st, t_at, t_known, *(a.copy() for a in answer))
            else:
                n = len(st.ids)
                hit = tuple(
                    np.asarray(a)
                    for a in physics.night_bounds_utc(st.lat, st.lon, np.full(n, t_at))
                )
            with self._lock:
                self._sun[key] = hit
                while len(self._sun) > _SUN_CACHE_SIZE:
                    self._sun.popitem(last=False)
        sunset, sunrise, night = (a.copy() for a in hit)
        return sunset, sunrise, night


# ---- the public entry points -------------------------------------------------------------


def compute_features(
    obs: pd.DataFrame,
    sites: Sequence[Site],
    at: datetime,
    settings: FeatureSettings | None = None,
    *,
    cache: FeatureCache | None = None,
) -> FeatureTable:
    """Compute every feature in ``FEATURES`` for ``sites`` at time ``at`` (tz-aware).

    ``obs`` is the canonical observation table (see ``notifier.core.observations``) holding
    observed rows up to ``at`` and any forecast rows; later observed rows are ignored.
    ``cache`` is what a caller computing features again and again keeps between calls
    (see :class:`FeatureCache`); without one, nothing is kept.
    """
    return compute_features_at(obs, sites, [at], settings, cache=cache)[0]


def compute_features_at(
    obs: pd.DataFrame,
    sites: Sequence[Site],
    times: Sequence[datetime],
    settings: FeatureSettings | None = None,
    *,
    cache: FeatureCache | None = None,
) -> list[FeatureTable]:
    """:func:`compute_features` at each of ``times`` (tz-aware), sharing the work.

    The observation block is built once for all the times (the hold windows of the
    rules look 10, 20 … minutes back), so each extra time costs only the per-time
    reductions; at night an earlier time also reuses the later time's sunset and
    sunrise. ``result[k]`` equals ``compute_features(obs, sites, times[k])`` but for
    rounding in the last bits (the shared block can be a column or two wider, which
    reorders a least-squares sum; tested to 1e-9). For more than a few times (a
    replay's or ``fogwatch learn``'s batch of steps) ``notifier.engine.steps.features_at``
    takes one pass over a block with a row per site and time instead.
    """
    settings = settings or FeatureSettings()
    cache = cache if cache is not None else FeatureCache()
    st = cache.site_arrays(sites)
    if not times:
        return []
    t_ats = [t.timestamp() for t in times]
    if obs is None:
        obs = _empty_obs()
    block = Block(
        obs,
        st,
        t_first=min(t - settings.block_hours * 3600 for t in t_ats),
        t_last=max(t_ats),
        t_weather=min(t - settings.current_max_age_h * 3600 for t in t_ats),
        t_forecast=min(t_ats) - FORECAST_BEFORE_S,
    )
    night: _Sun | None = None
    out = []
    # latest first: an earlier time in the same night can reuse its sun (see _sun)
    for k in sorted(range(len(times)), key=lambda k: -t_ats[k]):
        table, night = _features_at(block, st, times[k], settings, cache, night)
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


# ---- the sun ------------------------------------------------------------------------------


def _carried(
    st: SiteArrays,
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
    cache: FeatureCache, st: SiteArrays, t_at: float, later: _Sun | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``physics.night_bounds_utc`` for every site at ``t_at``; ``later`` is the result
    for a later time of the same call, which most sites can keep (see :func:`_carried`)."""
    if later is None:
        return cache.night_bounds(st, t_at)
    t_later, sunset, sunrise, night = later
    return _carried(st, t_at, t_later, sunset.copy(), sunrise.copy(), night.copy())


# ---- one evaluation time --------------------------------------------------------------------


def _features_at(
    blk: Block,
    st: SiteArrays,
    at: datetime,
    settings: FeatureSettings,
    cache: FeatureCache,
    later_sun: _Sun | None,
) -> tuple[FeatureTable, _Sun]:
    t_at = at.timestamp()
    last_sunset, next_sunrise, night = _sun(cache, st, t_at, later_sun)
    found = feature_values(blk, st, t_at, (last_sunset, next_sunrise, night), settings, at)
    return found.table(at, st.ids), (t_at, last_sunset, next_sunrise, night)


@dataclass
class Found:
    """Every feature of every block row, and what the feature table carries beside them."""

    values: dict[str, np.ndarray]  # in the order of FEATURES
    projection_method: np.ndarray
    last_time: np.ndarray
    fit_t0_c: np.ndarray
    fit_k_per_sqrt_h: np.ndarray
    last_sunset: np.ndarray
    drivers: np.ndarray | None

    def table(self, at: datetime, site_ids: list[str], rows: slice = slice(None)) -> FeatureTable:
        """The feature table at ``at`` of the block rows ``rows`` (all by default)."""
        return FeatureTable(
            at=at,
            site_ids=site_ids,
            values={name: arr[rows] for name, arr in self.values.items()},
            projection_method=self.projection_method[rows],
            last_time=self.last_time[rows],
            fit_t0_c=self.fit_t0_c[rows],
            fit_k_per_sqrt_h=self.fit_k_per_sqrt_h[rows],
            last_sunset=self.last_sunset[rows],
            drivers=None if self.drivers is None else self.drivers[rows],
        )


def feature_values(
    blk: Block,
    st: SiteArrays,
    t_at: float | np.ndarray,
    sun_now: tuple[np.ndarray, np.ndarray, np.ndarray],
    settings: FeatureSettings,
    at: datetime | Sequence[datetime],
    offsets_s: np.ndarray | None = None,
) -> Found:
    """Every feature of every row of ``blk`` (a site at ``at``, or, in a history's block,
    a site at one of several times: ``t_at``, ``at`` and ``offsets_s`` then give each
    row's own time and UTC offset, ``st`` each row's site); ``sun_now`` is each row's
    (last sunset, next sunrise, night) from ``physics.night_bounds_utc``."""
    last_sunset, next_sunrise, night = sun_now
    w = families.observed_window(blk, t_at, settings)
    now = families.current_values(w)
    moist = families.moisture(w, now, settings)
    sun = projection.night_windows(w, st, _one(at), last_sunset, next_sunrise, night, offsets_s)
    net_lw, cooling_potential = families.radiation(now, st, settings)
    crossover = projection.crossover(w, sun)
    proj = projection.projected_minimum(w, sun, now, cooling_potential, st, settings, crossover)
    cur = now.values
    water = families.surfaces_and_water(now, st, _months(t_at, len(st.ids)))
    found = {
        "temp_c": now.temp_c,
        "dewpoint_c": now.dewpoint_c,
        **moist,
        "hours_to_crossing": proj.hours_to_crossing,
        "hours_to_fog": projection.hours_to_fog(proj, sun, moist["hours_to_saturation"], settings),
        "projected_min_temp_c": proj.proj,
        "min_margin_c": proj.min_margin,
        "crossover_temp_c": crossover,
        "min_minus_crossover_c": proj.proj - crossover,
        "cloud_pct": cur["cloud_pct"],
        "wind_ms": cur["wind_ms"],
        "net_longwave_wm2": net_lw,
        "cooling_potential": cooling_potential,
        "is_night": sun.is_night,
        "hours_to_sunrise": sun.hours_to_sunrise,
        "hours_since_sunset": sun.hours_since_sunset,
        "surface_temp_c": cur["surface_temp_c"],
        "water_temp_c": cur["water_temp_c"],  # with the climatology, if any
        "visibility_m": cur["visibility_m"],
        **cloud_rain.cloud_and_rain(w, now, settings),
        **water,
        **families.observed_weather(w, now, moist["rh_pct"]),
        "data_age_min": projection.data_age_min(w),
    }
    # fog seen now is fog now: its time to fog is 0, whatever the projection says
    found["hours_to_fog"] = np.where(found["observed_fog"] == 1.0, 0.0, found["hours_to_fog"])
    found["fog_probability"] = (
        settings.model.probability(found, st.ids, at)
        if settings.model is not None
        else np.full(len(st.ids), np.nan)
    )
    # known even for a site that never reported (its age is +inf): silence is stale
    found["data_stale"] = found["data_age_min"] > settings.stale_after_min
    # in the order of FEATURES (what a row and the JSON output list them in)
    values = {name: np.asarray(found[name], dtype=float) for name in FEATURES}
    return Found(
        values=values,
        projection_method=proj.method,
        last_time=t_at + w.last_any * 3600.0,
        fit_t0_c=proj.fit_t0,
        fit_k_per_sqrt_h=proj.fit_k,
        last_sunset=last_sunset,
        drivers=_drivers(settings, values, st.ids, at),
    )


def _months(t_at: float | np.ndarray, n: int) -> np.ndarray:
    """Each row's calendar month (1–12, UTC) from its evaluation time in epoch seconds."""
    seconds = np.broadcast_to(np.asarray(t_at, dtype=float), (n,)).astype("int64")
    return seconds.astype("datetime64[s]").astype("datetime64[M]").astype(int) % 12 + 1


def _one(at: datetime | Sequence[datetime]) -> datetime:
    """A time for what takes one (a history's rows give their offsets themselves)."""
    return at if isinstance(at, datetime) else at[0]


def _drivers(
    settings: FeatureSettings,
    values: dict[str, np.ndarray],
    ids: list[str],
    at: datetime | Sequence[datetime],
) -> np.ndarray | None:
    """In words, what moved each site's chance most, where the chance is worth telling
    (a twentieth or more, below the lowest rule on it): the words the model's rules show.
    ``at`` is one time, or one per row."""
    model = settings.model
    if model is None:
        return None
    out = np.full(len(ids), "", dtype=object)
    with np.errstate(invalid="ignore"):
        shown = np.flatnonzero(values["fog_probability"] >= 0.05)
    for i in shown.tolist():
        row = {name: float(arr[i]) for name, arr in values.items()}
        pushes = model.drivers(row, ids[i], at if isinstance(at, datetime) else at[i])
        out[i] = "; ".join(
            f"{label} {'towards' if push > 0 else 'against'} fog" for label, push in pushes
        )
    return out
