"""Every site's status snapshot, written each cycle: what the bot, ``status``, the web
page and ``/health`` show without recomputing.

A site where no rule fires (most sites on most nights) has no hazards, so its snapshot
is its level ``none``, a few features and its data's age: read here straight from the
feature table's arrays, without building its
:class:`~notifier.engine.assessment.SiteAssessment`. Only the sites with a hazard go
through :func:`snapshot` (their hazards' reasons are worked out then). Both give the
same JSON (``tests/service/test_snapshots.py`` holds the first to the second).
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

__all__ = ["SNAPSHOT_FEATURES", "site_snapshots", "snapshot"]

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
    hazards = [
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
    age = sa.age_min
    return {
        "site": sa.site.id,
        "time": iso_z(sa.time),
        "level": sa.level,
        "hazards": hazards,
        "features": shown,
        "data": {
            "last_time": iso_z(sa.last_time),
            "age_min": None if not math.isfinite(age) else round(age, 1),
            "stale": sa.stale,
        },
    }


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
    quiet = assessments.quiet()
    out: dict[str, tuple[str, dict[str, Any]]] = {}
    for i in np.flatnonzero(~quiet).tolist():
        sa = assessments.unkept(i)  # not kept: tens of thousands on a foggy night
        out[sa.site.id] = (sa.level, snapshot(sa))
    out.update(_quiet_snapshots(assessments, np.flatnonzero(quiet)))
    # in the sites' order, as before (the rows are written in this order)
    return {s.id: out[s.id] for s in assessments.sites}


def _quiet_snapshots(
    assessments: Assessments, rows: np.ndarray
) -> dict[str, tuple[str, dict[str, Any]]]:
    """The snapshots of the sites at ``rows`` where no rule fires, from the arrays."""
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
