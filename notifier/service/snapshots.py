"""Every site's status snapshot, written each cycle: what the bot, ``status``, the web
page and ``/health`` show without recomputing.

From :class:`~notifier.engine.assessed.Assessments` the snapshots are kept as one
record of arrays for the cycle (:mod:`notifier.storage.snapshot_rows`): every site's
level, data age and shown features straight from the arrays, and for the sites where a
rule fires the facts their hazards are put into words from when a snapshot is read
(:mod:`notifier.storage.snapshot_facts`); no site's
:class:`~notifier.engine.assessment.SiteAssessment` is built for it. Read back, they
are the same JSON as :func:`snapshot` and as ``assess --json``
(``tests/service/test_snapshots.py`` holds them to both).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from notifier.core.timefmt import iso_z
from notifier.engine.assessed import Assessments
from notifier.engine.assessment import _json_number as json_number
from notifier.engine.catalog import FEATURES
from notifier.storage.snapshot_facts import SnapshotFacts, hazards_json
from notifier.storage.snapshot_rows import CycleSnapshots, RecordSnapshots

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


def _shown(name: str, value: Any) -> Any:
    # as ``to_json`` writes a feature's value (any number a hand-made assessment holds)
    if FEATURES[name].kind == "bool":
        return None if math.isnan(value) else bool(value)
    return json_number(value)


def site_snapshots(
    assessments: Sequence[SiteAssessment],
) -> Mapping[str, tuple[str, dict[str, Any]]]:
    """Site id → (level, snapshot) for every site assessed; from :class:`Assessments`,
    held as the cycle's record (each snapshot made only when looked up)."""
    if not isinstance(assessments, Assessments):
        return {sa.site.id: (sa.level, snapshot(sa)) for sa in assessments}
    table, n = assessments.table, len(assessments.sites)
    loud = np.flatnonzero(~assessments.quiet())
    facts_column = np.full(n, -1, dtype=np.int32)
    facts_column[loud] = np.arange(loud.size, dtype=np.int32)
    record = CycleSnapshots(
        time=assessments.time,
        ids=[s.id for s in assessments.sites],
        levels=assessments.levels().astype(np.int8),
        stale=np.asarray(assessments.site_levels.stale, dtype=bool),
        last_time=np.asarray(table.last_time, dtype=np.float64),
        age_min=np.asarray(table.values["data_age_min"], dtype=np.float64),
        shown={k: _column(table.values[k]) for k in SNAPSHOT_FEATURES if k in table.values},
        facts=cycle_facts(assessments, loud) if loud.size else None,
        facts_column=facts_column,
    )
    return RecordSnapshots(record)


def _column(values: np.ndarray) -> np.ndarray:
    """A feature's column as it can be stored (numbers as they are)."""
    values = np.asarray(values)
    return values if values.dtype.kind in "fiub" else _floats(values)


def cycle_facts(assessments: Assessments, rows: np.ndarray) -> SnapshotFacts:
    """The facts the hazards of the sites at ``rows`` are made from, as arrays."""
    # the evaluations and this time's cells among them: the engine's own arrays, read
    # rather than copied out for every cycle
    evals = assessments.evaluations
    cells = assessments.cells_of(rows)
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
        fired=assessments.fires_at(cells).reshape(len(evals), n),
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
