"""Every site's status snapshot, written each cycle: what the bot, ``status``, the web
page and ``/health`` show without recomputing.

Every site's features and data age are read straight from the feature table's arrays,
for all sites at once. A site where no rule fires (most sites on most nights) has no
hazards, so that is its whole snapshot, its
:class:`~notifier.engine.assessment.SiteAssessment` never built; only the sites with a
hazard have theirs built, for their level and hazards (their reasons are worked out
then). Both give the same JSON as :func:`snapshot` and as ``assess --json``
(``tests/service/test_snapshots.py`` holds them to both).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import numpy as np

from notifier.core.timefmt import iso_z
from notifier.engine.assessed import Assessments
from notifier.engine.assessment import _json_number as json_number
from notifier.engine.assessment import level_rank
from notifier.engine.catalog import FEATURES

if TYPE_CHECKING:  # pragma: no cover
    from notifier.engine.assessment import SiteAssessment

__all__ = ["SNAPSHOT_FEATURES", "hazards_json", "site_snapshots", "snapshot"]

#: the features a snapshot keeps (the status page's and the bot's columns)
SNAPSHOT_FEATURES = (
    "temp_c",
    "dewpoint_c",
    "dewpoint_depression_c",
    "projected_min_temp_c",
    "visibility_m",
    "wind_ms",
    "cloud_pct",
    "hours_to_fog",
)


def snapshot(sa: SiteAssessment) -> dict[str, Any]:
    """One site's snapshot: ``assess --json``'s shape with only the features shown
    (``to_json`` of the site with its other features left out; written out here so that
    tens of thousands of sites a cycle do not each copy their assessment for it)."""
    features = sa.features  # looked up by name: a site's table row has some 40
    shown = {k: _shown(k, features[k]) for k in SNAPSHOT_FEATURES if k in features}
    age = sa.age_min
    return {
        "site": sa.site.id,
        "time": iso_z(sa.time),
        "level": sa.level,
        "hazards": hazards_json(sa),
        "features": shown,
        "data": {
            "last_time": iso_z(sa.last_time),
            "age_min": None if not math.isfinite(age) else round(age, 1),
            "stale": sa.stale,
        },
    }


def hazards_json(sa: SiteAssessment) -> list[dict[str, Any]]:
    """A site's hazards as ``to_json`` writes them, the highest level first."""
    return [
        {
            "hazard": h.hazard,
            "level": h.level,
            "kind": h.kind,
            "eta": iso_z(h.eta),
            "eta_method": h.eta_method or None,
            "rules": h.rules,
            "reasons": list(h.reasons),
        }
        for h in sorted(sa.hazards.values(), key=lambda h: -level_rank(h.level))
    ]


def _shown(name: str, value: Any) -> Any:
    # as ``to_json`` writes a feature's value (any number a hand-made assessment holds)
    if FEATURES[name].kind == "bool":
        return None if math.isnan(value) else bool(value)
    return json_number(value)


def site_snapshots(
    assessments: Sequence[SiteAssessment],
) -> dict[str, tuple[str, dict[str, Any]]]:
    """Site id → (level, snapshot) for every site assessed."""
    if not isinstance(assessments, Assessments):
        return {sa.site.id: (sa.level, snapshot(sa)) for sa in assessments}
    # every site's features and data from the arrays; then the sites where a rule fires
    # get their level and hazards from their assessment
    out = _array_snapshots(assessments, np.arange(len(assessments.sites)))
    for i in np.flatnonzero(~assessments.quiet()).tolist():
        sa = assessments.unkept(i)  # not kept: tens of thousands on a foggy night
        _, data = out[sa.site.id]
        data["level"], data["hazards"] = sa.level, hazards_json(sa)
        out[sa.site.id] = (sa.level, data)
    return out


def _array_snapshots(
    assessments: Assessments, rows: np.ndarray
) -> dict[str, tuple[str, dict[str, Any]]]:
    """The snapshots of the sites at ``rows`` as if no rule fired there, from the arrays."""
    table = assessments.table
    names = [k for k in SNAPSHOT_FEATURES if k in table.values]
    columns = [table.values[k][rows].tolist() for k in names]
    shown = [_as_json(k) for k in names]
    ages = table.values["data_age_min"][rows].tolist()
    stale = assessments.site_levels.stale[rows].tolist()
    lasts = table.last_time[rows].tolist()
    at = iso_z(assessments.time)
    moments: dict[float, str | None] = {}
    out = {}
    for j, i in enumerate(rows.tolist()):
        last = lasts[j]
        when = moments.get(last) if last == last else None
        if when is None and last == last:
            when = moments[last] = iso_z(datetime.fromtimestamp(last, UTC))
        age = ages[j]
        site = assessments.sites[i].id
        out[site] = (
            "none",
            {
                "site": site,
                "time": at,
                "level": "none",
                "hazards": [],
                "features": {k: f(col[j]) for k, f, col in zip(names, shown, columns, strict=True)},
                "data": {
                    "last_time": when,
                    "age_min": None if not math.isfinite(age) else round(age, 1),
                    "stale": stale[j],
                },
            },
        )
    return out


def _as_json(name: str) -> Any:
    """How ``to_json`` writes a value of this feature."""
    if FEATURES[name].kind == "bool":
        return lambda v: None if math.isnan(v) else bool(v)
    return _json_number


def _json_number(v: float) -> Any:
    # ``assessment._json_number`` for a float read from an array
    if math.isnan(v) or math.isinf(v):
        return None
    return round(v, 3)
