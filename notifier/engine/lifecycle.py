"""Alert lifecycle: previous state + assessment + now → new state + events (pure).

One :class:`AlertState` per (site, hazard). :func:`step` compares it with the newest
:class:`~notifier.engine.assessment.SiteAssessment` and returns the next states and the
:class:`Event` objects a person should hear about. No file, network, clock or logging:
``now`` is passed in, and the same inputs always give the same outputs (and event ids).

Rules, with the defaults of :class:`~notifier.core.config.AlertSettings`:

- **Up at once.** When the assessed level rises above the current one: ``raised``
  (none → watch or warning) or ``escalated`` (watch → warning). The hazard
  ``data_gap`` says ``data_gap`` instead of ``raised``.
- **Seen, or sooner: news at once.** Under a warning, a rule of a kind that means the
  hazard is *seen* (``SIGHT_KINDS``: fog reported, dense fog, freezing fog, frost
  depositing) firing for the first time in the episode gives ``observed``; an expected
  time an hour or more earlier than the one last announced gives ``sooner``. Both go
  through quiet hours like a rise (``Event.urgent``).
- **Down only to a level that holds, else all clear.** The level used for dropping is
  the assessment's *sustain* level (each rule re-tested with its clearing margin). Only
  when that has stayed below the current level *continuously* for ``clearing_time``
  (45 min) does the alert drop: to ``downgraded`` (warning → watch) only if a watch rule
  fires now, with that rule's own reasons; otherwise straight to ``cleared`` (the
  all-clear). Any return to the current level restarts the clock, so a value hovering at
  a threshold never flaps. ``data_gap`` ends with ``data_back`` as soon as fresh data
  returns. An ending carries the episode's highest level (``peak_level``), so whoever
  heard the warning hears its end.
- **A short gap under a warning is told once.** While another hazard of the site is at
  warning, a data gap is held for ``gap_grace`` (45 min) once it is noticed: the warning
  stays in force meanwhile (stale data is not an all-clear), so the gap changes nothing a
  person should do. If readings return within the grace, one ``data_back`` says it all
  (``gap_untold``: "no readings from 02:30 to 04:40; fresh readings again"); if not,
  ``data_gap`` goes at the end of the grace and ``data_back`` when readings return. With
  no warning in force the gap is said at once: silence could hide a rising hazard. Both
  events carry ``gap_from``, the newest reading before the gap.
- **Reminders per site, and only while waiting.** Once ``reminder_every`` (3 h) has
  passed since any news of the site (of any hazard), one ``reminder`` for each of its
  warnings that is not easing and has not been seen, all in the same cycle (so they go
  out as one message). A hazard seen (fog formed, dense, freezing fog, frost) gets no
  reminder: its next news is its change or its end. None while the site's data is
  stale; routing drops reminders inside a recipient's quiet hours.
- **Cooldown** (``cooldown``, 60 min): a level is not announced again (``raised``,
  ``escalated`` or ``data_gap`` to that level) within ``cooldown`` of the last time it
  was announced for the same site and hazard. A rise that falls inside the cooldown is
  *held, not dropped*: the state stays where it is and the rise is announced on the first
  step after the cooldown ends, if the assessment still shows it. Because an alert can
  only end after ``clearing_time``, with the defaults a held rise waits at most
  ``cooldown - clearing_time`` = 15 min after an all-clear; a blip shorter than that is
  never announced.
- **Stale data is not an all-clear.** While a site's data is stale, its fog and icing
  alerts keep their level: their clearing clock is reset and no reminder is sent. The
  data gap is reported by the ``data_gap`` hazard itself.
- **Idempotent.** ``step(new_states, same assessments, same now)`` returns no events,
  and event ids are a hash of site, hazard, episode start, type, level and the minute
  of the event, so a re-run cycle makes the very same ids (the outbox dedupes on them).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING

from notifier.engine.alerts import AlertState, Event, StateKey
from notifier.engine.assessed import levels_of
from notifier.engine.assessment import level_rank
from notifier.engine.data_gap import DATA_GAP, gap_held, gap_told_once
from notifier.engine.event_parts import changes, make_event, sighted
from notifier.engine.rules import HAZARDS
from notifier.engine.settled import sites_to_step

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import AlertSettings
    from notifier.engine.assessment import HazardAssessment, SiteAssessment

__all__ = ["step"]


SOONER = timedelta(hours=1)  # an expected time this much earlier is news at once


def _rank(level: str) -> int:
    return level_rank(level)


def _step_one(
    state: AlertState,
    sa: SiteAssessment,
    now: datetime,
    settings: AlertSettings,
    warned: bool = False,
) -> tuple[AlertState, list[Event]]:
    hazard = sa.hazards.get(state.hazard)
    assessed = hazard.level if hazard else "none"
    sustain = sa.sustain.get(state.hazard, "none")
    if _rank(sustain) < _rank(assessed):
        sustain = assessed

    if _rank(assessed) > _rank(state.level):
        announced = state.raised_at(assessed)
        if announced is None or now - announced >= timedelta(seconds=settings.cooldown):
            held = gap_held(state, sa, now, settings, warned)
            if held is not None:
                return held, []
            return _rise(state, assessed, sa, now)
        # inside the cooldown: hold the rise, announce it when the cooldown ends

    if state.level == "none":
        if state.gap_pending_since is not None and sustain == "none":
            # readings back within the grace: one message tells the whole gap
            return _ended(state, now), [gap_told_once(state, sa, now)]
        return state, []

    is_data = state.hazard == DATA_GAP
    if sa.stale and not is_data:
        # unknown is not "below threshold": no clearing and no reminder on stale data
        return _with_since(state, None, None), []

    below_since = None
    if _rank(sustain) < _rank(state.level):
        below_since = state.below_since or now
    clear_since = (state.clear_since or now) if sustain == "none" else None

    if is_data and sustain == "none":
        return _end("data_back", state, sa, now, eased_since=now)

    clearing = timedelta(seconds=settings.clearing_time)
    if below_since is not None and now - below_since >= clearing:
        # no false steps: down only to a level whose own rules fire now, with their
        # reasons; when none does, the all-clear comes directly
        if hazard is not None and _rank(assessed) < _rank(state.level):
            return _downgrade(state, sa, now, below_since, clear_since)
        if hazard is None:
            return _end("cleared", state, sa, now, eased_since=below_since)
    state = _with_since(state, below_since, clear_since)
    if hazard is not None and hazard.level == state.level:
        return _news(state, hazard, sa, now)
    return state, []


def _news(
    state: AlertState, hazard: HazardAssessment, sa: SiteAssessment, now: datetime
) -> tuple[AlertState, list[Event]]:
    """At the same level, what a person needs at once: the hazard now seen (fog formed,
    turned dense, freezing fog, ice), or its expected time an hour or more sooner."""
    new_seen = tuple(k for k in sighted(hazard) if k not in state.seen)
    if new_seen:
        # "since" is when this newly seen thing appeared, not the first sighting
        event = make_event(
            "observed",
            replace(state, seen_since=now),
            state.level,
            sa,
            now,
            state.episode_start,
            seen=new_seen,
        )
    elif (
        hazard.eta is not None
        and state.eta is not None
        and hazard.eta_method not in ("observed", "surface-now")
        and state.eta - hazard.eta >= SOONER
    ):
        event = make_event("sooner", state, state.level, sa, now, state.episode_start)
    else:
        return state, []
    return _announced(state, event, now), [event]


def _announced(state: AlertState, event: Event, now: datetime) -> AlertState:
    """``state`` once ``event`` (at its own level) has been announced."""
    return replace(
        state,
        last_event_at=now,
        rules=event.rules or state.rules,
        reasons=event.reasons or state.reasons,
        seen=tuple(dict.fromkeys((*state.seen, *event.seen))),
        seen_since=event.seen_since or state.seen_since,
        eta=event.eta if event.eta is not None else state.eta,
    )


def _rise(
    state: AlertState, assessed: str, sa: SiteAssessment, now: datetime
) -> tuple[AlertState, list[Event]]:
    """``raised``, ``escalated`` or ``data_gap``: the level goes up at once."""
    if state.hazard == DATA_GAP:
        type_ = "data_gap"
    else:
        type_ = "raised" if state.level == "none" else "escalated"
    episode = now if state.level == "none" else state.episode_start
    hazard = sa.hazards.get(state.hazard)
    fresh = state if state.level != "none" else replace(state, seen=(), seen_since=None)
    gap_from = (state.gap_from or sa.last_time) if state.hazard == DATA_GAP else None
    extra = {"gap_from": gap_from} if gap_from is not None else {}
    event = make_event(type_, fresh, assessed, sa, now, episode, seen=sighted(hazard), **extra)
    raised = dict(state.last_raised)
    raised[assessed] = now
    new = replace(
        state,
        level=assessed,
        since=now,
        episode_start=episode,
        below_since=None,
        clear_since=None,
        last_event_at=now,
        last_reminder_at=None,
        last_raised=tuple(sorted(raised.items(), key=lambda p: _rank(p[0]))),
        rules=event.rules,
        reasons=event.reasons,
        peak=max(state.peak, assessed, key=_rank) if state.level != "none" else assessed,
        seen=tuple(dict.fromkeys((*fresh.seen, *event.seen))),
        seen_since=event.seen_since,
        eta=event.eta,
        gap_from=gap_from,
        gap_pending_since=None,
    )
    return new, [event]


def _end(
    type_: str, state: AlertState, sa: SiteAssessment, now: datetime, eased_since: datetime
) -> tuple[AlertState, list[Event]]:
    """``cleared`` or ``data_back``: the alert is over."""
    event = make_event(
        type_,
        state,
        "none",
        sa,
        now,
        state.episode_start,
        changes=changes(sa, state),
        eased_since=eased_since,
        gap_from=state.gap_from,
    )
    return _ended(state, now), [event]


def _downgrade(
    state: AlertState,
    sa: SiteAssessment,
    now: datetime,
    below_since: datetime,
    clear_since: datetime | None,
) -> tuple[AlertState, list[Event]]:
    """``downgraded``: warning eased to watch, the only level between warning and none."""
    target = "watch"
    event = make_event(
        "downgraded",
        state,
        target,
        sa,
        now,
        state.episode_start,
        changes=changes(sa, state),
        eased_since=below_since,
    )
    new = replace(
        state,
        level=target,
        since=now,
        below_since=clear_since,
        clear_since=clear_since,
        last_event_at=now,
        last_reminder_at=None,
        rules=event.rules,
        reasons=event.reasons,
        eta=event.eta,
    )
    return new, [event]


def _remind_site(
    states: dict[StateKey, AlertState],
    site_keys: Sequence[StateKey],
    sa: SiteAssessment,
    now: datetime,
    settings: AlertSettings,
) -> list[Event]:
    """Reminders per site, not per hazard: once ``reminder_every`` has passed since any
    news of the site, one ``reminder`` for each of its warnings that is not easing and
    not yet seen (they go out together as one message). None while the site's data is
    stale, and none for a hazard seen: its next news is its change or its end."""
    every = timedelta(seconds=settings.reminder_every)
    if every <= timedelta(0) or sa.stale:
        return []
    mine = [states[k] for k in site_keys if k in states]
    times = [st.last_event_at for st in mine if st.last_event_at is not None]
    quiet = now - max(times) if times else None
    due = [
        st
        for st in mine
        if st.level == "warning"
        and st.below_since is None
        and st.hazard != DATA_GAP
        and not st.seen  # seen: fog formed, dense, freezing, frost; told when it changes
    ]
    if not due or (quiet is not None and quiet < every):
        return []
    events = []
    for state in due:
        event = make_event(
            "reminder", state, state.level, sa, now, state.episode_start, level_since=state.since
        )
        states[state.key] = replace(
            state,
            last_event_at=now,
            last_reminder_at=now,
            rules=event.rules or state.rules,
            reasons=event.reasons or state.reasons,
            eta=event.eta if event.eta is not None else state.eta,  # as announced
        )
        events.append(event)
    return events


def _with_since(
    state: AlertState, below_since: datetime | None, clear_since: datetime | None
) -> AlertState:
    """``state`` with these easing times; itself when they are its own already (most
    cycles change nothing, and a replay steps through a great many)."""
    if state.below_since == below_since and state.clear_since == clear_since:
        return state
    return replace(state, below_since=below_since, clear_since=clear_since)


def _ended(state: AlertState, now: datetime) -> AlertState:
    return replace(
        state,
        level="none",
        since=now,
        episode_start=None,
        below_since=None,
        clear_since=None,
        last_event_at=now,
        last_reminder_at=None,
        rules=(),
        reasons=(),
        peak="none",
        seen=(),
        seen_since=None,
        eta=None,
        gap_from=None,
        gap_pending_since=None,
    )


def _prunable(state: AlertState, now: datetime, settings: AlertSettings) -> bool:
    """A quiet state whose cooldowns are over carries nothing worth keeping."""
    if state.level != "none" or state.gap_pending_since is not None:
        return False
    cooldown = timedelta(seconds=settings.cooldown)
    return all(now - t >= cooldown for _, t in state.last_raised)


def _with_in_force(events: list[Event], site_states: Sequence[AlertState]) -> list[Event]:
    """Endings, and data gaps, that say which other alerts of the site are in force."""
    out = []
    for event in events:
        if event.type in ("cleared", "downgraded", "data_gap", "data_back"):
            others = tuple(
                f"{st.hazard}:{st.level}"
                for st in site_states
                if st.hazard not in (event.hazard, DATA_GAP) and st.level != "none"
            )
            event = replace(event, in_force=others) if others else event
        out.append(event)
    return out


def _hazard_order(hazard: str) -> tuple[int, str]:
    return (HAZARDS.index(hazard) if hazard in HAZARDS else len(HAZARDS), hazard)


def step(
    previous: Mapping[StateKey, AlertState],
    assessments: Sequence[SiteAssessment],
    now: datetime,
    settings: AlertSettings,
) -> tuple[dict[StateKey, AlertState], list[Event]]:
    """Advance every (site, hazard) state by one cycle; see the module docstring.

    States of sites not in ``assessments`` are returned unchanged. A state back at none
    is dropped once no cooldown depends on it. The rules below run only for the sites
    :func:`~notifier.engine.settled.sites_to_step` finds something to do at; at every
    other site they would return the states unchanged, with no event.
    """
    if now.tzinfo is None:
        raise ValueError("now must be timezone-aware")
    now = now.astimezone(UTC)
    states: dict[StateKey, AlertState] = dict(previous)
    events: list[Event] = []
    # numpy over every site and state finds the few sites with something to do
    view = levels_of(assessments)
    todo = sites_to_step(previous, view, now, settings).tolist()
    wanted = {view.ids[i] for i in todo}
    by_site: dict[str, set[str]] = {}
    for s, h in previous:
        if s in wanted:
            by_site.setdefault(s, set()).add(h)
    for i in todo:
        sa = assessments[i]
        site_id = sa.site.id
        hazards = by_site.get(site_id, set()) | set(sa.hazards) | set(sa.sustain)
        if not hazards:
            continue  # nothing active, nothing remembered: nothing can happen here
        keys = [(site_id, hazard) for hazard in sorted(hazards, key=_hazard_order)]
        # a warning in force at the site (the grace a data gap gets under it)
        warned = any(
            key[1] != DATA_GAP and key in previous and previous[key].level == "warning"
            for key in keys
        )
        told: list[Event] = []
        for key in keys:
            state = previous.get(key) or AlertState(site_id=site_id, hazard=key[1])
            new, found = _step_one(state, sa, now, settings, warned)
            told.extend(found)
            states[key] = new
        events.extend(_with_in_force(told, [states[k] for k in keys]))
        if told:  # news of one hazard is news of the site: the reminder clocks restart
            for key in keys:
                st = states[key]
                if st.level != "none" and st.last_event_at != now:
                    states[key] = replace(st, last_event_at=now)
        events.extend(_remind_site(states, keys, sa, now, settings))
        for key in keys:
            if _prunable(states[key], now, settings):
                states.pop(key, None)
    return states, events
