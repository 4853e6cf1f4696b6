"""The records of the alert lifecycle: one :class:`AlertState` per (site, hazard), and the
:class:`Event` a person hears about. Both round-trip through plain dicts (the store keeps
them as JSON; ``STATE_VERSION`` marks their shape). Event ids are stable: a hash of site,
hazard, episode start, type, level and the minute of the event, so a re-run cycle makes
the very same ids.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

from notifier.core.timefmt import iso_text as _iso_text
from notifier.core.timefmt import parse_iso
from notifier.engine.assessment import level_rank

if TYPE_CHECKING:  # pragma: no cover
    pass

__all__ = [
    "AlertState",
    "EVENT_TYPES",
    "URGENT_TYPES",
    "Event",
    "STATE_VERSION",
    "StateKey",
    "event_id",
]


STATE_VERSION = 1

EVENT_TYPES = (
    "raised",
    "escalated",
    "observed",  # under a warning, the hazard is now seen: fog formed, dense, freezing, ice
    "sooner",  # the expected time moved earlier by an hour or more
    "downgraded",
    "cleared",
    "reminder",
    "data_gap",
    "data_back",
)
#: news that goes at once, through quiet hours like a warning (where a subscriber lets
#: warnings through), whatever its level: the hazard is seen, or is coming sooner
URGENT_TYPES = ("observed", "sooner")

StateKey = tuple[str, str]  # (site id, hazard)


@dataclass(frozen=True)
class AlertState:
    """Where one (site, hazard) stands. Times are aware UTC datetimes."""

    site_id: str
    hazard: str
    level: str = "none"
    since: datetime | None = None  # when the current level began
    episode_start: datetime | None = None  # when the episode left "none"
    below_since: datetime | None = None  # sustain level first fell below ``level``
    clear_since: datetime | None = None  # sustain level first fell to none
    last_event_at: datetime | None = None
    last_reminder_at: datetime | None = None
    last_raised: tuple[tuple[str, datetime], ...] = ()  # level → last announced (cooldown)
    rules: tuple[str, ...] = ()  # rules behind the current level
    reasons: tuple[str, ...] = ()  # the reasons last announced
    peak: str = "none"  # the highest level announced in this episode
    seen: tuple[str, ...] = ()  # kinds seen in this episode (observed, dense, frost …)
    seen_since: datetime | None = None  # when the hazard was first seen in this episode
    eta: datetime | None = None  # the expected time last announced
    # data gap only: the newest reading before the gap, and when a gap noticed under a
    # warning began its grace (``alerts.gap_grace``: held, not yet announced)
    gap_from: datetime | None = None
    gap_pending_since: datetime | None = None

    @property
    def key(self) -> StateKey:
        return (self.site_id, self.hazard)

    def raised_at(self, level: str) -> datetime | None:
        return dict(self.last_raised).get(level)

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready form with a schema version, for the store."""
        return {
            "version": STATE_VERSION,
            "site_id": self.site_id,
            "hazard": self.hazard,
            "level": self.level,
            "since": iso_text(self.since),
            "episode_start": iso_text(self.episode_start),
            "below_since": iso_text(self.below_since),
            "clear_since": iso_text(self.clear_since),
            "last_event_at": iso_text(self.last_event_at),
            "last_reminder_at": iso_text(self.last_reminder_at),
            "last_raised": {lvl: iso_text(t) for lvl, t in self.last_raised},
            "rules": list(self.rules),
            "reasons": list(self.reasons),
            "peak": self.peak,
            "seen": list(self.seen),
            "seen_since": iso_text(self.seen_since),
            "eta": iso_text(self.eta),
            "gap_from": iso_text(self.gap_from),
            "gap_pending_since": iso_text(self.gap_pending_since),
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> AlertState:
        version = data.get("version")
        if version != STATE_VERSION:
            raise ValueError(f"unsupported alert state version {version!r}")
        raised = sorted(
            ((lvl, parse_iso(t)) for lvl, t in data.get("last_raised", {}).items()),
            key=lambda p: level_rank(p[0]),
        )
        return cls(
            site_id=data["site_id"],
            hazard=data["hazard"],
            level=data["level"],
            since=parse_iso(data.get("since")),
            episode_start=parse_iso(data.get("episode_start")),
            below_since=parse_iso(data.get("below_since")),
            clear_since=parse_iso(data.get("clear_since")),
            last_event_at=parse_iso(data.get("last_event_at")),
            last_reminder_at=parse_iso(data.get("last_reminder_at")),
            last_raised=tuple((lvl, t) for lvl, t in raised if t is not None),
            rules=tuple(data.get("rules", ())),
            reasons=tuple(data.get("reasons", ())),
            peak=data.get("peak") or data["level"],
            seen=tuple(data.get("seen", ())),
            seen_since=parse_iso(data.get("seen_since")),
            eta=parse_iso(data.get("eta")),
            gap_from=parse_iso(data.get("gap_from")),
            gap_pending_since=parse_iso(data.get("gap_pending_since")),
        )


@dataclass(frozen=True)
class Event:
    """Something a person should hear about one site and hazard.

    ``level`` is the level after the event (``none`` for cleared and data_back);
    ``previous_level`` the level before it. For ``downgraded``, ``cleared`` and
    ``data_back``, ``changes`` says what is no longer true, value against the threshold
    the alert needed; ``previous_reasons`` what was announced before.
    """

    id: str
    type: str
    site_id: str
    hazard: str
    level: str
    previous_level: str
    time: datetime
    episode_start: datetime | None = None
    level_since: datetime | None = None  # for reminders: when the level began
    eased_since: datetime | None = None  # for endings: since when below the ended level
    kind: str = ""
    eta: datetime | None = None
    rules: tuple[str, ...] = ()
    reasons: tuple[str, ...] = ()
    explanations: tuple[str, ...] = ()
    safety_refs: tuple[str, ...] = ()
    changes: tuple[str, ...] = ()
    previous_reasons: tuple[str, ...] = ()
    features: Mapping[str, float] = field(default_factory=dict)
    data_age_min: float | None = None
    projection_method: str = ""
    eta_method: str = ""  # how ``eta`` was worked out (assess.ETA_METHODS)
    seen_since: datetime | None = None  # when the hazard was first seen this episode
    seen: tuple[str, ...] = ()  # for ``observed``: the kinds newly seen
    peak_level: str = ""  # for endings: the highest level announced in the episode
    # data gap and data back: the newest reading before the gap
    gap_from: datetime | None = None
    # data back: the gap was never sent on its own (it closed within alerts.gap_grace,
    # under a warning), so this one message tells all of it
    gap_untold: bool = False
    # endings and data gaps: the site's other alerts in force, as "hazard:level"
    # ("icing:warning"), so an all-clear for fog is not read as the site's all-clear
    in_force: tuple[str, ...] = ()

    @property
    def news_level(self) -> str:
        """The level this news is about: for an ending, the highest level the episode
        announced (whoever was told of a warning hears it has ended)."""
        if self.type in ("downgraded", "cleared", "data_back"):
            peak = self.peak_level or self.previous_level
            return max(peak, self.previous_level, key=level_rank)
        return self.level

    @property
    def urgent(self) -> bool:
        """News that goes through quiet hours like a warning."""
        return self.type in URGENT_TYPES

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready form for the outbox (NaN and ±inf become null)."""
        age = self.data_age_min
        return {
            "version": STATE_VERSION,
            "id": self.id,
            "type": self.type,
            "site_id": self.site_id,
            "hazard": self.hazard,
            "level": self.level,
            "previous_level": self.previous_level,
            "time": iso_text(self.time),
            "episode_start": iso_text(self.episode_start),
            "level_since": iso_text(self.level_since),
            "eased_since": iso_text(self.eased_since),
            "kind": self.kind,
            "eta": iso_text(self.eta),
            "rules": list(self.rules),
            "reasons": list(self.reasons),
            "explanations": list(self.explanations),
            "safety_refs": list(self.safety_refs),
            "changes": list(self.changes),
            "previous_reasons": list(self.previous_reasons),
            "features": dict(self.features),
            "data_age_min": age if age is not None and math.isfinite(age) else None,
            "projection_method": self.projection_method,
            "eta_method": self.eta_method,
            "seen_since": iso_text(self.seen_since),
            "seen": list(self.seen),
            "peak_level": self.peak_level,
            "gap_from": iso_text(self.gap_from),
            "gap_untold": self.gap_untold,
            "in_force": list(self.in_force),
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Event:
        time = parse_iso(data["time"])
        assert time is not None
        age = data.get("data_age_min")
        return cls(
            id=data["id"],
            type=data["type"],
            site_id=data["site_id"],
            hazard=data["hazard"],
            level=data["level"],
            previous_level=data["previous_level"],
            time=time,
            episode_start=parse_iso(data.get("episode_start")),
            level_since=parse_iso(data.get("level_since")),
            eased_since=parse_iso(data.get("eased_since")),
            kind=data.get("kind", ""),
            eta=parse_iso(data.get("eta")),
            rules=tuple(data.get("rules", ())),
            reasons=tuple(data.get("reasons", ())),
            explanations=tuple(data.get("explanations", ())),
            safety_refs=tuple(data.get("safety_refs", ())),
            changes=tuple(data.get("changes", ())),
            previous_reasons=tuple(data.get("previous_reasons", ())),
            features=dict(data.get("features", {})),
            data_age_min=math.inf if age is None else float(age),
            projection_method=data.get("projection_method", ""),
            eta_method=data.get("eta_method", ""),
            seen_since=parse_iso(data.get("seen_since")),
            seen=tuple(data.get("seen", ())),
            peak_level=data.get("peak_level", ""),
            gap_from=parse_iso(data.get("gap_from")),
            gap_untold=bool(data.get("gap_untold", False)),
            in_force=tuple(data.get("in_force", ())),
        )


def iso_text(t: datetime | None) -> str | None:
    """``timefmt.iso_text``, without converting a time already in UTC (the lifecycle's
    times all are): a state or event writes some fifteen times, tens of thousands of
    states and events a cycle at 100,000 sites."""
    if t is not None and t.tzinfo is UTC:
        return t.isoformat()
    return _iso_text(t)


def event_id(
    site_id: str,
    hazard: str,
    episode_start: datetime | None,
    type_: str,
    level: str,
    time: datetime,
) -> str:
    """Stable id: sha256 over site|hazard|episode start|type|level|minute of the event."""
    bucket = time.astimezone(UTC).replace(second=0, microsecond=0)
    text = "|".join(
        (site_id, hazard, iso_text(episode_start) or "-", type_, level, iso_text(bucket) or "-")
    )
    return hashlib.sha256(text.encode()).hexdigest()[:32]
