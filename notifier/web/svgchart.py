"""The status page's small chart, drawn on the server as SVG: the last 24 h of air
temperature, dew point and surface temperature (°C, upper panel) and visibility (km,
lower panel), with the site's local hours along the bottom.

Plain SVG 1.1 written by hand: no script, no web font, nothing fetched, a few kilobytes
per site, so the page stays light on a phone. A gap in the readings is a gap in the line
(nothing is drawn across missing data: silence must not look like a smooth night).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from datetime import datetime, timedelta
from xml.sax.saxutils import escape
from zoneinfo import ZoneInfo

import numpy as np

__all__ = ["SERIES", "chart_svg"]

# column, label, colour, panel (0: temperatures, 1: visibility)
SERIES = (
    ("temp_c", "air °C", "#c0392b", 0),
    ("dewpoint_c", "dew point °C", "#2471a3", 0),
    ("surface_temp_c", "surface °C", "#7d3c98", 0),
    ("visibility_m", "visibility km", "#5d6d7e", 1),
)
WIDTH, HEIGHT = 360, 170
LEFT, RIGHT = 34, 8
PANELS = ((8, 96), (112, 146))  # (top, bottom) of each panel, in pixels
GAP_S = 3 * 3600  # readings further apart than this are not joined (common practice)


def _segments(xs: np.ndarray, ys: np.ndarray) -> list[list[tuple[float, float]]]:
    """Runs of finite points; a NaN or a long pause between readings starts a new run."""
    runs: list[list[tuple[float, float]]] = []
    current: list[tuple[float, float]] = []
    last_x = None
    for x, y in zip(xs, ys, strict=True):
        if not math.isfinite(y):
            if current:
                runs.append(current)
            current, last_x = [], None
            continue
        if last_x is not None and x - last_x > GAP_S:
            runs.append(current)
            current = []
        current.append((float(x), float(y)))
        last_x = x
    if current:
        runs.append(current)
    return runs


def _range(values: Sequence[np.ndarray], floor_span: float) -> tuple[float, float] | None:
    finite = [v[np.isfinite(v)] for v in values]
    finite = [v for v in finite if v.size]
    if not finite:
        return None
    lo = float(min(v.min() for v in finite))
    hi = float(max(v.max() for v in finite))
    if hi - lo < floor_span:
        mid = (hi + lo) / 2
        lo, hi = mid - floor_span / 2, mid + floor_span / 2
    return math.floor(lo), math.ceil(hi)


def chart_svg(
    times_s: np.ndarray,
    columns: Mapping[str, np.ndarray],
    end: datetime,
    tz_name: str,
    title: str,
    hours: int = 24,
) -> str:
    """An SVG chart of ``columns`` (arrays beside ``times_s``, POSIX seconds) over the
    ``hours`` before ``end``; times along the bottom in ``tz_name``."""
    end_s = end.timestamp()
    start_s = end_s - hours * 3600
    span_x = WIDTH - LEFT - RIGHT

    def x_of(t: float) -> float:
        return LEFT + (t - start_s) / (end_s - start_s) * span_x

    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" '
        f'role="img" class="chart"><title>{escape(title)}</title>',
        *(
            f'<rect x="{LEFT}" y="{top}" width="{span_x}" height="{bottom - top}" '
            'fill="none" stroke="#ccc"/>'
            for top, bottom in PANELS
        ),
    ]
    inside = (times_s >= start_s) & (times_s <= end_s)
    xs = np.asarray(times_s, dtype=float)[inside]
    for panel, unit_scale, floor_span in ((0, 1.0, 4.0), (1, 0.001, 1.0)):
        names = [s for s in SERIES if s[3] == panel and s[0] in columns]
        values = [np.asarray(columns[n], dtype=float)[inside] * unit_scale for n, *_ in names]
        found = _range(values, floor_span)
        top, bottom = PANELS[panel]
        if found is None:
            out.append(
                f'<text x="{LEFT + 6}" y="{(top + bottom) / 2 + 4:.0f}" class="none">'
                f"no {'temperatures' if panel == 0 else 'visibility'} in the last {hours} h</text>"
            )
            continue
        lo, hi = (0.0, found[1]) if panel == 1 else found
        for label, y in ((f"{hi:g}", top + 9), (f"{lo:g}", bottom - 2)):
            out.append(f'<text x="{LEFT - 3}" y="{y}" text-anchor="end">{label}</text>')
        for (_, _label, colour, _), ys in zip(names, values, strict=True):
            for run in _segments(xs, ys):
                pts = " ".join(
                    f"{x_of(x):.1f},{bottom - (y - lo) / (hi - lo) * (bottom - top):.1f}"
                    for x, y in run
                )
                out.append(f'<polyline fill="none" stroke="{colour}" points="{pts}"/>')
    zone = ZoneInfo(tz_name)
    tick = (datetime.fromtimestamp(start_s, zone) + timedelta(hours=1)).replace(
        minute=0, second=0, microsecond=0
    )
    while tick.timestamp() <= end_s:
        if tick.hour % 6 == 0:
            x = x_of(tick.timestamp())
            out.append(
                f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{PANELS[0][0]}" y2="{PANELS[1][1]}" '
                'stroke="#eee"/>'
                f'<text x="{x:.1f}" y="{HEIGHT - 12}" text-anchor="middle">{tick:%H:%M}</text>'
            )
        tick += timedelta(hours=1)
    legend_x = LEFT
    for _column, label, colour, _ in SERIES:
        out.append(f'<text x="{legend_x}" y="{HEIGHT - 1}" fill="{colour}">{escape(label)}</text>')
        legend_x += 7 + 6 * len(label)
    out.append("</svg>")
    return "".join(out)
