"""Lifecycle tables for reminders (per site, none once the hazard is seen) and for a data
gap under a warning (held for ``gap_grace``, told once when short).

Each row is a night in 10-minute steps. The fog and icing strings use the codes of
``tests/engine/test_lifecycle_news.py`` ('.' none, 'w' watch, 'W' warning, 'F' warning with
fog reported, 'D' dense, 'Z' freezing fog); a data string gives each step's data: '.'
fresh, 's' stale (no reading for longer than ``alerts.stale_after``, 90 min: three missed
half-hourly reports, common practice, as rules/data.yaml says).
"""

from __future__ import annotations

from datetime import timedelta

import pytest

from notifier.core.config import AlertSettings
from notifier.engine.assessment import HazardAssessment
from notifier.engine.lifecycle import step
from tests.engine.test_lifecycle_news import STEP, T0, assessment

# the defaults: 45 min clearing, 3 h reminders, 60 min cooldown, 45 min gap grace
SETTINGS = AlertSettings()


def gap_hazard() -> HazardAssessment:
    return HazardAssessment(
        hazard="data_gap",
        level="watch",
        kind="stale",
        eta=None,
        rules=["data-gap"],
        reasons=["data stale: yes"],
        explanations=[],
        safety_refs=[],
    )


def night(fog: str, data: str = "", icing: str = "", settings: AlertSettings = SETTINGS):
    """[(step, event)] for the night; the data string marks the stale steps."""
    data = data or "." * len(fog)
    icing = icing or "." * len(fog)
    states: dict = {}
    out = []
    last_fresh = T0
    for i, (f, d, c) in enumerate(zip(fog, data, icing, strict=True)):
        now = T0 + i * STEP
        sa = assessment(now, f, c)
        if d == "s":
            age = (now - last_fresh).total_seconds() / 60 + 100.0  # past the 90 min
            sa.features = {**sa.features, "data_age_min": age}
            sa.last_time = last_fresh
            sa.hazards["data_gap"] = gap_hazard()
            sa.sustain["data_gap"] = "watch"
        else:
            last_fresh = now
        states, events = step(states, [sa], now, settings)
        again, none = step(states, [sa], now, settings)
        assert none == [] and again == states  # a re-run cycle adds nothing
        out.extend((i, e) for e in events)
    return out


def brief(found):
    return [(i, e.hazard, e.type) for i, e in found]


REMINDERS = [
    # (fog, icing, expected reminders (step, hazard))
    # a warning still waiting for its fog: a reminder each 3 h of no news
    ("W" * 40, "", [(18, "fog"), (36, "fog")]),
    # fog seen at step 2: its next news is its change or its end, never a reminder
    ("WWF" + "F" * 40, "", []),
    # reminded while waiting, then seen at step 20: no reminder after the sighting
    ("W" * 20 + "F" * 30, "", [(18, "fog")]),
    # fog seen, icing still forecast: only the icing is reminded of, 3 h after the
    # site's last news (the sighting at step 2)
    ("WWF" + "F" * 30, "W" * 33, [(20, "icing")]),
    # a watch is never reminded of
    ("w" * 40, "", []),
]
REMINDER_IDS = [
    "waiting-warning-reminded",
    "seen-never-reminded",
    "reminded-until-seen",
    "only-the-unseen-hazard",
    "no-watch-reminders",
]


@pytest.mark.parametrize(("fog", "icing", "expected"), REMINDERS, ids=REMINDER_IDS)
def test_reminders_only_while_the_hazard_is_awaited(fog, icing, expected):
    found = night(fog, icing=icing)
    got = [(i, e.hazard) for i, e in found if e.type == "reminder"]
    assert got == expected
    for i, _ in got:  # never within reminder_every of any other news of the site
        earlier = [j for j, e in found if j < i]
        assert earlier and (i - max(earlier)) * STEP >= timedelta(hours=3)


