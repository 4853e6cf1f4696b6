"""The words of a message: what happened, how a time was worked out, what a rule's
kind means, in plain words a farm manager, a harbour desk or a safety officer reads on
a phone rather than in the rule files' terms (``messages`` lays them out)."""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import TYPE_CHECKING

from notifier.core.timefmt import local_time

if TYPE_CHECKING:  # pragma: no cover
    from notifier.engine.alerts import Event

__all__ = [
    "ETA_WORDS",
    "HAZARD_NAMES",
    "KIND_WORDS",
    "SEEN_WORDS",
    "gap_text",
    "hhmm",
    "in_about",
    "in_force_text",
    "lead",
    "status_note",
    "when_text",
]

HAZARD_NAMES = {"fog": "Fog", "icing": "Icing", "data_gap": "Data gap"}

#: a rule's kind in words a lay reader follows
KIND_WORDS = {
    "radiation": "clear-sky cooling fog (the ground and air cool under a clear sky "
    "until the air is saturated)",
    "valley": "valley fog (cold air pooling in low ground)",
    "advection": "sea fog (moist air carried in over colder water)",
    "steam": "steam fog (rising off water much warmer than the air)",
    "precipitation": "fog forming in rain or drizzle (the air saturates under the "
    "cloud and the cloud base comes down)",
    "stratus-lowering": "low cloud coming down to the ground",
    "observed": "fog reported at the site",
    "dense": "dense fog",
    "freezing-fog": "freezing fog (droplets freeze on contact as rime)",
    "frost": "frost (ice depositing on cold surfaces)",
}
#: how an expected time was worked out (assess.ETA_METHODS), as the message says it
ETA_WORDS = {
    "cooling-curve": "from tonight's cooling curve meeting the dew point",
    "sea-fog": "from the onshore air's dew point against the water temperature "
    "and how fast the air is closing on saturation",
    "surface-cooling": "from the surface temperature's fall toward 0 °C and the "
    "frost point along tonight's cooling curve",
}
#: what is newly seen (Event.seen), as a headline says it
SEEN_WORDS = {
    "observed": "Fog has formed",
    "dense": "Dense fog",
    "freezing-fog": "Freezing fog",
    "frost": "Frost forming",
}


def hhmm(t: datetime | None, zone: str) -> str:
    return local_time(t, zone)


def in_about(delta_min: float) -> str:
    minutes = round(delta_min)
    if minutes < 60:
        return f"{minutes} min"
    hours, rest = divmod(minutes, 60)
    return f"{hours} h {rest:02d} min" if rest else f"{hours} h"


def lead(event: Event) -> str:
    """What happened, in a few words (the start of a headline)."""
    haz = HAZARD_NAMES.get(event.hazard, event.hazard)
    level = event.level
    if event.type == "observed":
        return " and ".join(SEEN_WORDS.get(k, k) for k in event.seen) or f"{haz} seen"
    if event.type == "data_back" and event.gap_untold:
        return "Short data gap, data back"
    return {
        "raised": f"{haz} {level}",
        "escalated": f"{haz} now a {level}",
        "sooner": f"{haz} expected sooner",
        "reminder": f"{haz} {level} still in force",
        "downgraded": f"{haz} eased to a {level}",
        "cleared": f"All clear: {haz.lower()}",
        "data_gap": "No fresh data",
        "data_back": "Data back",
        "outlook": "Tonight's outlook",
    }.get(event.type, f"{haz} {event.type}")


def status_note(event: Event, zone: str) -> str:
    """The date line: when, and what is new."""
    stamp = local_time(event.time, zone, with_date=True)
    level = f"{event.hazard} {event.level}"
    note = {
        "raised": f"new {level}",
        "escalated": f"up from {event.previous_level}",
        "observed": f"now seen, under the {level}",
        "sooner": f"the {level} stands, its time has moved earlier",
        "reminder": f"{level} in force since {hhmm(event.level_since, zone)}",
        "downgraded": f"down from {event.previous_level}",
        "cleared": f"{event.hazard} {event.news_level} has ended",
        "data_gap": "site cannot be judged",
        "data_back": "site can be judged again",
        "outlook": f"site at {event.previous_level} now"
        if event.previous_level != "none"
        else "no alert in force now",
    }.get(event.type, event.type)
    if event.type == "data_back" and event.gap_from is not None:
        note = f"{gap_text(event, zone)}; {note}"
    if event.in_force:
        note = f"{note}; {in_force_text(event)}"
    return f"{stamp} · {note}"


def in_force_text(event: Event) -> str:
    """The site's other alerts still in force at an ending: "icing warning still in
    force" (an all-clear for fog is not the all-clear for the site)."""
    alerts = [item.replace(":", " ").replace("_", " ") for item in event.in_force]
    return f"{' and '.join(alerts)} still in force" if alerts else ""


def gap_text(event: Event, zone: str) -> str:
    """A data gap's span: "no readings after 02:30 GMT" (still open) or "no readings
    from 02:30 to 04:40 GMT" (back), from the newest reading before it; "" if unknown."""
    if event.gap_from is None:
        return ""
    start = local_time(event.gap_from, zone, with_date=event.time - event.gap_from > _DAY)
    if event.type == "data_gap":
        return f"no readings after {start}"
    return f"no readings from {start.removesuffix(_zone_suffix(start))} to {hhmm(event.time, zone)}"


_DAY = timedelta(hours=20)


def _zone_suffix(text: str) -> str:
    """ " GMT" in "02:30 GMT": the zone said once in a span."""
    parts = text.rsplit(" ", 1)
    return f" {parts[1]}" if len(parts) == 2 and parts[1].isalpha() else ""


def when_text(event: Event, zone: str) -> str:
    """Now (since when), or the expected time and how it was worked out; or that there
    is none — never a made-up one."""
    since = f", since {hhmm(event.seen_since, zone)}" if event.seen_since else ""
    if event.eta_method == "observed":
        return f"here now{since}."
    if event.eta_method == "surface-now":
        return f"now: surfaces are at or below 0 °C and the frost point{since}."
    if event.eta is None:
        trend = event.features.get("hours_to_fog")
        if event.hazard == "fog" and trend is not None and 0.0 < trend < float("inf"):
            # a rule may test the evening's straight-line trend, which assess does not
            # give as a time until tonight's cooling curve can be fitted
            return (
                "no firm arrival time yet: tonight's cooling curve cannot be fitted this "
                "early, and the straight-line trend in the reasons below is a rough guide "
                "only."
            )
        return "no arrival time can be worked out from this site's data yet."
    ahead_min = (event.eta - event.time).total_seconds() / 60.0
    how = ETA_WORDS.get(event.eta_method, "")
    how = f", estimated {how}" if how else ""
    if ahead_min <= 5:
        return f"any time now{how}."
    at = local_time(event.eta, zone, with_date=ahead_min > 12 * 60)
    return f"from about {at} (in {in_about(ahead_min)}){how}."
