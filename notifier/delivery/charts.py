"""A small PNG for email: the last 12 h of air, dew point and surface temperature, with the
night's projected cooling curve and where it meets the dew point.

The picture stands on its own when forwarded: the site, hazard and level in its title, the
date and time zone on the time axis, and the caution along its foot. The projection runs
only through the night: it stops at sunrise, or where the projected air starts to warm.
An icing chart shows the surface (else the air) against 0 °C and the frost point, and
marks no dew-point crossing. The legend sits above the plot, clear of the "now" label.

matplotlib is imported inside :func:`chart_png` with the Agg backend, and the figure is
built with the object API (no pyplot state), so charts can be drawn from any thread of
a headless service.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta, tzinfo
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["Projection", "chart_figure", "chart_png", "night_points", "projection_points"]

# (temperature at sunset °C, cooling coefficient K h^-1/2, sunset time) — Brunt's
# square-root law, see notifier.physics.cooling — or explicit (time, temp °C) points.
Projection = tuple[float, float, datetime] | Sequence[tuple[datetime, float]]

WINDOW = timedelta(hours=12)
AHEAD = timedelta(hours=10)
SIZE_IN = (8.0, 4.5)
DPI = 100  # 800 × 450 px


def projection_points(
    projection: Projection, now: datetime, ahead: timedelta = AHEAD, step_min: int = 10
) -> list[tuple[datetime, float]]:
    """The projected curve as (time, temp) points from ``now`` up to ``ahead`` later."""
    if (
        isinstance(projection, tuple)
        and len(projection) == 3
        and isinstance(projection[2], datetime)
    ):
        from notifier.physics import project_sqrt_cooling_c

        t0_c, k, sunset = projection  # type: ignore[misc]
        start = max(now, sunset)
        n = int(ahead.total_seconds() // (step_min * 60)) + 1
        times = [start + timedelta(minutes=step_min * i) for i in range(n)]
        hours = np.array([(t - sunset).total_seconds() / 3600.0 for t in times])
        temps = project_sqrt_cooling_c(t0_c, k, hours)
        return [
            (t, float(v))
            for t, v in zip(times, np.atleast_1d(temps), strict=True)
            if np.isfinite(v)
        ]
    return [(t, float(v)) for t, v in projection]  # type: ignore[misc]


def night_points(
    points: Sequence[tuple[datetime, float]], sunrise: datetime | None
) -> list[tuple[datetime, float]]:
    """The projected points up to sunrise and up to the projected minimum: a cooling curve
    says nothing about the day, and once the air warms the night's question is answered."""
    out: list[tuple[datetime, float]] = []
    for t, v in points:
        if sunrise is not None and t > sunrise:
            break
        if out and v > min(p[1] for p in out):
            break  # the air has started to warm
        out.append((t, v))
    return out


def _crossing(
    points: Sequence[tuple[datetime, float]], dewpoint_c: float
) -> tuple[datetime, float] | None:
    """First point where the projected curve reaches the dew point (linear between)."""
    for (t1, v1), (t2, v2) in zip(points, points[1:], strict=False):
        if v1 <= dewpoint_c:
            return t1, v1
        if v2 <= dewpoint_c < v1:
            frac = (v1 - dewpoint_c) / (v1 - v2)
            return t1 + (t2 - t1) * frac, dewpoint_c
    return None


def chart_png(
    frame: pd.DataFrame,
    now: datetime,
    projection: Projection | None = None,
    dewpoint: float | None = None,
    title: str = "",
    tz_name: str = "UTC",
    **context: Any,
) -> bytes:
    """PNG bytes (800 × 450) of :func:`chart_figure`."""
    fig = chart_figure(frame, now, projection, dewpoint, title, tz_name, **context)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    return buf.getvalue()


def chart_figure(
    frame: pd.DataFrame,
    now: datetime,
    projection: Projection | None = None,
    dewpoint: float | None = None,
    title: str = "",
    tz_name: str = "UTC",
    *,
    hazard: str = "fog",
    level: str = "",
    sunrise: datetime | None = None,
    frost_point: float | None = None,
    caution: str | None = None,
) -> Figure:
    """One site's canonical observations around ``now`` as a matplotlib Figure.

    ``frame`` has the canonical columns (``time``, ``temp_c``, ``dewpoint_c``,
    ``surface_temp_c``; missing columns are skipped). ``dewpoint`` is the level the
    projection is compared with (default: the newest dew point in the frame).
    ``hazard`` and ``level`` go into the title; ``sunrise`` ends the projection;
    ``frost_point`` is drawn on an icing chart; ``caution`` (default: the one every
    message carries) runs along the foot.
    """
    import matplotlib

    from notifier.delivery.messages import CAUTION

    matplotlib.use("Agg")
    from zoneinfo import ZoneInfo

    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    if now.tzinfo is None:
        raise ValueError("now must be timezone-aware")
    now = now.astimezone(UTC)
    zone = ZoneInfo(tz_name)
    data, x = _recent_observations(frame, now)

    fig = Figure(figsize=SIZE_IN, dpi=DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1)
    # drawn in this order, so that later lines lie on top and the legend lists them so
    _plot_observations(ax, data, x)
    if dewpoint is None:
        dewpoint = _newest_dewpoint(data)
    # through the night: to sunrise when it is known (at most 16 h), else AHEAD
    ahead = AHEAD
    if sunrise is not None and now < sunrise:
        ahead = min(sunrise - now + timedelta(minutes=10), timedelta(hours=16))
    points = night_points(projection_points(projection, now, ahead), sunrise) if projection else []
    if hazard == "icing":
        _plot_icing_levels(ax, frost_point)
        _plot_projection(ax, points, None, zone)
    else:
        _plot_projection(ax, points, dewpoint, zone)
    right = points[-1][0] + timedelta(minutes=30) if points else now + timedelta(hours=1)
    _set_axes(ax, now, right, zone)
    head = title or "Temperature, dew point and surface"
    if level:
        word = "all clear" if level == "none" else level.upper()
        head += f" · {hazard.replace('_', ' ').capitalize()} {word}"
    fig.suptitle(head, fontsize=11, x=0.01, y=0.985, ha="left")
    fig.text(0.01, 0.012, CAUTION if caution is None else caution, fontsize=6.5, color="#555555")
    fig.subplots_adjust(left=0.08, right=0.98, top=0.84, bottom=0.2)
    return fig


