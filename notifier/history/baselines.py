"""Reference forecasts that every rule set is scored beside, on the same nights (pure).

- the one-line rule: at 21:00 local, warn if the dew-point depression is at most 2 °C and
  the wind below 3 m/s (common practice: a classic simple predictor);
- always warn and never warn, as categorical tables;
- climatology: the base rate of fog nights as a constant probability, scored by the
  Brier score (docs/references.md [Brier 1950]).

"Better than a one-liner?" is then answered on every replay.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, time

import numpy as np

from notifier.history.verify import Contingency, NightOutcome, table

__all__ = [
    "References",
    "always_warn",
    "brier_score",
    "never_warn",
    "one_liner_warns",
    "references",
]


ONE_LINER_LOCAL = time(21, 0)  # the one-line rule's hour (common practice)

ONE_LINER_DEPRESSION_C = 2.0  # warn at a dew-point depression ≤ 2 °C …

ONE_LINER_WIND_MS = 3.0  # … and a wind below 3 m/s

ONE_LINER_MAX_AGE_S = 3600.0  # its reading at most an hour old


def one_liner_warns(
    reading_times_s: np.ndarray,
    dewpoint_depression_c: np.ndarray,
    wind_ms: np.ndarray,
    at_s: np.ndarray,
) -> np.ndarray:
    """The one-line rule at each of ``at_s`` (POSIX seconds) from one site's readings
    (in time order): the newest reading at or before the time and at most an hour old,
    with a dew-point depression ≤ 2 °C and a wind below 3 m/s. No such reading, or an
    unknown value in it: no warning.

    >>> t = np.array([0.0, 3600.0])
    >>> one_liner_warns(t, np.array([1.0, 3.0]), np.array([1.0, 1.0]),
    ...                 np.array([1800.0, 3600.0, 9000.0])).tolist()
    [True, False, False]
    """
    reading_times_s = np.asarray(reading_times_s, dtype=float)
    at_s = np.asarray(at_s, dtype=float)
    k = np.searchsorted(reading_times_s, at_s, side="right") - 1
    found = k >= 0
    k = np.where(found, k, 0)
    if reading_times_s.size == 0:
        return np.zeros(at_s.shape, dtype=bool)
    fresh = found & (at_s - reading_times_s[k] <= ONE_LINER_MAX_AGE_S)
    with np.errstate(invalid="ignore"):
        moist = np.asarray(dewpoint_depression_c, dtype=float)[k] <= ONE_LINER_DEPRESSION_C
        calm = np.asarray(wind_ms, dtype=float)[k] < ONE_LINER_WIND_MS
    return fresh & moist & calm


def one_liner_time(night: datetime) -> datetime:
    """21:00 local on the evening that starts ``night`` (its local noon), in UTC."""
    return datetime.combine(night.date(), ONE_LINER_LOCAL, night.tzinfo).astimezone(UTC)


def brier_score(probability: Sequence[float], observed: Sequence[bool]) -> float:
    """Mean of (p − o)², o = 1 when the event happened (docs/references.md
    [Brier 1950]); NaN for no forecasts.

    >>> brier_score([0.25] * 4, [True, False, False, False])
    0.1875
    """
    p = np.asarray(probability, dtype=float)
    o = np.asarray(observed, dtype=float)
    return float(np.mean((p - o) ** 2)) if p.size else float("nan")


def always_warn(outcomes: Sequence[NightOutcome]) -> Contingency:
    """Every night warned: each fog night a hit, every other a false alarm."""
    fog = sum(o.observed for o in outcomes)
    return Contingency(hits=fog, false_alarms=len(outcomes) - fog)


def never_warn(outcomes: Sequence[NightOutcome]) -> Contingency:
    """No night warned: each fog night a miss, every other a correct negative."""
    fog = sum(o.observed for o in outcomes)
    return Contingency(misses=fog, correct_negatives=len(outcomes) - fog)


@dataclass
class References:
    """The reference forecasts over the nights a replay scored."""

    one_liner: list[NightOutcome]  # first_warning: 21:00 local on the nights it warned
    base_rate: float  # fog nights / nights
    brier_climatology: float  # the Brier score of the base rate, every night
    always: Contingency
    never: Contingency

    def brier_of(self, outcomes: Sequence[NightOutcome], level: str = "warning") -> float:
        """The Brier score of categorical forecasts (probability 1 when warned, else 0)."""
        return brier_score(
            [1.0 if o.warned(level) else 0.0 for o in outcomes], [o.observed for o in outcomes]
        )

    def brier_of_constant(self, probability: float) -> float:
        """The Brier score of one probability forecast every night."""
        nights = [o.observed for o in self.one_liner]
        return brier_score([probability] * len(nights), nights)

    def as_dict(self) -> dict[str, object]:
        def num(v: float) -> float | None:
            return None if math.isnan(v) else round(v, 4)

        return {
            "one_liner": {
                **table(self.one_liner, "warning").as_dict(),
                "brier": num(self.brier_of(self.one_liner)),
            },
            "always_warn": {**self.always.as_dict(), "brier": num(self.brier_of_constant(1.0))},
            "never_warn": {**self.never.as_dict(), "brier": num(self.brier_of_constant(0.0))},
            "climatology": {
                "base_rate": num(self.base_rate),
                "brier": num(self.brier_climatology),
            },
        }


def references(
    nights: Sequence[NightOutcome],
    readings: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]],
) -> References:
    """The reference forecasts on ``nights`` (the rules' nights, with their onsets);
    ``readings`` per site: (POSIX seconds, dew-point depression °C, wind m/s) of its
    observed rows in time order."""
    one_liner = []
    by_site: dict[str, list[NightOutcome]] = {}
    for o in nights:
        by_site.setdefault(o.site, []).append(o)
    for site, outcomes in by_site.items():
        at = [one_liner_time(o.night) for o in outcomes]
        t, depression, wind = readings.get(site, (np.zeros(0), np.zeros(0), np.zeros(0)))
        warns = one_liner_warns(t, depression, wind, np.array([a.timestamp() for a in at]))
        for o, when, warn in zip(outcomes, at, warns.tolist(), strict=True):
            first = when if warn else None
            one_liner.append(
                NightOutcome(
                    o.site, o.night, fog_onset=o.fog_onset, first_watch=first, first_warning=first
                )
            )
    observed = [o.observed for o in nights]
    base_rate = sum(observed) / len(observed) if observed else float("nan")
    return References(
        one_liner=one_liner,
        base_rate=base_rate,
        brier_climatology=brier_score([base_rate] * len(observed), observed),
        always=always_warn(nights),
        never=never_warn(nights),
    )
