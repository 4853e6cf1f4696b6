"""Verification of fog alerts against what was observed (pure: no I/O).

**Fog at the site.** A report is fog when its visibility is below 1000 m (the WMO
definition of fog, docs/references.md [WMO-No. 8]) or it reports FG or FZFG
(docs/references.md [WMO-No. 306], FM 15). Not fog at the site: VCFG (fog in the
vicinity, not at the station), and MIFG, BCFG and PRFG (shallow fog, patches, fog over
part of the aerodrome), which are reported with a visibility of 1 km or more — their
text alone is not fog, though a visibility below 1000 m in the same report still is.
Nor is visibility below 1000 m in precipitation with no FG in the text (RA, SN, DZ, SG,
PL, GR, GS, UP, or showers, SH): that is low visibility, not fog. A report with neither
a visibility nor any weather text says nothing either way and is passed over.

**Onset.** A *fog spell* is a run of consecutive fog reports; it ends at the first
report without fog. A spell is fog only once it is confirmed: at least two reports,
the first and the last at least 20 minutes apart (two hourly reports, or 20 minutes of
10-minute data; a one-report dip is not fog; common practice). Its *onset* is its
first report.

**The site-night** runs from local noon to the next local noon at one site. A night is
a *fog event* only if fog BEGINS in it: a confirmed spell has its onset in the night.
Fog already present when the night starts (a spell begun in the night before and not
yet ended) is not a new onset; such a night is scored on a later onset in it, after
that fog has ended, and is otherwise no event.

**Nights not observed are not scored.** A night is scored only where it was watched:
reports that say fog or not (a visibility or some weather text) at most 3 h apart from
18:00 to 09:00 local, the edges included (every 3 h: the synoptic observing hours,
docs/references.md [WMO-No. 8], from memory). A forecast is verified against an
observation or not at all (docs/references.md [Wilks]): where the visibility went
unreported for hours, a warning cannot be told from a false alarm, nor a quiet night
from a missed fog. Such nights are counted and listed apart, for every forecast alike
(the rules, the references, climatology).

**Alerts.** An alert (at the scored level or above) counts for a night only if it was
raised or escalated to that level in the night — not while fog carried over from the
night before is still present — or it was in force at the night's onset. A warning
carried over from before the night started, still in force from fog already present,
is neither a hit nor a false alarm for the new night. A fog night is *warned* when an
alert that counts came before its onset: raised earlier in the night, or in force when
the fog began. One raised only once fog was seen gave no one time to act: it is a
(late) miss. A night without an onset is a false alarm when an alert counts for it.
That gives the 2×2 table (docs/references.md [Wilks], forecast verification):

================  =================  =====================
                  fog began          no fog began
alert counted     a: hit             b: false alarm
no alert          c: miss            d: correct negative
================  =================  =====================

From the table, the probability of detection POD = a/(a+c), the false-alarm ratio
FAR = b/(a+b), the critical success index CSI = a/(a+b+c), and the frequency bias
(a+b)/(a+c). A score whose denominator is zero is undefined (NaN), not zero.

**Reference forecasts**, scored on the same nights: the one-line rule "at 21:00 local,
warn if the dew-point depression is ≤ 2 °C and the wind < 3 m/s" (common practice), from
the newest reading at or before 21:00 local and at most an hour old (none: no warning);
climatology, the base rate of fog nights over the nights scored, as a probability
(its Brier score, docs/references.md [Brier 1950]); and the constant forecasts "always
warn" and "never warn".
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime, time, timedelta
from statistics import median
from zoneinfo import ZoneInfo

import numpy as np

__all__ = [
    "Contingency",
    "FogSpell",
    "NightOutcome",
    "alert_for_night",
    "fog_observed",
    "fog_reports",
    "fog_spells",
    "night_fog",
    "night_of",
    "night_watched",
    "scores",
]


FOG_VISIBILITY_M = 1000.0  # WMO-No. 8: fog is visibility below 1000 m

# WMO-No. 306, FM 15: the precipitation codes, and the showers descriptor
PRECIPITATION = frozenset({"DZ", "RA", "SN", "SG", "PL", "GR", "GS", "UP", "SH"})

# MI shallow, BC patches, PR partial: reported with a visibility of 1 km or more; VC:
# in the vicinity, not at the station (WMO-No. 306, FM 15)
NOT_AT_SITE = frozenset({"MI", "BC", "PR", "VC"})

ONSET_MIN_REPORTS = 2  # a confirmed spell: two consecutive reports … (common practice)

ONSET_MIN_SPAN_S = 20 * 60.0  # … at least 20 minutes apart (common practice)

WATCHED_FROM_H, WATCHED_TO_H = 6.0, 21.0  # 18:00 to 09:00: hours after the night's noon
MAX_REPORT_GAP_S = 3 * 3600.0  # the synoptic observing interval (WMO-No. 8, from memory)


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


def _groups(token: str) -> list[str]:
    """A present-weather token as its two-letter groups: '-FZRA' → ['FZ', 'RA']."""
    token = token.lstrip("+-")
    return [token[i : i + 2] for i in range(0, len(token), 2)]


def _weather_says(weather: str | None) -> tuple[bool, bool, bool]:
    """(some text, fog at the site, precipitation) from a present-weather text."""
    text = "" if weather is None or weather != weather else str(weather).strip().upper()
    fog = precipitation = False
    for token in text.split():
        groups = _groups(token)
        if "FG" in groups and not NOT_AT_SITE.intersection(groups):
            fog = True
        if "VC" not in groups and PRECIPITATION.intersection(groups):
            precipitation = True
    return text != "", fog, precipitation


def fog_observed(visibility_m: float | None, weather: str | None) -> bool:
    """Fog at the site in one report (see the module docstring).

    >>> fog_observed(400.0, "FG"), fog_observed(9999.0, "VCFG"), fog_observed(800.0, "+RA")
    (True, False, False)
    """
    return bool(
        fog_reports(
            np.array([np.nan if visibility_m is None else visibility_m]),
            np.array([weather], dtype=object),
        )[0][0]
    )


def fog_reports(visibility_m: np.ndarray, weather: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(fog, known) per report: fog at the site, and whether the report says anything
    either way (a visibility or some weather text). Each distinct text is read once."""
    import pandas as pd

    vis = np.asarray(visibility_m, dtype=float)
    codes, texts = pd.factorize(np.asarray(weather, dtype=object), use_na_sentinel=True)
    said = np.array([*(_weather_says(t) for t in texts), (False, False, False)], dtype=bool)
    has_text, fog_text, precipitation = (said[codes, j] for j in range(3))
    with np.errstate(invalid="ignore"):
        low = vis < FOG_VISIBILITY_M
    fog = fog_text | (low & ~precipitation)
    return fog, has_text | ~np.isnan(vis)


