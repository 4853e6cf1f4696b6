"""The charts a cycle's alerts carry: one per event bound for a channel that shows them."""

from __future__ import annotations

import logging
import math
from collections.abc import Sequence
from datetime import datetime, timedelta
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.core.config import Config
    from notifier.engine.alerts import Event
    from notifier.engine.assessment import SiteAssessment
    from notifier.storage.deliveries import Delivery

__all__ = ["event_charts"]

log = logging.getLogger(__name__)


def event_charts(
    config: Config,
    events: Sequence[Event],
    deliveries: Sequence[Delivery],
    assessments: Sequence[SiteAssessment],
    obs: pd.DataFrame,
    now: datetime,
) -> dict[str, bytes]:
    """A chart for each event that goes to an email channel with charts on."""
    from notifier.core.config import EmailChannel, FolderChannel
    from notifier.delivery.charts import chart_png

    wanted = set()
    for d in deliveries:
        ch = next((c for c in config.channels if c.id == d.channel_id), None)
        if isinstance(ch, FolderChannel) or (isinstance(ch, EmailChannel) and ch.chart):
            wanted.add(d.event_id)
    out: dict[str, bytes] = {}
    charted = [ev for ev in events if ev.id in wanted and ev.hazard != "data_gap"]
    if not charted:
        return out
    # only the charted sites' assessments are read (each is built when first read)
    sites = getattr(assessments, "sites", None)  # ``Assessments`` knows them unbuilt
    ids = [s.id for s in sites] if sites is not None else [sa.site.id for sa in assessments]
    where = {site_id: i for i, site_id in enumerate(ids)}
    for ev in charted:
        sa = assessments[where[ev.site_id]]
        frame = obs[obs["site"] == ev.site_id] if len(obs) else obs
        # the projection ends at sunrise (charts.night_points)
        to_sunrise = sa.features.get("hours_to_sunrise", math.nan)
        sunrise = now + timedelta(hours=to_sunrise) if math.isfinite(to_sunrise) else None
        try:
            out[ev.id] = chart_png(
                frame,
                now,
                projection=sa.projection,
                dewpoint=sa.features.get("dewpoint_c"),
                title=sa.site.name,
                tz_name=sa.site.timezone,
                hazard=ev.hazard,
                level=ev.level,
                sunrise=sunrise,
                frost_point=sa.features.get("frost_point_c"),
            )
        except Exception:  # a chart is a nicety; the alert must go without it
            log.exception("chart for %s failed", ev.site_id)
    return out
