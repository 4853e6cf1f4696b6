"""Lifecycle tables for the news a person needs at once (the hazard seen, its time an hour
sooner), for the no-false-step rule, and for reminders per site.

Each row is a night in 10-minute steps; each character one assessment of the fog hazard:
'.' none, 'w' watch (forecast), 'W' warning (forecast), 'F' warning with fog reported,
'D' warning with dense fog. A second string gives the icing hazard the same way, with
'Z' a warning with freezing fog reported.
"""

from __future__ import annotations

from datetime import timedelta

import pytest

from notifier.core.config import AlertSettings
from notifier.engine.assessment import HazardAssessment, SiteAssessment
from notifier.engine.lifecycle import step
from tests.delivery.scenes import FEATURES, SETTINGS, site, utc

SITE = site("test-meadow")
T0 = utc(2026, 1, 10, 18, 0)
STEP = timedelta(minutes=10)
CODES = {
    # code: (level, kinds of the rules that fired at that level, kind of the lead rule)
    "w": ("watch", ("radiation",), "radiation"),
    "W": ("warning", ("radiation",), "radiation"),
    "F": ("warning", ("radiation", "observed"), "radiation"),
    "D": ("warning", ("radiation", "observed", "dense"), "radiation"),
    "Z": ("warning", ("freezing-fog",), "freezing-fog"),
    "i": ("watch", ("frost",), "frost"),
}


def hazard(name: str, code: str, at, eta_h: float | None) -> HazardAssessment:
    level, kinds, kind = CODES[code]
    seen = any(k in ("observed", "dense", "freezing-fog") for k in kinds)
    eta = at if seen else (None if eta_h is None else at + timedelta(hours=eta_h))
    return HazardAssessment(
        hazard=name,
        level=level,
        kind=kind,
        eta=eta,
        eta_method="observed" if seen else ("cooling-curve" if eta is not None else ""),
        kinds=kinds,
        rules=[f"{name}-{code}"],
        reasons=[f"{name} reason {code}"],
        explanations=[],
        safety_refs=[],
    )


def assessment(at, fog: str, icing: str = ".", eta_h: float | None = None) -> SiteAssessment:
    hazards = {}
    for name, code in (("fog", fog), ("icing", icing)):
        if code != ".":
            hazards[name] = hazard(name, code, at, eta_h)
    return SiteAssessment(
        site=SITE,
        time=at,
        features={**FEATURES, "data_age_min": 5.0},
        projection_method="cooling-fit",
        last_time=at,
        results=[],
        hazards=hazards,
        sustain={h.hazard: h.level for h in hazards.values()},
    )


def run(fog: str, icing: str = "", etas=None, settings: AlertSettings = SETTINGS):
    """[(step, hazard, type, level, seen)] for the night; ``etas[i]`` hours ahead."""
    icing = icing or "." * len(fog)
    states: dict = {}
    out = []
    for i, (f, c) in enumerate(zip(fog, icing, strict=True)):
        now = T0 + i * STEP
        sa = [assessment(now, f, c, None if etas is None else etas[i])]
        states, events = step(states, sa, now, settings)
        again, none = step(states, sa, now, settings)
        assert none == [] and again == states  # a re-run cycle adds nothing
        out.extend((i, e.hazard, e.type, e.level, e.seen) for e in events)
    return out


NEWS = [
    # (fog, icing, expected) — news of the hazard seen, at once
    (
        "WWWFFF",
        "",
        [(0, "fog", "raised", "warning", ()), (3, "fog", "observed", "warning", ("observed",))],
    ),
    (
        "WWFFDD",
        "",
        [
            (0, "fog", "raised", "warning", ()),
            (2, "fog", "observed", "warning", ("observed",)),
            (4, "fog", "observed", "warning", ("dense",)),
        ],
    ),
    # fog reported at once with the warning: the rise says it, no second message
    ("FFFF", "", [(0, "fog", "raised", "warning", ("observed",))]),
    # fog that comes and goes under the same warning is told once per episode
    (
        "WWFWWFF",
        "",
        [(0, "fog", "raised", "warning", ()), (2, "fog", "observed", "warning", ("observed",))],
    ),
    # freezing fog under an icing warning that began as frost on the ground
    (
        "WWWW",
        "iiZZ",
        [
            (0, "fog", "raised", "warning", ()),
            (0, "icing", "raised", "watch", ()),
            (2, "icing", "escalated", "warning", ("freezing-fog",)),
        ],
    ),
    # mist under a watch is not "seen" news: only a warning's sightings are
    ("wwww", "", [(0, "fog", "raised", "watch", ())]),
]
NEWS_IDS = [
    "fog-forms-under-a-warning",
    "fog-forms-then-turns-dense",
    "seen-at-the-rise-is-one-message",
    "seen-once-per-episode",
    "freezing-fog-escalates-icing",
    "no-sighting-news-at-watch",
]


