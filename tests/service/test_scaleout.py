"""Scale-out (issue 19): two ``fogwatch run`` instances on one PostgreSQL store.

They share the sites with no site evaluated twice and none missed, poll disjoint
shares of the sources, keep their shares across restarts (the partition is a fixed hash
of the id, not Python's salted ``hash()``), and exactly one leads — the other takes over
when the leader's connection ends. A SQLite store serves one instance only: the config
check refuses more, saying why. Sites and sources are invented; the server is the
throwaway PostgreSQL of tests/postgres.py on 127.0.0.1.
"""

from __future__ import annotations

import subprocess
import sys
import time
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from notifier.core.columns import CANONICAL_COLUMNS
from notifier.core.config_file import load_config
from notifier.core.errors import ConfigError
from notifier.core.partition import instance_of, share
from notifier.service.cycle import Service

AT = datetime(2026, 11, 20, 23, 0, tzinfo=UTC)
SITES = [f"zz-field-{i:02d}" for i in range(16)]
SOURCES = [f"drop-{i}" for i in range(6)]


def config_text(index: int, count: int, store_url: str) -> str:
    sites = "".join(
        f"  - {{id: {sid}, name: Invented field {i}, lat: {51 + i / 10:.2f}, lon: -2.5,"
        f" timezone: Europe/London, exposure: valley}}\n"
        for i, sid in enumerate(SITES)
    )
    sources = "".join(
        f"  - {{id: {src}, type: filedrop, path: {src}, settle: 0}}\n" for src in SOURCES
    )
    return (
        f"version: 1\nsites:\n{sites}sources:\n{sources}"
        f"store:\n  url: {store_url}\n"
        f"instance:\n  index: {index}\n  count: {count}\n"
    )


def readings(until: datetime) -> pd.DataFrame:
    """Three hours of a cooling, saturating night at every site (invented values)."""
    rows = []
    for i, sid in enumerate(SITES):
        for k in range(18, -1, -1):
            t = until - timedelta(minutes=10 * k)
            temp = 4.0 - 0.1 * (18 - k) - 0.05 * i
            rows.append(
                {
                    "site": sid,
                    "time": t,
                    "kind": "obs",
                    "temp_c": temp,
                    "dewpoint_c": temp - 0.2,
                    "wind_ms": 0.5,
                    "source": "test",
                }
            )
    frame = pd.DataFrame(rows).reindex(columns=CANONICAL_COLUMNS)
    frame["time"] = pd.to_datetime(frame["time"], utc=True).astype("datetime64[ns, UTC]")
    for name in CANONICAL_COLUMNS:
        if name not in ("site", "time", "kind", "weather", "source"):
            frame[name] = frame[name].astype("float64")
    return frame


@pytest.fixture
def pair(postgres: Any, tmp_path: Path) -> Iterator[tuple[Service, Service, Path]]:
    url = postgres.new_database()
    services = []
    for index in (0, 1):
        folder = tmp_path / f"instance-{index}"
        folder.mkdir()
        for src in SOURCES:
            (folder / src).mkdir()
        path = folder / "fogwatch.yaml"
        path.write_text(config_text(index, 2, url), encoding="utf-8")
        services.append(Service(path))
    services[0].store.add_observations(readings(AT))
    try:
        yield services[0], services[1], tmp_path
    finally:
        for service in services:
            service.close()


def test_two_instances_share_the_sites_none_twice_none_missed(pair: Any) -> None:
    first, second, _ = pair
    one, two = first.poll_and_assess(AT), second.poll_and_assess(AT)
    ids_one = [a.site.id for a in one.assessments]
    ids_two = [a.site.id for a in two.assessments]
    assert ids_one and ids_two, "each instance takes a share"
    assert not set(ids_one) & set(ids_two), "no site evaluated twice"
    assert sorted(ids_one + ids_two) == sorted(SITES), "and none missed"
    # each instance's window holds only its own sites' rows
    assert set(first._observations(AT)["site"].unique()) == set(ids_one)
    # every site's snapshot is in the shared store once, written by the one that took it
    snapshots = first.outbox.snapshots()
    assert sorted(snapshots) == sorted(SITES)
    # the next cycles: each instance keeps to its share, and leaves the other's states be
    later = AT + timedelta(minutes=10)
    first.store.add_observations(readings(later))
    states_before = {k: v for k, v in first.outbox.states().items() if k[0] in ids_two}
    again = first.poll_and_assess(later)
    assert [a.site.id for a in again.assessments] == ids_one
    assert {k: v for k, v in first.outbox.states().items() if k[0] in ids_two} == states_before


def test_the_sources_are_shared_too(pair: Any) -> None:
    from apscheduler.schedulers.background import BackgroundScheduler

    from notifier.service.scheduler import build_scheduler

    polled = []
    for service in pair[:2]:
        sched = BackgroundScheduler(timezone="UTC")
        build_scheduler(service, sched)
        polled.append({j.id.removeprefix("poll:") for j in sched.get_jobs() if j.id[:5] == "poll:"})
        assert {s.id for s in service._built_sources()} == polled[-1]
    assert not polled[0] & polled[1] and polled[0] | polled[1] == set(SOURCES)


