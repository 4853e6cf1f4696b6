"""What an event of the lifecycle carries (pure): its rules and reasons, what changed
when an alert ends, the features shown beside it, and what is newly seen.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from datetime import datetime
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

from notifier.engine.alerts import AlertState, Event, event_id
from notifier.engine.assessment import firing_reasons, level_rank, results_where, tested_where
from notifier.engine.catalog import FEATURES, SHOWN_FEATURES, format_value
from notifier.engine.templates import render_template

if TYPE_CHECKING:  # pragma: no cover
    from notifier.engine.assessment import HazardAssessment, SiteAssessment

__all__ = ["SIGHT_KINDS", "changes", "make_event", "seen_since_for", "sighted"]

#: rule kinds that mean the hazard is seen, not forecast (at warning level): fog
#: reported, dense fog, freezing fog, frost depositing
SIGHT_KINDS = ("observed", "dense", "freezing-fog", "frost")
#: the night's clock: an ended test of these is told as the night being over
SUN_FEATURES = frozenset({"is_night", "hours_to_sunrise", "hours_since_sunset"})
_COMPARED = re.compile(r" (?:[<>≤≥]|in|is) ")  # a reason's value, before its test


#: a rule's kind, short, for "what changed": whose threshold a value is told against
#: ("visibility now 9000 m, dense fog warning needs < 200 m", not "alert needs", which
#: read as if the whole fog warning had needed 200 m)
KIND_SHORT = MappingProxyType(
    {
        "radiation": "clear-sky fog",
        "valley": "valley fog",
        "advection": "sea fog",
        "steam": "steam fog",
        "stratus-lowering": "low-cloud fog",
        "observed": "reported fog",
        "dense": "dense fog",
        "site-model": "site-model fog",
        "freezing-fog": "freezing fog",
        "frost": "frost",
    }
)


def rule_words(rule: Any) -> str:
    """A rule as "what changed" names it: its kind and level ("dense fog warning")."""
    hazard = str(rule.hazard).replace("_", " ")
    return f"{KIND_SHORT.get(rule.kind, hazard)} {rule.level}"


def _rank(level: str) -> int:
    return level_rank(level)


def shown_features(sa: SiteAssessment, rule_ids: Sequence[str]) -> dict[str, float]:
    names = list(SHOWN_FEATURES)
    for tested in tested_where(sa, lambda rule: rule.id in rule_ids):
        names.extend(sorted(tested))
    features = sa.features
    out: dict[str, float] = {}
    for name in names:
        if name in out or name in _NOT_SHOWN:
            continue
        value = features.get(name)
        if value is None:
            continue
        value = float(value)
        if math.isfinite(value):
            out[name] = value
    return out


#: what an event never shows: the data's age (it has its own field) and the flags
_NOT_SHOWN = frozenset(
    {"data_age_min", *(name for name, spec in FEATURES.items() if spec.kind == "bool")}
)


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
                    f"{spec.label} now {value}, {rule_words(result.rule)} needs "
                    f"{outcome.test.describe_threshold()}"
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
    # what is seen, not the forecast that led to the warning (the projected minimum or
    # the hours to fog are moot once fog is here); the hazard's own texts are made only
    # when nothing seen replaces them
    seen = seen_texts(sa, hazard) if hazard is not None and extra.get("seen") else None
    if seen is not None:
        reasons, explanations = seen
    else:
        reasons = tuple(hazard.reasons) if hazard else ()
        explanations = tuple(hazard.explanations) if hazard else ()
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
        reasons=reasons,
        explanations=explanations,
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


def seen_texts(
    sa: SiteAssessment, hazard: HazardAssessment
) -> tuple[tuple[str, ...], tuple[str, ...]] | None:
    """The reasons and explanations of the rules that see the hazard (``SIGHT_KINDS``,
    at its level) and fire now, each value once; None when there are none."""
    firing = firing_reasons(
        sa,
        lambda rule: (
            rule.hazard == hazard.hazard and rule.level == hazard.level and rule.kind in SIGHT_KINDS
        ),
    )
    if not firing:
        return None
    reasons: list[str] = []
    said: set[str] = set()
    for _, texts in firing:
        for text in texts:
            value = _COMPARED.split(text, maxsplit=1)[0]  # "≤ 0 °C" and "< 0 °C": one line
            if value not in said:
                said.add(value)
                reasons.append(text)
    explanations = [render_template(r.explain, sa.features) for r, _ in firing if r.explain]
    return tuple(reasons), tuple(dict.fromkeys(explanations))


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
