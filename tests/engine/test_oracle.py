"""The array assessment and lifecycle against the per-site oracles kept in the tests.

The oracles (tests/engine/oracle_assess.py, oracle_lifecycle.py) are the per-site
Python that fogwatch ran before issue 19. Every call the suite makes is checked against
them (tests/oracle_check.py); here, besides, two chains run side by side and
independently — array assess → array step, oracle assess → oracle step — over
randomised invented worlds (seeded numpy: random nights, exposures, harbours with cold
water, fog seen, data gaps, sites that never report, hourly reports against the holds)
and over random sequences of assessments (hypothesis: levels, margins, stale data,
expected times, kinds seen). The expected answer is the oracle's, not a number.
"""

from __future__ import annotations

import os
from datetime import UTC, datetime, time, timedelta

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

import notifier.engine.assess as assess_module
import notifier.engine.lifecycle as lifecycle_module
from notifier.core.config import AlertSettings
from notifier.demo.play import DEMO_EVENING, demo_nights
from notifier.demo.weather import NightSpec, simulate_night
from notifier.engine.assessed import Assessments
from notifier.engine.assessment import HazardAssessment, SiteAssessment
from tests import oracle_check
from tests.engine.oracle_assess import oracle_assess_times
from tests.engine.oracle_lifecycle import oracle_step
from tests.engine.scenes import RULES, site

EVENING = DEMO_EVENING
EXPOSURES = ("open", "valley", "forest", "waterside", "coast", "urban")
USES = ("farm", "port", "venue", "other")
QUICK = AlertSettings(clearing_time=600, reminder_every=1800, cooldown=1200)


@pytest.mark.skipif(
    os.environ.get("FOGWATCH_ORACLE", "1") == "0", reason="FOGWATCH_ORACLE=0: checks left out"
)
def test_every_call_of_the_suite_is_checked_against_the_oracles():
    # the cross-check cannot silently go away: both entry points are the checked ones
    assert getattr(assess_module.assess_times, "__oracle_checked__", False)
    assert getattr(lifecycle_module.step, "__oracle_checked__", False)
    before = dict(oracle_check.CHECKS)
    s = site("zz-check")
    at = datetime(2026, 11, 7, 2, 0, tzinfo=UTC)
    found = assess_module.assess(RULES, [s], _no_rows(), at)
    lifecycle_module.step({}, found, at, AlertSettings())
    assert oracle_check.CHECKS["assess"] == before["assess"] + 1
    assert oracle_check.CHECKS["step"] == before["step"] + 1


def _unchecked(fn):
    return getattr(fn, "__wrapped__", fn)


def _no_rows() -> pd.DataFrame:
    return simulate_night(NightSpec("zz-check", EVENING, "UTC", 52.0, -1.0)).iloc[0:0]