@pytest.mark.parametrize(("fog", "icing", "expected"), NEWS, ids=NEWS_IDS)
def test_news_of_the_hazard_seen(fog, icing, expected):
    assert run(fog, icing) == expected


SOONER = [
    # the announced time is 4 h ahead; 70 min earlier is news, 50 min earlier is not
    ([4.0, 4.0 - 1 / 6, 4.0 - 2 / 6 - 70 / 60], [(0, "raised"), (2, "sooner")]),
    ([4.0, 4.0 - 1 / 6, 4.0 - 2 / 6 - 50 / 60], [(0, "raised")]),
    # later is never news, nor a time where there was none
    ([4.0, 6.0, 8.0], [(0, "raised")]),
    ([None, None, 1.0], [(0, "raised")]),
    # compared with the last time announced: 40 min earlier twice is not an hour
    ([4.0, 4.0 - 1 / 6 - 40 / 60, 4.0 - 2 / 6 - 80 / 60], [(0, "raised"), (2, "sooner")]),
]
SOONER_IDS = ["70-min-sooner", "50-min-sooner", "later", "first-time", "against-announced"]


@pytest.mark.parametrize(("etas", "expected"), SOONER, ids=SOONER_IDS)
def test_an_arrival_time_an_hour_sooner_is_news(etas, expected):
    got = run("W" * len(etas), etas=etas)
    assert [(i, t) for i, _, t, _, _ in got] == expected


FALSE_STEPS = [
    # a warning whose watch rule fires when it has eased 45 min: down to watch, with the
    # watch rule's own reasons; then the all-clear 45 min after the watch ends
    # (below the warning from step 1; 45 min later, at 10-minute steps, is step 6)
    ("W" + "w" * 6 + "." * 6, [(0, "raised", "warning"), (6, "downgraded", "watch")]),
    # no watch rule fires once the warning has eased: the all-clear comes directly
    ("W" + "w" * 2 + "." * 8, [(0, "raised", "warning"), (6, "cleared", "none")]),
    ("W" + "." * 8, [(0, "raised", "warning"), (6, "cleared", "none")]),
]
FALSE_STEP_IDS = ["down-to-a-watch-that-fires", "straight-to-all-clear", "warning-ends"]


@pytest.mark.parametrize(("fog", "expected"), FALSE_STEPS, ids=FALSE_STEP_IDS)
def test_no_false_steps(fog, expected):
    settings = AlertSettings(clearing_time="45min", reminder_every="3h", cooldown="60min")
    states: dict = {}
    events = []
    for i, code in enumerate(fog):
        now = T0 + i * STEP
        states, found = step(states, [assessment(now, code)], now, settings)
        events.extend((i, e) for e in found)
    assert [(i, e.type, e.level) for i, e in events][: len(expected)] == expected
    for _, e in events:
        assert e.reasons or e.changes, e  # every event carries its reasons
        if e.type == "downgraded":
            assert e.reasons == ("fog reason w",)  # the watch's own, not the warning's
        if e.type == "cleared":
            assert e.peak_level == "warning" and e.news_level == "warning"


def test_the_all_clear_after_a_downgrade_is_still_news_of_the_warning():
    fog = "W" + "w" * 6 + "." * 8
    states: dict = {}
    events = []
    for i, code in enumerate(fog):
        now = T0 + i * STEP
        states, found = step(states, [assessment(now, code)], now, SETTINGS)
        events.extend(found)
    assert [e.type for e in events] == ["raised", "downgraded", "cleared"]
    cleared = events[-1]
    assert cleared.previous_level == "watch" and cleared.news_level == "warning"


def test_fog_and_icing_reminders_go_together_per_site():
    # fog warning from step 0, icing warning from step 2: before, a reminder each 3 h
    # after its own start (20 min apart); now one reminder time for the site, 3 h after
    # its last news (the icing warning at step 2)
    fog, icing = "W" * 40, "..WW" + "W" * 36
    got = [(i, h, t) for i, h, t, _, _ in run(fog, icing) if t == "reminder"]
    assert got == [(20, "fog", "reminder"), (20, "icing", "reminder")] + [
        (38, "fog", "reminder"),
        (38, "icing", "reminder"),
    ]


def test_news_of_one_hazard_restarts_the_sites_reminder_clock():
    # the fog warning begins at step 0; an icing watch at step 12 is news of the site,
    # so the fog's reminder waits 3 h from then (step 30), not from step 0 (step 18)
    fog, icing = "W" * 32, "." * 12 + "i" * 20
    got = [(i, h, t) for i, h, t, _, _ in run(fog, icing) if t == "reminder"]
    assert got == [(30, "fog", "reminder")]
