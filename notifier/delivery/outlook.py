"""The evening outlook: tonight's fog and icing prospects for one site, as an event.

Sent once each evening at the configured local time to subscribers who take watch-level
news. It is built from the same features as the alerts: the projected minimum against
the dew point (the crossover method's question), the cooling potential, when fog could
start, and whether it would freeze.

It is not sent where it would only repeat an alert: a recipient told of an alert of the
site within ``alerts.reminder_every`` before the outlook, while that alert is still in
force, has had tonight's news already (:func:`outlook_repeats`); the site's next
message to them is the alert's change or its end.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from datetime import datetime, timedelta
from typing import TYPE_CHECKING

from notifier.core.timefmt import local_time
from notifier.engine.alerts import Event, event_id
from notifier.engine.assessment import SiteAssessment

if TYPE_CHECKING:  # pragma: no cover
    from notifier.storage.deliveries import Delivery
    from notifier.storage.outbox import Outbox

__all__ = ["outlook_event", "outlook_lines", "outlook_repeats", "without_repeats"]

ALERT_HAZARDS = ("fog", "icing")  # the alerts an outlook speaks of (not a data gap)


def _finite(v: float | None) -> bool:
    return v is not None and math.isfinite(v)


def outlook_lines(sa: SiteAssessment, now: datetime) -> tuple[list[str], str]:
    """The outlook's sentences and its one-word fog chance (low | some | high | unknown)."""
    f = sa.features
    zone = sa.site.timezone
    pm, td = f.get("projected_min_temp_c"), f.get("dewpoint_c")
    cp = f.get("cooling_potential")
    lines = []
    chance = "unknown"
    if _finite(pm) and _finite(td):
        margin = pm - td  # type: ignore[operator]
        lines.append(
            f"Projected minimum {pm:.1f} °C against a dew point of {td:.1f} °C "
            f"(margin {margin:+.1f} °C)."
        )
        # within ~1 °C of the dew point fog is likely (crossover method, common practice)
        chance = "high" if margin <= 1.0 else "some" if margin <= 3.0 else "low"
    else:
        lines.append("Not enough data tonight to project the minimum.")
    if _finite(cp):
        word = "strong" if cp >= 0.7 else "moderate" if cp >= 0.4 else "weak"  # type: ignore[operator]
        lines.append(f"Cooling potential {cp:.2f} ({word}).")
    hours = f.get("hours_to_fog")
    to_sunrise = f.get("hours_to_sunrise")
    if chance in ("high", "some"):
        if _finite(hours):
            start = now + timedelta(hours=float(hours))  # type: ignore[arg-type]
            lines.append(
                f"Onset window: {local_time(start - timedelta(hours=1), zone)} to "
                f"{local_time(start + timedelta(hours=1), zone)}."
            )
        elif _finite(to_sunrise):
            # radiation fog most often forms in the last hours before dawn (common practice)
            sunrise = now + timedelta(hours=float(to_sunrise))  # type: ignore[arg-type]
            early = local_time(sunrise - timedelta(hours=4), zone)
            late = local_time(sunrise + timedelta(hours=1), zone)
            lines.append(f"Onset window: most likely {early} to {late} (around dawn).")
    if _finite(pm):
        if pm <= 0.0 and chance in ("high", "some"):  # type: ignore[operator]
            lines.append("Icing: likely — fog would form below 0 °C and deposit rime.")
        elif pm <= 1.0:  # type: ignore[operator]
            lines.append("Icing: possible — frost on exposed surfaces.")
        else:
            lines.append("Icing: unlikely.")
    lines.append(f"Fog chance tonight: {chance}.")
    return lines, chance


