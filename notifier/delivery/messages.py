"""Events → messages a person reads on a phone: subject, plain text, and a JSON body.

The layout is fogwatch's own: a headline, a line with the date and what is new, then
short paragraphs that each open with a plain word and a colon, lines at most
:data:`WIDTH` characters::

    Fog has formed · Quay Two · 00:30 GMT
    Sat 07 Nov 00:30 GMT · fog now seen, under the warning since 23:30 GMT

    When: here now, reported since 00:30 GMT.
    What: sea fog (moist air carried in over colder water).

    Why:
    • visibility 959 m < 1000 m
    ...

Events of one site at one moment (fog and icing together) go out as one message
(:func:`render_site`). Every message ends with the same caution (:data:`CAUTION`). An
all-clear or a downgrade says what changed: the level it ends, since when it has eased,
each test that no longer holds (value against the threshold the alert needed), and the
values now. A time that cannot be worked out is left out, never shown as "?".
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

from notifier.core.timefmt import iso_text, local_time
from notifier.delivery.wording import (
    HAZARD_NAMES,
    KIND_WORDS,
    SEEN_WORDS,
    gap_text,
    hhmm,
    in_force_text,
    lead,
    status_note,
    when_text,
)
from notifier.engine.catalog import FEATURES, NOW_FEATURES, format_value

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Site
    from notifier.engine.alerts import Event
    from notifier.engine.rules import RuleSet

__all__ = [
    "CAUTION",
    "WIDTH",
    "Message",
    "headline",
    "render",
    "render_site",
    "render_summary",
    "site_headline",
]

WIDTH = 68
MESSAGE_SCHEMA = 2  # 2: event types observed and sooner, fields eta_method and seen
CAUTION = (
    "This is an automated estimate from site data, not an official forecast. "
    "Follow official warnings, the harbour authority, local codes and licensed practice."
)
ICING_NEAR_C = 1.0  # "near or below 0 °C": within 1 °C of freezing (common practice)

PROJECTIONS = {
    "forecast": "forecast rows for this site",
    "cooling-fit": "fit to tonight's cooling so far",
    "midday-estimate": "estimate from the afternoon's values",
}


@dataclass(frozen=True)
class Message:
    subject: str
    text: str
    json: dict[str, Any] = field(default_factory=dict)


def _one_line(text: str) -> str:
    return " ".join(text.split())


def _wrap(text: str, bullet: bool = False) -> list[str]:
    text = _one_line(text)
    if bullet:
        return textwrap.wrap(
            text, WIDTH, initial_indent="• ", subsequent_indent="  ", break_on_hyphens=False
        ) or ["•"]
    return textwrap.wrap(text, WIDTH, break_on_hyphens=False) or [""]


def _block(label: str, paragraphs: Sequence[str] = (), bullets: Sequence[str] = ()) -> list[str]:
    lines = ["", f"{label}:"] if label else [""]
    for para in paragraphs:
        lines.extend(_wrap(para))
    for bullet in bullets:
        lines.extend(_wrap(bullet, bullet=True))
    return lines


def _capped(items: Sequence[str], limit: int) -> list[str]:
    if len(items) <= limit:
        return list(items)
    return [*items[: limit - 1], f"and {len(items) - limit + 1} more"]


def headline(event: Event, site: Site, tz_name: str | None = None) -> str:
    """One line: what happened, site and local time, worded by event type."""
    zone = tz_name or site.timezone
    return f"{lead(event)} · {_one_line(site.name)} · {hhmm(event.time, zone)}"


def _value(name: str, value: float) -> str:
    return format_value(name, value) if name in FEATURES else f"{value:g}"


def _when_block(event: Event, zone: str) -> list[str]:
    if event.hazard == "data_gap":
        if event.type == "data_gap":
            span = gap_text(event, zone)
            return _para(
                "When",
                f"now{f' ({span})' if span else ''}, and until readings return: fog "
                "and icing cannot be judged at this site meanwhile. An alert in force "
                "stays in force: missing data never ends one.",
            )
        return []
    if event.level == "none":
        return []
    lines = _para("When", when_text(event, zone))
    kind = KIND_WORDS.get(event.kind)
    if kind and event.kind != "observed":
        lines += _wrap(f"What: {kind}.")
    return lines


def _para(label: str, text: str) -> list[str]:
    return ["", *_wrap(f"{label}: {text}")]


def _ice_block(event: Event) -> list[str]:
    feats = event.features
    parts = []
    for name, word in (("temp_c", "air"), ("surface_temp_c", "surface")):
        value = feats.get(name)
        if value is not None and math.isfinite(value) and value <= ICING_NEAR_C:
            parts.append(f"{word} {_value(name, value)}")
    if not parts:
        return []
    said = ", ".join(parts)
    return _block(
        "Ice",
        [
            f"{said[0].upper()}{said[1:]}: at or near freezing. "
            "Surfaces may be icy even where they look only wet."
        ],
    )


def _data_block(event: Event) -> list[str]:
    age = event.data_age_min
    if age is None or not math.isfinite(age):
        paras = ["No readings have been received from this site."]
    else:
        paras = [f"Newest reading {round(max(age, 0.0)):d} min old."]
    if event.projection_method and event.eta_method in ("cooling-curve", "surface-cooling"):
        method = PROJECTIONS.get(event.projection_method, event.projection_method)
        paras.append(f"Projection: {method}.")
    return _block("Data", paras)


def _now_bullets(event: Event) -> list[str]:
    out = []
    for name in NOW_FEATURES:
        value = event.features.get(name)
        if value is not None and math.isfinite(value):
            out.append(f"{FEATURES[name].label} {_value(name, value)}")
    return out


def _notes(event: Event, site: Site, rules: RuleSet) -> list[str]:
    return [n.text for n in rules.notes_for(event.hazard, site.use, event.safety_refs)]


def _body(event: Event, site: Site, rules: RuleSet, zone: str) -> list[str]:
    lines = [*_wrap(headline(event, site, zone)), *_wrap(status_note(event, zone))]
    if event.type == "outlook":
        lines += _block("Tonight", list(event.explanations))
        lines += _data_block(event)
        lines += _block("", [CAUTION])
        return lines
    lines += _event_lines(event, zone)
    lines += _ice_block(event)
    lines += _data_block(event)
    lines += _notes_block([event], site, rules)
    lines += _block("", [CAUTION])
    lines += ["", f"ref {event.id[:12]} · fogwatch"]
    return lines


def _event_lines(event: Event, zone: str) -> list[str]:
    """When, what and why of one event (or, for an ending, what changed)."""
    lines = _when_block(event, zone)
    if event.type not in ("downgraded", "cleared", "data_back"):
        return lines + _block("Why", list(event.explanations), bullets=event.reasons)
    since = f" since {hhmm(event.eased_since, zone)}" if event.eased_since else ""
    haz = HAZARD_NAMES.get(event.hazard, event.hazard).lower()
    if event.type == "data_back":
        span = gap_text(event, zone)
        lead = f"{span[:1].upper()}{span[1:]}: fresh" if span else "Fresh"
        lead += " readings are arriving again."
        if event.gap_untold:
            lead += (
                " It was not sent on its own: it was short, and a gap never ends a "
                "warning (alerts.gap_grace)."
            )
    elif event.type == "cleared":
        lead = f"No {haz} alert level has held{since}."
    else:
        lead = f"Below {event.previous_level} level{since}."
    if event.in_force:
        lead += f" Still in force here: {in_force_text(event).removesuffix(' still in force')}."
    lines += _block("What changed", [lead], bullets=_capped(event.changes, 6))
    now = _now_bullets(event)
    if now:
        lines += _block("Now", bullets=now)
    if event.type == "downgraded" and event.reasons:
        lines += _block(f"Why it is still a {event.level}", bullets=event.reasons)
    if event.previous_reasons:
        lines += _block("Was", bullets=_capped(event.previous_reasons, 4))
    return lines


def _notes_block(events: Sequence[Event], site: Site, rules: RuleSet) -> list[str]:
    notes: list[str] = []
    for event in events:
        notes += [n for n in _notes(event, site, rules) if n not in notes]
    if not notes:
        return []
    ending = all(e.level == "none" for e in events)
    return _block("Keep in mind" if ending else "What to do", bullets=notes)


def _site_body(events: Sequence[Event], site: Site, rules: RuleSet, zone: str) -> list[str]:
    """Several events of one site at one moment, as one message: each event's own part
    under its own line, then the data, what to do and the caution once."""
    first = events[0]
    lines = [*_wrap(site_headline(events, site, zone))]
    stamp = local_time(first.time, zone, with_date=True)
    lines += _wrap(f"{stamp} · {len(events)} updates for this site")
    for event in events:
        lines += ["", *_wrap(f"{lead(event)} ({status_note(event, zone).split(' · ', 1)[1]})")]
        if event.type == "outlook":
            lines += _block("Tonight", list(event.explanations))
        else:
            lines += _event_lines(event, zone)
    lines += _ice_block(max(events, key=lambda e: len(e.features)))
    lines += _data_block(first)
    lines += _notes_block(events, site, rules)
    lines += _block("", [CAUTION])
    lines += ["", f"ref {' '.join(e.id[:12] for e in events)} · fogwatch"]
    return lines


def site_headline(events: Sequence[Event], site: Site, tz_name: str | None = None) -> str:
    """One line for one or more events of a site at one moment."""
    zone = tz_name or site.timezone
    leads = "; ".join(dict.fromkeys(lead(e) for e in events))
    return f"{leads} · {_one_line(site.name)} · {hhmm(events[0].time, zone)}"


def _age(age: float | None) -> float | None:
    return None if age is None or not math.isfinite(age) else round(age, 1)


def _event_json(event: Event, site: Site, head: str, text: str) -> dict[str, Any]:
    return {
        "schema": MESSAGE_SCHEMA,
        "id": event.id,
        "type": event.type,
        "site": site.id,
        "site_name": site.name,
        "hazard": event.hazard,
        "level": event.level,
        "previous_level": event.previous_level,
        "kind": event.kind or None,
        "headline": head,
        "text": text,
        "reasons": list(event.reasons),
        "changes": list(event.changes),
        "eta": iso_text(event.eta),
        "eta_method": event.eta_method or None,
        "seen": list(event.seen),
        "time": iso_text(event.time),
        "data_age_min": _age(event.data_age_min),
        "features": {k: round(v, 3) for k, v in event.features.items() if math.isfinite(v)},
        "caution": CAUTION,
    }


def render_site(
    events: Sequence[Event], site: Site, rules: RuleSet, tz_name: str | None = None
) -> Message:
    """One message for the events of one site at one moment (fog and icing together)."""
    if len(events) == 1:
        return render(events[0], site, rules, tz_name)
    if not events:
        raise ValueError("a message needs at least one event")
    zone = tz_name or site.timezone
    head = site_headline(events, site, zone)
    text = "\n".join(_site_body(events, site, rules, zone)) + "\n"
    body = {
        "schema": MESSAGE_SCHEMA,
        "type": "site",
        "site": site.id,
        "site_name": site.name,
        "headline": head,
        "text": text,
        "time": iso_text(events[0].time),
        "events": [_event_json(e, site, headline(e, site, zone), "") for e in events],
        "caution": CAUTION,
    }
    return Message(subject=head, text=text, json=body)


def render(event: Event, site: Site, rules: RuleSet, tz_name: str | None = None) -> Message:
    """The message for one event, with times shown in ``tz_name`` (default: the site's)."""
    zone = tz_name or site.timezone
    head = headline(event, site, zone)
    text = "\n".join(_body(event, site, rules, zone)) + "\n"
    return Message(subject=head, text=text, json=_event_json(event, site, head, text))


def _summary_line(event: Event, site: Site, zone: str) -> str:
    haz = HAZARD_NAMES.get(event.hazard, event.hazard)
    what = {
        "raised": f"{haz} {event.level} raised",
        "escalated": f"{haz} up to {event.level}",
        "reminder": f"{haz} {event.level} continued",
        "downgraded": f"{haz} eased to {event.level}",
        "cleared": f"{haz} {event.news_level} ended (all clear)",
        "observed": " and ".join(SEEN_WORDS.get(k, k) for k in event.seen).lower() or "seen",
        "sooner": f"{haz} expected sooner",
        "data_gap": "no fresh data",
        "data_back": f"{gap_text(event, zone) or 'readings missed'}, data back",
    }.get(event.type, event.type)
    first = (event.changes or event.reasons or ("",))[0]
    tail = f": {first}" if first else ""
    return f"{hhmm(event.time, zone)} {what}{tail}"


def render_summary(
    items: Sequence[tuple[Event, Site]],
    rules: RuleSet,
    tz_name: str | None = None,
    at: datetime | None = None,
) -> Message:
    """One morning summary of the news held during quiet hours, grouped by site."""
    if not items:
        raise ValueError("a summary needs at least one event")
    ordered = sorted(items, key=lambda p: (p[1].name, p[0].time))
    zone = tz_name or ordered[0][1].timezone
    at = at or max(e.time for e, _ in items)
    count = len(items)
    sites = len({s.id for _, s in items})
    plural = "s" if count != 1 else ""
    # "Overnight" only for a summary released in the morning (local 03:00-12:00); one
    # released at, say, 22:00 after afternoon quiet hours says what it is
    morning = 3 <= at.astimezone(ZoneInfo(zone)).hour < 12
    head = (
        f"{'Overnight' if morning else 'While quiet'}: {count} update{plural} for {sites} "
        f"site{'s' if sites != 1 else ''} · {hhmm(at, zone)}"
    )
    lines = [*_wrap(head), *_wrap(local_time(at, zone, with_date=True) + " · held for quiet hours")]
    current = None
    for event, site in ordered:
        if site.id != current:
            lines += ["", *_wrap(_one_line(site.name))]
            current = site.id
        lines.extend(_wrap(_summary_line(event, site, zone), bullet=True))
    notes: list[str] = []
    for event, site in ordered:
        for note in _notes(event, site, rules):
            if note not in notes:
                notes.append(note)
    if notes:
        lines += _block("Keep in mind", bullets=notes)
    lines += _block("", [CAUTION])
    text = "\n".join(lines) + "\n"
    body = {
        "schema": MESSAGE_SCHEMA,
        "type": "summary",
        "headline": head,
        "text": text,
        "time": iso_text(at),
        "events": [_event_json(e, s, headline(e, s, zone), "") for e, s in ordered],
        "caution": CAUTION,
    }
    return Message(subject=head, text=text, json=body)
