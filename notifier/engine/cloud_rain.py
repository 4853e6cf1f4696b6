"""Feature family: the cloud base and the rain, from ``ceiling_m`` and ``precip_mm``.

Every site at once, over one evaluation time's :class:`~notifier.engine.families.Window`:

- ``ceiling_m``: the newest ceiling of the last hours (the lowest broken or overcast
  base, or the vertical visibility; :data:`~notifier.core.columns.NO_CEILING_M` for none);
- ``ceiling_trend_m_per_h``: its Theil–Sen slope over the trend window (3 h), with every
  height above :data:`LOW_CLOUD_TOP_M` — "no ceiling" too — counted as that height, so a
  high deck coming and going, or a 30 000 m "none", does not swamp the slope; what it
  tells is low cloud forming or lowering (negative) or lifting (positive);
- ``precip_last_3h_mm``: the precipitation of the trend window, as the mean of the
  hourly amounts reported in it times its length (each report is the last hour's amount,
  so hourly and sub-hourly data agree);
- ``hours_since_precip``: hours since the newest report of more than a trace; the
  window's length (24 h) when the reports in it show none.

Each is unknown (NaN) where the site reports no such column in the window: rules that
test them do not fire, and rules that do not test them are unchanged. ``ceiling_known``
and ``precip_known`` (never unknown) say whether they are reported, so that a rule can
ask "no rain, or no rain gauge" and leave a site without one as it was.

>>> LOW_CLOUD_TOP_M
2000.0
"""

from __future__ import annotations

import numpy as np

from notifier.engine.block import column_span, in_range, latest
from notifier.engine.catalog import FeatureSettings
from notifier.engine.families import Current, Window, trend_of

__all__ = ["LOW_CLOUD_TOP_M", "cloud_and_rain"]

# The low étage of the cloud atlas ends at about 2 km (WMO International Cloud Atlas,
# docs/references.md [WMO cloud atlas]): a change above it says nothing about fog.
LOW_CLOUD_TOP_M = 2000.0


def cloud_and_rain(w: Window, now: Current, settings: FeatureSettings) -> dict[str, np.ndarray]:
    """``ceiling_m``, ``ceiling_trend_m_per_h``, ``precip_last_3h_mm`` and
    ``hours_since_precip`` for every site (see the module docstring)."""
    blk, n = w.blk, w.blk.n
    found = {
        "ceiling_m": now.values["ceiling_m"],
        "ceiling_trend_m_per_h": np.full(n, np.nan),
        "precip_last_3h_mm": np.full(n, np.nan),
        "hours_since_precip": np.full(n, np.nan),
    }
    found["ceiling_known"] = (~np.isnan(found["ceiling_m"])).astype(float)
    if blk.reports("ceiling_m").size:
        a, b = column_span(w.trend_lo, w.hi)
        if b > a:
            low = np.fmin(blk.block("ceiling_m", a, b), LOW_CLOUD_TOP_M)
            found["ceiling_trend_m_per_h"] = trend_of(w, low, a, b, settings)
    if blk.reports("precip_mm").size:
        found["precip_last_3h_mm"] = _recent_total(w, settings)
        found["hours_since_precip"] = _hours_since(w, settings)
    found["precip_known"] = (~np.isnan(found["hours_since_precip"])).astype(float)
    return found


def _recent_total(w: Window, settings: FeatureSettings) -> np.ndarray:
    a, b = column_span(w.trend_lo, w.hi)
    out = np.full(w.blk.n, np.nan)
    if b <= a:
        return out
    amounts = np.where(in_range(a, b, w.trend_lo, w.hi), w.blk.block("precip_mm", a, b), np.nan)
    some = ~np.isnan(amounts).all(axis=1)
    with np.errstate(invalid="ignore"):
        out[some] = np.nanmean(amounts[some], axis=1) * settings.trend_window_h
    return out


def _hours_since(w: Window, settings: FeatureSettings) -> np.ndarray:
    a, b = column_span(w.lo, w.hi)
    out = np.full(w.blk.n, np.nan)
    if b <= a:
        return out
    amounts = np.where(in_range(a, b, w.lo, w.hi), w.blk.block("precip_mm", a, b), np.nan)
    reported = ~np.isnan(amounts).all(axis=1)
    with np.errstate(invalid="ignore"):
        # more than a trace: a trace (P0000) is 0 mm; 0.1 mm is the smallest amount a
        # gauge reports (common practice)
        wet = amounts >= 0.1
    hours_wet, _ = latest(w.hours[:, a:b], wet)
    out[reported] = settings.block_hours
    seen = reported & ~np.isnan(hours_wet)
    out[seen] = np.maximum(-hours_wet[seen], 0.0)
    return out
