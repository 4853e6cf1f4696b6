"""The hazards of a cycle's status snapshots, kept as facts and put into words on read.

A site with a hazard used to have its hazards written out each cycle as ``to_json``
does (level, kind, expected time, rules, reasons in words): tens of thousands of sites
a cycle on a foggy night at 100,000 sites, each built one by one, for a page or a bot
answer that reads one site at a time. Now a cycle keeps one record of facts for all
its sites with a hazard, as arrays with a column per site:

- the **catalogue** (JSON): each rule evaluated, in order (id, hazard, level, kind and
  the tests whose values a reason shows: feature, operator, threshold, margin);
- ``fired``: which rules fire at the site; ``held``: which of those tests held there;
- ``values``: the site's features (what the expected time is read from), and
  ``tested``: the values the tests compared where they are not the features' own;
- ``fit``: tonight's cooling fit (T0, k, sunset; NaN where there is none).

:meth:`SnapshotFacts.hazards` makes a site's hazards from its column with the engine's
own :func:`~notifier.engine.assessed.aggregate` (levels, the leading rule, expected
times, the reasons' order and the one line per value) and reason words, so the words
are those the assessment itself gives (``tests/service/test_snapshots.py`` holds them
to the per-site oracle's ``to_json``).
"""

from __future__ import annotations

import io
import json
import math
import uuid
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any, cast

import numpy as np
import sqlalchemy as sa

from notifier.core.timefmt import iso_z, parse_iso
from notifier.engine.assessed import aggregate
from notifier.engine.assessment import SiteAssessment, level_rank
from notifier.engine.rules import Comparison, Outcome, _reason
from notifier.storage.migrations import site_status, snapshot_facts

if TYPE_CHECKING:  # pragma: no cover
    from sqlalchemy.engine import Connection

    from notifier.storage.store import Store

__all__ = ["SnapshotFacts", "hazards_json", "read_snapshots", "write_snapshots"]

#: sites looked up per statement when a reader names them (SQLite's bound on parameters)
SITES_PER_READ = 500


def write_snapshots(
    store: Store, conn: Connection, snapshots: Mapping[str, tuple[str, dict[str, Any]]], when: str
) -> None:
    """Every site's row; the cycle's facts (``snapshots.facts``, where there are any)
    as one record that the rows of ``snapshots.columns`` point at; records no row
    points at any more are dropped."""
    if not snapshots:
        return
    facts: SnapshotFacts | None = getattr(snapshots, "facts", None)
    columns: Mapping[str, int] = getattr(snapshots, "columns", {})
    key = None
    if facts is not None:
        key = uuid.uuid4().hex
        conn.execute(
            snapshot_facts.insert(),
            {
                "key": key,
                "time": when,
                "catalogue": facts.catalogue_json(),
                "arrays": facts.arrays_bytes(),
            },
        )
    # one statement for every site (executemany): a statement built per site cost
    # 1.6 ms each, seconds a cycle at 10,000 sites
    stmt = store._insert(site_status)
    stmt = stmt.on_conflict_do_update(
        index_elements=["site"],
        set_={
            c: getattr(stmt.excluded, c)
            for c in ("time", "level", "payload", "facts_key", "facts_column")
        },
    )
    rows = []
    for site, (level, payload) in snapshots.items():
        column = columns.get(site)
        rows.append(
            {
                "site": site,
                "time": when,
                "level": level,
                "payload": json.dumps(payload),
                "facts_key": None if column is None else key,
                "facts_column": column,
            }
        )
    conn.execute(stmt, rows)
    pointed = sa.select(site_status.c.facts_key).where(site_status.c.facts_key.is_not(None))
    conn.execute(snapshot_facts.delete().where(snapshot_facts.c.key.not_in(pointed)))


def read_snapshots(
    conn: Connection, sites: Iterable[str] | None = None
) -> dict[str, tuple[datetime, str, dict[str, Any]]]:
    """Site id → (time, level, snapshot), the hazards put into words from the facts."""
    if sites is None:
        rows = list(conn.execute(sa.select(site_status)))
    else:
        wanted = list(dict.fromkeys(sites))
        rows = []
        for first in range(0, len(wanted), SITES_PER_READ):
            chunk = wanted[first : first + SITES_PER_READ]
            rows += conn.execute(sa.select(site_status).where(site_status.c.site.in_(chunk)))
    records: dict[str, SnapshotFacts | None] = {}
    out = {}
    for r in rows:
        payload = json.loads(r.payload)
        if r.facts_key is not None:
            if r.facts_key not in records:
                records[r.facts_key] = _record(conn, r.facts_key)
            found = records[r.facts_key]
            if found is not None:
                payload["hazards"] = found.hazards(r.facts_column)
        out[r.site] = (cast(datetime, parse_iso(r.time)), r.level, payload)
    return out


