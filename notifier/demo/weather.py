"""Invented station data for the demo and for scenario tests.

A deliberately simple night: the afternoon warms to a maximum and cools to sunset;
after sunset the air follows Brunt's square-root law; once it reaches the dew point
the dew point is dragged down with it (condensation), cooling slows, and visibility
falls as fog thickens. After sunrise the air warms and the fog lifts. Nothing here is
real data: sites, places and numbers are made up to show how fogwatch behaves.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from datetime import date, datetime, time, timedelta
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

import numpy as np

from notifier import physics

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["NightSpec", "simulate_night"]


@dataclass(frozen=True)
class NightSpec:
    site: str
    evening: date  # local date of the evening
    timezone: str
    lat: float
    lon: float
    day_max_c: float = 13.0
    sunset_temp_c: float = 9.0
    dewpoint_c: float = 6.0
    dewpoint_drift_c_per_h: float = -0.05
    cooling_k_per_sqrt_h: float = 1.6
    cloud_pct: float = 10.0
    wind_ms: float = 1.2
    wind_dir_deg: float = 240.0
    water_temp_c: float | None = None
    surface_offset_c: float | None = None  # surface colder than air at night by this
    start_local: time = time(12, 0)
    end_local: time = time(9, 0)
    step_min: int = 10
    stop_after_local: datetime | None = None  # the feed stops here (a data gap)
    lift_local: time | None = None  # a breeze mixes the fog out from this local time
    lift_warming_c_per_h: float = 0.4
    changes: tuple[tuple[time, dict[str, float]], ...] = field(default_factory=tuple)

    def with_(self, **kw: object) -> NightSpec:
        return replace(self, **kw)  # type: ignore[arg-type]


def simulate_night(spec: NightSpec) -> pd.DataFrame:
    """Rows in the canonical observation table for one invented night."""
    import pandas as pd

    zone = ZoneInfo(spec.timezone)
    start = datetime.combine(spec.evening, spec.start_local, zone)
    end = datetime.combine(spec.evening + timedelta(days=1), spec.end_local, zone)
    n = int((end - start).total_seconds() // (spec.step_min * 60)) + 1
    t = start.timestamp() + np.arange(n) * spec.step_min * 60.0
    sunrise_today, sunset_s = physics.sunrise_sunset_utc(spec.lat, spec.lon, spec.evening)
    sunrise_s, _ = physics.sunrise_sunset_utc(spec.lat, spec.lon, spec.evening + timedelta(days=1))
    sunset, sunrise = float(sunset_s), float(sunrise_s)

    cloud, wind, k, wind_dir, dew_step = _scheduled(spec, t, zone)
    lift = np.inf
    if spec.lift_local is not None:
        day = spec.evening + timedelta(days=spec.lift_local < spec.start_local)
        lift = datetime.combine(day, spec.lift_local, zone).timestamp()

    temp = _air_temperature(spec, t, k, sunset, sunrise, lift)
    dew = spec.dewpoint_c + spec.dewpoint_drift_c_per_h * (t - t[0]) / 3600.0 + dew_step
    saturated_since = _condense(t, temp, dew, sunrise, lift)
    dew = np.minimum(dew, temp)
    vis = _visibility(t, temp, dew, saturated_since, sunrise, lift)
    weather = np.where(vis < 1000, np.where(temp < 0, "FZFG", "FG"), np.where(vis < 5000, "BR", ""))

    frame = pd.DataFrame(
        {
            "site": spec.site,
            "time": pd.to_datetime(t, unit="s", utc=True),
            "kind": "obs",
            "temp_c": np.round(temp, 2),
            "dewpoint_c": np.round(dew, 2),
            "rh_pct": np.round(physics.relative_humidity_pct(temp, dew), 1),
            "wind_ms": wind,
            "wind_dir_deg": wind_dir,
            "cloud_pct": cloud,
            "surface_temp_c": np.nan
            if spec.surface_offset_c is None
            else np.round(temp - spec.surface_offset_c * (t > sunset - 3600), 2),
            "water_temp_c": np.nan if spec.water_temp_c is None else spec.water_temp_c,
            "visibility_m": np.round(vis, 0),
            "pressure_hpa": 1021.0,
            "weather": weather,
            "source": "demo",
        }
    )
    if spec.stop_after_local is not None:
        frame = frame[frame["time"] <= pd.Timestamp(spec.stop_after_local)]
    return frame.reset_index(drop=True)


def _scheduled(
    spec: NightSpec, t: np.ndarray, zone: ZoneInfo
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Cloud, wind, cooling rate, wind direction and dew-point shift at each step.

    Each starts at the spec's value and takes the values of ``spec.changes`` from their
    local times on.
    """
    n = len(t)
    cloud = np.full(n, spec.cloud_pct)
    wind = np.full(n, spec.wind_ms)
    k = np.full(n, spec.cooling_k_per_sqrt_h)
    wind_dir = np.full(n, spec.wind_dir_deg)
    dew_step = np.zeros(n)
    for when, values in spec.changes:
        at = datetime.combine(spec.evening + timedelta(days=when < spec.start_local), when, zone)
        after = t >= at.timestamp()
        if "cloud_pct" in values:
            cloud[after] = values["cloud_pct"]
        if "wind_ms" in values:
            wind[after] = values["wind_ms"]
        if "cooling_k_per_sqrt_h" in values:
            k[after] = values["cooling_k_per_sqrt_h"]
        if "wind_dir_deg" in values:
            wind_dir[after] = values["wind_dir_deg"]
        if "dewpoint_shift_c" in values:  # moister (or drier) air arriving over 90 min
            ramp = np.clip((t - at.timestamp()) / 5400.0, 0.0, 1.0)
            dew_step = dew_step + ramp * values["dewpoint_shift_c"]
    return cloud, wind, k, wind_dir, dew_step


