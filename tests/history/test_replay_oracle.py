"""Replay's fast path against the per-site lifecycle, on randomised multi-site replays.

``replay`` steps the lifecycle over arrays: every step's assessments are the lazy
``Assessments`` of a batch of steps, ``settled`` picks the few sites whose states may
change and only those have an assessment object built; the fog levels and the chance of
fog are read from arrays. The oracle here is the plain per-site lifecycle kept in the
tests (``tests/engine/oracle_lifecycle.py``, what fogwatch ran before issue 19), run
on every site's assessment object at every step of the same replay. The expected
events, fog levels and night outcomes are the oracle's, not numbers written down.

The worlds are invented (seeded numpy: random nights several in a row, exposures,
coasts with cold water, feeds that stop, patchy and hourly feeds, a site that never
reports); no real place or data.
"""

from __future__ import annotations

from datetime import UTC, date, datetime, time, timedelta

import numpy as np
import pandas as pd
import pytest

import notifier.engine.lifecycle as lifecycle_module
from notifier.core.config import AlertSettings, Config
from notifier.demo.weather import NightSpec, simulate_night
from notifier.history.replay import ReplayResult, replay
from notifier.service.loading import Loaded
from tests.engine.oracle_lifecycle import oracle_step
from tests.engine.scenes import RULES, site

FIRST_EVENING = date(2026, 10, 12)
EXPOSURES = ("open", "valley", "forest", "waterside", "coast", "urban")
USES = ("farm", "port", "venue", "other")
# short clocks: more clearings, reminders and held rises in a few nights
QUICK = AlertSettings(clearing_time=600, reminder_every=1800, cooldown=1200)


def world(seed: int, n_sites: int, nights: int) -> tuple[list, pd.DataFrame]:
    """``n_sites`` invented sites, each with ``nights`` random nights in a row."""
    rng = np.random.default_rng(seed)
    sites, frames = [], []
    for k in range(n_sites):
        exposure = str(rng.choice(EXPOSURES))
        coast = exposure in ("coast", "waterside")
        lat, lon = float(rng.uniform(49.5, 58.5)), float(rng.uniform(-6.0, 1.5))
        s = site(f"zz-r{seed}-{k}", exposure, str(rng.choice(USES)), lat=lat, lon=lon)
        sites.append(s)
        if k == n_sites - 1:
            continue  # a site that never reports: a data gap from the start
        step_min = int(rng.choice([10, 10, 30, 60]))  # hourly reports meet the holds late
        for night in range(nights):
            evening = FIRST_EVENING + timedelta(days=night)
            sunset_c = float(rng.uniform(-3.0, 13.0))
            spec = NightSpec(
                site=s.id,
                evening=evening,
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
                step_min=step_min,
                stop_after_local=(
                    datetime.combine(evening, time(22, 0), tzinfo=UTC)
                    + timedelta(minutes=int(rng.integers(0, 600)))
                    if rng.random() < 0.15
                    else None
                ),
                lift_local=time(int(rng.integers(3, 9)), 0) if rng.random() < 0.5 else None,
            )
            frame = simulate_night(spec)
            if rng.random() < 0.2:  # a patchy feed: readings lost at random
                frame = frame[rng.random(len(frame)) > 0.3]
            frames.append(frame)
    return sites, pd.concat(frames, ignore_index=True)


def _per_site_step(previous, assessments, now, settings):
    """The oracle lifecycle over every site's assessment object (all of them built)."""
    return oracle_step(previous, list(assessments), now, settings)


def _both(
    seed: int, n_sites: int, nights: int, alerts: AlertSettings
) -> tuple[ReplayResult, ReplayResult]:
    sites, obs = world(seed, n_sites, nights)
    loaded = Loaded(Config(sites=tuple(sites), alerts=alerts), RULES)
    start = datetime.combine(FIRST_EVENING, time(16, 0), tzinfo=UTC)
    end = start + timedelta(days=nights, hours=-1)
    fast = replay(loaded, obs, start, end)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(lifecycle_module, "step", _per_site_step)
        plain = replay(loaded, obs, start, end)
    return fast, plain


@pytest.mark.parametrize(
    ("seed", "alerts"),
    [(11, AlertSettings()), (12, QUICK), (13, AlertSettings()), (14, QUICK)],
    ids=["default-11", "quick-12", "default-13", "quick-14"],
)
def test_replay_gives_the_per_site_lifecycles_events(seed, alerts):
    fast, plain = _both(seed, n_sites=9, nights=3, alerts=alerts)
    assert [e.to_dict() for e in fast.events] == [e.to_dict() for e in plain.events]
    np.testing.assert_array_equal(fast.fog_level, plain.fog_level)
    assert fast.nights == plain.nights
    # the worlds are built so that alerts rise and end at several sites
    types = {e.type for e in fast.events}
    assert {"raised", "cleared"} <= types, types
    assert len({e.site_id for e in fast.events}) >= 3
    assert (fast.fog_level > 0).any()
