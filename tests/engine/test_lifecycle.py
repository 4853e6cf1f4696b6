"""Alert lifecycle: sequences of assessments → exactly the events a person would want."""

from __future__ import annotations

import dataclasses
import hashlib
from datetime import datetime, time, timedelta
from zoneinfo import ZoneInfo

import pytest

from notifier.core.config import AlertSettings
from notifier.engine.alerts import AlertState, Event, event_id
from notifier.engine.assess import assess
from notifier.engine.lifecycle import step
from tests.delivery.scenes import SETTINGS, assessment, clear_night, site, utc
from tests.engine.scenes import RULES

SITE = site("test-meadow")
T0 = utc(2026, 1, 10, 18, 0)
STEP = timedelta(minutes=5)
SYMBOL = {".": "none", "w": "watch", "W": "warning"}


def run(
    levels: str,
    sustain: str | None = None,
    hazard: str = "fog",
    settings: AlertSettings = SETTINGS,
    stale: str | None = None,
):
    """One assessment per 5 minutes; each character a level: '.' none, 'w' watch,
    'W' warning. ``sustain`` gives the level with clearing margins (default: the same);
    ``stale`` marks with 's' the steps whose data is stale. Returns
    [(step index, type, level)], checking idempotency at every step on the way."""
    states: dict = {}
    seen = []
    for i, ch in enumerate(levels):
        now = T0 + i * STEP
        keep = SYMBOL[sustain[i]] if sustain else None
        age = 200.0 if stale and stale[i] == "s" else 5.0
        sa = [assessment(SITE, now, SYMBOL[ch], keep, hazard=hazard, age_min=age)]
        new, events = step(states, sa, now, settings)
        again, repeat = step(states, sa, now, settings)  # same inputs, same outputs
        assert [e.id for e in repeat] == [e.id for e in events]
        assert again == new
        applied, none = step(new, sa, now, settings)  # re-run after applying: nothing new
        assert none == [], (i, none)
        assert applied == new
        states = new
        seen.extend((i, e.type, e.level) for e in events)
    return seen


CASES = [
    # (levels, sustain, expected events)
    (".w", None, [(1, "raised", "watch")]),
    (".W", None, [(1, "raised", "warning")]),
    ("wW", None, [(0, "raised", "watch"), (1, "escalated", "warning")]),
    # an all-clear only after 45 min continuously below: step 1 + 9 × 5 min
    ("w" + "." * 10, None, [(0, "raised", "watch"), (10, "cleared", "none")]),
    ("w" + "." * 8, None, [(0, "raised", "watch")]),
    # a value hovering across the threshold: every return restarts the clock
    ("w.w.w.w.w.w.w.w.w.w", None, [(0, "raised", "watch")]),
    ("w" + "." * 8 + "w" + "." * 8, None, [(0, "raised", "watch")]),
    # inside the rule's clearing margin the alert is sustained
    ("w" + "." * 20, "w" * 21, [(0, "raised", "watch")]),
    ("w" + "." * 12, "www" + "." * 10, [(0, "raised", "watch"), (12, "cleared", "none")]),
    # warning eases to watch, then clears: each drop waits its own 45 min
    ("W" + "w" * 10, None, [(0, "raised", "warning"), (10, "downgraded", "watch")]),
    (
        "W" + "w" * 10 + "." * 10,
        None,
        [(0, "raised", "warning"), (10, "downgraded", "watch"), (20, "cleared", "none")],
    ),
    # no false step: the watch rules stopped before the warning had eased for 45 min,
    # so the warning ends in an all-clear, never in a watch that holds no longer
    ("W" + "w" * 3 + "." * 12, None, [(0, "raised", "warning"), (10, "cleared", "none")]),
    ("W" + "." * 10, None, [(0, "raised", "warning"), (10, "cleared", "none")]),
    # still at warning: a reminder every 3 h (36 steps), none at watch
    ("W" * 40, None, [(0, "raised", "warning"), (36, "reminder", "warning")]),
    (
        "W" * 73,
        None,
        [(0, "raised", "warning"), (36, "reminder", "warning"), (72, "reminder", "warning")],
    ),
    ("w" * 40, None, [(0, "raised", "watch")]),
    # no reminder while the warning is easing; it comes once the warning holds again
    ("W" * 34 + "w" * 5 + "W" * 3, None, [(0, "raised", "warning"), (39, "reminder", "warning")]),
    # cooldown: the same level is not announced again within 60 min of the last time;
    # a rise inside it is held and announced when it ends (step 12 = 60 min)
    (
        "w" + "." * 10 + "w" * 6,
        None,
        [(0, "raised", "watch"), (10, "cleared", "none"), (12, "raised", "watch")],
    ),
    ("w" + "." * 10 + "w" + "." * 10, None, [(0, "raised", "watch"), (10, "cleared", "none")]),
    (
        "W" + "w" * 10 + "W" * 3,
        None,
        [(0, "raised", "warning"), (10, "downgraded", "watch"), (12, "escalated", "warning")],
    ),
    (
        "w" + "." * 13 + "w",
        None,
        [(0, "raised", "watch"), (10, "cleared", "none"), (14, "raised", "watch")],
    ),
]
IDS = [
    "raise-watch-at-once",
    "raise-warning-at-once",
    "escalate-at-once",
    "clear-after-45-min-below",
    "not-cleared-at-40-min",
    "hovering-does-not-flap",
    "short-returns-restart-clearing",
    "margin-sustains-alert",
    "clears-45-min-after-margin",
    "warning-eases-to-watch",
    "downgrade-then-clear",
    "no-false-step-to-watch",
    "warning-clears-straight-to-none",
    "reminder-after-3h",
    "reminder-every-3h",
    "no-reminder-at-watch",
    "no-reminder-while-easing",
    "cooldown-holds-quick-return",
    "cooldown-hides-short-blip",
    "cooldown-holds-re-escalation",
    "new-raise-after-cooldown",
]


