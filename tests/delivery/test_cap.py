"""CAP 1.2 messages from lifecycle events: valid against the OASIS schema, and right by
the rules of the standard's text that a schema cannot express
(docs/references.md [OASIS CAP 1.2])."""

from __future__ import annotations

import hashlib
import re
import xml.etree.ElementTree as ET
from datetime import UTC, datetime, timedelta

import pytest

from notifier.core.config import Site
from notifier.delivery.cap import (
    CAP_NS,
    cap_message,
    cap_time,
    certainty,
    msg_type,
    severity,
    urgency,
)
from notifier.engine.alerts import Event
from tests.cap_schema import XSD, XSD_SHA256, cap_schema

T0 = datetime(2026, 11, 20, 23, 0, tzinfo=UTC)
SITE = Site(
    id="zz-quay",
    name="North Quay <Basin> & Slip",  # markup in a name must come out escaped
    lat=53.02,
    lon=-3.11,
    timezone="Europe/London",
    use="port",
)
N = f"{{{CAP_NS}}}"


def event(type_: str, level: str, previous: str = "none", **kw: object) -> Event:
    base = dict(
        id=f"ev-{type_}-{level}",
        type=type_,
        site_id=SITE.id,
        hazard="fog",
        level=level,
        previous_level=previous,
        time=T0,
        episode_start=T0 - timedelta(hours=1),
        reasons=("dew-point depression 0.8 °C < 1.5 °C",),
    )
    base.update(kw)
    return Event(**base)  # type: ignore[arg-type]


RAISED = event("raised", "warning", eta=T0 + timedelta(minutes=30))
ESCALATED = event("escalated", "warning", "watch", time=T0 + timedelta(hours=1))
CLEARED = event("cleared", "none", "warning", time=T0 + timedelta(hours=3))
GAP = event("data_gap", "warning", hazard="data_gap", reasons=())
ICING = event("raised", "warning", hazard="icing", eta=T0)


def build(ev: Event, refs: tuple[Event, ...] = ()) -> str:
    return cap_message(
        ev,
        SITE,
        ["Follow the harbour authority."],
        sender="fogwatch@quay.example",
        radius_km=2.0,
        references=refs,
    )


def test_the_schema_file_is_the_one_from_the_package():
    assert hashlib.sha256(XSD.read_bytes()).hexdigest() == XSD_SHA256


@pytest.mark.parametrize(
    "ev,refs",
    [(RAISED, ()), (ESCALATED, (RAISED,)), (CLEARED, (RAISED, ESCALATED)), (GAP, ()), (ICING, ())],
    ids=["alert", "update", "cancel", "data-gap", "icing"],
)
def test_every_kind_of_message_validates_against_the_cap_schema(ev: Event, refs: tuple[Event, ...]):
    cap_schema().validate(build(ev, refs))  # the OASIS CAP 1.2 XML schema


def test_the_schema_check_can_fail():
    bad = build(RAISED).replace("<urgency>Expected</urgency>", "<urgency>Soon</urgency>")
    assert not cap_schema().is_valid(bad)


def test_lifecycle_maps_to_alert_update_cancel():
    assert [msg_type(e) for e in (RAISED, ESCALATED, CLEARED, GAP)] == [
        "Alert",
        "Update",
        "Cancel",
        "Alert",
    ]
    assert msg_type(event("outlook", "none")) is None
    with pytest.raises(ValueError, match="no alert state"):
        build(event("outlook", "none"))


def test_standard_text_rules_the_schema_does_not_check():
    root = ET.fromstring(build(CLEARED, (RAISED, ESCALATED)))
    # [OASIS CAP 1.2] identifier and sender: no spaces, commas or restricted characters (< &)
    for tag in ("identifier", "sender"):
        assert not re.search(r"[\s,<&]", root.find(N + tag).text)
    # [OASIS CAP 1.2] dateTime: "Z" must not be used; UTC is written -00:00
    assert root.find(N + "sent").text == "2026-11-21T02:00:00-00:00"
    # [OASIS CAP 1.2] references: space-separated "sender,identifier,sent" of the earlier messages
    refs = root.find(N + "references").text.split(" ")
    assert refs == [
        f"fogwatch@quay.example,fogwatch-{e.id},{cap_time(e.time)}" for e in (RAISED, ESCALATED)
    ]
    info = root.find(N + "info")
    assert info.find(N + "category").text == "Met"
    assert info.find(N + "responseType").text == "AllClear"
    # [OASIS CAP 1.2] circle: "lat,lon radius" in WGS 84 degrees and kilometres
    assert info.find(f"{N}area/{N}circle").text == "53.02000,-3.11000 2"
    assert info.find(f"{N}area/{N}areaDesc").text == SITE.name
    assert "not an official forecast" in info.find(N + "description").text


def test_urgency_severity_certainty_follow_arrival_level_and_probability():
    # docs/references.md [OASIS CAP 1.2]: Immediate = now, Expected = within the hour
    assert urgency(ICING) == "Immediate"
    assert urgency(RAISED) == "Expected"
    assert urgency(event("raised", "watch", eta=T0 + timedelta(hours=4))) == "Future"
    assert urgency(CLEARED) == "Past"
    # level and hazard → severity: common practice, on CAP 1.2's meanings
    assert [severity(e) for e in (RAISED, ICING, GAP)] == ["Moderate", "Severe", "Unknown"]
    assert severity(event("raised", "watch")) == "Minor"
    # "Likely (p > ~50%)", "Possible (p <= ~50%)" (docs/references.md [OASIS CAP 1.2])
    assert certainty(ICING) == "Observed"
    assert certainty(event("raised", "watch", features={"fog_probability": 0.7})) == "Likely"
    assert certainty(event("raised", "warning", features={"fog_probability": 0.3})) == "Possible"
    assert certainty(event("raised", "warning", features={"fog_probability": 0.01})) == "Unlikely"
    assert certainty(event("raised", "watch")) == "Possible"


def test_a_data_gap_is_not_weather_and_says_the_site_cannot_be_judged():
    info = ET.fromstring(build(GAP)).find(N + "info")
    assert info.find(N + "category").text == "Other"
    assert "cannot be judged" in info.find(N + "description").text
