"""ORACLE: a data gap under a warning (engine/data_gap), per site, as before issue 19 made the
lifecycle array-based. The array ``step`` must give exactly its states and events
(tests/engine/test_oracle.py, tests/oracle_check.py); a deliberate change of behaviour
is made here too."""

from __future__ import annotations

from dataclasses import replace
from datetime import datetime, timedelta
from typing import TYPE_CHECKING

from notifier.engine.alerts import AlertState, Event
from tests.engine.oracle_event_parts import changes, make_event

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import AlertSettings
    from notifier.engine.assessment import SiteAssessment

__all__ = ["DATA_GAP", "gap_held", "gap_told_once"]

DATA_GAP = "data_gap"


def gap_held(
    state: AlertState, sa: SiteAssessment, now: datetime, settings: AlertSettings, warned: bool
) -> AlertState | None:
    """A data gap about to be raised: the state that holds it back (noticed under a
    warning, inside ``gap_grace``), or None when it is to be said now."""
    grace = timedelta(seconds=settings.gap_grace)
    if state.hazard != DATA_GAP or state.level != "none" or grace <= timedelta(0):
        return None
    if not warned and state.gap_pending_since is None:
        return None  # no warning in force: silence could hide a rising hazard
    pending = state.gap_pending_since or now
    if now - pending >= grace:
        return None
    hazard = sa.hazards.get(DATA_GAP)
    return replace(
        state,
        gap_pending_since=pending,
        gap_from=state.gap_from or sa.last_time,
        rules=tuple(hazard.rules) if hazard else state.rules,
    )


def gap_told_once(state: AlertState, sa: SiteAssessment, now: datetime) -> Event:
    """Readings back within the grace: the one ``data_back`` that tells the whole gap.

    It carries the data-gap rule's level (watch) as the level it ends, so it reaches
    whoever the gap itself would have reached."""
    start = state.gap_pending_since
    held = replace(state, level="watch", peak="watch", episode_start=start)
    return make_event(
        "data_back",
        held,
        "none",
        sa,
        now,
        start,
        changes=changes(sa, held),
        eased_since=now,
        gap_from=state.gap_from,
        gap_untold=True,
    )
