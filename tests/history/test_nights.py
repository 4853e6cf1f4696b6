"""What a fog night is, and which alerts count for it (notifier.history.verify).

Every expected value below is worked out from the definitions in verify's docstring,
case by case, in the comment beside it; none is copied from the code's output.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest

from notifier.history.replay import replay
from notifier.history.verify import (
    NightOutcome,
    alert_for_night,
    fog_observed,
    fog_reports,
    fog_spells,
    night_fog,
    night_watched,
)
from notifier.service.loading import load

# -- fog at the site, report by report (WMO-No. 8; WMO-No. 306, FM 15) --------------------


@pytest.mark.parametrize(
    ("vis", "wx", "fog"),
    [
        (999.0, "", True),  # visibility below 1000 m: fog (WMO-No. 8)
        (1000.0, "", False),  # 1000 m is not below 1000 m
        (np.nan, "FZFG", True),  # freezing fog at the site
        (np.nan, "FG", True),
        (3000.0, "BR", False),  # mist
        (9999.0, "VCFG", False),  # fog in the vicinity, not at the site
        (5000.0, "MIFG", False),  # shallow fog: reported with visibility ≥ 1 km
        (3000.0, "BCFG", False),  # patches
        (2000.0, "PRFG", False),  # part of the aerodrome
        (np.nan, "-DZ BCFG", False),  # drizzle and fog patches: no fog at the site
        (800.0, "BCFG", True),  # the visibility still says fog
        (800.0, "+RA", False),  # heavy rain: low visibility, not fog
        (600.0, "SHSN", False),  # snow showers
        (900.0, "-DZ", False),  # drizzle
        (700.0, "BLSN", False),  # blowing snow
        (600.0, "RA FG", True),  # rain with fog reported: fog
        (800.0, "VCSH", True),  # showers in the vicinity do not explain it: fog
        (np.nan, None, False),
    ],
    ids=lambda v: repr(v),
)
def test_fog_at_the_site(vis, wx, fog):
    assert fog_observed(vis, wx) is fog


def test_a_report_that_says_nothing_is_not_known():
    fog, known = fog_reports(
        np.array([np.nan, np.nan, 500.0, np.nan]), np.array([None, "", None, "RA"], dtype=object)
    )
    assert fog.tolist() == [False, False, True, False]
    assert known.tolist() == [False, False, True, True]


T0 = datetime(2026, 1, 5, 12, 0, tzinfo=UTC)


def _at(hours: float) -> datetime:
    return T0 + timedelta(hours=hours)


@pytest.mark.parametrize(
    ("minutes", "fog", "onsets"),
    [
        # hourly: one report of fog between clear ones is a dip, not a spell
        ([0, 60, 120], [False, True, False], []),
        # two consecutive hourly reports, 60 min apart: confirmed, onset at the first
        ([0, 60, 120, 180], [False, True, True, False], [60]),
        # 10-minute data: two reports span 10 minutes, under 20: not confirmed …
        ([0, 10, 20, 30], [False, True, True, False], []),
        # … three span 20 minutes: confirmed
        ([0, 10, 20, 30, 40], [False, True, True, True, False], [10]),
        # two spells with a clear report between: two onsets
        ([0, 60, 120, 180, 240], [True, True, False, True, True], [0, 180]),
    ],
    ids=["hourly-dip", "hourly-two", "10min-two", "10min-three", "two-spells"],
)
def test_a_spell_needs_two_reports_twenty_minutes_apart(minutes, fog, onsets):
    times = [T0 + timedelta(minutes=m) for m in minutes]
    found = fog_spells(times, fog)
    assert [s.onset for s in found] == [T0 + timedelta(minutes=m) for m in onsets]


# -- nights: onsets and the alerts that count ------------------------------------------------
#
# Two nights, UTC: night A from hour 0 (noon) to 24, night B from 24 to 48. Reports are
# hourly, clear (20 km) except the fog hours given; the alert level is given as
# (from hour, to hour, level) periods, sampled on an hourly step grid.

CLEAR = (20000.0, "")
FOG = (200.0, "FG")


def _night(
    fog_hours: list[float],
    alerts: list[tuple[float, float, int]],
    night: int,
    other: tuple[float, str] = FOG,
) -> NightOutcome:
    hours = np.arange(0.0, 49.0)
    vis = np.array([other[0] if h in fog_hours else CLEAR[0] for h in hours])
    wx = np.array([other[1] if h in fog_hours else CLEAR[1] for h in hours], dtype=object)
    fog, known = fog_reports(vis, wx)
    spells = fog_spells([_at(h) for h in hours[known]], fog[known].tolist())
    times_s = np.array([_at(h).timestamp() for h in hours])
    levels = np.array([max((lv for a, b, lv in alerts if a <= h < b), default=0) for h in hours])
    start, end = _at(24 * night), _at(24 * night + 24)
    onset, carried = night_fog(spells, start, end)
    o = NightOutcome("s", start, fog_onset=onset, carried_fog_until=carried)
    s = lambda t: None if t is None else t.timestamp()  # noqa: E731
    for rank, name in ((1, "first_watch"), (2, "first_warning")):
        when = alert_for_night(times_s, levels, rank, s(start), s(end), s(onset), s(carried))
        setattr(o, name, None if when is None else datetime.fromtimestamp(when, UTC))
    return o


def _hours(a: float, b: float) -> list[float]:
    return [float(h) for h in range(int(a), int(b) + 1)]


WATCH, WARNING = 1, 2

NIGHTS = [
    # fog from 03:00 (hour 15) to 14:00 (hour 26), past noon; a warning from 02:00 to
    # 15:00. Night A: fog began at hour 15, the warning came at 14 before it: a hit.
    ("carried-fog-night-a", _hours(15, 26), [(14, 27, WARNING)], 0, _at(15), "hit"),
    # Night B: the fog was there when it began (its onset lies in night A), so no onset;
    # the warning was raised in night A and is in force from that fog: it does not count.
    ("carried-fog-night-b", _hours(15, 26), [(14, 27, WARNING)], 1, None, "correct_negative"),
    # no fog; a warning raised at 10:00 (hour 22, night A) still in force at 13:00 (25):
    # a false alarm for night A, nothing for night B (not raised in it, no onset).
    ("carried-warning-a", [], [(22, 26, WARNING)], 0, None, "false_alarm"),
    ("carried-warning-b", [], [(22, 26, WARNING)], 1, None, "correct_negative"),
    # fog carried to 13:00 (hour 25), clear from 14:00, fog again from 02:00 (hour 38);
    # the warning ends at 14:00 and is raised again at 01:00 (37): night B has an onset
    # at hour 38 and a warning raised in it an hour before: a hit.
    (
        "new-onset-after-clearing",
        _hours(15, 25) + _hours(38, 42),
        [(14, 26, WARNING), (37, 43, WARNING)],
        1,
        _at(38),
        "hit",
    ),
    # the same fogs, no new warning in night B: the carried warning had ended, so nothing
    # counts for the onset at 38: a miss.
    (
        "new-onset-no-new-warning",
        _hours(15, 25) + _hours(38, 42),
        [(14, 26, WARNING)],
        1,
        _at(38),
        "miss",
    ),
    # fog carried to 12:00 (hour 24), clear at 13:00, fog again from 14:00 (26): the
    # warning stayed in force throughout, so it was in force at the onset: a hit.
    ("in-force-at-onset", _hours(15, 24) + _hours(26, 30), [(14, 31, WARNING)], 1, _at(26), "hit"),
    # a watch carried over, escalated to warning at 13:00 (25) while the carried fog is
    # still there: not a new alert for night B, which has no onset.
    (
        "escalated-in-carried-fog",
        _hours(15, 27),
        [(14, 25, WATCH), (25, 29, WARNING)],
        1,
        None,
        "correct_negative",
    ),
    # fog from 02:00 (38); the warning came with it (raised by the fog at 38): late, a miss.
    ("late-warning", _hours(38, 42), [(38, 44, WARNING)], 1, _at(38), "miss"),
    # a single fog report at 38 (a dip): no onset; the warning it raised counts: a false alarm.
    ("one-report-dip", [38.0], [(38, 40, WARNING)], 1, None, "false_alarm"),
]


@pytest.mark.parametrize(
    ("fog_hours", "alerts", "night", "onset", "category"),
    [case[1:] for case in NIGHTS],
    ids=[case[0] for case in NIGHTS],
)
def test_which_nights_are_fog_and_which_alerts_count(fog_hours, alerts, night, onset, category):
    o = _night(fog_hours, alerts, night)
    assert o.fog_onset == onset
    assert o.category("warning") == category


def test_a_carried_warning_at_the_onset_leads_from_the_night_start():
    # in force at the onset at hour 26 since hour 14 (night A): first in force in night B
    # at its start, hour 24, so the lead is 2 h
    o = _night(_hours(15, 24) + _hours(26, 30), [(14, 31, WARNING)], 1)
    assert o.lead_min("warning") == 120


@pytest.mark.parametrize(
    ("what", "vis_wx"),
    [
        ("VCFG", (9999.0, "VCFG")),
        ("MIFG", (5000.0, "MIFG")),
        ("BCFG", (3000.0, "BCFG")),
        ("PRFG", (2000.0, "PRFG")),
        ("rain-low-visibility", (800.0, "+RA")),
    ],
)
def test_nights_of_fog_not_at_the_site_are_no_event(what, vis_wx):
    # five hours of it from 02:00 (38) in night B, with a warning then: no fog began at
    # the site, so the warning raised in the night is a false alarm; without one, quiet
    warned = _night(_hours(38, 42), [(38, 44, WARNING)], 1, other=vis_wx)
    quiet = _night(_hours(38, 42), [], 1, other=vis_wx)
    assert warned.fog_onset is None and warned.category("warning") == "false_alarm"
    assert quiet.category("warning") == "correct_negative"


# -- the same definitions through a replay -------------------------------------------------

CONFIG = """\
version: 1
sites:
  - {id: moor, name: Moor, lat: 52.3, lon: -1.8, timezone: Europe/London,
     exposure: open, use: farm}
