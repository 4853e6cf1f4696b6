"""Messages: every one explains itself, carries the caution and the safety notes, and is
readable on a phone."""

from __future__ import annotations

import re
from datetime import timedelta

import pytest

from notifier.delivery.messages import CAUTION, WIDTH, headline, render, render_summary
from notifier.engine.alerts import Event
from notifier.engine.assess import assess
from notifier.engine.lifecycle import step
from tests.delivery.scenes import RULES, SETTINGS, clear_night, event, site, utc

USES = ("farm", "port", "venue", "other")


def flat(text: str) -> str:
    return " ".join(text.split())


@pytest.fixture(scope="module")
def night_events() -> list[Event]:
    s = site("clear-field")
    obs, now, end = clear_night(s)
    states: dict = {}
    events: list[Event] = []
    while now <= end:
        states, found = step(states, assess(RULES, [s], obs, now), now, SETTINGS)
        events.extend(found)
        now += timedelta(minutes=10)
    return events


def check_common(text: str, ev: Event, use: str) -> None:
    body = flat(text)
    assert flat(CAUTION) in body
    for note in RULES.notes_for(ev.hazard, use, ev.safety_refs):
        assert flat(note.text) in body, note.id
    for line in text.splitlines():
        assert len(line) <= WIDTH + 2 or re.search(r"https?://", line), line


@pytest.mark.parametrize("use", USES)
def test_night_messages_explain_themselves(night_events, use):
    s = site("clear-field", use=use, name="Clear Field")
    for ev in night_events:
        msg = render(ev, s, RULES)
        check_common(msg.text, ev, use)
        body = flat(msg.text)
        for reason in ev.reasons:
            assert flat(reason) in body
        assert "Newest reading" in body
        assert "\n" not in msg.subject and "Clear Field" in msg.subject


def test_reasons_carry_units(night_events):
    warning = next(e for e in night_events if e.type == "escalated")
    text = render(warning, site("clear-field"), RULES).text
    assert re.search(r"wind \d+\.\d m/s ≤ 3\.5 m/s", text)
    # the depression's rate with its sign and unit, in words a phone reader takes in
    flat = " ".join(text.split())  # as read, whatever the line wrapping
    assert re.search(r"the gap changing by [+-]\d+\.\d\d °C an hour", flat) and "Why:" in text
    # a time, or plainly none: never a "?" (before tonight's cooling curve is fitted)
    when = r"When: (from about \d\d:\d\d|no arrival time can be worked out|no firm arrival time)"
    assert re.search(when, text)
    assert "?" not in text


def test_all_clear_says_what_changed(night_events):
    cleared = night_events[-1]
    assert cleared.type == "cleared"
    text = render(cleared, site("clear-field", use="port"), RULES).text
    assert text.startswith("All clear: fog · ")
    assert "fog warning has ended" in text
    assert "What changed:" in text and "Now:" in text and "Was:" in text
    # what ended it, value against the threshold the alert needed
    assert re.search(r"visibility now \d+ m, dense fog warning needs < 200 m", text)
    assert re.search(r"air temperature \d+\.\d °C", text)


def test_downgrade_says_from_which_level():
    ev = event(
        "downgraded",
        "watch",
        "warning",
        changes=("dew-point depression now 1.8 °C, alert needs ≤ 1 °C",),
        eased_since=utc(2026, 1, 10, 19, 10),
    )
    text = render(ev, site("quay-two", use="port"), RULES).text
    assert "down from warning" in text and "Below warning level since 19:10 GMT" in text
    assert "Why it is still a watch:" in text
    check_common(text, ev, "port")


@pytest.mark.parametrize(
    ("features", "has_ice"),
    [
        ({"temp_c": 0.6, "surface_temp_c": -1.2}, True),
        ({"temp_c": 4.0, "surface_temp_c": 1.0}, True),
        ({"temp_c": 4.0, "surface_temp_c": 2.5}, False),
        ({"temp_c": 4.0}, False),
    ],
    ids=["below-zero", "surface-at-1c", "mild", "no-surface-sensor"],
)
def test_icing_note_near_or_below_zero(features, has_ice):
    ev = event(hazard="icing", features=features, safety_refs=("icing-general",))
    text = render(ev, site("quay-two", use="venue"), RULES).text
    assert ("Ice:\n" in text) is has_ice
    if features.get("surface_temp_c") == -1.2:
        assert "Air 0.6 °C, surface -1.2 °C: at or near freezing" in text
    check_common(text, ev, "venue")


