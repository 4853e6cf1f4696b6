"""The "When" line when no arrival time is given: it must not read as if the reasons
below it (a straight-line "time to fog") contradicted it."""

from __future__ import annotations

import math

import pytest

from notifier.delivery.wording import when_text
from tests.delivery.scenes import event

ZONE = "Europe/London"


@pytest.mark.parametrize(
    ("features", "expected"),
    [
        # a rule tested the evening's trend (hours_to_fog 1.3 h): say it is rough, no time
        ({"hours_to_fog": 1.3}, "no firm arrival time yet"),
        # no trend at all: plainly none
        ({}, "no arrival time can be worked out"),
        ({"hours_to_fog": math.nan}, "no arrival time can be worked out"),
        # fog already reached by the trend is not a time ahead
        ({"hours_to_fog": 0.0}, "no arrival time can be worked out"),
    ],
    ids=["trend-only", "no-trend", "unknown-trend", "zero"],
)
def test_no_time_is_given_and_a_rough_trend_is_called_rough(features, expected):
    text = when_text(event(eta=None, eta_method="", features=features), ZONE)
    assert text.startswith(expected), text
    assert not any(ch.isdigit() for ch in text)  # no made-up time (common practice)