def _recent_observations(frame: pd.DataFrame, now: datetime) -> tuple[pd.DataFrame, list[datetime]]:
    """(the observations, not forecasts, of the 12 h up to ``now`` in time order, their
    times); no times when the frame has no ``time`` column."""
    import pandas as pd

    data = frame
    if "kind" in data.columns:
        data = data[(data["kind"].isna() | (data["kind"] == "obs")).to_numpy()]
    times = pd.to_datetime(data["time"], utc=True) if "time" in data.columns else None
    if times is None:
        return data, []
    keep = (times > pd.Timestamp(now - WINDOW)) & (times <= pd.Timestamp(now))
    data = data[keep.to_numpy()].assign(_t=times[keep.to_numpy()]).sort_values("_t")
    return data, [t.to_pydatetime() for t in data["_t"]]


def _plot_observations(ax: Axes, data: pd.DataFrame, x: list[datetime]) -> None:
    """One line each for air, dew point and surface temperature, where there are values."""
    from matplotlib import dates as mdates

    series = (
        ("temp_c", "air", "#c0392b", "-"),
        ("dewpoint_c", "dew point", "#2471a3", "-"),
        ("surface_temp_c", "surface", "#7d3c98", ":"),
    )
    for column, label, colour, style in series:
        if column in data.columns and x:
            y = data[column].to_numpy(dtype=float)
            if np.isfinite(y).any():
                ax.plot(mdates.date2num(x), y, style, color=colour, label=label, linewidth=1.8)


def _newest_dewpoint(data: pd.DataFrame) -> float | None:
    """The last finite dew point among the charted observations, or None."""
    if "dewpoint_c" not in data.columns or not len(data):
        return None
    finite = data["dewpoint_c"].to_numpy(dtype=float)
    finite = finite[np.isfinite(finite)]
    return float(finite[-1]) if finite.size else None


def _plot_projection(
    ax: Axes, points: list[tuple[datetime, float]], dewpoint: float | None, zone: tzinfo
) -> None:
    """The projected air temperature as a dashed line, with the dew point level and the
    time the two meet marked."""
    from matplotlib import dates as mdates

    if not points:
        return
    px = mdates.date2num([t for t, _ in points])
    ax.plot(
        px,
        [v for _, v in points],
        "--",
        color="#c0392b",
        alpha=0.7,
        label="projected air",
        linewidth=1.5,
    )
    if dewpoint is None:
        return
    ax.axhline(dewpoint, color="#2471a3", alpha=0.3, linewidth=1)
    cross = _crossing(points, dewpoint)
    if cross is None:
        return
    cx = mdates.date2num(cross[0])
    ax.axvline(cx, color="#555555", linestyle="--", linewidth=1)
    ax.plot([cx], [cross[1]], "o", color="#2471a3", markersize=7)
    ax.annotate(
        f"meets dew point ~{cross[0].astimezone(zone):%H:%M}",
        (cx, cross[1]),
        textcoords="offset points",
        xytext=(6, 8),
        fontsize=9,
    )


def _plot_icing_levels(ax: Axes, frost_point: float | None) -> None:
    """0 °C, and the frost point: where a surface below both gathers ice."""
    ax.axhline(0.0, color="#17202a", linewidth=1.2, label="0 °C")
    if frost_point is not None and np.isfinite(frost_point):
        ax.axhline(frost_point, color="#1abc9c", linestyle="-.", linewidth=1.2, label="frost point")


def _set_axes(ax: Axes, now: datetime, right: datetime, zone: tzinfo) -> None:
    """The time axis (12 h back, to ``right``) in local hours with the dates and the time
    zone under it, a marked "now", the labels, the grid and the legend above the plot."""
    from matplotlib import dates as mdates

    left = now - WINDOW
    ax.axvline(mdates.date2num(now), color="#999999", linewidth=1)
    ax.set_xlim(mdates.date2num(left), mdates.date2num(right))
    ax.xaxis.set_major_locator(mdates.HourLocator(byhour=range(0, 24, 3), tz=zone))
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%H:%M", tz=zone))
    first, last = left.astimezone(zone), right.astimezone(zone)
    days = (
        f"{first:%a %d %b}" if first.date() == last.date() else f"{first:%a %d} – {last:%a %d %b}"
    )
    names = sorted({first.strftime("%Z"), now.astimezone(zone).strftime("%Z"), last.strftime("%Z")})
    ax.set_xlabel(f"{days} {last:%Y}, local time ({' / '.join(names)})", fontsize=9)
    ax.annotate(
        "now",
        (mdates.date2num(now), 1.0),
        xycoords=("data", "axes fraction"),
        xytext=(3, -12),
        textcoords="offset points",
        fontsize=8,
        color="#777777",
    )
    ax.set_ylabel("°C")
    ax.grid(True, alpha=0.3)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(
            loc="lower left",
            bbox_to_anchor=(0.0, 1.0),
            ncol=6,
            fontsize=8,
            frameon=False,
            borderaxespad=0.2,
        )
