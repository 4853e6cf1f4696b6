"""What a chart says on its face, read from the matplotlib Figure before it is saved: the
date and time zone on the time axis, the site, hazard and level in the title, the caution
along the foot, a projection that ends with the night, an icing chart against 0 °C and the
frost point, and no label drawn over another."""

from __future__ import annotations

from datetime import timedelta

import pandas as pd
import pytest
from matplotlib import dates as mdates

from notifier.delivery.charts import chart_figure
from notifier.delivery.messages import CAUTION
from notifier.demo.weather import NightSpec, simulate_night
from tests.engine.scenes import EVENING, site, utc

NOW = utc(2026, 10, 14, 19, 30)
SUNSET = utc(2026, 10, 14, 17, 20)
SUNRISE = utc(2026, 10, 15, 6, 20)
ZONE = "Europe/London"


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    s = site("chart-field")
    return simulate_night(
        NightSpec(site=s.id, evening=EVENING, timezone=ZONE, lat=s.lat, lon=s.lon,
                  surface_offset_c=1.5)
    )  # fmt: skip


def texts(fig) -> list[str]:
    return [t.get_text() for t in fig.findobj(lambda a: hasattr(a, "get_text")) if t.get_text()]


def line(fig, label: str):
    (ax,) = fig.axes
    found = [ln for ln in ax.get_lines() if ln.get_label() == label]
    assert found, [ln.get_label() for ln in ax.get_lines()]
    return found[0]


def test_the_axis_carries_the_dates_and_the_time_zone(frame):
    fig = chart_figure(frame, NOW, (8.0, 1.6, SUNSET), 5.0, "Chart Field", ZONE,
                       level="watch", sunrise=SUNRISE)  # fmt: skip
    # 12 h back from 20:30 BST on Wed 14 Oct to the night's end on Thu 15 Oct; London is
    # on BST (UTC+1) until the last Sunday of October, 25 October 2026 (EU summer time)
    assert fig.axes[0].get_xlabel() == "Wed 14 – Thu 15 Oct 2026, local time (BST)"


def test_the_title_names_site_hazard_and_level_and_the_caution_is_on_the_image(frame):
    fig = chart_figure(frame, NOW, None, 5.0, "Chart Field", ZONE, hazard="fog", level="warning")
    assert "Chart Field · Fog WARNING" in texts(fig)
    assert CAUTION in texts(fig)
    cleared = chart_figure(frame, NOW, None, 5.0, "Chart Field", ZONE, hazard="icing",
                           level="none")  # fmt: skip
    assert "Chart Field · Icing all clear" in texts(cleared)


def test_the_projection_stops_at_sunrise(frame):
    fig = chart_figure(frame, NOW, (8.0, 1.6, SUNSET), 5.0, "Chart Field", ZONE,
                       level="watch", sunrise=SUNRISE)  # fmt: skip
    xs = line(fig, "projected air").get_xdata()
    assert mdates.num2date(max(xs)) <= SUNRISE
    assert mdates.num2date(max(xs)) > SUNRISE - timedelta(minutes=10)
    # and the axis ends soon after it, not at 16:00 the next day
    assert mdates.num2date(fig.axes[0].get_xlim()[1]) <= SUNRISE + timedelta(minutes=30)


def test_the_projection_stops_once_the_air_warms(frame):
    # explicit points: cooling to 03:30, warming after (a cloud sheet, or the morning)
    points = [(NOW + timedelta(hours=h), 6.0 - h if h <= 7 else -1.0 + (h - 7)) for h in range(10)]
    fig = chart_figure(frame, NOW, points, 5.0, "Chart Field", ZONE, level="watch")
    ys = line(fig, "projected air").get_ydata()
    assert list(ys) == [6.0 - h for h in range(8)]


def test_an_icing_chart_shows_0_c_and_the_frost_point_and_no_dew_point_crossing(frame):
    fig = chart_figure(frame, NOW, (8.0, 1.6, SUNSET), 5.0, "Chart Field", ZONE,
                       hazard="icing", level="warning", sunrise=SUNRISE,
                       frost_point=-1.4)  # fmt: skip
    assert set(line(fig, "0 °C").get_ydata()) == {0.0}
    assert set(line(fig, "frost point").get_ydata()) == {-1.4}
    assert line(fig, "surface")  # the surface temperature, against them
    assert not any(t.startswith("meets dew point") for t in texts(fig))
    fog = chart_figure(frame, NOW, (8.0, 1.6, SUNSET), 5.0, "Chart Field", ZONE,
                       hazard="fog", level="watch", sunrise=SUNRISE)  # fmt: skip
    assert any(t.startswith("meets dew point") for t in texts(fog))


@pytest.mark.parametrize("hazard", ["fog", "icing"])
def test_no_label_overlaps_another_and_all_lie_inside_the_image(frame, hazard):
    fig = chart_figure(frame, NOW, (8.0, 1.6, SUNSET), 5.0, "Chart Field", ZONE,
                       hazard=hazard, level="warning", sunrise=SUNRISE,
                       frost_point=-1.4)  # fmt: skip
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    (ax,) = fig.axes
    page = fig.bbox
    boxes = {"legend": ax.get_legend().get_window_extent(renderer)}
    for t in fig.findobj(lambda a: hasattr(a, "get_text") and hasattr(a, "get_window_extent")):
        name = t.get_text()
        if name in ("now", "Chart Field · " + hazard.capitalize() + " WARNING", CAUTION) or (
            name.startswith("meets dew point")
        ):
            boxes[name] = t.get_window_extent(renderer)
    assert "now" in boxes and CAUTION in boxes and len(boxes) >= 4
    names = list(boxes)
    for i, a in enumerate(names):
        box = boxes[a]
        assert (
            page.x0 <= box.x0 and box.x1 <= page.x1 and page.y0 <= box.y0 and box.y1 <= page.y1
        ), a
        for b in names[i + 1 :]:
            assert not box.overlaps(boxes[b]), (a, b)