@dataclass(frozen=True)
class FogSpell:
    """A confirmed spell of fog at one site: its onset, and its first report without fog
    (None: none came in the data)."""

    onset: datetime
    ended: datetime | None


def fog_spells(times: Sequence[datetime], fog: Sequence[bool]) -> list[FogSpell]:
    """The confirmed fog spells in one site's reports (in time order, each saying fog or
    not; reports that say nothing left out already)."""
    out = []
    n = len(times)
    i = 0
    while i < n:
        if not fog[i]:
            i += 1
            continue
        j = i
        while j + 1 < n and fog[j + 1]:
            j += 1
        span = (times[j] - times[i]).total_seconds()
        if j - i + 1 >= ONSET_MIN_REPORTS and span >= ONSET_MIN_SPAN_S:
            out.append(FogSpell(times[i], times[j + 1] if j + 1 < n else None))
        i = j + 1
    return out


def night_fog(
    spells: Sequence[FogSpell], start: datetime, end: datetime
) -> tuple[datetime | None, datetime | None]:
    """(onset, carried until) for the night [start, end): the first confirmed onset in
    it, and the end of fog carried over from before it (None: none carried over; ``end``
    when it lasts the whole night)."""
    onset = next((s.onset for s in spells if start <= s.onset < end), None)
    carried = None
    for s in spells:
        if s.onset < start and (s.ended is None or s.ended > start):
            carried = end if s.ended is None else min(s.ended, end)
    return onset, carried


