"""The script a user would otherwise write: a loop over sites with MetPy calls.

It computes the core of fogwatch's features for one evaluation time — the latest
temperature and dew point, relative humidity, depression and its trend (``np.polyfit``
over the last 3 h), hours to saturation, frost point, sunset and sunrise (astral),
tonight's square-root cooling fit and projected minimum, net long-wave loss (Brutsaert,
with MetPy's vapour pressure and units), the afternoon crossover temperature, and fog or
mist from the latest visibility and weather report — site by site, with units attached,
the way MetPy's documentation shows.

It is a yardstick, not a reference: the numbers are close to fogwatch's but the methods
are the simple ones (least squares instead of Theil–Sen, no forecast or exposure
handling). ``bench/run.py`` times it on a subset of the sites and scales linearly.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["features_site_by_site"]


def features_site_by_site(
    obs: pd.DataFrame, sites: Sequence[Any], at: dt.datetime
) -> dict[str, dict[str, float]]:
    """One dict of features per site id, computed one site at a time."""
    import metpy.calc as mpcalc
    from metpy.units import units

    try:
        from astral import Observer
        from astral.sun import sun
    except ImportError:  # pragma: no cover - astral comes with the test extra
        Observer = sun = None  # noqa: N806

    at_ts = pd.Timestamp(at)
    wanted = {s.id: s for s in sites}
    out: dict[str, dict[str, float]] = {}
    for site_id, g in obs.groupby("site", sort=False):
        s = wanted.get(site_id)
        if s is None:
            continue
        g = g.sort_values("time")
        rows = g[
            (g["kind"] == "obs") & (g["time"] <= at_ts) & (g["time"] > at_ts - pd.Timedelta("24h"))
        ]
        f: dict[str, float] = {}
        if rows.empty:
            out[site_id] = {"data_age_min": float("inf")}
            continue
        hours = ((rows["time"] - at_ts).dt.total_seconds() / 3600.0).to_numpy()
        temp = rows["temp_c"].to_numpy() * units.degC
        if rows["dewpoint_c"].notna().any():
            dew = rows["dewpoint_c"].to_numpy() * units.degC
        else:
            dew = mpcalc.dewpoint_from_relative_humidity(
                temp, rows["rh_pct"].to_numpy() * units.percent
            )
        recent = hours >= -3.0
        pair = recent & ~np.isnan(temp.magnitude) & ~np.isnan(dew.magnitude)
        if pair.any():
            i = np.flatnonzero(pair)[-1]
            t_now, td_now = temp[i], dew[i]
            f["temp_c"] = float(t_now.m_as("degC"))
            f["dewpoint_c"] = float(td_now.m_as("degC"))
            f["rh_pct"] = float(
                mpcalc.relative_humidity_from_dewpoint(t_now, td_now).m_as("percent")
            )
            depression = (temp - dew).m_as("delta_degC")
            f["dewpoint_depression_c"] = float(depression[i])
            use = recent & ~np.isnan(depression)
            if use.sum() >= 3:
                slope = np.polyfit(hours[use], depression[use], 1)[0]
                f["depression_trend_c_per_h"] = float(slope)
                if slope < 0 and depression[i] > 0:
                    f["hours_to_saturation"] = float(depression[i] / -slope)
            e = mpcalc.saturation_vapor_pressure(td_now)  # vapour pressure at the dew point
            gamma = np.log(e.m_as("hPa") / 6.112)
            f["frost_point_c"] = float(272.62 * gamma / (22.46 - gamma))
            cloud = rows["cloud_pct"].to_numpy()[recent]
            cloud = cloud[~np.isnan(cloud)]
            c = cloud[-1] / 100.0 if cloud.size else 0.0
            eps_clear = 1.24 * (e.m_as("hPa") / t_now.m_as("K")) ** (1 / 7)
            eps = (1 - 0.84 * c) * eps_clear + 0.84 * c
            sigma = 5.670374419e-8 * units("W / m^2 / K^4")
            loss = 0.98 * (1 - eps) * sigma * t_now.to("K") ** 4
            f["net_longwave_wm2"] = float(loss.m_as("W / m^2"))
        wind = rows["wind_ms"].to_numpy()[recent]
        wind = wind[~np.isnan(wind)]
        if wind.size:
            f["wind_ms"] = float((wind[-1] * units("m/s")).m_as("m/s"))
        if Observer is not None:
            try:
                today = sun(Observer(s.lat, s.lon), date=at.date(), tzinfo=dt.UTC)
                tomorrow = sun(
                    Observer(s.lat, s.lon), date=at.date() + dt.timedelta(1), tzinfo=dt.UTC
                )
            except ValueError:  # the sun does not set or rise there that day
                today = tomorrow = None
            if today is not None:
                sunset = (
                    today["sunset"] if today["sunset"] <= at else today["sunset"] - dt.timedelta(1)
                )
                sunrise = tomorrow["sunrise"] if at > today["sunrise"] else today["sunrise"]
                since = (rows["time"] >= pd.Timestamp(sunset)).to_numpy() & ~np.isnan(
                    temp.magnitude
                )
                if since.sum() >= 3:
                    x = np.sqrt(
                        (rows["time"][since] - pd.Timestamp(sunset)).dt.total_seconds() / 3600
                    )
                    k, t0 = np.polyfit(x, temp.magnitude[since], 1)
                    night_h = (sunrise - sunset).total_seconds() / 3600
                    f["projected_min_temp_c"] = float(t0 + k * np.sqrt(night_h))
        local = rows["time"].dt.tz_convert(s.timezone)
        afternoon = ((local.dt.hour >= 12) & (local.dt.hour < 18)).to_numpy()
        if afternoon.any():
            f["crossover_temp_c"] = float(np.nanmin(dew.magnitude[afternoon]))
        vis = rows["visibility_m"].to_numpy()[recent]
        weather = rows["weather"].fillna("").astype(str).str.upper().to_numpy()[recent]
        has = ~np.isnan(vis) | (weather != "")
        if has.any():
            j = np.flatnonzero(has)[-1]
            fog = "FG" in weather[j] or vis[j] < 1000
            f["observed_fog"] = float(fog)
            f["observed_mist"] = float(not fog and ("BR" in weather[j] or vis[j] < 5000))
        f["data_age_min"] = float(-hours[-1] * 60)
        out[site_id] = f
    return out