def _record(conn: Connection, key: str) -> SnapshotFacts | None:
    row = conn.execute(
        sa.select(snapshot_facts.c.catalogue, snapshot_facts.c.arrays).where(
            snapshot_facts.c.key == key
        )
    ).first()
    return None if row is None else SnapshotFacts.from_stored(row[0], bytes(row[1]))


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


@dataclass(frozen=True)
class SnapshotFacts:
    """One cycle's facts for its sites with a hazard, a column per site (see the
    module's docstring)."""

    time: datetime
    catalogue: list[dict[str, Any]]
    features: list[str]
    tested_features: list[str]
    fired: np.ndarray  # bool, rules × columns
    held: np.ndarray  # bool, the catalogue's tests (rule by rule) × columns
    values: np.ndarray  # float64, features × columns
    tested: np.ndarray  # float64, tested_features × columns
    fit: np.ndarray  # float64, (T0 °C, k K/h^½, sunset POSIX s) × columns

    # -- stored ------------------------------------------------------------------------

    def catalogue_json(self) -> str:
        return json.dumps(
            {
                "time": self.time.timestamp(),  # exact, unlike the ISO text to the second
                "rules": self.catalogue,
                "features": self.features,
                "tested_features": self.tested_features,
            }
        )

    def arrays_bytes(self) -> bytes:
        out = io.BytesIO()
        np.savez(
            out,
            fired=np.packbits(self.fired, axis=0),
            held=np.packbits(self.held, axis=0),
            values=self.values,
            tested=self.tested,
            fit=self.fit,
        )
        return out.getvalue()

    @classmethod
    def from_stored(cls, catalogue: str, arrays: bytes) -> SnapshotFacts:
        head = json.loads(catalogue)
        rules = head["rules"]
        tests = sum(len(r["tests"]) for r in rules)
        with np.load(io.BytesIO(arrays), allow_pickle=False) as data:
            values = data["values"]
            columns = values.shape[1]
            fired = np.unpackbits(data["fired"], axis=0, count=len(rules)).astype(bool)
            held = np.unpackbits(data["held"], axis=0, count=tests).astype(bool)
            return cls(
                time=datetime.fromtimestamp(head["time"], UTC),
                catalogue=rules,
                features=head["features"],
                tested_features=head["tested_features"],
                fired=fired.reshape(len(rules), columns),
                held=held.reshape(tests, columns),
                values=values,
                tested=data["tested"],
                fit=data["fit"],
            )

    # -- read --------------------------------------------------------------------------

    def hazards(self, column: int) -> list[dict[str, Any]]:
        """The hazards of the site at ``column``, as ``to_json`` writes them."""
        features = {
            k: float(v) for k, v in zip(self.features, self.values[:, column].tolist(), strict=True)
        }
        tested = dict(zip(self.tested_features, self.tested[:, column].tolist(), strict=True))
        t0, k, sunset = self.fit[:, column].tolist()
        projection = None
        if not (math.isnan(t0) or math.isnan(k) or math.isnan(sunset)):
            projection = (t0, k, datetime.fromtimestamp(sunset, UTC))
        sa = SiteAssessment(
            site=cast(Any, None),  # not read: the row carries the site
            time=self.time,
            features=features,
            projection_method="",
            last_time=None,
            results=[],
            projection=projection,
        )
        evals: list[_Fired] = []
        first = 0
        for r, rule in enumerate(self.catalogue):
            tests = rule["tests"]
            if self.fired[r, column]:
                texts = [
                    _words(test, tested.get(test[0], features.get(test[0], math.nan)))
                    for n, test in enumerate(tests)
                    if self.held[first + n, column]
                ]
                evals.append(_Fired(_RuleFacts(rule), texts))
            first += len(tests)
        every = [True] * len(evals)
        aggregate(sa, self.time, cast(Sequence[Any], evals), 0, every, every)
        return hazards_json(sa)


def _words(test: list[Any], value: float) -> str:
    """A test that held, in the words ``RuleEvaluation.reasons_at`` gives it."""
    feature, op, threshold, margin = test
    comparison = Comparison(feature, op, threshold, margin, None)
    return _reason(Outcome(comparison, value, True, True))


class _RuleFacts:
    """What :func:`~notifier.engine.assessed.aggregate` reads of a rule."""

    __slots__ = ("id", "hazard", "level", "kind", "safety", "explain")

    def __init__(self, rule: dict[str, Any]):
        self.id: str = rule["id"]
        self.hazard: str = rule["hazard"]
        self.level: str = rule["level"]
        self.kind: str = rule["kind"]
        self.safety: tuple[str, ...] = ()  # not in a snapshot
        self.explain = ""  # not in a snapshot


class _Fired:
    """What :func:`~notifier.engine.assessed.aggregate` reads of a rule that fired:
    the rule, and its reasons at the site."""

    __slots__ = ("rule", "_texts")

    def __init__(self, rule: _RuleFacts, texts: list[str]):
        self.rule = rule
        self._texts = texts

    def reasons_at(self, i: int) -> list[str]:
        return self._texts