def world(seed: int, n: int) -> tuple[list, pd.DataFrame]:
    """``n`` invented sites with random nights (all made up: no real place or data)."""
    rng = np.random.default_rng(seed)
    sites, frames = [], []
    for k in range(n):
        exposure = str(rng.choice(EXPOSURES))
        coast = exposure in ("coast", "waterside")
        extra: dict[str, object] = {}
        if coast and rng.random() < 0.7:
            start = float(rng.uniform(0, 300))
            extra = {"onshore_from_deg": start, "onshore_to_deg": (start + 120) % 360}
        lat, lon = float(rng.uniform(49.5, 58.5)), float(rng.uniform(-6.0, 1.5))
        s = site(f"zz-w{seed}-{k}", exposure, str(rng.choice(USES)), lat=lat, lon=lon, **extra)
        sites.append(s)
        if rng.random() < 0.06:
            continue  # a site that never reports: a data gap from the start
        sunset_c = float(rng.uniform(-3.0, 13.0))
        spec = NightSpec(
            site=s.id,
            evening=EVENING,
            timezone=s.timezone,
            lat=lat,
            lon=lon,
            day_max_c=sunset_c + float(rng.uniform(0.5, 5.0)),
            sunset_temp_c=sunset_c,
            dewpoint_c=sunset_c - float(rng.uniform(0.2, 6.0)),
            dewpoint_drift_c_per_h=float(rng.uniform(-0.1, 0.05)),
            cooling_k_per_sqrt_h=float(rng.uniform(0.2, 2.2)),
            cloud_pct=float(rng.choice([5.0, 20.0, 60.0, 95.0])),
            wind_ms=float(rng.uniform(0.3, 6.0)),
            wind_dir_deg=float(rng.uniform(0, 360)),
            water_temp_c=float(sunset_c - rng.uniform(-4, 4)) if coast else None,
            surface_offset_c=float(rng.uniform(0.5, 3.0)) if rng.random() < 0.5 else None,
            start_local=time(10, 0),
            step_min=int(rng.choice([10, 10, 30, 60])),  # hourly reports meet the holds late
            stop_after_local=(
                datetime.combine(EVENING, time(22, 0), tzinfo=UTC)
                + timedelta(minutes=int(rng.integers(0, 600)))
                if rng.random() < 0.15
                else None
            ),
            lift_local=time(int(rng.integers(3, 9)), 0) if rng.random() < 0.5 else None,
            changes=(
                ((time(int(rng.integers(0, 5)), 0), {"wind_dir_deg": float(rng.uniform(0, 360))}),)
                if rng.random() < 0.3
                else ()
            ),
        )
        frame = simulate_night(spec)
        if rng.random() < 0.2:  # a patchy feed: readings lost at random
            frame = frame[rng.random(len(frame)) > 0.3]
        frames.append(frame)
    return sites, pd.concat(frames, ignore_index=True)


def run_both(sites, obs, times, alerts: AlertSettings) -> int:
    """Both chains over ``times``; returns how many events they agreed on. (The array
    chain calls the unchecked functions: the comparison is made here.)"""
    found = _unchecked(assess_module.assess_times)(RULES, sites, obs, times)
    expected = oracle_assess_times(RULES, sites, obs, times)
    states: dict = {}
    o_states: dict = {}
    told = 0
    for now, new, old in zip(times, found, expected, strict=True):
        assert isinstance(new, Assessments)
        oracle_check.assert_same_assessments(new, old)
        result = _unchecked(lifecycle_module.step)(states, new, now, alerts)
        o_result = oracle_step(o_states, old, now, alerts)
        oracle_check.assert_same_step(result, o_result)
        states, o_states = result[0], o_result[0]
        told += len(result[1])
    return told


def night_times(minutes: int = 10) -> list[datetime]:
    t0 = datetime.combine(EVENING, time(16, 0), tzinfo=UTC)
    return [t0 + timedelta(minutes=minutes * k) for k in range(int(16 * 60 / minutes))]


@pytest.mark.parametrize(
    "seed, alerts",
    [(1, AlertSettings()), (2, QUICK), (3, AlertSettings()), (4, QUICK)],
)
def test_random_worlds_give_the_oracles_assessments_and_events(seed, alerts):
    sites, obs = world(seed, 20)
    told = run_both(sites, obs, night_times(), alerts)
    assert told > 0  # the worlds are built so that something happens


def test_the_demo_night_gives_the_oracles_assessments_and_events(demo_loaded):
    obs = pd.concat([simulate_night(s) for s in demo_nights(demo_loaded.config)])
    told = run_both(list(demo_loaded.config.sites), obs, night_times(), AlertSettings())
    assert told > 0


@pytest.fixture(scope="module")
def demo_loaded():
    from notifier.demo.play import DEMO_CONFIG
    from notifier.service.loading import load

    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("FOGWATCH_DEMO_WEBHOOK_SECRET", "whsec_" + "MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw")
        mp.setenv("FOGWATCH_DEMO_BOT_SECRET", "whsec_" + "MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw")
        return load(DEMO_CONFIG)


# -- random sequences of assessments through the lifecycle --------------------------------

