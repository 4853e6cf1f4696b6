"""Verification of fog alerts against what was observed (pure: no I/O).

The unit is the *site-night*: from local noon to the next local noon at one site. A
night is a fog event when fog was observed in it — visibility below 1000 m (the WMO
definition of fog, WMO-No. 8) or a reported FG / FZFG. It was *warned* when an alert at
the scored level was in force at some time in it. That gives the 2×2 table (Wilks,
*Statistical Methods in the Atmospheric Sciences*, ch. 8 on forecast verification):

================  =================  =====================
                  fog observed       no fog observed
alert in force    a: hit             b: false alarm
no alert          c: miss            d: correct negative
================  =================  =====================

A fog night counts as warned only if the alert was in force by the fog's onset: one
raised only once fog was seen gave no warning, and is a (late) miss. From the table,
the probability of detection POD = a/(a+c), the false-alarm ratio
FAR = b/(a+b), the critical success index CSI = a/(a+b+c), and the frequency bias
(a+b)/(a+c). A score whose denominator is zero is undefined (NaN), not zero.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime, time, timedelta
from statistics import median
from zoneinfo import ZoneInfo

__all__ = ["Contingency", "NightOutcome", "fog_observed", "night_of", "scores"]


@dataclass
class Contingency:
    hits: int = 0
    false_alarms: int = 0
    misses: int = 0
    correct_negatives: int = 0

    def add(self, other: Contingency) -> Contingency:
        return Contingency(
            self.hits + other.hits,
            self.false_alarms + other.false_alarms,
            self.misses + other.misses,
            self.correct_negatives + other.correct_negatives,
        )

    @property
    def n(self) -> int:
        return self.hits + self.false_alarms + self.misses + self.correct_negatives

    @property
    def pod(self) -> float:
        return _ratio(self.hits, self.hits + self.misses)

    @property
    def far(self) -> float:
        return _ratio(self.false_alarms, self.hits + self.false_alarms)

    @property
    def csi(self) -> float:
        return _ratio(self.hits, self.hits + self.false_alarms + self.misses)

    @property
    def bias(self) -> float:
        return _ratio(self.hits + self.false_alarms, self.hits + self.misses)

    def as_dict(self) -> dict[str, float | int | None]:
        def num(v: float) -> float | None:
            return None if math.isnan(v) else round(v, 4)

        return {
            "hits": self.hits,
            "false_alarms": self.false_alarms,
            "misses": self.misses,
            "correct_negatives": self.correct_negatives,
            "pod": num(self.pod),
            "far": num(self.far),
            "csi": num(self.csi),
            "bias": num(self.bias),
        }


def _ratio(num: int, den: int) -> float:
    return num / den if den else float("nan")


def scores(a: int, b: int, c: int, d: int) -> Contingency:
    """The table for a hits, b false alarms, c misses and d correct negatives."""
    return Contingency(a, b, c, d)


def fog_observed(visibility_m: float | None, weather: str | None) -> bool:
    """Fog by the WMO definition (visibility below 1000 m) or a reported FG / FZFG."""
    if visibility_m is not None and not math.isnan(visibility_m) and visibility_m < 1000:
        return True
    tokens = str(weather or "").upper().replace("+", " ").replace("-", " ").split()
    return any(tok.endswith("FG") for tok in tokens)


def night_of(t: datetime, zone: str) -> datetime:
    """The local noon that starts the site-night containing ``t``."""
    local = t.astimezone(ZoneInfo(zone))
    day = local.date() if local.time() >= time(12, 0) else local.date() - timedelta(days=1)
    return datetime.combine(day, time(12, 0), ZoneInfo(zone))


@dataclass
class NightOutcome:
    """One site-night: what was observed, what was in force, and how early."""

    site: str
    night: datetime  # local noon that starts it
    fog_onset: datetime | None = None
    first_watch: datetime | None = None
    first_warning: datetime | None = None
    rules: list[str] = field(default_factory=list)
    why_not: list[str] = field(default_factory=list)  # for a miss: what did not hold

    @property
    def observed(self) -> bool:
        return self.fog_onset is not None

    def first(self, level: str) -> datetime | None:
        """When an alert at ``level`` or above was first in force in this night."""
        if level == "warning":
            return self.first_warning
        found = [t for t in (self.first_watch, self.first_warning) if t is not None]
        return min(found) if found else None

    def warned(self, level: str) -> bool:
        """An alert in force in the night — and, on a fog night, before the fog's onset.

        A warning that only came once the fog was there (from observing it) gave no
        one time to act: it counts as a miss, shown as late.
        """
        first = self.first(level)
        if first is None:
            return False
        return self.fog_onset is None or first < self.fog_onset

    def category(self, level: str) -> str:
        if self.observed:
            return "hit" if self.warned(level) else "miss"
        return "false_alarm" if self.warned(level) else "correct_negative"

    def lead_min(self, which: str) -> float | None:
        """Minutes from the first watch / warning to the onset (negative: it came late)."""
        first = self.first(which)
        if first is None or self.fog_onset is None:
            return None
        return (self.fog_onset - first).total_seconds() / 60.0


def table(outcomes: Sequence[NightOutcome], level: str) -> Contingency:
    counts = Contingency()
    for o in outcomes:
        cat = o.category(level)
        if cat == "hit":
            counts.hits += 1
        elif cat == "miss":
            counts.misses += 1
        elif cat == "false_alarm":
            counts.false_alarms += 1
        else:
            counts.correct_negatives += 1
    return counts


def median_lead_min(outcomes: Sequence[NightOutcome], which: str) -> float | None:
    """Median lead of the first watch / warning before onset, over the nights it came
    in time (late alerts are misses and have no lead)."""
    leads = [o.lead_min(which) for o in outcomes if o.observed and o.warned(which)]
    found = [v for v in leads if v is not None]
    return median(found) if found else None