def alert_for_night(
    times_s: np.ndarray,
    levels: np.ndarray,
    rank: int,
    start_s: float,
    end_s: float,
    onset_s: float | None,
    carried_until_s: float | None,
) -> float | None:
    """When an alert at ``rank`` or above first counted for the night [start, end), in
    POSIX seconds, or None if none did.

    ``levels`` is the alert level at each step (``times_s``). An alert counts when the
    level rose to ``rank`` or above in the night (a raise or an escalation) outside the
    fog carried over into it (before ``carried_until_s``), or when it was in force at
    the step before the onset; then from when it was first in force in the night (or,
    for an onset at the very start of the night, from when it was raised).
    """
    times_s = np.asarray(times_s, dtype=float)
    levels = np.asarray(levels)
    # the night's steps, and the step before them (a rise is against the step before)
    lo = int(np.searchsorted(times_s, start_s, side="left"))
    hi = int(np.searchsorted(times_s, end_s, side="left"))
    now = levels[lo:hi]
    before = np.concatenate((levels[lo - 1 : lo] if lo > 0 else [0], now))[:-1]
    rose = (now >= rank) & (now > before)
    if carried_until_s is not None:
        rose &= times_s[lo:hi] >= carried_until_s
    found = [float(times_s[lo:hi][rose][0])] if rose.any() else []
    if onset_s is not None:
        k = int(np.searchsorted(times_s, onset_s, side="left")) - 1  # the step before
        if k >= 0 and levels[k] >= rank:
            first = k
            while first > 0 and levels[first - 1] >= rank:
                first -= 1
            since = max(float(times_s[first]), start_s)
            found.append(since if since < onset_s else float(times_s[first]))
    return min(found) if found else None


def night_of(t: datetime, zone: str) -> datetime:
    """The local noon that starts the site-night containing ``t``."""
    local = t.astimezone(ZoneInfo(zone))
    day = local.date() if local.time() >= time(12, 0) else local.date() - timedelta(days=1)
    return datetime.combine(day, time(12, 0), ZoneInfo(zone))


def night_watched(report_s: np.ndarray, night: datetime) -> bool:
    """Whether a night was observed well enough to be scored: sorted POSIX seconds of the
    site's reports that say fog or not, none more than 3 h from the next between 18:00
    and 09:00 local (the edges count as gaps too).

    >>> noon = datetime(2001, 1, 1, 12, tzinfo=ZoneInfo("UTC"))
    >>> hourly = noon.timestamp() + 3600.0 * np.arange(25)
    >>> evening = hourly[hourly < noon.timestamp() + 9 * 3600]  # to 21:00, then none
    >>> night_watched(hourly, noon), night_watched(evening, noon)
    (True, False)
    """
    lo = night.timestamp() + WATCHED_FROM_H * 3600.0
    hi = night.timestamp() + WATCHED_TO_H * 3600.0
    a = int(np.searchsorted(report_s, lo, side="left"))
    b = int(np.searchsorted(report_s, hi, side="right"))
    points = np.concatenate(([lo], report_s[a:b], [hi]))
    return bool(np.max(np.diff(points)) <= MAX_REPORT_GAP_S)


@dataclass
class NightOutcome:
    """One site-night: the fog onset in it, and when an alert that counts for it came."""

    site: str
    night: datetime  # local noon that starts it
    fog_onset: datetime | None = None
    first_watch: datetime | None = None  # the first watch or warning that counts
    first_warning: datetime | None = None  # the first warning that counts
    carried_fog_until: datetime | None = None  # fog from the night before, until
    rules: list[str] = field(default_factory=list)
    why_not: list[str] = field(default_factory=list)  # for a miss: what did not hold

    @property
    def observed(self) -> bool:
        return self.fog_onset is not None

    def first(self, level: str) -> datetime | None:
        """When an alert at ``level`` or above that counts for the night first came."""
        if level == "warning":
            return self.first_warning
        found = [t for t in (self.first_watch, self.first_warning) if t is not None]
        return min(found) if found else None

    def warned(self, level: str) -> bool:
        """An alert that counts for the night — and, on a fog night, before the onset.

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
