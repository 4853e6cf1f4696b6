"""Alert events as OASIS Common Alerting Protocol 1.2 messages, and an Atom index of them.

One event of the lifecycle is one CAP ``<alert>`` (docs/references.md [OASIS CAP 1.2]):

- ``msgType``: ``raised`` and ``data_gap`` open an episode (``Alert``); ``escalated``,
  ``downgraded`` and ``reminder`` are ``Update``; ``cleared`` and ``data_back`` end it
  (``Cancel``; a short data gap told once, when over, is no CAP message). An Update or
  Cancel names the episode's earlier messages in
  ``references`` (``sender,identifier,sent`` each, as the standard asks).
- ``category``: ``Met`` for fog and icing; a data gap is ``Other`` (the site cannot be
  judged: it is no weather at all, but silence must not look like safety).
- ``urgency`` from the arrival time, ``severity`` from the level and hazard,
  ``certainty`` from the level, or from the model's probability when one is loaded (the
  value lists and their meanings are the standard's).
- ``onset`` the arrival time, ``expires`` a fixed time after it, ``headline`` the
  message's own headline, ``description`` the reasons and the caution, ``instruction``
  the safety notes, and the site as an ``area`` circle.

Times are written as the standard asks: ``2026-11-20T03:00:00-00:00`` (UTC as
``-00:00``, never ``Z``). The building is pure: no file, clock or network.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING

from notifier.delivery.messages import CAUTION, HAZARD_NAMES, headline

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Site
    from notifier.engine.alerts import Event

__all__ = [
    "ATOM_NS",
    "CAP_NS",
    "atom_index",
    "cap_identifier",
    "cap_message",
    "cap_time",
    "certainty",
    "msg_type",
    "severity",
    "urgency",
]

CAP_NS = "urn:oasis:names:tc:emergency:cap:1.2"
ATOM_NS = "http://www.w3.org/2005/Atom"
CAP_MIME = "application/cap+xml"  # the media type CAP feeds link their messages with

MSG_TYPES = {
    "raised": "Alert",
    "data_gap": "Alert",
    "escalated": "Update",
    "downgraded": "Update",
    "reminder": "Update",
    "cleared": "Cancel",
    "data_back": "Cancel",
}
# an alert is considered for this long after its onset unless updated (common practice:
# twice the default reminder interval, so a live alert is always renewed before it lapses)
VALID_FOR = timedelta(hours=6)
# "Expected: responsive action SHOULD be taken soon (within next hour)"
# (docs/references.md [OASIS CAP 1.2])
EXPECTED_WITHIN = timedelta(hours=1)
_RESTRICTED = re.compile(
    r"[\s,<&]+"
)  # not allowed in identifier or sender (docs/references.md [OASIS CAP 1.2])


def cap_time(moment: datetime) -> str:
    """A CAP date-time: whole seconds, with the offset, and UTC written ``-00:00``.

    >>> cap_time(datetime(2026, 11, 20, 3, 0, 5, 700, tzinfo=UTC))
    '2026-11-20T03:00:05-00:00'
    """
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S") + "-00:00"


def _clean_id(text: str) -> str:
    return _RESTRICTED.sub("-", text).strip("-") or "fogwatch"


def cap_identifier(event: Event) -> str:
    """The message's identifier: stable for the event, unique per sender."""
    return f"fogwatch-{event.id}"


def msg_type(event: Event) -> str | None:
    """Alert, Update or Cancel; None for what is no alert state: the evening outlook, and
    a short data gap told once when it was over (no Alert for it was ever issued, so
    there is nothing to cancel)."""
    if event.type == "data_back" and event.gap_untold:
        return None
    return MSG_TYPES.get(event.type)


def urgency(event: Event) -> str:
    """From the arrival time: present now → Immediate, within the hour → Expected,
    later or not yet known → Future; an ended episode → Past."""
    if msg_type(event) == "Cancel":
        return "Past"
    if event.hazard == "data_gap":
        return "Unknown"
    if event.eta is not None and event.eta <= event.time:
        return "Immediate"
    if event.eta is not None and event.eta - event.time <= EXPECTED_WITHIN:
        return "Expected"
    return "Future"


def severity(event: Event) -> str:
    """Icing at warning level is Severe (a significant threat to life: ice on decks,
    roads and steps), fog at warning level Moderate (a possible threat), a watch Minor;
    a data gap Unknown. The level-to-severity choice is common practice; the meanings
    are CAP 1.2's (docs/references.md [OASIS CAP 1.2])."""
    if event.hazard == "data_gap":
        return "Unknown"
    level = event.news_level
    if level == "warning":
        return "Severe" if event.hazard == "icing" else "Moderate"
    return "Minor"


def certainty(event: Event) -> str:
    """Observed when the hazard is seen now; else from the model's probability when one is
    loaded (Likely above 50 %, Possible above 5 %, else Unlikely: CAP 1.2's own wording,
    "p > ~50%", "p <= ~50%", "not expected"), else warning → Likely, watch → Possible."""
    if event.hazard == "data_gap":
        return "Unknown"
    if msg_type(event) == "Cancel":
        return "Observed"  # what is observed is that it has ended
    if event.eta is not None and event.eta <= event.time:
        return "Observed"
    p = event.features.get("fog_probability") if event.hazard == "fog" else None
    if p is not None and math.isfinite(p):
        return "Likely" if p > 0.5 else "Possible" if p > 0.05 else "Unlikely"
    return "Likely" if event.level == "warning" else "Possible"


