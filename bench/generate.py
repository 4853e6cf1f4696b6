"""Workload W1 for the benchmark: invented sites and 24 h of 10-minute readings.

Everything is reproducible from a seed and nothing here is a real place or real data.
``sites(n, seed)`` gives the site list; ``observations(sites, at, seed)`` the canonical
table (observed rows every 10 min for 24 h up to ``at``, plus hourly forecast rows for a
share of the sites); ``load_store(directory, ...)`` writes them into a real SQLite
store inside ``directory`` (a temp or bench folder — nothing is written elsewhere).

The mix is meant to exercise every branch of the feature code: all six exposures,
coastal sites with an onshore sector, stations without cloud or wind (forecast fallback),
visibility and present-weather reports, surface and water sensors, random gaps, sites
that went quiet hours ago and sites that never reported.

Run it alone to see what it makes::

    .venv/bin/python bench/generate.py --sites 1000
"""

from __future__ import annotations

import argparse
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd

from notifier.core.columns import CANONICAL_COLUMNS, text_columns_as_objects
from notifier.core.config import Site

__all__ = ["AT", "SEED", "last_poll_path", "load_store", "observations", "sites"]

SEED = 20261120
# A November night over north-west Europe: long, so the cooling fit has hours to work on.
AT = datetime(2026, 11, 20, 3, 0, tzinfo=UTC)
STEP_MIN = 10
ROWS_PER_SITE = 144  # 24 h at 10 min

EXPOSURES = ("open", "valley", "forest", "waterside", "coast", "urban")
USES = ("farm", "port", "venue", "other")
ZONES = ("Europe/London", "Europe/Dublin", "Europe/Paris", "Europe/Berlin", "Europe/Oslo")
WEATHER_FOG = ("FG", "BCFG", "PRFG", "MIFG", "-DZ FG")
WEATHER_MIST = ("BR", "-DZ BR", "BR HZ")


def _sixteenths(values: np.ndarray) -> np.ndarray:
    """Temperatures at the 1/16 °C step of common digital sensors (exact in binary)."""
    return np.round(values * 16.0) / 16.0


def sites(n: int = 10_000, seed: int = SEED) -> list[Site]:
    """``n`` invented sites scattered over 48–62° N, 10° W–15° E."""
    rng = np.random.default_rng(seed)
    lat = rng.uniform(48.0, 62.0, n)
    lon = rng.uniform(-10.0, 15.0, n)
    exposure = rng.choice(EXPOSURES, n, p=(0.35, 0.15, 0.1, 0.12, 0.13, 0.15))
    use = rng.choice(USES, n)
    zone = np.array(ZONES)[np.clip(((lon + 10.0) / 5.0).astype(int), 0, len(ZONES) - 1)]
    sector_from = rng.uniform(0.0, 360.0, n).round()
    out = []
    for i in range(n):
        watery = exposure[i] in ("coast", "waterside")
        out.append(
            Site(
                id=f"w1-{i:05d}",
                name=f"Invented site {i}",
                lat=round(float(lat[i]), 4),
                lon=round(float(lon[i]), 4),
                timezone=str(zone[i]),
                exposure=str(exposure[i]),
                use=str(use[i]),
                onshore_from_deg=float(sector_from[i]) if watery else None,
                onshore_to_deg=float((sector_from[i] + 120.0) % 360.0) if watery else None,
                tags=("bench",),
            )
        )
    return out


