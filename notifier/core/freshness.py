"""How old a site's data is, as a person reads it: the date and time of the newest
reading, its age in words, and a plain mark when it is older than ``alerts.stale_after``.

Silence must not look like safety: a level worked out from old data is shown with the
date of that data, never as if it were current.

>>> from datetime import datetime, UTC
>>> newest = datetime(2026, 11, 7, 9, 0, tzinfo=UTC)
>>> age_text(39218.0)
'27 days 5 h'
>>> freshness(newest, datetime(2026, 12, 4, 18, 38, tzinfo=UTC), "Europe/London", 90.0).text
'newest reading Sat 07 Nov 09:00 GMT, 27 days 9 h old: STALE'
>>> freshness(newest, datetime(2026, 11, 7, 9, 25, tzinfo=UTC), "Europe/London", 90.0).text
'newest reading 09:00 GMT today, 25 min old'
>>> freshness(None, newest, "Europe/London", 90.0).text
'no reading ever: STALE'
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from notifier.core.timefmt import iso_z, local_time

__all__ = ["Freshness", "age_text", "freshness", "when_text"]


def age_text(minutes: float) -> str:
    """An age in the largest units that read easily: ``25 min``, ``5 h 20 min``,
    ``3 days 4 h``."""
    if not math.isfinite(minutes):
        return "never"
    m = max(0, round(minutes))
    if m < 60:
        return f"{m} min"
    h, m = divmod(m, 60)
    if h < 24:
        return f"{h} h {m} min" if m else f"{h} h"
    d, h = divmod(h, 24)
    days = f"{d} day" + ("s" if d != 1 else "")
    return f"{days} {h} h" if h else days


def when_text(t: datetime, now: datetime, zone: str) -> str:
    """A site's wall-clock time, with the date unless it is the same local day as ``now``."""
    from zoneinfo import ZoneInfo

    same_day = t.astimezone(ZoneInfo(zone)).date() == now.astimezone(ZoneInfo(zone)).date()
    return f"{local_time(t, zone)} today" if same_day else local_time(t, zone, with_date=True)


@dataclass(frozen=True)
class Freshness:
    """The newest reading of a site as of ``now``."""

    last_time: datetime | None
    age_min: float  # +inf when there is no reading at all
    stale: bool
    text: str  # "newest reading Sat 07 Nov 09:00 GMT, 27 days 9 h old: STALE"

    def as_json(self) -> dict[str, Any]:
        return {
            "last_time": iso_z(self.last_time),
            "age_min": round(self.age_min, 1) if math.isfinite(self.age_min) else None,
            "stale": self.stale,
        }


def freshness(
    last_time: datetime | None, now: datetime, zone: str, stale_after_min: float
) -> Freshness:
    """The age of ``last_time`` at ``now``; stale past ``stale_after_min`` (or with none)."""
    if last_time is None:
        return Freshness(None, math.inf, True, "no reading ever: STALE")
    age = (now - last_time).total_seconds() / 60.0
    stale = not (age <= stale_after_min)
    text = f"newest reading {when_text(last_time, now, zone)}, {age_text(age)} old"
    if age < 0:
        text = f"newest reading {when_text(last_time, now, zone)} (ahead of the clock)"
    return Freshness(last_time, age, stale, text + (": STALE" if stale else ""))