def _air_temperature(
    spec: NightSpec, t: np.ndarray, k: np.ndarray, sunset: float, sunrise: float, lift: float
) -> np.ndarray:
    """The air temperature before condensation: afternoon, Brunt cooling, morning."""
    n = len(t)
    temp = np.empty(n)
    t_max = t[0] + 2.5 * 3600
    h_after = np.maximum(t - sunset, 0.0) / 3600.0
    for i in range(n):
        if t[i] <= t_max:
            frac = (t[i] - t[0]) / (t_max - t[0])
            temp[i] = spec.day_max_c - 1.5 * (1 - frac)
        elif t[i] <= sunset:
            frac = (t[i] - t_max) / (sunset - t_max)
            temp[i] = spec.day_max_c + (spec.sunset_temp_c - spec.day_max_c) * frac
        elif t[i] > lift:
            # milder air mixed down from aloft
            temp[i] = temp[i - 1] + spec.lift_warming_c_per_h * spec.step_min / 60.0
        elif t[i] <= sunrise:
            step = k[i] * (np.sqrt(h_after[i]) - np.sqrt(max(h_after[i - 1], 0.0)))
            temp[i] = temp[i - 1] - step
        else:
            temp[i] = temp[i - 1] + 1.8 * spec.step_min / 60.0
    return temp


def _condense(
    t: np.ndarray, temp: np.ndarray, dew: np.ndarray, sunrise: float, lift: float
) -> np.ndarray:
    """Saturate the air in place (``temp`` and ``dew``); return when each fog spell began."""
    # condensation: the dew point cannot exceed the air; near saturation the air cools
    # more slowly (latent heat), which the 0.5 factor stands in for
    n = len(t)
    saturated_since = np.full(n, np.nan)
    for i in range(1, n):
        if t[i] > lift:
            continue  # mixed out: no fog from here on
        if temp[i] < dew[i] + 0.2 and t[i] <= sunrise + 1800:
            if np.isnan(saturated_since[i - 1]):
                saturated_since[i] = t[i]
            else:
                saturated_since[i] = saturated_since[i - 1]
            excess = dew[i] + 0.2 - temp[i]
            temp[i] += 0.5 * excess
            dew[i:] = np.minimum(dew[i:], temp[i] - 0.15)
        elif t[i] <= sunrise + 2 * 3600 and not np.isnan(saturated_since[i - 1]):
            saturated_since[i] = saturated_since[i - 1]
    return saturated_since


def _visibility(
    t: np.ndarray,
    temp: np.ndarray,
    dew: np.ndarray,
    saturated_since: np.ndarray,
    sunrise: float,
    lift: float,
) -> np.ndarray:
    """Visibility (m) from the dew-point depression, thickening fog, and its lifting."""
    depression = temp - dew
    vis = np.where(depression > 3, 25000.0, 5000.0 + (depression - 0.3) / 2.7 * 20000.0)
    fogged = ~np.isnan(saturated_since)
    minutes = np.where(fogged, (t - np.nan_to_num(saturated_since)) / 60.0, 0.0)
    vis = np.where(fogged, np.maximum(120.0, 4000.0 * np.exp(-minutes / 35.0)), vis)
    lifting = t > sunrise + 1.5 * 3600
    vis = np.where(lifting, np.maximum(vis, 3000.0 + (t - sunrise - 5400) / 3600 * 8000), vis)
    mixed = t > lift
    vis = np.where(mixed, np.maximum(vis, 2500.0 + (t - lift) / 3600 * 9000), vis)
    return np.clip(vis, 50.0, 30000.0)