store: {url: "sqlite:///nights.sqlite"}
"""


def _hourly(start: datetime, hours: int, fog: set[int]) -> pd.DataFrame:
    """Hourly readings: fog (200 m, saturated) at the hours in ``fog``, else dry and
    windy (no rule can warn: wind 7 m/s, 6 °C from saturation, overcast)."""
    rows = []
    for h in range(hours):
        foggy = h in fog
        rows.append(
            {
                "site": "moor",
                "time": start + timedelta(hours=h),
                "kind": "obs",
                "temp_c": 5.0,
                "dewpoint_c": 5.0 if foggy else -1.0,
                "wind_ms": 1.0 if foggy else 7.0,
                "cloud_pct": 100.0,
                "visibility_m": 200.0 if foggy else 20000.0,
                "weather": "FG" if foggy else "",
            }
        )
    frame = pd.DataFrame(rows)
    frame["time"] = pd.to_datetime(frame["time"], utc=True)
    return frame


def test_replay_scores_fog_past_noon_on_the_night_it_began(tmp_path):
    cfg = tmp_path / "fogwatch.yaml"
    cfg.write_text(CONFIG)
    loaded = load(cfg)
    start = datetime(2026, 1, 5, 12, 0, tzinfo=UTC)  # noon in London in winter
    # fog from 03:00 on the 6th (hour 15) until 14:00 (hour 26), past noon; and fog again
    # from 03:00 on the 7th (hour 39) to 07:00
    fog = set(range(15, 27)) | set(range(39, 44))
    obs = _hourly(start - timedelta(hours=30), 30 + 72, {h + 30 for h in fog})
    result = replay(loaded, obs, start, start + timedelta(hours=48), step_s=3600.0)
    first, second = result.nights
    # night 1: fog began at 03:00 and only the observed fog raised the warning (the air
    # was far from saturation and windy until then): a late miss
    assert first.fog_onset == start + timedelta(hours=15)
    assert first.category("warning") == "miss"
    # night 2: the fog at noon was carried over, not a new onset; the new onset is the
    # fog of 03:00 on the 7th, after the first cleared; again warned only by itself
    assert second.carried_fog_until == start + timedelta(hours=27)
    assert second.fog_onset == start + timedelta(hours=39)
    assert second.category("warning") == "miss" and second.lead_min("warning") == 0
    # without the second fog, night 2 has no event, and the warning still in force at
    # noon from the carried fog is not a false alarm
    dry = obs[~obs["time"].isin([start + timedelta(hours=h) for h in range(39, 44)])]
    dry = pd.concat([dry, _hourly(start + timedelta(hours=39), 5, set())], ignore_index=True)
    again = replay(loaded, dry, start, start + timedelta(hours=48), step_s=3600.0)
    assert again.nights[1].fog_onset is None
    assert again.nights[1].first_warning is None
    assert again.nights[1].category("warning") == "correct_negative"


# -- nights without observations are not scored -------------------------------------------
# A forecast is verified against an observation or not at all (docs/references.md
# [Wilks]); reports every 3 h, the synoptic observing hours, still watch a night
# (WMO-No. 8, from memory).

NOON = datetime(2001, 3, 1, 12, 0, tzinfo=UTC)


@pytest.mark.parametrize(
    ("hours", "watched"),
    [
        (list(range(0, 25)), True),  # hourly all night
        (list(range(0, 25, 3)), True),  # 3-hourly: 18:00, 21:00, … 09:00 exactly
        ([h for h in range(25) if not 10 <= h <= 13], False),  # 21:00 → 02:00 is 5 h
        ([h for h in range(25) if not 10 <= h <= 11], True),  # 21:00 → 00:00 is 3 h
        (list(range(0, 19)), True),  # to 06:00, then 06:00 → 09:00 is 3 h
        (list(range(0, 18)), False),  # to 05:00: 4 h without a report before 09:00
        (list(range(10, 25)), False),  # from 22:00: 18:00 → 22:00 is 4 h
        ([], False),  # nothing at all
    ],
    ids=["hourly", "3-hourly", "5-h gap", "3-h gap", "ends 06:00", "ends 05:00", "late", "none"],
)
def test_a_night_is_scored_only_where_it_was_watched(hours, watched):
    seconds = np.array([NOON.timestamp() + 3600.0 * h for h in hours], dtype=float)
    assert night_watched(seconds, NOON) is watched


def test_replay_leaves_nights_without_visibility_out_of_every_score(tmp_path):
    cfg = tmp_path / "fogwatch.yaml"
    cfg.write_text(CONFIG)
    loaded = load(cfg)
    start = datetime(2026, 1, 5, 12, 0, tzinfo=UTC)
    # two nights of dry, windy readings; on the second the visibility is not reported
    # from 20:00 to 04:00 (hours 32 to 40): 9 h without a word on fog
    obs = _hourly(start - timedelta(hours=30), 30 + 72, set())
    blind = (obs["time"] >= start + timedelta(hours=32)) & (
        obs["time"] <= start + timedelta(hours=40)
    )
    obs.loc[blind, ["visibility_m", "weather"]] = [np.nan, None]
    result = replay(loaded, obs, start, start + timedelta(hours=48), step_s=3600.0)
    assert [n.night.date() for n in result.nights] == [start.date()]
    assert [n.night.date() for n in result.unwatched] == [(start + timedelta(days=1)).date()]
    # every table counts the first night only: the rules and the references alike
    assert result.table().n == 1
    assert len(result.references.one_liner) == 1
    from notifier.history.report import report_text, to_json

    assert "1 more site-night(s) not scored" in report_text([result])
    assert to_json([result])["rules"]["unwatched_nights"] == [
        {"site": "moor", "night": (start + timedelta(days=1)).date().isoformat()}
    ]
