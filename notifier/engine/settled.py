"""Which sites the lifecycle must step one by one this cycle (pure: no I/O, no clock).

Most cycles change nothing at most sites: an alert stays at its level, with nothing
newly seen, no clearing clock starting, running out or stopping, and no reminder due.
:func:`sites_to_step` finds those in numpy over every (site, hazard) state at once, from
the assessment's arrays (:class:`~notifier.engine.assessed.SiteLevels`), and hands back
only the others; :func:`~notifier.engine.lifecycle.step` runs its per-site rules on them
alone. The test here errs one way only: a site it lets through may turn out to have
nothing to do (a rise held by its cooldown, an expected time not an hour sooner), but a
site it leaves out is one whose states the per-site rules would return unchanged, with
no event. ``tests/engine/test_oracle.py`` holds it to that against the per-site version.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from datetime import datetime
from typing import TYPE_CHECKING

import numpy as np

from notifier.engine.alerts import AlertState, StateKey
from notifier.engine.assessed import SIGHT_BITS, SiteLevels
from notifier.engine.event_parts import SIGHT_KINDS
from notifier.engine.rules import LEVELS

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import AlertSettings

__all__ = ["sites_to_step"]

DATA_GAP = "data_gap"
WARNING = LEVELS.index("warning")
# times are compared as POSIX seconds in floating point; a second's slack on the side of
# stepping the site keeps a rounding error from hiding a clearing or a reminder
SLACK_S = 1.0
SOONER_S = 3600.0  # lifecycle.SOONER: an expected time this much earlier is news


def _seconds(t: datetime | None) -> float:
    return math.nan if t is None else t.timestamp()


def sites_to_step(
    previous: Mapping[StateKey, AlertState],
    view: SiteLevels,
    now: datetime,
    settings: AlertSettings,
) -> np.ndarray:
    """The indices (ascending) of the sites in ``view`` whose states may change, or
    whose step may give an event; see the module docstring."""
    n = len(view.ids)
    index = view.index()
    now_s = now.timestamp()
    rank = {level: k for k, level in enumerate(LEVELS)}
    sight = dict(zip(SIGHT_KINDS, SIGHT_BITS, strict=True))
    step = np.zeros(n, dtype=bool)
    # the level of each (site, hazard) state, for the rises
    held = {h: np.zeros(n, np.int8) for h in view.levels}
    rows: list[tuple[int, str, int, float, float, float, int, bool, float]] = []
    for (site_id, hazard), st in previous.items():
        i = index.get(site_id)
        if i is None:
            continue  # a site not assessed keeps its states
        level = rank[st.level]
        if level == 0:
            step[i] = True  # back at none: pruned once its cooldowns are over
            continue
        if hazard in held:
            held[hazard][i] = level
        seen = 0
        for kind in st.seen:
            seen |= sight.get(kind, 0)
        rows.append(
            (
                i,
                hazard,
                level,
                _seconds(st.below_since),
                _seconds(st.clear_since),
                _seconds(st.last_event_at),
                seen,
                bool(st.seen),
                _seconds(st.eta),
            )
        )
    # up at once (or held by the cooldown, which the per-site rules judge)
    for hazard, ranks in view.levels.items():
        step |= ranks > held[hazard]
    if rows:
        step[_changing(rows, view, now_s, settings)] = True
    return np.flatnonzero(step)


def _changing(
    rows: list[tuple[int, str, int, float, float, float, int, bool, float]],
    view: SiteLevels,
    now_s: float,
    settings: AlertSettings,
) -> np.ndarray:
    """The sites of the active states (``rows``) that may change or speak."""
    cols = list(zip(*rows, strict=True))
    idx = np.array(cols[0], dtype=np.intp)
    hazards = np.array(cols[1], dtype=object)
    level = np.array(cols[2], dtype=np.int8)
    below = np.array(cols[3], dtype=float)
    clear = np.array(cols[4], dtype=float)
    last = np.array(cols[5], dtype=float)
    seen = np.array(cols[6], dtype=np.uint8)
    seen_any = np.array(cols[7], dtype=bool)
    eta = np.array(cols[8], dtype=float)
    assessed = np.zeros(idx.size, np.int8)
    sustain = np.zeros(idx.size, np.int8)
    sighted = np.zeros(idx.size, np.uint8)
    sooner = np.full(idx.size, np.nan)
    for hazard in set(cols[1]):
        mine = hazards == hazard
        at = idx[mine]
        # each map on its own: a hazard may hold with its margins where none fires
        for found, into in (
            (view.levels, assessed),
            (view.sustain, sustain),
            (view.seen, sighted),
            (view.sooner, sooner),
        ):
            if hazard in found:
                into[mine] = found[hazard][at]
    is_data = hazards == DATA_GAP
    stale = view.stale[idx]
    # no clearing clock running, no all-clear clock running
    no_below, no_clear = np.isnan(below), np.isnan(clear)
    # stale data: fog and icing keep their level, the clocks are reset
    frozen = stale & ~is_data
    change = frozen & ~(no_below & no_clear)
    live = ~frozen
    below_now = sustain < level
    change |= live & is_data & (sustain == 0)  # data back
    change |= live & (below_now != ~no_below)  # the clearing clock starts or stops
    with np.errstate(invalid="ignore"):
        due_clear = now_s - below >= settings.clearing_time - SLACK_S
    change |= live & below_now & due_clear  # down, or all clear
    change |= live & ((sustain == 0) != ~no_clear)  # the all-clear clock starts or stops
    same = live & (assessed == level)
    change |= same & ((sighted & ~seen) != 0)  # newly seen
    with np.errstate(invalid="ignore"):
        earlier = eta - sooner >= SOONER_S - SLACK_S
    change |= same & earlier  # an hour or more sooner
    if settings.reminder_every > 0:
        # reminders go per site, a while after the site's newest news of any hazard
        newest = np.full(view.stale.size, -np.inf)
        np.fmax.at(newest, idx, last)
        quiet = now_s - newest[idx]
        every = settings.reminder_every * np.where(seen_any, 2.0, 1.0)
        due = (level == WARNING) & no_below & ~is_data & ~stale
        change |= due & (quiet >= every - SLACK_S)
    return idx[change]
