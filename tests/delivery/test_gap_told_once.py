"""A short data gap under a warning, told once when it is over (engine/data_gap.py): the
message gives the gap's span and its end; CAP issues nothing for it, as no Alert for the
gap was ever sent (OASIS CAP 1.2, msgType: a Cancel refers to earlier messages)."""

from __future__ import annotations

from datetime import timedelta

from notifier.core.config import Site
from notifier.delivery.cap import msg_type
from notifier.delivery.messages import render, render_summary
from tests.delivery.scenes import RULES, event, utc

SITE = Site(
    id="quay-two",
    name="Quay Two",
    lat=53.0,
    lon=-3.0,
    timezone="Europe/London",
    exposure="coast",
    use="port",
)
BACK = utc(2026, 1, 11, 4, 40)


def data_back(**kw: object):
    return event(
        "data_back",
        "none",
        "watch",
        hazard="data_gap",
        at=BACK,
        kind="",
        eta=None,
        reasons=(),
        changes=("data stale now no",),
        gap_from=BACK - timedelta(hours=2, minutes=10),
        **kw,
    )


def test_the_message_gives_the_span_and_says_why_it_comes_once():
    msg = render(data_back(gap_untold=True), SITE, RULES)
    flat = " ".join(msg.text.split())
    # January in London is GMT (tz database)
    assert msg.subject == "Short data gap, data back · Quay Two · 04:40 GMT"
    assert "no readings from 02:30 to 04:40 GMT; site can be judged again" in flat
    assert "No readings from 02:30 to 04:40 GMT: fresh readings are arriving again." in flat
    assert "was not sent on its own" in flat
    assert "not an official forecast" in flat


def test_a_gap_already_told_ends_with_its_span_and_no_excuse():
    msg = render(data_back(), SITE, RULES)
    flat = " ".join(msg.text.split())
    assert msg.subject == "Data back · Quay Two · 04:40 GMT"
    assert "No readings from 02:30 to 04:40 GMT" in flat
    assert "was not sent on its own" not in flat


def test_the_summary_line_says_the_span():
    summary = render_summary([(data_back(gap_untold=True), SITE)], RULES)
    assert "04:40 GMT no readings from 02:30 to 04:40 GMT, data back" in " ".join(
        summary.text.split()
    )


def test_cap_issues_nothing_for_a_gap_told_once_and_cancels_one_that_was_told():
    assert msg_type(data_back(gap_untold=True)) is None
    assert msg_type(data_back()) == "Cancel"