T0 = datetime(2026, 11, 6, 18, 0, tzinfo=UTC)
SITES = [site(f"zz-seq-{k}") for k in range(3)]
HAZARD_KINDS = {
    "fog": ("radiation", "observed", "dense", "advection", "valley"),
    "icing": ("frost", "freezing-fog", "radiation"),
    "data_gap": ("stale",),
}
LEVEL = ("none", "watch", "warning")
cell = st.tuples(
    st.integers(0, 2),  # level
    st.integers(0, 2),  # sustain (raised to the level)
    st.booleans(),  # stale
    st.one_of(st.none(), st.integers(-30, 300)),  # minutes to the expected time
    st.integers(0, 7),  # which kinds fire (bits)
)


def _hand_made(s, now: datetime, cells: dict[str, tuple]) -> SiteAssessment:
    hazards, sustain = {}, {}
    stale = any(c[2] for c in cells.values())
    for hazard, (level, keep, _, eta_min, kind_bits) in cells.items():
        kinds = HAZARD_KINDS[hazard]
        chosen = tuple(k for j, k in enumerate(kinds) if kind_bits >> j & 1) or kinds[:1]
        if level:
            eta = None if eta_min is None else now + timedelta(minutes=eta_min)
            method = "observed" if "observed" in chosen else ("cooling-curve" if eta else "")
            hazards[hazard] = HazardAssessment(
                hazard=hazard,
                level=LEVEL[level],
                kind=chosen[0],
                eta=eta,
                eta_method=method if eta else "",
                kinds=chosen,
                rules=[f"{hazard}-{LEVEL[level]}-{c}" for c in chosen],
                reasons=[f"{c} holds" for c in chosen],
                explanations=[],
                safety_refs=[],
            )
        if max(level, keep):
            sustain[hazard] = LEVEL[max(level, keep)]
    features = {"data_age_min": 200.0 if stale else 5.0, "temp_c": 3.0, "dewpoint_c": 2.5}
    return SiteAssessment(
        site=s,
        time=now,
        features=features,
        projection_method="",
        last_time=now,
        results=[],
        hazards=hazards,
        sustain=sustain,
    )


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    steps=st.lists(
        st.tuples(
            st.integers(1, 40),  # minutes since the step before
            st.lists(
                st.dictionaries(st.sampled_from(tuple(HAZARD_KINDS)), cell), min_size=3, max_size=3
            ),
        ),
        min_size=1,
        max_size=40,
    ),
    quick=st.booleans(),
)
# found by hypothesis: a watch that eases, then holds again with its margins alone
# (the clearing clocks stop though no rule fires)
@example(
    steps=[
        (1, [{}, {"fog": (1, 0, False, None, 0)}, {}]),
        (1, [{}, {}, {}]),
        (1, [{}, {"fog": (0, 1, False, None, 0)}, {}]),
    ],
    quick=False,
)
def test_random_sequences_give_the_oracles_states_and_events(steps, quick):
    alerts = QUICK if quick else AlertSettings()
    now = T0
    states: dict = {}
    o_states: dict = {}
    for gap, per_site in steps:
        now += timedelta(minutes=gap)
        found = [_hand_made(s, now, cells) for s, cells in zip(SITES, per_site, strict=True)]
        result = lifecycle_module.step(states, found, now, alerts)
        o_result = oracle_step(o_states, found, now, alerts)
        oracle_check.assert_same_step(result, o_result)
        states, o_states = result[0], o_result[0]


def test_a_quiet_cycle_builds_no_site_assessment():
    # the point of the arrays: a cycle where nothing changes reads no site's assessment
    sites, obs = world(5, 30)
    times = night_times(10)[60:63]
    first = assess_module.assess_times(RULES, sites, obs, times)
    states, _ = oracle_step({}, first[0], times[0], AlertSettings())
    # unchecked (the check itself reads every site's assessment)
    again = _unchecked(assess_module.assess_times)(RULES, sites, obs, [times[0]])[0]
    # the same time again: every state is where the first step left it
    kept, events = _unchecked(lifecycle_module.step)(states, again, times[0], AlertSettings())
    assert events == [] and kept == states
    assert len(states) > 0  # there were alerts to keep, and none was read
    assert again._built == {}
