"""Arrival times per kind of hazard, checked against when the scene's own data shows it.

The scenes are the demo's invented nights (notifier/demo/weather.py). "The data shows
fog" is read from the readings themselves: visibility below 1000 m, the visibility of
fog in the METAR code (FG; docs/references.md [WMO-No. 306]).
"""

from __future__ import annotations

from datetime import datetime, time, timedelta
from zoneinfo import ZoneInfo

import pytest

from notifier.demo.play import DEMO_CONFIG, DEMO_EVENING, demo_nights
from notifier.demo.weather import simulate_night
from notifier.engine.assess import assess_times
from notifier.engine.rules import render_template
from notifier.service.loading import load

ZONE = ZoneInfo("Europe/London")
FOG_VISIBILITY_M = 1000.0  # FG: visibility below 1000 m (docs/references.md [WMO-No. 306])


@pytest.fixture(scope="module")
def demo():
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("FOGWATCH_DEMO_WEBHOOK_SECRET", "whsec_" + "MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw")
        mp.setenv("FOGWATCH_DEMO_BOT_SECRET", "whsec_" + "MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw")
        loaded = load(DEMO_CONFIG)
    return loaded


def night(demo, site_id: str, start: time, end: time, minutes: int = 10):
    (spec,) = [s for s in demo_nights(demo.config) if s.site == site_id]
    obs = simulate_night(spec)
    site = demo.config.site(site_id)
    t0 = datetime.combine(DEMO_EVENING, start, ZONE)
    t1 = datetime.combine(DEMO_EVENING + timedelta(days=1), end, ZONE)
    times = [
        t0 + timedelta(minutes=minutes * k)
        for k in range(int((t1 - t0) / timedelta(minutes=minutes)) + 1)
    ]
    found = assess_times(demo.rules, [site], obs, times)
    return obs, [(t, per[0]) for t, per in zip(times, found, strict=True)]


def test_sea_fog_time_against_when_the_data_first_shows_fog(demo):
    obs, steps = night(demo, "skerrow-berth", time(20, 0), time(3, 0))
    fog_rows = obs[(obs["site"] == "skerrow-berth") & (obs["visibility_m"] < FOG_VISIBILITY_M)]
    first_fog = fog_rows["time"].min().to_pydatetime()
    sea = [(t, sa.hazards["fog"]) for t, sa in steps if "fog" in sa.hazards]
    given = [(t, h.eta) for t, h in sea if h.eta_method == "sea-fog"]
    # a time is given before the fog, and it is within 45 minutes of the fog's arrival
    assert given and all(t < first_fog for t, _ in given)
    for _, eta in given:
        assert abs((eta - first_fog).total_seconds()) <= 45 * 60, (eta, first_fog)
    # while the wind is offshore (before 23:00) no sea-fog time is given at all
    offshore = [h for t, h in sea if t.astimezone(ZONE).time() >= time(20) and t.hour < 23]
    assert all(h.eta_method != "sea-fog" for h in offshore)
    # once the data shows fog: "now", not a time still ahead
    after = [h for t, h in sea if t >= first_fog + timedelta(minutes=10)]
    assert after and all(
        h.eta_method == "observed" and h.eta == t
        for (t, _), h in zip(
            [(t, h) for t, h in sea if t >= first_fog + timedelta(minutes=10)], after, strict=True
        )
    )


def test_time_to_fog_is_zero_while_fog_is_observed(demo):
    # explain at 01:30 used to show hours_to_fog 2.4 h with fog reported at the berth
    _, steps = night(demo, "skerrow-berth", time(23, 0), time(1, 30))
    t, sa = steps[-1]
    assert sa.features["observed_fog"] == 1.0
    assert sa.features["hours_to_fog"] == 0.0


def test_icing_is_now_when_the_surface_is_below_zero_and_the_frost_point(demo):
    # the orchard's icing watch at 16:00 used to say "from about 19:36" (the fog's
    # cooling curve) though its surfaces were below 0 °C by 17:50
    _, steps = night(demo, "hollin-orchard", time(16, 0), time(19, 0))
    for t, sa in steps:
        icing = sa.hazards.get("icing")
        if icing is None or icing.eta is None:
            continue
        surface = sa.features["surface_temp_c"]
        target = (
            min(0.0, sa.features["frost_point_c"])
            if sa.features["frost_point_c"] == sa.features["frost_point_c"]
            else 0.0
        )
        if icing.eta_method == "surface-now":
            assert icing.eta == t and surface <= target
        elif icing.eta_method == "observed":  # freezing fog reported
            assert icing.eta == t and sa.features["observed_fog"] == 1.0
        else:  # ahead: the surface is still above both, and the time before sunrise
            assert icing.eta_method == "surface-cooling" and surface > target
            assert icing.eta > t
    below = [t for t, sa in steps if sa.features["surface_temp_c"] < 0.0]
    assert below
    first = below[0]
    (sa,) = [sa for t, sa in steps if t == first]
    assert sa.hazards["icing"].eta_method == "surface-now"


def test_an_unknown_value_drops_its_clause_not_a_question_mark():
    text = render_template(
        "The air is {d:.1f} °C from saturation under a clear sky; fog is likely within {h:.1f} h.",
        {"d": 0.4, "h": float("nan")},
    )
    assert text == "The air is 0.4 °C from saturation under a clear sky."
    assert "?" not in render_template("Frost (minimum {m:.1f} °C): likely.", {})


def test_each_value_is_given_once_among_the_reasons(demo):
    # freezing fog (surface ≤ 0 °C) and hoar frost (surface < 0 °C) fire together at the
    # orchard: the surface temperature used to be listed twice, once per comparison
    _, steps = night(demo, "hollin-orchard", time(19, 30), time(20, 0))
    _, sa = steps[0]
    reasons = list(sa.hazards["icing"].reasons)
    assert {"freezing-fog", "frost"} <= set(sa.hazards["icing"].kinds)
    assert len([r for r in reasons if r.startswith("surface temperature ")]) == 1, reasons
