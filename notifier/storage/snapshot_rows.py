"""Every site's status snapshot of a cycle as ONE record of arrays, and the rows of
``site_status`` pointing into it.

A snapshot changes every cycle (its time, the data's age, the features shown), so a
row per site meant 100,000 JSON texts and upserts a cycle at 100,000 sites. A cycle
over :class:`~notifier.engine.assessed.Assessments` writes instead one record in
``snapshot_facts`` (:class:`CycleSnapshots`: each site's level, stale flag, newest
reading, data age and shown features as arrays, a column per site, and the hazards'
:class:`~notifier.storage.snapshot_facts.SnapshotFacts`), keyed by its list of sites.
A site's row says only which record and column hold it (``facts_key``,
``facts_column``): rows are written when they do not all point at the record yet (the
first cycle, a change of the sites, another writer), not every cycle. A snapshot is
made from its column when read, the same JSON as a written one
(``tests/service/test_snapshots.py``). Rows written with their snapshot (any other
sequence of assessments, hand-made ones) are read as they are.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any, cast

import numpy as np
import sqlalchemy as sa

from notifier.core.timefmt import iso_z, parse_iso
from notifier.engine.catalog import FEATURES
from notifier.engine.rules import LEVELS
from notifier.storage.migrations import site_status, snapshot_facts
from notifier.storage.snapshot_facts import SnapshotFacts

if TYPE_CHECKING:  # pragma: no cover
    from sqlalchemy.engine import Connection

    from notifier.storage.store import Store

__all__ = ["CycleSnapshots", "read_levels", "read_snapshots", "write_snapshots"]

#: sites looked up per statement when a reader names them (SQLite's bound on parameters)
SITES_PER_READ = 500


@dataclass(frozen=True)
class CycleSnapshots:
    """Every site's snapshot at one time, a column per site of ``ids``."""

    time: datetime
    ids: list[str]
    levels: np.ndarray  # int8 ranks of ``rules.LEVELS``
    stale: np.ndarray  # bool
    last_time: np.ndarray  # float64 POSIX s, NaN where the site never reported
    age_min: np.ndarray  # float64
    shown: dict[str, np.ndarray]  # the snapshot's features, in its order
    facts: SnapshotFacts | None  # the hazards of the sites with one
    facts_column: np.ndarray  # int32: each site's column of ``facts``, -1 where none

    def key(self) -> str:
        """The record's key: its sites (a cycle over the same sites replaces it)."""
        return "sites-" + hashlib.sha256("\n".join(self.ids).encode()).hexdigest()[:32]

    def snapshot(self, k: int) -> dict[str, Any]:
        """Site ``k``'s snapshot, as ``to_json`` writes it (bar the features not shown)."""
        last, age = float(self.last_time[k]), float(self.age_min[k])
        column = int(self.facts_column[k])
        hazards = self.facts.hazards(column) if self.facts is not None and column >= 0 else []
        return {
            "site": self.ids[k],
            "time": iso_z(self.time),
            "level": LEVELS[int(self.levels[k])],
            "hazards": hazards,
            "features": {name: _shown(name, v[k].item()) for name, v in self.shown.items()},
            "data": {
                "last_time": None if last != last else iso_z(datetime.fromtimestamp(last, UTC)),
                "age_min": None if not math.isfinite(age) else round(age, 1),
                "stale": bool(self.stale[k]),
            },
        }

    # -- stored ------------------------------------------------------------------------

    def catalogue_json(self) -> str:
        return json.dumps(
            {
                "time": self.time.timestamp(),
                "ids": self.ids,
                "shown": list(self.shown),
                "facts": None if self.facts is None else self.facts.head(),
            }
        )

    def arrays_bytes(self) -> bytes:
        arrays = {
            "levels": self.levels,
            "stale": self.stale,
            "last_time": self.last_time,
            "age_min": self.age_min,
            "facts_column": self.facts_column,
        }
        arrays |= {f"shown_{n}": v for n, v in enumerate(self.shown.values())}
        if self.facts is not None:
            arrays |= {f"facts_{k}": v for k, v in self.facts.arrays().items()}
        out = io.BytesIO()
        np.savez(out, **cast(dict[str, Any], arrays))  # (keyword names: the arrays)
        return out.getvalue()

    @classmethod
    def from_stored(cls, catalogue: str, arrays: bytes) -> CycleSnapshots:
        head = json.loads(catalogue)
        with np.load(io.BytesIO(arrays), allow_pickle=False) as data:
            facts = None
            if head["facts"] is not None:
                parts = {
                    k: data[f"facts_{k}"] for k in ("fired", "held", "values", "tested", "fit")
                }
                facts = SnapshotFacts.from_parts(head["facts"], parts)
            return cls(
                time=datetime.fromtimestamp(head["time"], UTC),
                ids=head["ids"],
                levels=data["levels"],
                stale=data["stale"],
                last_time=data["last_time"],
                age_min=data["age_min"],
                shown={name: data[f"shown_{n}"] for n, name in enumerate(head["shown"])},
                facts=facts,
                facts_column=data["facts_column"],
            )


