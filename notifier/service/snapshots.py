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
from notifier.engine.catalog import FEATURES
from notifier.engine.rules import LEVELS
from notifier.storage.snapshot_facts import SnapshotFacts, hazards_json

if TYPE_CHECKING:  # pragma: no cover
    from notifier.engine.assessment import SiteAssessment

__all__ = ["SNAPSHOT_FEATURES", "SiteSnapshots", "hazards_json", "site_snapshots", "snapshot"]

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


def _shown(name: str, value: Any) -> Any:
    # as ``to_json`` writes a feature's value (any number a hand-made assessment holds)
    if FEATURES[name].kind == "bool":
        return None if math.isnan(value) else bool(value)
    return json_number(value)


class SiteSnapshots(dict[str, tuple[str, dict[str, Any]]]):
    """Site id → (level, snapshot), and the cycle's :class:`SnapshotFacts` that the
    hazards of the sites in ``columns`` (site id → column) are made from when read:
    those sites' snapshots are written with no hazards."""

    facts: SnapshotFacts | None = None
    columns: dict[str, int]

    def __init__(self) -> None:
        super().__init__()
        self.columns = {}


def site_snapshots(
    assessments: Sequence[SiteAssessment],
) -> dict[str, tuple[str, dict[str, Any]]]:
    """Site id → (level, snapshot) for every site assessed. From :class:`Assessments`,
    a :class:`SiteSnapshots` whose sites with a hazard carry their hazards as facts."""
    if not isinstance(assessments, Assessments):
        return {sa.site.id: (sa.level, snapshot(sa)) for sa in assessments}
    # every site's features and data from the arrays, as if no rule fired there; the
    # sites where a rule fires get their level from the arrays and their hazards as
    # the facts they are made from
    out = SiteSnapshots()
    out.update(_array_snapshots(assessments, np.arange(len(assessments.sites))))
    loud = np.flatnonzero(~assessments.quiet())
    if not loud.size:
        return out
    out.facts = cycle_facts(assessments, loud)
    levels = assessments.levels()[loud].tolist()
    for column, (i, rank) in enumerate(zip(loud.tolist(), levels, strict=True)):
        site = assessments.sites[i].id
        _, data = out[site]
        data["level"] = LEVELS[rank]
        out[site] = (LEVELS[rank], data)
        out.columns[site] = column
    return out


def cycle_facts(assessments: Assessments, rows: np.ndarray) -> SnapshotFacts:
    """The facts the hazards of the sites at ``rows`` are made from, as arrays."""
    # the evaluations and this time's cells among them: the engine's own arrays (the
    # assessment's internals, read here rather than copied out for every cycle)
    evals = assessments._evals
    cells = assessments._offset + rows
    table = assessments.table
    catalogue: list[dict[str, Any]] = []
    held: list[np.ndarray] = []
    tested: dict[str, np.ndarray] = {}
    for ev in evals:
        tests = []
        for n, test in enumerate(ev.tests):
            if not FEATURES[test.feature].in_reasons:
                continue
            tests.append([test.feature, test.op, _plain(test.value), float(test.margin)])
            held.append(np.asarray(ev.held[n])[cells])
            if test.feature not in tested:
                tested[test.feature] = _floats(np.asarray(ev.values[n])[cells])
        rule = ev.rule
        catalogue.append(
            {"id": rule.id, "hazard": rule.hazard, "level": rule.level, "kind": rule.kind}
            | {"tests": tests}
        )
    names = list(table.values)
    values = np.array([_floats(table.values[k][rows]) for k in names]).reshape(len(names), -1)
    # a tested value is the feature's own almost always: kept only where it is not
    for k, v in list(tested.items()):
        if k in table.values and np.array_equal(v, values[names.index(k)], equal_nan=True):
            del tested[k]
    fitted = table.projection_method[rows] == "cooling-fit"
    fit = np.array(
        [
            np.where(fitted, table.fit_t0_c[rows], np.nan),
            np.where(fitted, table.fit_k_per_sqrt_h[rows], np.nan),
            np.where(fitted, table.last_sunset[rows], np.nan),
        ],
        dtype=np.float64,
    )
    n = rows.size
    return SnapshotFacts(
        time=assessments.time,
        catalogue=catalogue,
        features=names,
        tested_features=list(tested),
        fired=np.asarray(assessments._flags[0])[:, cells].reshape(len(evals), n),
        held=np.array(held, dtype=bool).reshape(len(held), n),
        values=values,
        tested=np.array(list(tested.values()), dtype=np.float64).reshape(len(tested), n),
        fit=fit,
    )


def _floats(values: np.ndarray) -> np.ndarray:
    """As ``float()`` reads each (``FeatureRow``, ``RuleEvaluation.reasons_at``)."""
    if values.dtype.kind in "fiub":
        return values.astype(np.float64)
    out = np.empty(values.shape, dtype=np.float64)
    for j, v in enumerate(values.tolist()):
        try:
            out[j] = float(v)
        except (TypeError, ValueError):
            out[j] = math.nan
    return out


def _plain(value: Any) -> Any:
    """A rule test's threshold as JSON keeps it."""
    if isinstance(value, tuple | list):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


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
