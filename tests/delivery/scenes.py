"""Invented sites, assessments and events for delivery tests (no real places or people)."""

from __future__ import annotations

from datetime import datetime, time, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

import pandas as pd

from notifier.core.config import AlertSettings, Config, Site, Subscriber
from notifier.demo.weather import NightSpec, simulate_night
from notifier.engine.alerts import Event, event_id
from notifier.engine.assessment import HazardAssessment, SiteAssessment
from tests.engine.scenes import EVENING, RULES, site, utc

__all__ = [
    "RULES",
    "SETTINGS",
    "assessment",
    "clear_night",
    "config_with",
    "event",
    "site",
    "utc",
]

SETTINGS = AlertSettings()  # 45 min clearing, 3 h reminders, 60 min cooldown
FEATURES = {
    "data_age_min": 5.0,
    "temp_c": 6.2,
    "dewpoint_c": 5.6,
    "dewpoint_depression_c": 0.6,
    "wind_ms": 1.1,
    "cloud_pct": 10.0,
}


def assessment(
    s: Site,
    at: datetime,
    level: str = "none",
    sustain: str | None = None,
    hazard: str = "fog",
    age_min: float = 5.0,
    **features: float,
) -> SiteAssessment:
    """A hand-made assessment: ``level`` from the rules, ``sustain`` with margins."""
    hazards = {}
    if level != "none":
        hazards[hazard] = HazardAssessment(
            hazard=hazard,
            level=level,
            kind="stale" if hazard == "data_gap" else "radiation",
            eta=None if hazard == "data_gap" else at + timedelta(hours=1),
            rules=[f"{hazard}-{level}"],
            reasons=[f"dew-point depression 0.6 °C ≤ 1 °C ({level})"],
            explanations=[],
            safety_refs=[],
        )
    keep = sustain or level
    return SiteAssessment(
        site=s,
        time=at,
        features={**FEATURES, "data_age_min": age_min, **features},
        projection_method="cooling-fit",
        last_time=at,
        results=[],
        hazards=hazards,
        sustain={hazard: keep} if keep != "none" else {},
    )


def event(
    type_: str = "raised",
    level: str = "watch",
    previous: str = "none",
    hazard: str = "fog",
    site_id: str = "quay-two",
    at: datetime | None = None,
    **kw: object,
) -> Event:
    at = at or utc(2026, 1, 10, 20, 0)
    base: dict[str, object] = dict(
        id=event_id(site_id, hazard, at, type_, level, at),
        type=type_,
        site_id=site_id,
        hazard=hazard,
        level=level,
        previous_level=previous,
        time=at,
        episode_start=at,
        kind="radiation",
        eta=at + timedelta(minutes=50),
        rules=("radiation-fog-watch",),
        reasons=("dew-point depression 0.8 °C ≤ 1 °C", "wind 1.2 m/s ≤ 3.5 m/s"),
        explanations=("The air is 0.8 °C from saturation and closing.",),
        features={"temp_c": 6.0, "dewpoint_c": 5.2, "dewpoint_depression_c": 0.8, "wind_ms": 1.2},
        data_age_min=7.0,
        projection_method="cooling-fit",
    )
    base.update(kw)
    return Event(**base)  # type: ignore[arg-type]


def config_with(subscribers: list[dict[str, object]], sites: list[Site] | None = None) -> Config:
    sites = sites or [
        site("quay-two", use="port", tags=("harbour",)),
        site("north-field", use="farm", tags=("fields",)),
    ]
    return Config(
        sites=tuple(sites), subscribers=tuple(Subscriber.model_validate(s) for s in subscribers)
    )


def clear_night(s: Site) -> tuple[pd.DataFrame, datetime, datetime]:
    """The invented clear, calm night of tests/engine at ``s`` (watch in the evening,
    warning as the air nears saturation, fog until after sunrise), fed to 11:00 so that
    the all-clear (45 min after the fog lifts, ~09:10) can be seen; and the span a test
    steps through, 16:00 that evening to 10:30 the next morning, local time."""
    obs = simulate_night(
        NightSpec(
            site=s.id,
            evening=EVENING,
            timezone=s.timezone,
            lat=s.lat,
            lon=s.lon,
            end_local=time(11, 0),
        )
    )
    zone = ZoneInfo(s.timezone)
    start = datetime.combine(EVENING, time(16, 0), zone)
    end = datetime.combine(EVENING + timedelta(days=1), time(10, 30), zone)
    return obs, start, end


# the columns a station logger's CSV carries in the delivery scenes, one file per step
LOGGER_COLUMNS = [
    "site",
    "time",
    "temp_c",
    "dewpoint_c",
    "wind_ms",
    "wind_dir_deg",
    "cloud_pct",
    "visibility_m",
    "pressure_hpa",
    "weather",
]


def drop(folder: Path, rows: pd.DataFrame, now: datetime) -> None:
    """One CSV per step, as a station logger would upload it."""
    out = rows[LOGGER_COLUMNS].copy()
    out["time"] = out["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    path = folder / f"clear-field-{now:%Y%m%dT%H%M}.csv"
    tmp = path.with_suffix(".part")
    out.to_csv(tmp, index=False)
    tmp.rename(path)


# the one invented site of the whole-service nights (service night, payload schemas)
CLEAR_FIELD = {
    "id": "clear-field",
    "name": "Clear Field",
    "lat": 52.3,
    "lon": -1.8,
    "timezone": "Europe/London",
    "exposure": "open",
    "use": "farm",
}
