"""The reference forecasts scored beside the rules: the one-line rule, climatology,
always and never warn (notifier.history.verify). Expected values are worked out from
the definitions in the comments, not copied from the code's output."""

from __future__ import annotations

from datetime import UTC, datetime, time, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pytest

from notifier.history.baselines import brier_score, one_liner_warns, references
from notifier.history.verify import NightOutcome, table

LONDON = ZoneInfo("Europe/London")


def _noon(day: int, month: int = 1) -> datetime:
    return datetime(2026, month, day, 12, 0, tzinfo=LONDON)


def _at_21(night: datetime, minutes: float = 0.0) -> float:
    """POSIX seconds of 21:00 local on the evening of ``night``, plus ``minutes``."""
    return (
        datetime.combine(night.date(), time(21, 0), LONDON) + timedelta(minutes=minutes)
    ).timestamp()


# Each hand-made night: the readings (minutes from 21:00 local, depression °C, wind m/s),
# and whether the one-liner warns — "at 21:00 local, warn if the dew-point depression is
# ≤ 2 °C and wind < 3 m/s, from the newest reading at or before 21:00 within the last hour".
ONE_LINER = [
    ("moist-and-calm", [(0, 1.5, 2.0)], True),
    ("depression-at-2-warns", [(0, 2.0, 1.0)], True),  # ≤ 2 °C
    ("depression-above-2", [(0, 2.1, 1.0)], False),
    ("wind-at-3-does-not", [(0, 1.0, 3.0)], False),  # < 3 m/s, strictly
    ("an-hour-old-counts", [(-60, 1.0, 1.0)], True),  # within the last hour
    ("older-is-no-reading", [(-61, 1.0, 1.0)], False),  # none in the hour: no warning
    ("later-reading-ignored", [(-30, 3.5, 1.0), (10, 0.5, 1.0)], False),  # 21:10 is after
    ("newest-wins", [(-50, 0.5, 1.0), (-10, 4.0, 1.0)], False),  # the 20:50 one says no
    ("unknown-wind", [(0, 1.0, np.nan)], False),  # unknown is not calm
    ("no-readings", [], False),
]


@pytest.mark.parametrize(
    ("readings", "warns"), [c[1:] for c in ONE_LINER], ids=[c[0] for c in ONE_LINER]
)
def test_the_one_liner_on_hand_made_nights(readings, warns):
    night = _noon(10)
    t = np.array([_at_21(night, m) for m, _, _ in readings])
    depression = np.array([d for _, d, _ in readings])
    wind = np.array([w for _, _, w in readings])
    got = one_liner_warns(t, depression, wind, np.array([_at_21(night)]))
    assert got.tolist() == [warns]


def test_the_one_liner_is_21_local_across_daylight_saving():
    # 2026-07-01 is summer time in London: 21:00 BST is 20:00 UTC. A reading at 20:00 UTC
    # is at 21:00 local; one at 21:00 UTC is after it and does not count.
    night = _noon(1, month=7)
    at = night.replace(hour=21).astimezone(UTC)
    assert at.hour == 20
    readings = {"s": (np.array([at.timestamp()]), np.array([1.0]), np.array([1.0]))}
    refs = references([NightOutcome("s", night)], readings)
    assert refs.one_liner[0].first_warning == at
    late = {"s": (np.array([at.timestamp() + 3600.0]), np.array([1.0]), np.array([1.0]))}
    assert references([NightOutcome("s", night)], late).one_liner[0].first_warning is None


def test_references_score_the_same_nights_with_the_same_onsets():
    # four nights; the one-liner warns on nights 0, 1 and 2 (moist and calm at 21:00),
    # not on night 3. Fog began at 03:00 after nights 0 and 3, and at 18:00 on night 1
    # (before 21:00, so that warning came late).
    nights = [_noon(d) for d in range(10, 14)]
    onsets = [
        nights[0] + timedelta(hours=15),
        nights[1] + timedelta(hours=6),
        None,
        nights[3] + timedelta(hours=15),
    ]
    outcomes = [NightOutcome("s", n, fog_onset=o) for n, o in zip(nights, onsets, strict=True)]
    t = np.array([_at_21(n) for n in nights])
    readings = {"s": (t, np.array([1.0, 1.0, 1.0, 5.0]), np.array([1.0, 1.0, 1.0, 1.0]))}
    refs = references(outcomes, readings)
    one = table(refs.one_liner, "warning")
    # night 0: warned at 21:00 before 03:00: hit; night 1: warned after the 18:00 onset:
    # miss; night 2: warned, no fog: false alarm; night 3: not warned, fog: miss
    assert (one.hits, one.misses, one.false_alarms, one.correct_negatives) == (1, 2, 1, 0)
    assert [o.fog_onset for o in refs.one_liner] == onsets
    # climatology: 3 fog nights of 4, p = 0.75; its Brier score is p(1−p)² on each fog
    # night and p² on the other, averaged: 0.75·0.0625 + 0.25·0.5625 = 0.1875 = p(1−p)
    assert refs.base_rate == pytest.approx(0.75)
    assert refs.brier_climatology == pytest.approx(0.75 * 0.25)
    # always warn: every fog night a hit, the other a false alarm; never warn the reverse
    assert (refs.always.hits, refs.always.false_alarms, refs.always.misses) == (3, 1, 0)
    assert refs.always.pod == 1.0 and refs.always.far == pytest.approx(0.25)
    assert refs.always.csi == pytest.approx(0.75) and refs.always.bias == pytest.approx(4 / 3)
    assert (refs.never.misses, refs.never.correct_negatives, refs.never.hits) == (3, 1, 0)
    assert refs.never.pod == 0.0 and refs.never.csi == 0.0 and np.isnan(refs.never.far)
    # a yes/no forecast's Brier score is the share of nights it got wrong: (b + c)/n
    assert refs.brier_of(refs.one_liner) == pytest.approx(3 / 4)
    assert refs.brier_of_constant(1.0) == pytest.approx(1 / 4)
    assert refs.brier_of_constant(0.0) == pytest.approx(3 / 4)


def test_brier_score_is_the_mean_squared_probability_error():
    # docs/references.md [Brier 1950]: (0.9−1)² + (0.2−0)² + (0.5−1)² over 3
    assert brier_score([0.9, 0.2, 0.5], [True, False, True]) == pytest.approx(
        (0.01 + 0.04 + 0.25) / 3
    )
    assert np.isnan(brier_score([], []))