def observations(
    site_list: list[Site],
    at: datetime = AT,
    seed: int = SEED,
    rows_per_site: int = ROWS_PER_SITE,
    forecast_share: float = 0.15,
) -> pd.DataFrame:
    """The canonical table for ``site_list``: observed rows up to ``at``, then forecasts."""
    rng = np.random.default_rng(seed + 1)
    n = len(site_list)
    steps = np.arange(rows_per_site - 1, -1, -1)  # oldest first
    t_at = int(at.timestamp())
    times = t_at - steps * STEP_MIN * 60  # (rows,)
    lon = np.array([s.lon for s in site_list])
    # local solar hour drives a simple diurnal cycle: warmest ~15 h, coldest near dawn
    solar_h = ((times[None, :] / 3600.0) + lon[:, None] / 15.0) % 24.0
    diurnal = np.cos(2 * np.pi * (solar_h - 15.0) / 24.0)  # +1 mid-afternoon
    mean_c = rng.normal(7.0, 4.0, n)[:, None]
    amp_c = rng.uniform(1.5, 6.0, n)[:, None]
    temp = mean_c + amp_c * diurnal + rng.normal(0.0, 0.15, (n, rows_per_site))
    # depression: wide by day, closing overnight; a third of the sites close fully
    night_dep = rng.choice([0.0, 0.3, 1.0, 2.5, 5.0], n, p=(0.15, 0.15, 0.25, 0.25, 0.2))
    day_dep = night_dep + rng.uniform(2.0, 8.0, n)
    dep = night_dep[:, None] + (day_dep - night_dep)[:, None] * (diurnal + 1.0) / 2.0
    dep = np.maximum(dep + rng.normal(0.0, 0.2, (n, rows_per_site)), 0.0)
    dew = temp - dep
    with np.errstate(invalid="ignore"):
        e_d = 6.112 * np.exp(17.62 * dew / (243.12 + dew))
        e_t = 6.112 * np.exp(17.62 * temp / (243.12 + temp))
    rh = np.minimum(100.0 * e_d / e_t, 100.0)
    wind = rng.gamma(2.0, 1.2, n)[:, None] * (0.6 + 0.4 * (diurnal + 1.0))
    wind = np.round(wind + rng.normal(0.0, 0.3, (n, rows_per_site)).clip(-0.5, 0.5), 1)
    wind = np.maximum(wind, 0.0)
    wind_dir = (rng.uniform(0, 360, n)[:, None] + rng.normal(0, 15, (n, rows_per_site))) % 360
    cloud = np.clip(
        rng.choice([0.0, 12.5, 37.5, 75.0, 100.0], n)[:, None]
        + rng.normal(0, 8, (n, rows_per_site)),
        0,
        100,
    ).round()
    pressure = rng.normal(1013.0, 8.0, n)[:, None] + np.zeros((1, rows_per_site))
    # visibility falls with the depression; weather codes where a station reports them
    vis = np.where(dep < 0.3, rng.uniform(150, 900, (n, rows_per_site)), 20000.0)
    vis = np.where((dep >= 0.3) & (dep < 1.0), rng.uniform(1500, 4500, (n, rows_per_site)), vis)
    codes = np.full((n, rows_per_site), "", dtype=object)
    fog_code = rng.choice(WEATHER_FOG, (n, rows_per_site))
    mist_code = rng.choice(WEATHER_MIST, (n, rows_per_site))
    codes = np.where(dep < 0.3, np.where(temp < 0, "FZFG", fog_code), codes)
    codes = np.where((dep >= 0.3) & (dep < 1.0), mist_code, codes)
    surface = temp - np.where(diurnal < 0, 1.5, -1.0) + rng.normal(0, 0.3, (n, rows_per_site))
    water = rng.uniform(6.0, 13.0, n)[:, None] + np.zeros((1, rows_per_site))

    # which station carries which sensor
    has_cloud = rng.random(n) < 0.6
    has_wind = rng.random(n) < 0.9
    has_vis = rng.random(n) < 0.5
    has_wx = rng.random(n) < 0.3
    has_surface = rng.random(n) < 0.4
    watery = np.array([s.exposure in ("coast", "waterside") for s in site_list])
    has_water = watery & (rng.random(n) < 0.8)
    nan = np.nan
    cloud = np.where(has_cloud[:, None], cloud, nan)
    wind = np.where(has_wind[:, None], wind, nan)
    wind_dir = np.where(has_wind[:, None], wind_dir.round(), nan)
    vis = np.where(has_vis[:, None], vis, nan)
    codes = np.where(has_wx[:, None], codes, None)
    surface = np.where(has_surface[:, None], _sixteenths(surface), nan)
    water = np.where(has_water[:, None], water.round(1), nan)
    # the odd missing reading in an otherwise complete row (temperature and dew point
    # are always there: the store only holds rows that passed validation)
    wind = np.where(rng.random((n, rows_per_site)) < 0.005, nan, wind)

    keep = rng.random((n, rows_per_site)) >= 0.03  # 3 % of rows never arrived
    quiet = rng.random(n) < 0.01  # went quiet 5 h ago (stale)
    keep &= ~(quiet[:, None] & (times[None, :] > t_at - 5 * 3600))
    keep &= ~(rng.random(n) < 0.005)[:, None]  # never reported at all

    site_ids = np.array([s.id for s in site_list], dtype=object)
    rows, cols = np.nonzero(keep)
    frame = pd.DataFrame(
        {
            "site": site_ids[rows],
            "time": pd.to_datetime(times[cols], unit="s", utc=True),
            "kind": "obs",
            "temp_c": _sixteenths(temp[rows, cols]),
            "dewpoint_c": _sixteenths(dew[rows, cols]),
            "rh_pct": rh[rows, cols].round(1),
            "wind_ms": wind[rows, cols],
            "wind_dir_deg": wind_dir[rows, cols],
            "cloud_pct": cloud[rows, cols],
            "surface_temp_c": surface[rows, cols],
            "water_temp_c": water[rows, cols],
            "visibility_m": vis[rows, cols].round(),
            "pressure_hpa": pressure[rows, cols].round(1),
            "weather": codes[rows, cols],
            "source": "bench",
        }
    )
    frames = [frame]
    fc_sites = np.flatnonzero(rng.random(n) < forecast_share)
    if fc_sites.size:
        hours = np.arange(-1, 19)
        ft = t_at + hours * 3600
        fsolar = ((ft[None, :] / 3600.0) + lon[fc_sites, None] / 15.0) % 24.0
        fdiurnal = np.cos(2 * np.pi * (fsolar - 15.0) / 24.0)
        ftemp = mean_c[fc_sites] + amp_c[fc_sites] * fdiurnal
        fdew = ftemp - night_dep[fc_sites, None] - 0.5
        rr, cc = np.meshgrid(np.arange(fc_sites.size), np.arange(hours.size), indexing="ij")
        rr, cc = rr.ravel(), cc.ravel()
        frames.append(
            pd.DataFrame(
                {
                    "site": site_ids[fc_sites][rr],
                    "time": pd.to_datetime(ft[cc], unit="s", utc=True),
                    "kind": "forecast",
                    "temp_c": _sixteenths(ftemp[rr, cc]),
                    "dewpoint_c": _sixteenths(fdew[rr, cc]),
                    "cloud_pct": np.full(rr.size, 25.0),
                    "wind_ms": np.full(rr.size, 1.5),
                    "source": "bench-forecast",
                }
            )
        )
    out = pd.concat(frames, ignore_index=True).reindex(columns=CANONICAL_COLUMNS)
    out["time"] = out["time"].astype("datetime64[ns, UTC]")
    for column in out.columns:
        if column not in ("site", "time", "kind", "weather", "source"):
            out[column] = out[column].astype("float64")
    out = text_columns_as_objects(out)
    return out.sort_values(["site", "time", "kind"], kind="stable").reset_index(drop=True)


