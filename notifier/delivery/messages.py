"""Events → messages a person reads on a phone: subject, plain text, and a JSON body.

The layout is fogwatch's own: a headline, then short blocks under one-word labels, each
line at most :data:`WIDTH` characters::

    Fog WARNING · Quay Two · 20:20 BST
    Wed 14 Oct 20:20 BST · up from watch

    WHEN
    Fog expected from about 20:40 BST (in 20 min).
    ...
    WHY · ICE · DATA · DO · NOTE

Every message ends with the same caution (:data:`CAUTION`). An all-clear or a
downgrade says what changed: the level it ends, since when it has eased, each test
that no longer holds (value against the threshold the alert needed), and the values now.
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
from notifier.engine.catalog import FEATURES, NOW_FEATURES, format_value

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Site
    from notifier.engine.alerts import Event
    from notifier.engine.rules import RuleSet

__all__ = ["CAUTION", "WIDTH", "Message", "headline", "render", "render_summary"]

WIDTH = 68
MESSAGE_SCHEMA = 1
CAUTION = (
    "This is an automated estimate from site data, not an official forecast. "
    "Follow official warnings, the harbour authority, local codes and licensed practice."
)
ICING_NEAR_C = 1.0  # "near or below 0 °C": within 1 °C of freezing (common practice)

HAZARD_NAMES = {"fog": "Fog", "icing": "Icing", "data_gap": "Data gap"}
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
    lines = ["", label]
    for para in paragraphs:
        lines.extend(_wrap(para))
    for bullet in bullets:
        lines.extend(_wrap(bullet, bullet=True))
    return lines


def _capped(items: Sequence[str], limit: int) -> list[str]:
    if len(items) <= limit:
        return list(items)
    return [*items[: limit - 1], f"and {len(items) - limit + 1} more"]


def _hhmm(t: datetime | None, zone: str) -> str:
    return local_time(t, zone)


def _in_about(delta_min: float) -> str:
    minutes = round(delta_min)
    if minutes < 60:
        return f"{minutes} min"
    hours, rest = divmod(minutes, 60)
    return f"{hours} h {rest:02d} min" if rest else f"{hours} h"


def headline(event: Event, site: Site, tz_name: str | None = None) -> str:
    """One line: hazard, level, site and local time, worded by event type."""
    zone = tz_name or site.timezone
    haz = HAZARD_NAMES.get(event.hazard, event.hazard)
    name = _one_line(site.name)
    when = _hhmm(event.time, zone)
    lead = {
        "raised": f"{haz} {event.level.upper()}",
        "escalated": f"{haz} {event.level.upper()}",
        "reminder": f"{haz} {event.level.upper()} continues",
        "downgraded": f"{haz} eased to {event.level.upper()}",
        "cleared": f"All clear: {haz.lower()}",
        "data_gap": "No fresh data",
        "data_back": "Data back",
        "outlook": "Tonight's outlook",
    }.get(event.type, f"{haz} {event.type}")
    return f"{lead} · {name} · {when}"


def _status_line(event: Event, zone: str) -> str:
    stamp = local_time(event.time, zone, with_date=True)
    note = {
        "raised": "new",
        "escalated": f"up from {event.previous_level}",
        "reminder": f"in force since {_hhmm(event.level_since, zone)}",
        "downgraded": f"down from {event.previous_level}",
        "cleared": f"{event.hazard} {event.previous_level} has ended",
        "data_gap": "site cannot be judged",
        "data_back": "site can be judged again",
        "outlook": f"now {event.previous_level}",
    }.get(event.type, event.type)
    return f"{stamp} · {note}"


def _value(name: str, value: float) -> str:
    return format_value(name, value) if name in FEATURES else f"{value:g}"


def _when_block(event: Event, zone: str) -> list[str]:
    if event.hazard == "data_gap":
        if event.type == "data_gap":
            return _block(
                "WHEN",
                [
                    "Now, and until readings return: fog and icing cannot be "
                    "judged at this site meanwhile."
                ],
            )
        return []
    if event.level == "none":
        return []
    haz = HAZARD_NAMES.get(event.hazard, event.hazard)
    paras = []
    if event.eta is not None:
        ahead_min = (event.eta - event.time).total_seconds() / 60.0
        if ahead_min <= 5:
            paras.append(f"{haz} conditions now ({event.kind or 'observed'}).")
        else:
            at = local_time(event.eta, zone, with_date=ahead_min > 12 * 60)
            paras.append(f"{haz} expected from about {at} (in {_in_about(ahead_min)}).")
    else:
        paras.append("No time projected yet; the conditions below hold now.")
    if event.kind and event.kind != "observed":
        paras.append(f"Type: {event.kind}.")
    return _block("WHEN", paras)


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
        "ICE",
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
    if event.projection_method and event.hazard != "data_gap" and event.level != "none":
        method = PROJECTIONS.get(event.projection_method, event.projection_method)
        paras.append(f"Projection: {method}.")
    return _block("DATA", paras)


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
    lines = [*_wrap(headline(event, site, zone)), *_wrap(_status_line(event, zone))]
    if event.type == "outlook":
        lines += _block("TONIGHT", list(event.explanations))
        lines += _data_block(event)
        lines += _block("NOTE", [CAUTION])
        return lines
    lines += _when_block(event, zone)
    if event.type in ("downgraded", "cleared", "data_back"):
        since = f" since {_hhmm(event.eased_since, zone)}" if event.eased_since else ""
        haz = HAZARD_NAMES.get(event.hazard, event.hazard).lower()
        if event.type == "data_back":
            lead = "Fresh readings are arriving again."
        elif event.type == "cleared":
            lead = f"No {haz} alert level has held{since}."
        else:
            lead = f"Below {event.previous_level} level{since}."
        lines += _block("WHAT CHANGED", [lead], bullets=_capped(event.changes, 6))
        now = _now_bullets(event)
        if now:
            lines += _block("NOW", bullets=now)
        if event.type == "downgraded" and event.reasons:
            lines += _block("STILL HOLDS", bullets=event.reasons)
        if event.previous_reasons:
            lines += _block("WAS", bullets=_capped(event.previous_reasons, 4))
    else:
        lines += _block("WHY", list(event.explanations), bullets=event.reasons)
    lines += _ice_block(event)
    lines += _data_block(event)
    notes = _notes(event, site, rules)
    if notes:
        label = "KEEP IN MIND" if event.level == "none" else "DO"
        lines += _block(label, bullets=notes)
    lines += _block("NOTE", [CAUTION])
    lines += ["", f"ref {event.id[:12]} · fogwatch"]
    return lines


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
        "time": iso_text(event.time),
        "data_age_min": _age(event.data_age_min),
        "features": {k: round(v, 3) for k, v in event.features.items() if math.isfinite(v)},
        "caution": CAUTION,
    }


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
        "cleared": f"{haz} {event.previous_level} ended (all clear)",
        "data_gap": "no fresh data",
        "data_back": "data back",
    }.get(event.type, event.type)
    first = (event.changes or event.reasons or ("",))[0]
    tail = f": {first}" if first else ""
    return f"{_hhmm(event.time, zone)} {what}{tail}"


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
        f"site{'s' if sites != 1 else ''} · {_hhmm(at, zone)}"
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
        lines += _block("KEEP IN MIND", bullets=notes)
    lines += _block("NOTE", [CAUTION])
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
