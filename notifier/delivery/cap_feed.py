"""CAP messages from the store: the message of one stored event (with the earlier
messages of its episode as references), and the current messages the web app's Atom
index lists. The XML itself is built by :mod:`notifier.delivery.cap`.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import TYPE_CHECKING

from notifier.delivery.cap import cap_message, msg_type

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Config, Site
    from notifier.engine.alerts import Event
    from notifier.engine.rules import RuleSet
    from notifier.storage.outbox import Outbox

__all__ = ["INDEX_WINDOW", "cap_for_event", "current_alert_events", "episode_events"]

# how far back the index looks for the latest message of each site and hazard: an ended
# episode's Cancel stays listed this long, so a reader that polls now and then sees it
INDEX_WINDOW = timedelta(hours=24)
MAX_REFERENCES = 20


def episode_events(outbox: Outbox, event: Event) -> list[Event]:
    """The CAP messages of ``event``'s episode sent before it, oldest first (at most 20)."""
    start = event.episode_start or event.level_since or event.time
    found = [
        e
        for e in outbox.events_between(start, event.time)
        if e.site_id == event.site_id
        and e.hazard == event.hazard
        and e.id != event.id
        and msg_type(e) is not None
    ]
    return found[-MAX_REFERENCES:]


def cap_for_event(
    outbox: Outbox, config: Config, rules: RuleSet, event: Event, *, sender: str, radius_km: float
) -> str:
    """The CAP 1.2 XML of a stored event (KeyError for a site no longer configured)."""
    site = config.site(event.site_id)
    notes = [n.text for n in rules.notes_for(event.hazard, site.use, event.safety_refs)]
    return cap_message(
        event,
        site,
        notes,
        sender=sender,
        radius_km=radius_km,
        references=episode_events(outbox, event) if msg_type(event) != "Alert" else (),
    )


def current_alert_events(outbox: Outbox, config: Config, now: datetime) -> list[tuple[Event, Site]]:
    """The latest CAP-worthy event of each configured site and hazard in the last 24 h."""
    latest: dict[tuple[str, str], Event] = {}
    for event in outbox.events_between(now - INDEX_WINDOW, now):
        if msg_type(event) is not None:
            latest[(event.site_id, event.hazard)] = event
    sites = {s.id: s for s in config.sites}
    out = [(e, sites[e.site_id]) for e in latest.values() if e.site_id in sites]
    return sorted(out, key=lambda p: (p[1].name, p[0].hazard))