GAPS = [
    # (fog, data, expected (step, hazard, type))
    # under a warning, a gap closing within the 45 min grace: one data_back, at its end
    (
        "W" * 10,
        "...sss....",
        [(0, "fog", "raised"), (6, "data_gap", "data_back")],
    ),
    # under a warning, a gap past the grace: data_gap when the grace ends (noticed at
    # step 3, 45 min later is step 7.5: step 8), data_back when readings return
    (
        "W" * 14,
        "...sssssss....",
        [(0, "fog", "raised"), (8, "data_gap", "data_gap"), (10, "data_gap", "data_back")],
    ),
    # under a watch the gap is said at once: silence could hide a rising hazard
    (
        "w" * 10,
        "...sss....",
        [(0, "fog", "raised"), (3, "data_gap", "data_gap"), (6, "data_gap", "data_back")],
    ),
    # with no alert at all, likewise
    (
        "." * 10,
        "...sss....",
        [(3, "data_gap", "data_gap"), (6, "data_gap", "data_back")],
    ),
]
GAP_IDS = ["short-gap-told-once", "long-gap-told-twice", "gap-under-watch", "gap-alone"]


@pytest.mark.parametrize(("fog", "data", "expected"), GAPS, ids=GAP_IDS)
def test_a_short_gap_under_a_warning_is_told_once(fog, data, expected):
    found = night(fog, data)
    assert brief(found) == expected
    backs = [e for _, e in found if e.type == "data_back"]
    gaps = [e for _, e in found if e.type == "data_gap"]
    for back in backs:
        # the gap's start (the newest reading before it) is carried, so no information
        # is lost when the gap itself was never sent on its own
        assert back.gap_from == T0 + 2 * STEP
        assert back.gap_untold == (not gaps)
        assert back.news_level == "watch" and back.changes
        # and says the site's alert that stayed in force through it
        assert back.in_force == {"W": ("fog:warning",), "w": ("fog:watch",)}.get(fog[0], ())
    for gap in gaps:
        assert gap.gap_from == T0 + 2 * STEP


def test_the_warning_holds_through_the_gap_and_no_one_hears_it_eased():
    # stale data is not an all-clear: the fog warning keeps its level through the gap
    found = night("W" * 4 + "." * 6, "...sss....")
    types = [(i, e.hazard, e.type) for i, e in found]
    assert (6, "data_gap", "data_back") in types
    # the warning's clearing clock starts only once readings are back (step 6): 45 min
    # later, at step 11 at the earliest, not during the gap
    assert all(not (e.type == "cleared" and i < 10) for i, e in found)


def test_no_grace_says_every_gap_at_once():
    off = AlertSettings(gap_grace="0")
    found = night("W" * 10, "...sss....", settings=off)
    assert brief(found) == [
        (0, "fog", "raised"),
        (3, "data_gap", "data_gap"),
        (6, "data_gap", "data_back"),
    ]


def test_a_held_gap_survives_a_store_round_trip():
    from notifier.engine.alerts import AlertState

    states: dict = {}
    for i, d in enumerate("..ss"):
        now = T0 + i * STEP
        sa = assessment(now, "W")
        if d == "s":
            sa.features = {**sa.features, "data_age_min": 120.0}
            sa.last_time = T0 + STEP
            sa.hazards["data_gap"] = gap_hazard()
            sa.sustain["data_gap"] = "watch"
        states, _ = step(states, [sa], now, SETTINGS)
    held = states[(sa.site.id, "data_gap")]
    assert held.gap_pending_since == T0 + 2 * STEP and held.gap_from == T0 + STEP
    assert AlertState.from_dict(held.to_dict()) == held


ENDINGS = [
    # (fog, icing, expected (step, hazard, type, in_force))
    # the fog ends under an icing warning: its all-clear says the icing stands
    ("W" * 3 + "." * 9, "W" * 12, [(8, "fog", "cleared", ("icing:warning",))]),
    # both end: the last all-clear is the site's, with nothing left in force (below the
    # level from step 3 and step 5; each ends 45 min later, alerts.clearing_time)
    (
        "W" * 3 + "." * 9,
        "W" * 5 + "." * 7,
        [(8, "fog", "cleared", ("icing:warning",)), (10, "icing", "cleared", ())],
    ),
    # the fog eases to a watch that holds, under an icing watch
    ("W" * 3 + "w" * 9, "i" * 12, [(8, "fog", "downgraded", ("icing:watch",))]),
]
ENDING_IDS = ["fog-ends-icing-stands", "both-end", "eased-beside-a-watch"]


@pytest.mark.parametrize(("fog", "icing", "expected"), ENDINGS, ids=ENDING_IDS)
def test_an_ending_names_the_sites_alerts_still_in_force(fog, icing, expected):
    found = night(fog, icing=icing)
    ends = [
        (i, e.hazard, e.type, e.in_force) for i, e in found if e.type in ("cleared", "downgraded")
    ]
    assert ends == expected