def test_the_share_survives_a_restart_and_another_hash_seed(pair: Any) -> None:
    first, _, _ = pair
    mine = [s.id for s in first.sites]
    restarted = Service(first.config_path)
    try:
        assert [s.id for s in restarted.sites] == mine  # a restart
    finally:
        restarted.close()
    # another interpreter with another string-hash salt computes the same shares
    code = (
        "from notifier.core.partition import instance_of;"
        f"print(' '.join(str(instance_of(s, 2)) for s in {SITES!r}))"
    )
    for seed in ("1", "4242"):
        out = subprocess.run(
            [sys.executable, "-c", code],
            env={"PYTHONHASHSEED": seed, "PYTHONPATH": str(Path(__file__).parents[2])},
            capture_output=True,
            text=True,
            check=True,
        ).stdout.split()
        assert [SITES[i] for i, k in enumerate(out) if k == "0"] == mine


def test_one_leader_and_the_other_takes_over_when_its_connection_ends(pair: Any) -> None:
    first, second, _ = pair
    assert first.leads() and not second.leads(), "one leader"
    assert first.leads() and not second.leads(), "and it stays so"
    # the leader's connection ends (a crash, a dropped network): the server ends the
    # session, and with it the advisory lock
    with first.store.engine.connect() as conn:
        (pid,) = conn.exec_driver_sql(
            "SELECT pid FROM pg_locks WHERE locktype = 'advisory' AND granted"
        ).scalars()  # the one session holding the lead
        # pg_terminate_backend signals the backend and returns; the lock goes when the
        # backend has exited (PostgreSQL docs, server signalling functions): wait for it
        assert conn.exec_driver_sql(f"SELECT pg_terminate_backend({int(pid)})").scalar()
        deadline = time.monotonic() + 10.0
        while (
            time.monotonic() < deadline
            and conn.exec_driver_sql(
                "SELECT count(*) FROM pg_locks WHERE locktype = 'advisory' AND granted"
            ).scalar()
        ):
            time.sleep(0.05)
    assert second.leads(), "the other takes over"
    assert not first.leads(), "and the old leader, asking again, no longer leads"
    # a leader that stops gives the lead up at once
    second.leadership.release()
    assert first.leads()


def test_only_the_leader_runs_outlooks_and_housekeeping(pair: Any, monkeypatch: Any) -> None:
    from apscheduler.schedulers.background import BackgroundScheduler

    from notifier.service.scheduler import build_scheduler

    first, second, _ = pair
    assert first.leads()
    ran: list[str] = []
    for name, service in (("first", first), ("second", second)):
        monkeypatch.setattr(service, "housekeeping", lambda now, n=name: ran.append(n))
        monkeypatch.setattr(service, "outlook", lambda now, ids, n=name: ran.append(n))
        sched = BackgroundScheduler(timezone="UTC")
        build_scheduler(service, sched, clock=lambda: AT)
        for job in sched.get_jobs():
            if job.id == "housekeeping" or job.id.startswith("outlook:"):
                job.func()
    assert ran == ["first", "first"]


def test_the_leaders_outlook_covers_the_other_instances_sites(pair: Any) -> None:
    first, second, _ = pair
    first.poll_and_assess(AT)
    second.poll_and_assess(AT)
    first.outlook(AT, SITES)
    sites = {e["site"] for e in _events(first) if e["type"] == "outlook"}
    assert sites == set(SITES)


def _events(service: Service) -> list[dict[str, Any]]:
    with service.store.engine.connect() as conn:
        rows = conn.exec_driver_sql("SELECT site, type FROM events").all()
    return [{"site": r[0], "type": r[1]} for r in rows]


def test_sqlite_serves_one_instance_and_check_says_so(tmp_path: Path) -> None:
    path = tmp_path / "fogwatch.yaml"
    path.write_text(config_text(0, 2, f"sqlite:///{tmp_path / 'fw.sqlite'}"), encoding="utf-8")
    with pytest.raises(
        ConfigError,
        match=r"fogwatch.yaml:\d+: instance.count: count 2 needs "
        r"a PostgreSQL store",
    ):
        load_config(path)
    path.write_text(config_text(0, 1, f"sqlite:///{tmp_path / 'fw.sqlite'}"), encoding="utf-8")
    assert load_config(path).instance.count == 1


@pytest.mark.parametrize(
    ("index", "count", "message"),
    [
        (2, 2, "index must be below count"),
        (0, 0, "greater than or equal to 1"),
        (-1, 2, "greater than or equal to 0"),
    ],
    ids=["index-past-count", "no-instances", "negative-index"],
)
def test_a_bad_instance_is_refused(tmp_path: Path, index: int, count: int, message: str) -> None:
    path = tmp_path / "fogwatch.yaml"
    path.write_text(config_text(index, count, "postgresql+psycopg://x@127.0.0.1/x"), "utf-8")
    with pytest.raises(ConfigError, match=message):
        load_config(path)


def test_every_site_has_exactly_one_instance_for_any_count() -> None:
    ids = [f"zz-site-{i}" for i in range(500)]
    for count in (1, 2, 3, 7):
        shares = [share([_Id(i) for i in ids], k, count) for k in range(count)]
        taken = [s.id for part in shares for s in part]
        assert sorted(taken) == sorted(ids)
        # a fair split (binomial: each share within 5 sigma of n/count)
        n, p = len(ids), 1 / count
        assert all(abs(len(part) - n * p) <= 5 * (n * p * (1 - p)) ** 0.5 + 1e-9 for part in shares)
        assert all(instance_of(i, count) in range(count) for i in ids)


class _Id:
    def __init__(self, id: str):  # noqa: A002
        self.id = id