def outlook_event(sa: SiteAssessment, now: datetime) -> Event:
    """The outlook as an event whose fields agree with its text.

    ``level`` and ``previous_level`` are the site's level now (the outlook changes no
    level, and its text says "site at <level> now"); routing sends it as watch-level news whatever
    that level (delivery.routing). ``reasons`` are the outlook's sentences, ``eta`` the
    middle of the onset window when the cooling curve gives one, and ``kind`` is left
    empty: the fog chance is a sentence of the text, not a kind of fog."""
    lines, _chance = outlook_lines(sa, now)
    if sa.stale:
        lines.append(
            "The newest reading is older than alerts.stale_after: this outlook rests on old data."
        )
    hours = sa.features.get("hours_to_fog")
    onset_known = _finite(hours) and any(line.startswith("Onset window: ") for line in lines)
    return Event(
        # the id keeps "watch": an outlook queued twice for one moment is still one outlook
        id=event_id(sa.site.id, "fog", None, "outlook", "watch", now),
        type="outlook",
        site_id=sa.site.id,
        hazard="fog",
        level=sa.level,
        previous_level=sa.level,
        time=now,
        eta=now + timedelta(hours=float(hours)) if onset_known else None,  # type: ignore[arg-type]
        reasons=tuple(lines),
        explanations=tuple(lines),
        features={
            k: v
            for k, v in sa.features.items()
            if k
            in (
                "temp_c",
                "dewpoint_c",
                "projected_min_temp_c",
                "cooling_potential",
                "hours_to_fog",
                "hours_to_sunrise",
            )
            and math.isfinite(v)
        },
        data_age_min=sa.age_min if math.isfinite(sa.age_min) else None,
        projection_method=sa.projection_method,
    )


def outlook_repeats(
    outlook: Event, subscriber_id: str, told: Iterable[tuple[str, Event]], every: timedelta
) -> bool:
    """Whether ``outlook`` would only repeat to this recipient an alert already told.

    True when the site is at watch or warning now and, within ``every`` before the
    outlook, the recipient was sent news of a fog or icing alert of the site at a level
    (not its end). ``told`` is (subscriber id, event) for what was sent. News of the same
    moment does not count: the outlook goes out in one message with it.

    >>> from datetime import UTC, datetime, timedelta
    >>> t = datetime(2026, 11, 6, 17, 30, tzinfo=UTC)
    >>> def ev(type_, level, at):
    ...     return Event("x", type_, "vale", "fog", level, "none", at)
    >>> outlook = ev("outlook", "watch", t)
    >>> watch = ("ann", ev("raised", "watch", t - timedelta(hours=1)))
    >>> outlook_repeats(outlook, "ann", [watch], timedelta(hours=3))
    True
    >>> outlook_repeats(outlook, "bo", [watch], timedelta(hours=3))
    False
    >>> outlook_repeats(outlook, "ann", [watch], timedelta(minutes=30))
    False
    >>> outlook_repeats(outlook, "ann", [("ann", ev("raised", "watch", t))], timedelta(hours=3))
    False
    """
    if outlook.level == "none":
        return False
    since = outlook.time - every
    return any(
        sub == subscriber_id
        and event.site_id == outlook.site_id
        and event.hazard in ALERT_HAZARDS
        and event.type != "outlook"
        and event.level != "none"
        and since <= event.time < outlook.time
        for sub, event in told
    )


def without_repeats(
    deliveries: Sequence[Delivery],
    outlooks: Sequence[Event],
    outbox: Outbox,
    now: datetime,
    every_s: float,
) -> list[Delivery]:
    """The outlook's deliveries less those that would only repeat an alert told to that
    recipient within ``every_s`` seconds (``alerts.reminder_every``)."""
    every = timedelta(seconds=every_s)
    by_id = {e.id: e for e in outlooks}
    recent = {e.id: e for e in outbox.events_between(now - every, now) if e.type != "outlook"}
    if not recent:
        return list(deliveries)
    told = [(d.subscriber, recent[d.event_id]) for d in outbox.deliveries() if d.event_id in recent]
    return [
        d
        for d in deliveries
        if d.event_id not in by_id
        or not outlook_repeats(by_id[d.event_id], d.subscriber_id, told, every)
    ]
