"""``fogwatch demo``: one invented night at the three invented demo sites.

Everything runs through the same code as the live service, with a simulated clock:
no network, no server, no arguments.
"""

from __future__ import annotations

from datetime import date, datetime, time, timedelta
from pathlib import Path
from typing import TYPE_CHECKING

from notifier.demo_data import NightSpec, simulate_night

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.config import Config

__all__ = ["DEMO_CONFIG", "DEMO_EVENING", "demo_nights", "demo_observations"]

DEMO_CONFIG = Path(__file__).resolve().parent.parent / "demo_sites.yaml"
DEMO_EVENING = date(2026, 11, 6)


def demo_nights(config: Config) -> list[NightSpec]:
    """The invented weather of the demo night, one spec per demo site."""
    by_id = {s.id: s for s in config.sites}
    specs = []

    def spec(site_id: str, **kw: object) -> NightSpec:
        s = by_id[site_id]
        return NightSpec(
            site=s.id,
            evening=DEMO_EVENING,
            timezone=s.timezone,
            lat=s.lat,
            lon=s.lon,
            start_local=time(10, 0),
            **kw,
        )  # type: ignore[arg-type]

    # Valley orchard: clear, calm and cold — cold air pools, fog forms and freezes,
    # rime on the trees and frost on the ground by dawn.
    specs.append(
        spec(
            "hollin-orchard",
            day_max_c=7.5,
            sunset_temp_c=4.0,
            dewpoint_c=1.6,
            dewpoint_drift_c_per_h=-0.03,
            cooling_k_per_sqrt_h=1.9,
            cloud_pct=5.0,
            wind_ms=0.8,
            surface_offset_c=2.0,
        )
    )
    # Estuary berth: mild, cloudy, offshore breeze in the evening; after 23:00 the wind
    # backs onshore and brings moist air over the cold estuary — sea fog rolls in.
    specs.append(
        spec(
            "skerrow-berth",
            day_max_c=12.0,
            sunset_temp_c=11.0,
            dewpoint_c=9.4,
            dewpoint_drift_c_per_h=0.0,
            cooling_k_per_sqrt_h=0.35,
            cloud_pct=85.0,
            wind_ms=4.0,
            wind_dir_deg=110.0,
            water_temp_c=7.6,
            changes=((time(23, 0), {"wind_dir_deg": 245.0, "dewpoint_rise_c": 1.4}),),
        )
    )
    # Showground: clear and calm, textbook radiation fog after midnight; the feed from
    # the car-park logger drops out for a while before dawn.
    specs.append(
        spec(
            "marrowby-showground",
            day_max_c=11.0,
            sunset_temp_c=8.0,
            dewpoint_c=5.2,
            dewpoint_drift_c_per_h=-0.04,
            cooling_k_per_sqrt_h=1.5,
            cloud_pct=10.0,
            wind_ms=1.3,
        )
    )
    return specs


def demo_observations(config: Config) -> pd.DataFrame:
    import pandas as pd

    return pd.concat([simulate_night(s) for s in demo_nights(config)], ignore_index=True)


def run_interim_timeline(config_path: Path = DEMO_CONFIG) -> int:
    """Assess the demo night every 30 minutes and print each change of level."""
    from zoneinfo import ZoneInfo

    from notifier.service import evaluate, load

    loaded = load(config_path)
    obs = demo_observations(loaded.config)
    zone = ZoneInfo(loaded.config.sites[0].timezone)
    t = datetime.combine(DEMO_EVENING, time(16, 0), zone)
    end = datetime.combine(DEMO_EVENING + timedelta(days=1), time(9, 0), zone)
    last: dict[tuple[str, str], str] = {}
    print("fogwatch demo — one invented night, three invented sites\n")
    while t <= end:
        for sa in evaluate(loaded, obs, t):  # rows after t are ignored by the features
            for hazard in ("fog", "icing", "data_gap"):
                h = sa.hazards.get(hazard)
                level = h.level if h else "none"
                key = (sa.site.id, hazard)
                if last.get(key, "none") != level:
                    why = "; ".join(h.reasons[:2]) if h else "back below its thresholds"
                    print(
                        f"{t.astimezone(zone):%a %H:%M}  {sa.site.name:<26} {hazard:<8} "
                        f"{last.get(key, 'none')} → {level}: {why}"
                    )
                    last[key] = level
        t += timedelta(minutes=30)
    print("\nAutomated estimate from invented data, not an official forecast.")
    return 0
