"""A cycle's snapshots kept as one record that the sites' rows point into, on SQLite and
PostgreSQL: the rows are written once for a list of sites, not every cycle, and each
read gives the newest cycle's snapshot, held to the per-site oracle assessment's
snapshot (tests/engine/oracle_assess.py, through ``snapshot``); another writer's rows
are pointed back at the record by the next cycle."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import sqlalchemy as sa

from notifier.service.snapshots import site_snapshots, snapshot
from notifier.storage.migrations import site_status, snapshot_facts
from notifier.storage.outbox import Outbox
from notifier.web.status import last_cycle
from tests.engine.test_oracle import EVENING
from tests.service.test_snapshots import _worlds


def _rows(store):
    with store.engine.connect() as conn:
        rows = conn.execute(sa.select(site_status.c.site, site_status.c.time, site_status.c.level))
        records = conn.execute(sa.select(sa.func.count()).select_from(snapshot_facts)).scalar()
        return {r.site: (r.time, r.level) for r in rows}, records


def _as_text(snaps):
    return {k: (lv, json.dumps(p)) for k, (_, lv, p) in snaps.items()}


def test_rows_point_into_the_newest_record(any_store):
    box = Outbox(any_store)
    evening = datetime.combine(EVENING, datetime.min.time(), tzinfo=UTC)
    times = [evening + timedelta(hours=h) for h in (17, 22, 27, 30)]
    first_rows = None
    levels_seen = set()
    moved = 0
    cycles = 0
    for new, old, sites in _worlds(times, seeds=(6,)):  # noqa: B007  (sites: used below)
        cycles += 1
        box.commit_cycle({}, {}, [], [], new.time, snapshots=site_snapshots(new))
        rows, records = _rows(any_store)
        if first_rows is None:
            first_rows = rows
        # written at the first cycle only: the same sites point at the same columns
        assert rows == first_rows and records == 1
        want = {sa.site.id: (sa.level, json.dumps(snapshot(sa))) for sa in old}
        got = box.snapshots()
        assert _as_text(got) == want
        assert {t for t, _, _ in got.values()} == {new.time}
        assert box.snapshot_levels() == {k: lv for k, (lv, _) in want.items()}
        assert last_cycle(any_store) == new.time
        levels_seen |= {lv for lv, _ in want.values()}
        # the rows' own level is the first cycle's; the readers above take the record's
        moved += sum(first_rows[k][1] != lv for k, (lv, _) in want.items())
    assert cycles == len(times) and {"none", "warning"} <= levels_seen and moved

    # another writer's row for one of the sites (a hand-made snapshot) ...
    one = sites[0].id
    later = times[-1] + timedelta(minutes=10)
    box.commit_cycle({}, {}, [], [], later, snapshots={one: ("watch", {"n": 1})})
    assert box.snapshots([one]) == {one: (later, "watch", {"n": 1})}
    # ... is pointed back at the record by the next cycle, every row written again
    box.commit_cycle({}, {}, [], [], new.time, snapshots=site_snapshots(new))
    rows, records = _rows(any_store)
    assert records == 1 and rows[one][1] == want[one][0]
    assert _as_text(box.snapshots()) == want


def test_a_new_list_of_sites_leaves_no_old_record(any_store):
    box = Outbox(any_store)
    evening = datetime.combine(EVENING, datetime.min.time(), tzinfo=UTC)
    worlds = list(_worlds([evening + timedelta(hours=27)], seeds=(5, 8)))
    for new, _, _ in worlds:
        box.commit_cycle({}, {}, [], [], new.time, snapshots=site_snapshots(new))
    # two lists of sites (two instances' shares): a record each
    assert _rows(any_store)[1] == 2
    # the first list's sites written by hand: its record is pointed at by none, dropped
    new, old, sites = worlds[0]
    box.commit_cycle({}, {}, [], [], new.time, snapshots={s.id: ("none", {}) for s in sites})
    assert _rows(any_store)[1] == 1
    assert {k for k, (_, _, p) in box.snapshots().items() if p == {}} == {s.id for s in sites}