class RecordSnapshots(Mapping[str, tuple[str, dict[str, Any]]]):
    """Site id → (level, snapshot) of a :class:`CycleSnapshots`, each snapshot made
    when looked up; :func:`write_snapshots` writes the record itself."""

    def __init__(self, record: CycleSnapshots):
        self.record = record
        self._index = {sid: k for k, sid in enumerate(record.ids)}

    def __getitem__(self, site: str) -> tuple[str, dict[str, Any]]:
        k = self._index[site]
        return LEVELS[int(self.record.levels[k])], self.record.snapshot(k)

    def __iter__(self) -> Iterator[str]:
        return iter(self.record.ids)

    def __len__(self) -> int:
        return len(self.record.ids)


def _shown(name: str, value: Any) -> Any:
    # as ``to_json`` writes a feature's value
    if FEATURES[name].kind == "bool":
        return None if math.isnan(value) else bool(value)
    if math.isnan(value) or math.isinf(value):
        return None
    return round(value, 3)


def write_snapshots(
    store: Store, conn: Connection, snapshots: Mapping[str, tuple[str, dict[str, Any]]], when: str
) -> None:
    """The cycle's record and the rows pointing into it (only where they do not all
    yet); for any other mapping, every site's row with its snapshot. Records no row
    points at any more are dropped."""
    if not snapshots:
        return
    record: CycleSnapshots | None = getattr(snapshots, "record", None)
    stmt = store._insert(site_status)
    stmt = stmt.on_conflict_do_update(
        index_elements=["site"],
        set_={c: getattr(stmt.excluded, c) for c in ("time", "level", "payload") + _POINTER},
    )
    if record is None:
        rows = [
            {"site": site, "time": when, "level": level, "payload": json.dumps(payload)}
            | dict.fromkeys(_POINTER)
            for site, (level, payload) in snapshots.items()
        ]
        conn.execute(stmt, rows)
    else:
        key = record.key()
        put = store._insert(snapshot_facts)
        put = put.on_conflict_do_update(
            index_elements=["key"],
            set_={c: getattr(put.excluded, c) for c in ("time", "catalogue", "arrays")},
        )
        conn.execute(
            put,
            {
                "key": key,
                "time": when,
                "catalogue": record.catalogue_json(),
                "arrays": record.arrays_bytes(),
            },
        )
        pointing = conn.execute(
            sa.select(sa.func.count()).where(site_status.c.facts_key == key)
        ).scalar()
        if pointing == len(record.ids):
            return  # every row points here already (the same sites: the same columns)
        levels = record.levels.tolist()
        rows = [
            {
                "site": site,
                "time": when,
                "level": LEVELS[levels[k]],  # as of this cycle: the record has the newest
                "payload": "null",
                "facts_key": key,
                "facts_column": k,
            }
            for k, site in enumerate(record.ids)
        ]
        conn.execute(stmt, rows)
    pointed = sa.select(site_status.c.facts_key).where(site_status.c.facts_key.is_not(None))
    conn.execute(snapshot_facts.delete().where(snapshot_facts.c.key.not_in(pointed)))


_POINTER = ("facts_key", "facts_column")


def read_snapshots(
    conn: Connection, sites: Iterable[str] | None = None
) -> dict[str, tuple[datetime, str, dict[str, Any]]]:
    """Site id → (time, level, snapshot), for every row or those of ``sites``."""
    records: dict[str, tuple[datetime, CycleSnapshots] | None] = {}
    out = {}
    for r in _rows(conn, sites):
        if r.facts_key is None:
            out[r.site] = (cast(datetime, parse_iso(r.time)), r.level, json.loads(r.payload))
            continue
        found = _record(conn, r.facts_key, records)
        if found is not None:
            when, record = found
            k = r.facts_column
            out[r.site] = (when, LEVELS[int(record.levels[k])], record.snapshot(k))
    return out


def read_levels(conn: Connection) -> dict[str, str]:
    """Site id → its snapshot's level, no snapshot made."""
    records: dict[str, tuple[datetime, CycleSnapshots] | None] = {}
    out = {}
    for r in conn.execute(
        sa.select(site_status.c.site, site_status.c.level, *(site_status.c[c] for c in _POINTER))
    ):
        if r.facts_key is None:
            out[r.site] = r.level
        elif (found := _record(conn, r.facts_key, records)) is not None:
            out[r.site] = LEVELS[int(found[1].levels[r.facts_column])]
    return out


def _rows(conn: Connection, sites: Iterable[str] | None) -> list[Any]:
    if sites is None:
        return list(conn.execute(sa.select(site_status)))
    wanted = list(dict.fromkeys(sites))
    rows: list[Any] = []
    for first in range(0, len(wanted), SITES_PER_READ):
        chunk = wanted[first : first + SITES_PER_READ]
        rows += conn.execute(sa.select(site_status).where(site_status.c.site.in_(chunk)))
    return rows


def _record(
    conn: Connection, key: str, found: dict[str, tuple[datetime, CycleSnapshots] | None]
) -> tuple[datetime, CycleSnapshots] | None:
    """The record ``key`` (read once per call of a reader) and when it was written."""
    if key not in found:
        row = conn.execute(
            sa.select(
                snapshot_facts.c.time, snapshot_facts.c.catalogue, snapshot_facts.c.arrays
            ).where(snapshot_facts.c.key == key)
        ).first()
        found[key] = (
            None
            if row is None
            else (
                cast(datetime, parse_iso(row[0])),
                CycleSnapshots.from_stored(row[1], bytes(row[2])),
            )
        )
    return found[key]