@pytest.mark.parametrize(("levels", "sustain", "expected"), CASES, ids=IDS)
def test_lifecycle_table(levels, sustain, expected):
    assert run(levels, sustain) == expected


@pytest.mark.parametrize(
    ("levels", "expected"),
    [
        ("..ww...", [(2, "data_gap", "watch"), (4, "data_back", "none")]),
        ("w" + "." + "w" * 3, [(0, "data_gap", "watch"), (1, "data_back", "none")]),
        (
            "w" + "." + "w" * 12,
            [(0, "data_gap", "watch"), (1, "data_back", "none"), (12, "data_gap", "watch")],
        ),
    ],
    ids=[
        "gap-then-back-at-once",
        "second-gap-inside-cooldown-held",
        "second-gap-announced-after-cooldown",
    ],
)
def test_data_gap_and_back(levels, expected):
    assert run(levels, hazard="data_gap") == expected


def test_stale_data_is_not_an_all_clear():
    # the feed stops at step 3: the fog rules cannot hold on unknown data, but the
    # warning must not clear on silence, nor remind; it clears on 45 min of fresh data
    levels = "WWW" + "." * 20 + "." * 10
    stale = "..." + "s" * 20 + "." * 10
    assert run(levels, stale=stale) == [(0, "raised", "warning"), (32, "cleared", "none")]


def test_custom_settings_are_honoured():
    fast = AlertSettings(clearing_time="10min", reminder_every="30min", cooldown="0")
    assert run("W" * 7 + "." * 3 + "w", settings=fast) == [
        (0, "raised", "warning"),
        (6, "reminder", "warning"),
        (9, "cleared", "none"),
        (10, "raised", "watch"),
    ]


def documented_event_id(*fields: str) -> str:
    """Worked out here from event_id's docstring (notifier/engine/alerts.py): "sha256
    over site|hazard|episode start|type|level|minute of the event", times as ISO 8601
    UTC, an absent episode start as "-", the id being the first 32 hex digits."""
    return hashlib.sha256("|".join(fields).encode()).hexdigest()[:32]


def test_event_ids_are_stable_and_distinct():
    a = event_id("s1", "fog", T0, "raised", "watch", T0 + timedelta(seconds=20))
    assert a == event_id("s1", "fog", T0, "raised", "watch", T0 + timedelta(seconds=50))
    # T0 is 2026-01-10 18:00 UTC; the event at 18:00:20 falls in the minute 18:00
    assert a == documented_event_id(
        "s1", "fog", "2026-01-10T18:00:00+00:00", "raised", "watch", "2026-01-10T18:00:00+00:00"
    )
    # an event time in another zone (19:07:59 in Berlin) is taken as UTC, to the minute
    berlin = T0.astimezone(ZoneInfo("Europe/Berlin")) + timedelta(minutes=7, seconds=59)
    assert berlin.strftime("%H:%M:%S") == "19:07:59"
    assert event_id("s1", "icing", None, "cleared", "none", berlin) == documented_event_id(
        "s1", "icing", "-", "cleared", "none", "2026-01-10T18:07:00+00:00"
    )
    others = {
        event_id("s2", "fog", T0, "raised", "watch", T0),
        event_id("s1", "icing", T0, "raised", "watch", T0),
        event_id("s1", "fog", T0 + STEP, "raised", "watch", T0),
        event_id("s1", "fog", T0, "escalated", "watch", T0),
        event_id("s1", "fog", T0, "raised", "warning", T0),
        event_id("s1", "fog", T0, "raised", "watch", T0 + timedelta(minutes=1)),
    }
    assert a not in others and len(others) == 6


