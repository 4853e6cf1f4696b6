"""A replay of hourly data gives the same nights whatever its clock step.

A rule's ``hold`` is met by data time: the rule must have held from ``hold`` before the
site's newest reading until now (``notifier.engine.assess``). Stepping every 10 minutes
between hourly reports carries the last reading forward; before, that let one report
meet a 10-minute hold by itself at :10, which a replay stepping hourly never saw.
"""

from __future__ import annotations

from datetime import date, datetime, time, timedelta

import numpy as np
import pandas as pd
import pytest

from notifier.demo.weather import NightSpec, simulate_night
from notifier.history.replay import replay
from notifier.service.loading import load
from tests.history.scenes import FIRST, TWO_FIELDS

DAYS = 8


def _hourly_night(site_id: str, evening: date, kind: str) -> pd.DataFrame:
    """One invented night of hourly reports (on the hour), of one of a few kinds."""
    base = dict(
        site=site_id,
        evening=evening,
        timezone="Europe/London",
        lat=52.3,
        lon=-1.8,
        start_local=time(12, 0),
        end_local=time(11, 0),
        step_min=60,
    )
    if kind == "fog":
        return simulate_night(NightSpec(**base))
    if kind == "near-miss":
        # saturation approached but the dew point sits just below the night's minimum
        return simulate_night(NightSpec(**base, dewpoint_c=4.0, cooling_k_per_sqrt_h=1.3))
    if kind == "late-breeze":
        return simulate_night(NightSpec(**base, lift_local=time(4, 0)))
    return simulate_night(
        NightSpec(**base, cloud_pct=95.0, wind_ms=6.0, cooling_k_per_sqrt_h=0.3, dewpoint_c=3.0)
    )


def _night_table(result) -> list[tuple]:
    return [
        (
            n.site,
            n.night,
            n.fog_onset,
            n.category("warning"),
            n.category("watch"),
        )
        for n in result.nights
    ]


@pytest.fixture(scope="module")
def hourly(tmp_path_factory):
    folder = tmp_path_factory.mktemp("steps")
    cfg = folder / "fogwatch.yaml"
    cfg.write_text(TWO_FIELDS)
    loaded = load(cfg)
    kinds = ("fog", "quiet", "near-miss", "fog", "late-breeze", "quiet")
    frames = [
        _hourly_night(s.id, FIRST + timedelta(days=d), kinds[(d + 3 * i) % len(kinds)])
        for i, s in enumerate(loaded.config.sites)
        for d in range(DAYS)
    ]
    obs = pd.concat(frames, ignore_index=True)
    assert (obs["time"].dt.minute == 0).all()  # hourly, on the hour
    zone = loaded.config.sites[0].zone
    start = datetime.combine(FIRST, time(12, 0), zone)
    # to the noon that ends the last night: both step sizes cover the same nights
    end = datetime.combine(FIRST + timedelta(days=DAYS), time(12, 0), zone)
    return loaded, obs, start, end


def test_hourly_history_scores_the_same_at_10_min_and_1_h_steps(hourly):
    loaded, obs, start, end = hourly
    fine = replay(loaded, obs, start, end, step_s=600.0)
    coarse = replay(loaded, obs, start, end, step_s=3600.0)
    assert _night_table(fine) == _night_table(coarse)
    assert fine.table("warning") == coarse.table("warning")
    assert fine.table("watch") == coarse.table("watch")
    # the history has fog nights the rules warned of, so the comparison says something
    assert fine.table("warning").hits > 0
    # the first warning of each night comes at the same report, not ten minutes after
    # the report before it
    firsts = [
        (n.first_warning, m.first_warning) for n, m in zip(fine.nights, coarse.nights, strict=True)
    ]
    assert all(a == b for a, b in firsts), firsts


def test_a_report_carried_forward_does_not_meet_a_hold_by_itself(hourly):
    # every warning a 10-minute replay raises from a rule with a hold is raised at a
    # report (on the hour): between reports nothing new is known
    loaded, obs, start, end = hourly
    fine = replay(loaded, obs, start, end, step_s=600.0)
    held = {r.id for r in loaded.rules.rules if r.hold_s > 0}
    raised = [
        e
        for e in fine.events
        if e.type in ("raised", "escalated") and e.hazard == "fog" and held & set(e.rules)
    ]
    assert raised
    assert all(e.time.minute == 0 for e in raised), [e.time for e in raised]
    assert np.isfinite(fine.times).all()
