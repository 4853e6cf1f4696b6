"""Charts: a small, valid PNG of the last 12 h with the projected crossing."""

from __future__ import annotations

import io
from datetime import datetime, timedelta

import matplotlib.image
import pandas as pd
import pytest

from notifier.delivery.charts import chart_png, projection_points
from notifier.demo.weather import NightSpec, simulate_night
from tests.engine.scenes import EVENING, site, utc

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
NOW = utc(2026, 10, 14, 19, 30)
SUNSET = utc(2026, 10, 14, 17, 20)


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    s = site("chart-field")
    return simulate_night(
        NightSpec(
            site=s.id,
            evening=EVENING,
            timezone=s.timezone,
            lat=s.lat,
            lon=s.lon,
            surface_offset_c=1.5,
        )
    )


def decode(png: bytes):
    assert png.startswith(PNG_SIGNATURE)
    return matplotlib.image.imread(io.BytesIO(png), format="png")


@pytest.mark.parametrize(
    "projection",
    [
        None,
        (8.0, 1.6, SUNSET),
        [(NOW + timedelta(hours=h), 6.5 - 0.8 * h) for h in range(8)],
    ],
    ids=["observations-only", "square-root-law", "explicit-points"],
)
def test_chart_is_a_small_png(frame, projection):
    png = chart_png(
        frame, NOW, projection, dewpoint=5.0, title="Chart Field", tz_name="Europe/London"
    )
    image = decode(png)
    assert image.shape[:2] == (450, 800)
    assert 5_000 < len(png) < 250_000


def test_crossing_is_marked_where_the_curve_meets_the_dew_point():
    points = projection_points((8.0, 2.0, SUNSET), NOW)
    assert points[0][0] == NOW
    crossing = next(t for t, v in points if v <= 5.0)
    # 8 - 2 sqrt(h) = 5 → h = 2.25 h after sunset
    assert abs((crossing - (SUNSET + timedelta(hours=2.25))).total_seconds()) <= 600


def test_empty_frame_still_draws(frame):
    png = chart_png(frame.iloc[0:0], NOW)
    assert decode(png).shape[:2] == (450, 800)


def test_naive_time_is_refused(frame):
    with pytest.raises(ValueError, match="timezone-aware"):
        chart_png(frame, datetime(2026, 10, 14, 19, 30))