def _response(event: Event) -> str:
    if msg_type(event) == "Cancel":
        return "AllClear"
    return "Prepare" if event.level == "warning" else "Monitor"


def _sub(parent: ET.Element, tag: str, text: str | None = None) -> ET.Element:
    el = ET.SubElement(parent, f"{{{CAP_NS}}}{tag}")
    if text is not None:
        el.text = text
    return el


def _event_name(event: Event) -> str:
    name = HAZARD_NAMES.get(event.hazard, event.hazard)
    if event.hazard == "data_gap":
        return "No fresh site data"
    return f"{name} ({event.kind})" if event.kind and event.kind != "general" else name


def _description(event: Event) -> str:
    lines = list(event.changes if msg_type(event) == "Cancel" else event.reasons)
    if msg_type(event) == "Cancel":
        ended = HAZARD_NAMES.get(event.hazard, event.hazard)
        lines.insert(0, f"{ended} {event.previous_level} has ended.")
    if event.hazard == "data_gap" and msg_type(event) == "Alert":
        lines.append("The site cannot be judged until fresh readings arrive.")
    return "\n".join([*lines, CAUTION])


def cap_message(
    event: Event,
    site: Site,
    notes: Sequence[str],
    *,
    sender: str,
    radius_km: float,
    references: Sequence[Event] = (),
) -> str:
    """The CAP 1.2 ``<alert>`` for ``event`` as XML text; ``references`` are the earlier
    messages of the episode (for an Update or a Cancel). ValueError for an outlook."""
    kind = msg_type(event)
    if kind is None:
        raise ValueError(f"a {event.type!r} event is no alert state and has no CAP message")
    sender = _clean_id(sender)
    alert = ET.Element(f"{{{CAP_NS}}}alert")
    _sub(alert, "identifier", cap_identifier(event))
    _sub(alert, "sender", sender)
    _sub(alert, "sent", cap_time(event.time))
    _sub(alert, "status", "Actual")
    _sub(alert, "msgType", kind)
    _sub(alert, "scope", "Public")
    earlier = [e for e in references if e.id != event.id and e.time <= event.time]
    if kind != "Alert" and earlier:
        _sub(
            alert,
            "references",
            " ".join(f"{sender},{cap_identifier(e)},{cap_time(e.time)}" for e in earlier),
        )
    info = _sub(alert, "info")
    _sub(info, "language", "en")
    _sub(info, "category", "Other" if event.hazard == "data_gap" else "Met")
    _sub(info, "event", _event_name(event))
    _sub(info, "responseType", _response(event))
    _sub(info, "urgency", urgency(event))
    _sub(info, "severity", severity(event))
    _sub(info, "certainty", certainty(event))
    onset = event.eta if event.eta is not None and event.eta > event.time else event.time
    if kind != "Cancel":
        _sub(info, "onset", cap_time(onset))
    _sub(info, "expires", cap_time((event.time if kind == "Cancel" else onset) + VALID_FOR))
    _sub(info, "senderName", "fogwatch (automated estimate from site data)")
    _sub(info, "headline", headline(event, site)[:160])
    _sub(info, "description", _description(event))
    if notes and kind != "Cancel":
        _sub(info, "instruction", "\n".join(notes))
    for name, value in (("fogwatchHazard", event.hazard), ("fogwatchLevel", event.level)):
        parameter = _sub(info, "parameter")
        _sub(parameter, "valueName", name)
        _sub(parameter, "value", value)
    area = _sub(info, "area")
    _sub(area, "areaDesc", site.name)
    # "lat,lon radius": WGS 84 degrees, radius in kilometres (docs/references.md [OASIS CAP 1.2])
    _sub(area, "circle", f"{site.lat:.5f},{site.lon:.5f} {radius_km:g}")
    ET.indent(alert)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(
        alert, encoding="unicode", default_namespace=CAP_NS
    )


def atom_index(
    entries: Sequence[tuple[Event, Site]], *, base_url: str, sender: str, now: datetime
) -> str:
    """An Atom feed of current CAP messages (docs/references.md [RFC 4287]), each linked
    at ``/cap/ID.xml``."""

    def sub(parent: ET.Element, tag: str, text: str | None = None, **attrs: str) -> ET.Element:
        el = ET.SubElement(parent, tag, attrs)
        if text is not None:
            el.text = text
        return el

    base = base_url.rstrip("/")
    # plain names under a literal xmlns: ElementTree's default_namespace cannot carry
    # the unqualified attributes Atom uses (rel, href)
    feed = ET.Element("feed", xmlns=ATOM_NS)
    sub(feed, "id", f"{base}/cap.xml")
    sub(feed, "title", "fogwatch: current alerts (CAP 1.2)")
    newest = max((e.time for e, _ in entries), default=now)
    sub(feed, "updated", newest.astimezone(UTC).isoformat())
    author = sub(feed, "author")
    sub(author, "name", _clean_id(sender))
    sub(feed, "link", rel="self", href=f"{base}/cap.xml")
    for event, site in entries:
        entry = sub(feed, "entry")
        sub(entry, "id", f"urn:fogwatch:cap:{cap_identifier(event)}")
        sub(entry, "title", headline(event, site))
        sub(entry, "updated", event.time.astimezone(UTC).isoformat())
        sub(entry, "summary", f"{msg_type(event)}: {_event_name(event)} at {site.name}")
        sub(entry, "link", rel="alternate", type=CAP_MIME, href=f"{base}/cap/{event.id}.xml")
    ET.indent(feed)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(feed, encoding="unicode")
