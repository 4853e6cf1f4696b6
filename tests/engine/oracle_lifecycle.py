"""ORACLE: the per-site lifecycle (and event building) as it was before issue 19; the
array ``step`` must give exactly its states and events (tests/engine/test_oracle.py)."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import replace
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Any

from notifier.engine.alerts import AlertState, Event, StateKey, event_id
from notifier.engine.assessment import level_rank, results_where
from notifier.engine.catalog import FEATURES, SHOWN_FEATURES, format_value
from notifier.engine.rules import HAZARDS

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import AlertSettings
    from notifier.engine.assessment import HazardAssessment, SiteAssessment

#: rule kinds that mean the hazard is seen, not forecast (at warning level): fog
#: reported, dense fog, freezing fog, frost depositing
SIGHT_KINDS = ("observed", "dense", "freezing-fog", "frost")
#: the night's clock: an ended test of these is told as the night being over
SUN_FEATURES = frozenset({"is_night", "hours_to_sunrise", "hours_since_sunset"})


def shown_features(sa: SiteAssessment, rule_ids: Sequence[str]) -> dict[str, float]:
    names = list(SHOWN_FEATURES)
    for result in results_where(sa, lambda rule: rule.id in rule_ids):
        names.extend(sorted(result.rule.features()))
    out: dict[str, float] = {}
    for name in names:
        value = sa.features.get(name)
        if name in out or value is None or name == "data_age_min":
            continue
        if FEATURES.get(name) is not None and FEATURES[name].kind == "bool":
            continue
        value = float(value)
        if math.isfinite(value):
            out[name] = value
    return out


def changes(sa: SiteAssessment, state: AlertState) -> tuple[str, ...]:
    """What is no longer true: the tests of the ended rules that do not hold now, one
    line per value (the rules of what was seen first: "visibility now 9000 m" says more
    than a forecast's margin), leaving out whether a value is reported at all."""
    lines: list[str] = []
    unknown: list[str] = []
    said: set[str] = set()
    ended = results_where(sa, lambda rule: rule.id in state.rules)
    for result in sorted(ended, key=lambda r: r.rule.kind not in SIGHT_KINDS):
        if not result.applies:
            continue
        for outcome in result.outcomes:
            name = outcome.test.feature
            if outcome.held or name in said or name.endswith("_known"):
                continue
            said.add(name)
            spec = FEATURES[name]
            if not outcome.known:
                unknown.append(f"{spec.label} now unknown")
            elif name in SUN_FEATURES:
                # "time to sunrise now 22.7 h" says only that the night is over
                if "the night is over" not in lines:
                    lines.append("the night is over")
            elif outcome.test.op == "is":
                lines.append(f"{spec.label} now {format_value(name, outcome.value)}")
            else:
                value = format_value(name, outcome.value)
                lines.append(
                    f"{spec.label} now {value}, alert needs {outcome.test.describe_threshold()}"
                )
    lines += unknown
    if not lines:
        lines.append(f"no {state.hazard.replace('_', ' ')} rule at {state.level} holds now")
    return tuple(lines)


def sustaining_rules(sa: SiteAssessment, hazard: str, level: str) -> tuple[str, ...]:
    same = results_where(sa, lambda rule: rule.hazard == hazard and rule.level == level)
    return tuple(r.rule.id for r in same if r.applies and r.sustains)


def make_event(
    type_: str,
    state: AlertState,
    new_level: str,
    sa: SiteAssessment,
    now: datetime,
    episode_start: datetime | None,
    **extra: Any,
) -> Event:
    hazard = sa.hazards.get(state.hazard)
    if new_level == "none":
        hazard = None  # an ending: the rules are those of the alert that ended
        rules = state.rules
    else:
        rules = tuple(hazard.rules) if hazard else sustaining_rules(sa, state.hazard, new_level)
    age = sa.features.get("data_age_min")
    return Event(
        id=event_id(state.site_id, state.hazard, episode_start, type_, new_level, now),
        type=type_,
        site_id=state.site_id,
        hazard=state.hazard,
        level=new_level,
        previous_level=state.level,
        time=now,
        episode_start=episode_start,
        kind=hazard.kind if hazard else "",
        eta=hazard.eta if hazard else None,
        rules=rules,
        reasons=tuple(hazard.reasons) if hazard else (),
        explanations=tuple(hazard.explanations) if hazard else (),
        safety_refs=tuple(hazard.safety_refs) if hazard else (),
        previous_reasons=state.reasons,
        features=shown_features(sa, rules + state.rules),
        data_age_min=None if age is None else float(age),
        projection_method=sa.projection_method,
        eta_method=hazard.eta_method if hazard else "",
        seen_since=seen_since_for(state, hazard, now),
        peak_level=max(state.peak, state.level, key=_rank),
        **extra,
    )


def sighted(hazard: HazardAssessment | None) -> tuple[str, ...]:
    """The kinds of what is seen now (not forecast) at warning level."""
    if hazard is None or hazard.level != "warning":
        return ()
    return tuple(k for k in hazard.kinds if k in SIGHT_KINDS)


def seen_since_for(
    state: AlertState, hazard: HazardAssessment | None, now: datetime
) -> datetime | None:
    if hazard is None or hazard.eta_method not in ("observed", "surface-now"):
        return None
    return state.seen_since or now


DATA_GAP = "data_gap"
SOONER = timedelta(hours=1)  # an expected time this much earlier is news at once


def _rank(level: str) -> int:
    return level_rank(level)


def _step_one(
    state: AlertState, sa: SiteAssessment, now: datetime, settings: AlertSettings
) -> tuple[AlertState, list[Event]]:
    hazard = sa.hazards.get(state.hazard)
    assessed = hazard.level if hazard else "none"
    sustain = sa.sustain.get(state.hazard, "none")
    if _rank(sustain) < _rank(assessed):
        sustain = assessed

    if _rank(assessed) > _rank(state.level):
        announced = state.raised_at(assessed)
        if announced is None or now - announced >= timedelta(seconds=settings.cooldown):
            return _rise(state, assessed, sa, now)
        # inside the cooldown: hold the rise, announce it when the cooldown ends

    if state.level == "none":
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
    event = make_event(type_, fresh, assessed, sa, now, episode, seen=sighted(hazard))
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
    news of the site, one ``reminder`` for each of its warnings that is not easing (they
    go out together as one message). None while the site's data is stale."""
    every = timedelta(seconds=settings.reminder_every)
    if every <= timedelta(0) or sa.stale:
        return []
    mine = [states[k] for k in site_keys if k in states]
    times = [st.last_event_at for st in mine if st.last_event_at is not None]
    quiet = now - max(times) if times else None
    due = [
        st
        for st in mine
        if st.level == "warning" and st.below_since is None and st.hazard != DATA_GAP
    ]
    # once seen, the next news is usually its change (dense, freezing, ended): a hazard
    # seen and announced is reminded of half as often; when one is due, all go together
    if not any(quiet is None or quiet >= (every * 2 if st.seen else every) for st in due):
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
    )