def last_poll_path(store_path: Path) -> Path:
    """Where :func:`load_store` keeps the readings of ``at`` itself (see there)."""
    return store_path.with_name("w1-last-poll.pkl")


def load_store(
    directory: Path,
    n_sites: int = 10_000,
    seed: int = SEED,
    at: datetime = AT,
) -> tuple[Path, list[Site], int]:
    """Write W1 into ``directory/w1.sqlite``; returns (path, sites, rows written).

    The readings observed at ``at`` itself — the poll that starts the measured cycle —
    are not written but kept beside the store (:func:`last_poll_path`), so that the
    benchmark can write them as a poll would and time the cycle that follows.
    """
    from notifier.storage.store import Store

    directory.mkdir(parents=True, exist_ok=True)
    path = directory / "w1.sqlite"
    for stale in (path, path.with_name(path.name + "-wal"), path.with_name(path.name + "-shm")):
        stale.unlink(missing_ok=True)
    site_list = sites(n_sites, seed)
    frame = observations(site_list, at, seed)
    last = (frame["kind"] == "obs") & (frame["time"] == pd.Timestamp(at))
    frame[last].reset_index(drop=True).to_pickle(last_poll_path(path))
    with Store(f"sqlite:///{path}") as store:
        written = store.add_observations(frame[~last], received_at=at - timedelta(minutes=10))
    return path, site_list, written + int(last.sum())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sites", type=int, default=10_000)
    parser.add_argument("--seed", type=int, default=SEED)
    parser.add_argument("--dir", type=Path, default=None, help="default: a new temp folder")
    args = parser.parse_args()
    directory = args.dir or Path(tempfile.mkdtemp(prefix="fogwatch-bench-"))
    start = time.perf_counter()
    path, site_list, written = load_store(directory, args.sites, args.seed)
    elapsed = time.perf_counter() - start
    print(f"{written:,} rows for {len(site_list):,} sites in {path} ({elapsed:.1f} s)")


if __name__ == "__main__":
    main()
