"""Site snapshots built from the arrays (sites where no rule fires) and from the
cycle's facts (sites with a hazard: their hazards put into words when the snapshot is
read back from the store) against the per-site snapshot of the per-site oracle
assessment (tests/engine/oracle_assess.py), and both against ``assess --json``
(``to_json``) of that assessment: the same JSON, byte for byte, for every site of
randomised invented worlds."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import notifier.engine.assess as assess_module
from notifier.engine.assessed import Assessments
from notifier.engine.assessment import to_json
from notifier.service.snapshots import SNAPSHOT_FEATURES, site_snapshots, snapshot
from notifier.storage.outbox import Outbox
from notifier.storage.store import Store
from tests.engine.oracle_assess import oracle_assess_times
from tests.engine.scenes import RULES
from tests.engine.test_oracle import EVENING, world


def _unchecked(fn):
    return getattr(fn, "__wrapped__", fn)


def test_snapshots_from_the_arrays_are_the_per_site_ones(tmp_path):
    evening = datetime.combine(EVENING, datetime.min.time(), tzinfo=UTC)
    times = [evening + timedelta(hours=h) for h in (17, 22, 27, 30)]
    quiet = loud = stale = never = 0
    store = Store(f"sqlite:///{tmp_path / 'snapshots.sqlite'}")
    box = Outbox(store)
    for new, old, sites in _worlds(times, seeds=(5, 6, 8)):
        assert isinstance(new, Assessments)
        written = site_snapshots(new)
        # as a cycle writes them, and as the page, the bot and `status` read them back
        box.commit_cycle({}, {}, [], [], new.time, snapshots=written)
        ids = [s.id for s in sites]
        read, every = box.snapshots(ids), box.snapshots()
        assert read == {k: every[k] for k in ids}  # a few read as when all are
        got = {k: (read[k][1], read[k][2]) for k in ids}
        want = {sa.site.id: (sa.level, _from_to_json(sa)) for sa in old}
        # snapshot() itself, on the oracle's assessments, is assess --json's shape too
        assert [json.dumps(snapshot(sa)) for sa in old] == [json.dumps(p) for _, p in want.values()]
        assert list(written) == ids
        # the rows written: the same text (json.dumps keeps the keys' order)
        assert {k: (lv, json.dumps(p)) for k, (lv, p) in got.items()} == {
            k: (lv, json.dumps(p)) for k, (lv, p) in want.items()
        }
        quiet += int(new.quiet().sum())
        loud += int((~new.quiet()).sum())
        stale += sum(p["data"]["stale"] for _, p in got.values())
        never += sum(p["data"]["last_time"] is None for _, p in got.values())
    # the worlds cover both paths, stale data and sites that never reported
    assert quiet and loud and stale and never
    # only the records some row points at are kept: at most each world's last cycle's
    with store.engine.connect() as conn:
        kept = conn.exec_driver_sql("SELECT key FROM snapshot_facts").scalars().all()
        pointed = conn.exec_driver_sql(
            "SELECT DISTINCT facts_key FROM site_status WHERE facts_key IS NOT NULL"
        )
        assert sorted(kept) == sorted(pointed.scalars().all()) and 1 <= len(kept) <= 3
    store.close()


def _from_to_json(sa):
    """``assess --json`` (``to_json``) of the site, with only the snapshot's features."""
    (data,) = to_json([sa])
    shown = data["features"]  # in the snapshot's order
    data["features"] = {k: shown[k] for k in SNAPSHOT_FEATURES if k in shown}
    return data


def _worlds(times, seeds):
    for seed in seeds:
        sites, obs = world(seed, 30)
        # a short stale limit, so that some sites are stale and some not
        found = _unchecked(assess_module.assess_times)(RULES, sites, obs, times, stale_after_min=25)
        expected = oracle_assess_times(RULES, sites, obs, times, stale_after_min=25)
        for new, old in zip(found, expected, strict=True):
            yield new, old, sites
