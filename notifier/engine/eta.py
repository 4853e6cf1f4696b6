"""When a hazard is expected, and how that was worked out (pure: no I/O, no clock).

Each kind of hazard has its own clock; where it cannot be read there is no time rather
than a wrong one. Worked out per site, and only for the sites whose assessment is read.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from datetime import datetime, timedelta
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from notifier.engine.assessment import SiteAssessment
    from notifier.engine.rules import Rule

__all__ = ["ETA_METHODS", "SEEN_FIRST", "hazard_eta"]

ETA_HORIZON_H = 48.0  # beyond this a projected time says nothing

# Which clock a hazard's expected time is read from, by the kind of its leading rule.
OBSERVED_KINDS = frozenset({"observed", "dense"})
SEA_KINDS = frozenset({"advection"})
COOLING_KINDS = frozenset({"radiation", "valley"})
SEEN_FIRST = frozenset({"observed", "dense", "freezing-fog", "frost"})
#: how an expected time was worked out: observed (now), cooling-curve (tonight's
#: cooling meets the dew point), sea-fog (onshore air closing on saturation over colder
#: water), surface-now (a surface at or below 0 °C and the frost point), surface-cooling
#: (the surface carried down tonight's cooling curve to them)
ETA_METHODS = ("observed", "cooling-curve", "sea-fog", "surface-now", "surface-cooling")


def hazard_eta(
    hazard: str, lead: Rule, sa: SiteAssessment, at: datetime
) -> tuple[datetime | None, str]:
    """When the hazard is expected, and how that was worked out (``ETA_METHODS``).

    Each kind of hazard has its own clock; where it cannot be read, there is no time
    rather than a wrong one (None, "").
    """
    features = sa.features
    if hazard == "data_gap":
        return None, ""
    if lead.kind in OBSERVED_KINDS or features.get("observed_fog") == 1.0:
        if hazard == "fog" or features.get("observed_fog") == 1.0:
            return at, "observed"
    if hazard == "icing":
        return _icing_eta(sa, at)
    if lead.kind in SEA_KINDS:
        return _sea_fog_eta(features, at)
    if lead.kind in COOLING_KINDS:
        return _cooling_eta(sa, at)
    return None, ""


def _cooling_eta(sa: SiteAssessment, at: datetime) -> tuple[datetime | None, str]:
    """Radiation (and valley) fog: when tonight's fitted cooling curve meets the dew
    point, before sunrise. Before the curve can be fitted (the evening's first hours) a
    straight trend would give times far out, so there is no time yet."""
    hours = sa.features.get("hours_to_fog", math.nan)
    if hours == 0.0:
        return at, "cooling-curve"
    sunrise_h = sa.features.get("hours_to_sunrise", math.nan)
    if sa.projection is None or not (hours <= sunrise_h):
        return None, ""
    return _hours_ahead(at, hours, "cooling-curve")


def _hours_ahead(at: datetime, hours: float | None, method: str) -> tuple[datetime | None, str]:
    if hours is None or not np.isfinite(hours) or hours < 0 or hours > ETA_HORIZON_H:
        return None, ""
    return at + timedelta(hours=float(hours)), method


def _sea_fog_eta(features: Mapping[str, float], at: datetime) -> tuple[datetime | None, str]:
    """Sea or advection fog: onshore air with its dew point above the water temperature
    is chilled from below towards saturation, so the fog comes when the dew-point
    depression, at its present rate of closing, reaches zero (Taylor 1917's picture of
    advection fog over cold water: docs/references.md [Taylor 1917]). Offshore wind, water
    warmer than the dew point, or a depression that is not closing: no time."""
    if features.get("onshore") != 1.0 or not features.get("dewpoint_minus_water_c", -1.0) > 0.0:
        return None, ""
    return _hours_ahead(at, features.get("hours_to_saturation", math.nan), "sea-fog")


def _icing_eta(sa: SiteAssessment, at: datetime) -> tuple[datetime | None, str]:
    """Ice: when the surface (or, with no surface sensor, the air) falls to 0 °C and to
    the frost point, whichever is lower: frost deposits only on a surface at or below
    both (docs/references.md [Karlsson 2001]). Now if it is there already; else the
    surface carried down tonight's fitted cooling curve at its present offset from the
    air, before sunrise; else no time."""
    features = sa.features
    air = features.get("temp_c", math.nan)
    surface = features.get("surface_temp_c", math.nan)
    if not np.isfinite(surface):
        surface = air
    frost = features.get("frost_point_c", math.nan)
    if not np.isfinite(surface):
        return None, ""
    target = min(0.0, frost) if np.isfinite(frost) else 0.0
    if surface <= target:
        return at, "surface-now"
    if sa.projection is None or not np.isfinite(air):
        return None, ""
    t0, k, sunset = sa.projection
    if k <= 0:
        return None, ""
    # T(h) = T0 − k·√h (the fitted square-root law), shifted by the surface's offset
    needed = (t0 + (surface - air) - target) / k
    if needed <= 0 or needed * needed > ETA_HORIZON_H + (at - sunset).total_seconds() / 3600:
        return None, ""
    eta = sunset + timedelta(hours=needed * needed)
    sunrise_h = features.get("hours_to_sunrise", math.nan)
    if eta <= at or not np.isfinite(sunrise_h) or eta > at + timedelta(hours=sunrise_h):
        return None, ""
    return eta, "surface-cooling"


def sooner_candidates(
    hazard: str,
    lead_in: Callable[[frozenset[str]], np.ndarray],
    values: Mapping[str, np.ndarray],
    fits: tuple[np.ndarray, np.ndarray, np.ndarray],
    at_s: float,
) -> np.ndarray:
    """Per site, POSIX seconds that are :func:`hazard_eta`'s time wherever that time is
    one a ``sooner`` can be told of (not an ``observed`` or ``surface-now`` time, which
    are now); NaN where there is none. Where :func:`hazard_eta` gives no time this may
    still give one (its horizon and sunrise cut-offs are left out), never the other way:
    the lifecycle uses it only to find the sites worth a closer look.

    ``lead_in(kinds)`` says where the kind of the site's leading rule is one of
    ``kinds``; ``fits`` the cooling fit's T0, k and sunset (NaN where the
    projection is not a fit)."""
    n = fits[0].size
    nan = np.full(n, np.nan)

    def value(name: str) -> np.ndarray:
        found = values.get(name)
        return nan if found is None else np.asarray(found, dtype=float)

    out = np.full(n, np.nan)
    if hazard == "data_gap" or not n:
        return out
    observed_fog = value("observed_fog") == 1.0
    observed = lead_in(OBSERVED_KINDS) | observed_fog
    if hazard == "fog":
        left = ~observed
    else:
        left = ~(observed & observed_fog)
    t0, k, sunset = fits
    with np.errstate(invalid="ignore", divide="ignore"):
        if hazard == "icing":
            air = value("temp_c")
            surface = value("surface_temp_c")
            surface = np.where(np.isfinite(surface), surface, air)
            frost = value("frost_point_c")
            target = np.where(np.isfinite(frost), np.minimum(0.0, frost), 0.0)
            needed = (t0 + (surface - air) - target) / k
            cooling = (surface > target) & np.isfinite(air) & (k > 0) & (needed > 0)
            eta = sunset + needed * needed * 3600.0
            return np.where(left & cooling, eta, np.nan)
        sea = lead_in(SEA_KINDS)
        onshore = (value("onshore") == 1.0) & (value("dewpoint_minus_water_c") > 0.0)
        out = np.where(left & sea & onshore, at_s + value("hours_to_saturation") * 3600.0, out)
        cool = left & ~sea & lead_in(COOLING_KINDS)
        hours = value("hours_to_fog")
        fitted = np.isfinite(t0) & np.isfinite(k) & np.isfinite(sunset)
        ahead = np.where(hours == 0.0, at_s, np.where(fitted, at_s + hours * 3600.0, np.nan))
        return np.where(cool, ahead, out)