def _prunable(state: AlertState, now: datetime, settings: AlertSettings) -> bool:
    """A quiet state whose cooldowns are over carries nothing worth keeping."""
    if state.level != "none":
        return False
    cooldown = timedelta(seconds=settings.cooldown)
    return all(now - t >= cooldown for _, t in state.last_raised)


def _hazard_order(hazard: str) -> tuple[int, str]:
    return (HAZARDS.index(hazard) if hazard in HAZARDS else len(HAZARDS), hazard)


def oracle_step(
    previous: Mapping[StateKey, AlertState],
    assessments: Sequence[SiteAssessment],
    now: datetime,
    settings: AlertSettings,
) -> tuple[dict[StateKey, AlertState], list[Event]]:
    """Advance every (site, hazard) state by one cycle; see the module docstring.

    States of sites not in ``assessments`` are returned unchanged. A state back at none
    is dropped once no cooldown depends on it.
    """
    if now.tzinfo is None:
        raise ValueError("now must be timezone-aware")
    now = now.astimezone(UTC)
    states: dict[StateKey, AlertState] = dict(previous)
    events: list[Event] = []
    by_site: dict[str, set[str]] = {}
    for s, h in previous:
        by_site.setdefault(s, set()).add(h)
    for sa in assessments:
        site_id = sa.site.id
        hazards = by_site.get(site_id, set()) | set(sa.hazards) | set(sa.sustain)
        if not hazards:
            continue  # nothing active, nothing remembered: nothing can happen here
        keys = [(site_id, hazard) for hazard in sorted(hazards, key=_hazard_order)]
        told = False
        for key in keys:
            state = previous.get(key) or AlertState(site_id=site_id, hazard=key[1])
            new, found = _step_one(state, sa, now, settings)
            events.extend(found)
            states[key] = new
            told = told or bool(found)
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