def test_all_clear_carries_what_changed():
    states: dict = {}
    states, events = step(states, [assessment(SITE, T0, "warning")], T0, SETTINGS)
    later = T0 + timedelta(minutes=50)
    states, _ = step(states, [assessment(SITE, T0 + STEP, "none")], T0 + STEP, SETTINGS)
    states, events = step(states, [assessment(SITE, later, "none", temp_c=9.5)], later, SETTINGS)
    (cleared,) = events
    assert cleared.type == "cleared" and cleared.previous_level == "warning"
    assert cleared.news_level == "warning"
    assert cleared.features["temp_c"] == 9.5
    assert cleared.changes and cleared.previous_reasons
    assert cleared.eased_since == T0 + STEP
    assert cleared.episode_start == T0


def test_state_and_event_round_trip():
    states, events = step({}, [assessment(SITE, T0, "warning")], T0, SETTINGS)
    for state in states.values():
        assert AlertState.from_dict(state.to_dict()) == state
    for e in events:
        assert Event.from_dict(e.to_dict()) == e
    with pytest.raises(ValueError, match="unsupported alert state version"):
        AlertState.from_dict({**next(iter(states.values())).to_dict(), "version": 99})


def test_other_sites_states_are_untouched_and_naive_time_refused():
    other = AlertState(site_id="elsewhere", hazard="fog", level="watch", since=T0)
    states, events = step({other.key: other}, [assessment(SITE, T0, "none")], T0, SETTINGS)
    assert states == {other.key: other} and events == []
    with pytest.raises(ValueError, match="timezone-aware"):
        step({}, [], datetime(2026, 1, 10, 18, 0), SETTINGS)


def test_quiet_state_is_pruned_after_cooldown():
    states, _ = step({}, [assessment(SITE, T0, "watch")], T0, SETTINGS)
    t = T0
    for _ in range(30):
        t += STEP
        states, _ = step(states, [assessment(SITE, t, "none")], t, SETTINGS)
    assert states == {}


def test_simulated_night_gives_one_watch_one_warning_fog_seen_and_one_all_clear():
    # A clear calm night at an open site (tests/delivery/scenes.py: clear_night)
    s = site("clear-field")
    obs, now, end = clear_night(s)
    states: dict = {}
    events: list[Event] = []
    while now <= end:
        assessments = assess(RULES, [s], obs, now)
        states, found = step(states, assessments, now, SETTINGS)
        assert step(states, assessments, now, SETTINGS)[1] == []
        events.extend(found)
        now += timedelta(minutes=10)
    news = [(e.type, e.level, e.seen) for e in events if e.type != "reminder"]
    assert news == [
        ("raised", "watch", ()),
        ("escalated", "warning", ()),
        ("observed", "warning", ("observed",)),  # fog forms under the warning
        ("observed", "warning", ("dense",)),  # and turns dense
        ("cleared", "none", ()),
    ]
    # a reminder only 3 h after the site's last news of any kind while the fog is still
    # to come; none once it has been seen (its next news is its change or its end)
    reminders = [e for e in events if e.type == "reminder"]
    quiet = [r.time - max(e.time for e in events if e.time < r.time) for r in reminders]
    seen_by = [any(e.seen for e in events if e.time < r.time) for r in reminders]
    assert seen_by == [False]
    assert quiet == [timedelta(hours=3)]
    first_seen = next(e.time for e in events if e.seen)
    assert events[-1].time - first_seen > 2 * timedelta(seconds=SETTINGS.reminder_every)
    cleared = events[-1]
    assert cleared.previous_level == "warning" and cleared.changes
    assert cleared.time.astimezone(ZoneInfo(s.timezone)).time() >= time(9, 30)
    assert len({e.id for e in events}) == len(events)
    assert {e.episode_start for e in events} == {events[0].time}


def test_event_dataclass_is_frozen():
    _, (e,) = step({}, [assessment(SITE, T0, "watch")], T0, SETTINGS)
    with pytest.raises(dataclasses.FrozenInstanceError):
        e.level = "warning"  # type: ignore[misc]


def test_public_names():
    import notifier.engine.alerts as alerts_module
    import notifier.engine.lifecycle as lifecycle_module

    assert set(lifecycle_module.__all__) == {"step"}
    assert set(alerts_module.__all__) == {
        "EVENT_TYPES",
        "STATE_VERSION",
        "AlertState",
        "Event",
        "StateKey",
        "URGENT_TYPES",
        "event_id",
    }
    for module in (lifecycle_module, alerts_module):
        for name in module.__all__:
            assert hasattr(module, name)