def test_data_gap_message():
    ev = event(
        "data_gap",
        "watch",
        hazard="data_gap",
        kind="stale",
        eta=None,
        reasons=("data age 240 min > 90 min",),
        data_age_min=240.0,
        safety_refs=("data-gap",),
    )
    msg = render(ev, site("north-field"), RULES)
    assert msg.subject.startswith("No fresh data · North Field")
    assert "cannot be judged" in msg.text and "Newest reading 240 min old" in msg.text
    check_common(msg.text, ev, "farm")
    never = render(
        event("data_gap", "watch", hazard="data_gap", data_age_min=float("inf")),
        site("north-field"),
        RULES,
    )
    assert "No readings have been received" in never.text
    assert never.json["data_age_min"] is None


def test_headline_has_hazard_level_site_and_local_time():
    ev = event("escalated", "warning", "watch", at=utc(2026, 7, 1, 21, 5))
    assert (
        headline(ev, site("quay-two", name="Quay Two"))
        == "Fog now a warning · Quay Two · 22:05 BST"
    )
    assert headline(ev, site("quay-two", name="Quay Two"), "UTC").endswith("21:05 UTC")


def test_site_name_cannot_break_the_subject():
    ev = event()
    msg = render(ev, site("quay-two", name="Quay\r\nBcc: x@example.test"), RULES)
    assert "\r" not in msg.subject and "\n" not in msg.subject
    assert not any(line.startswith("Bcc:") for line in msg.text.splitlines())


def test_long_site_name_wraps():
    ev = event()
    text = render(
        ev,
        site(
            "quay-two",
            name="The Very Long Outer Harbour Breakwater "
            "Number Two Eastern Approach Pontoon Landing",
        ),
        RULES,
    ).text
    assert all(len(line) <= WIDTH for line in text.splitlines())


def test_json_body_fields():
    ev = event("escalated", "warning", "watch")
    body = render(ev, site("quay-two", use="port"), RULES).json
    for key in (
        "id",
        "type",
        "site",
        "hazard",
        "level",
        "previous_level",
        "headline",
        "text",
        "reasons",
        "eta",
        "time",
        "data_age_min",
        "caution",
    ):
        assert key in body, key
    assert body["id"] == ev.id and body["previous_level"] == "watch"
    assert body["eta"] == "2026-01-10T20:50:00+00:00"
    assert body["time"].endswith("+00:00") and body["caution"] == CAUTION


def test_morning_summary_bundles_held_news():
    field = site("north-field", use="farm", name="North Field")
    quay = site("quay-two", use="port", name="Quay Two")
    items = [
        (event(at=utc(2026, 1, 10, 23, 10), site_id="north-field"), field),
        (
            event(
                "cleared",
                "none",
                "watch",
                at=utc(2026, 1, 11, 3, 40),
                site_id="north-field",
                changes=("wind now 4.2 m/s, alert needs ≤ 3.5 m/s",),
            ),
            field,
        ),
        (event(at=utc(2026, 1, 11, 1, 0), site_id="quay-two"), quay),
    ]
    msg = render_summary(items, RULES, at=utc(2026, 1, 11, 6, 30))
    assert msg.subject == "Overnight: 3 updates for 2 sites · 06:30 GMT"
    text = msg.text
    assert "23:10 GMT Fog watch raised" in text
    assert "03:40 GMT Fog watch ended (all clear): wind now 4.2 m/s" in text
    assert text.index("North Field") < text.index("Quay Two")
    assert flat(CAUTION) in flat(text)
    for note in RULES.notes_for("fog", "port") + RULES.notes_for("fog", "farm"):
        assert flat(note.text) in flat(text)
    assert all(len(line) <= WIDTH for line in text.splitlines())
    assert msg.json["type"] == "summary" and len(msg.json["events"]) == 3
    with pytest.raises(ValueError, match="at least one event"):
        render_summary([], RULES)
