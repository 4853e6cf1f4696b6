"""Times and numbers as text, in one place: what is stored, sent as JSON, or shown to people.

Inside fogwatch every instant is an aware UTC ``datetime``; text appears only here, at the
edges. Two ISO forms are in use and both stay readable by :func:`parse_iso`:

- :func:`iso_z` — ``2026-11-07T02:00:00Z``: JSON output, the store's time columns;
- :func:`iso_text` — ``2026-11-07T02:00:00+00:00``: stored alert states and event payloads.

A naive ``datetime`` is taken as UTC everywhere (never as the machine's local time).

>>> from datetime import datetime, UTC
>>> t = datetime(2026, 11, 7, 2, 0, 30, 250000, tzinfo=UTC)
>>> iso_z(t), iso_text(t)
('2026-11-07T02:00:30Z', '2026-11-07T02:00:30.250000+00:00')
>>> parse_iso(iso_z(t)) == t.replace(microsecond=0), parse_iso(iso_text(t)) == t
(True, True)
>>> local_time(t, "Europe/London"), local_time(t, "Europe/London", with_date=True)
('02:00 GMT', 'Sat 07 Nov 02:00 GMT')
>>> quantity_text(0.84, "°C", decimals=1), quantity_text(93.4, "%", decimals=0)
('0.8 °C', '93%')
"""

from __future__ import annotations

import math
from datetime import UTC, datetime
from typing import overload

__all__ = ["iso_text", "iso_z", "local_time", "parse_iso", "quantity_text", "unit_suffix"]


def _aware(t: datetime) -> datetime:
    return t if t.tzinfo is not None else t.replace(tzinfo=UTC)


@overload
def iso_z(t: datetime) -> str: ...
@overload
def iso_z(t: None) -> None: ...
def iso_z(t: datetime | None) -> str | None:
    """``2026-11-07T02:00:00Z`` (UTC, whole seconds), or None."""
    return None if t is None else _aware(t).astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


@overload
def iso_text(t: datetime) -> str: ...
@overload
def iso_text(t: None) -> None: ...
def iso_text(t: datetime | None) -> str | None:
    """An instant as ISO 8601 in UTC (``2026-11-20T03:00:00+00:00``), or None: the times
    of stored states and of event payloads."""
    return None if t is None else _aware(t).astimezone(UTC).isoformat()


@overload
def parse_iso(text: str) -> datetime: ...
@overload
def parse_iso(text: None) -> None: ...
def parse_iso(text: str | None) -> datetime | None:
    """Either ISO form above (``Z`` or an offset) back to an aware ``datetime``; None stays
    None."""
    if text is None:
        return None
    return _aware(datetime.fromisoformat(text.replace("Z", "+00:00")))


def local_time(t: datetime | None, zone_name: str, with_date: bool = False) -> str:
    """The site's wall-clock time a person reads (``02:00 GMT``); ``—`` for no time."""
    if t is None:
        return "—"
    from zoneinfo import ZoneInfo

    local = t.astimezone(ZoneInfo(zone_name))
    return local.strftime("%a %d %b %H:%M %Z" if with_date else "%H:%M %Z")


def quantity_text(value: float, unit: str, *, decimals: int, kind: str = "float") -> str:
    """A measured value with its unit (``0.8 °C``, ``93%``), ``yes``/``no`` for a flag,
    ``unknown`` for NaN."""
    if math.isnan(value):
        return "unknown"
    if kind == "bool":
        return "yes" if value else "no"
    return f"{value:.{decimals}f}{unit_suffix(unit)}"


def unit_suffix(unit: str) -> str:
    """What follows a number: ``" °C"``, but ``"%"`` with no space, and nothing for no unit."""
    if not unit:
        return ""
    return unit if unit == "%" else f" {unit}"
