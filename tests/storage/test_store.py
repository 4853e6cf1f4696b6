"""The store: migrations once each, upsert newest-wins, the window across a restart."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
import sqlalchemy as sa

from notifier.core.columns import CANONICAL_COLUMNS
from notifier.core.config import Site
from notifier.core.errors import StoreError
from notifier.core.observations import normalize
from notifier.storage import migrations as migrations_module
from notifier.storage import store as store_module
from notifier.storage.migrations import MIGRATIONS, Migration
from notifier.storage.store import Store
from tests.conftest import SITES

NOW = datetime(2024, 1, 12, 7, 0, tzinfo=UTC)
SITE_MAP = {s["id"]: Site(**s) for s in SITES}


def table(records: list[dict[str, Any]], source_id: str = "test") -> pd.DataFrame:
    frame, rejections, _ = normalize(
        records, sites=SITE_MAP, now=NOW, origin="t", source_id=source_id
    )
    assert rejections == []
    return frame


def obs(hour: int, temp_c: float = 2.0, site: str = "zz-vale", **extra: Any) -> dict[str, Any]:
    record = {
        "site": site,
        "time": f"2024-01-12T{hour:02d}:00:00Z",
        "temp_c": temp_c,
        "dewpoint_c": temp_c - 1.0,
    }
    record.update(extra)
    return record


@pytest.fixture
def db(any_store: Store) -> Store:
    return any_store  # SQLite and PostgreSQL (tests/conftest.py)


def test_public_names():
    assert set(store_module.__all__) == {"Store"}
    assert set(migrations_module.__all__) == {"MIGRATIONS", "Migration", "metadata"}


def test_round_trip_keeps_the_canonical_table(db):
    frame = table([obs(1, wind_ms=2.5, weather="FZFG"), obs(2, site="zz-quay", cloud_pct=75.0)])
    assert db.add_observations(frame) == 2
    back = db.window(None, NOW - timedelta(hours=12), NOW)
    assert list(back.columns) == CANONICAL_COLUMNS
    assert str(back["time"].dtype) == "datetime64[ns, UTC]"
    expected = frame.sort_values(["site", "time"]).reset_index(drop=True)
    pd.testing.assert_frame_equal(back, expected, check_dtype=False)
    assert back["weather"].tolist() == [None, "FZFG"]


def test_upsert_newest_input_wins_whole_row(db):
    db.add_observations(table([obs(3, temp_c=2.0, wind_ms=4.0)], source_id="first"))
    db.add_observations(table([obs(3, temp_c=1.5)], source_id="second"))
    back = db.window(["zz-vale"], NOW - timedelta(hours=6), NOW)
    assert len(back) == 1
    assert back.loc[0, "temp_c"] == 1.5
    assert back.loc[0, "source"] == "second"
    assert pd.isna(back.loc[0, "wind_ms"]), "a replaced row keeps nothing of the old one"


def test_obs_and_forecast_for_the_same_time_are_both_kept(db):
    db.add_observations(table([obs(3, kind="obs"), obs(3, temp_c=1.0, kind="forecast")]))
    assert len(db.window(None, NOW - timedelta(hours=6), NOW)) == 2
    only = db.window(None, NOW - timedelta(hours=6), NOW, kinds=("forecast",))
    assert only["kind"].tolist() == ["forecast"]


def test_window_bounds_are_inclusive_and_sorted_by_site_then_time(db):
    db.add_observations(table([obs(h, site=s) for h in (5, 1, 3) for s in ("zz-vale", "zz-quay")]))
    start = datetime(2024, 1, 12, 1, tzinfo=UTC)
    end = datetime(2024, 1, 12, 3, tzinfo=UTC)
    back = db.window(None, start, end)
    assert back["site"].tolist() == ["zz-quay", "zz-quay", "zz-vale", "zz-vale"]
    assert [t.hour for t in back["time"]] == [1, 3, 1, 3]
    assert db.window(["zz-nowhere"], start, end).empty
    assert list(db.window([], start, end).columns) == CANONICAL_COLUMNS


def test_each_write_batch_is_numbered_and_window_after_reads_only_later_ones(db):
    assert db.last_batch() == 0
    db.add_observations(table([obs(h) for h in (1, 2)]))
    first = db.last_batch()
    db.add_observations(table([obs(3), obs(2, temp_c=0.5)]))  # one new, one replacing
    assert db.last_batch() == first + 1
    start = NOW - timedelta(hours=12)
    later = db.window(None, start, None, after=first)
    assert [(t.hour, v) for t, v in zip(later["time"], later["temp_c"], strict=True)] == [
        (2, 0.5),
        (3, 2.0),
    ]
    assert db.window(None, start, None, after=db.last_batch()).empty
    assert db.add_observations(table([])[:0]) == 0
    assert db.last_batch() == first + 1, "an empty write is no batch"


def test_window_without_an_end_and_with_categorical_text(db):
    db.add_observations(table([obs(h, weather="BR" if h % 2 else None) for h in range(1, 5)]))
    db.add_observations(table([obs(30 - 24, kind="forecast")]))  # 06Z, after NOW's window
    start = NOW - timedelta(hours=12)
    plain = db.window(None, start, None)
    assert len(plain) == 5 and len(db.window(None, start, NOW - timedelta(hours=2))) == 4
    cats = db.window(None, start, None, categorical=True)
    assert all(isinstance(cats[c].dtype, pd.CategoricalDtype) for c in ("site", "kind"))
    # the same table apart from the dtype of the text columns
    as_objects = cats.astype({c: object for c in ("site", "kind", "weather", "source")})
    as_objects = as_objects.where(as_objects.notna(), None)
    pd.testing.assert_frame_equal(as_objects, plain)


def test_ceiling_and_precipitation_round_trip_and_frames_without_them_are_taken(db):
    # METAR OVC004 is a 400 ft ceiling = 121.92 m (docs/references.md [FMH-1]); the frame
    # of a caller that predates the columns lacks them and is stored with NULL (unknown)
    db.add_observations(table([obs(1, ceiling_ft=400.0, precip_in=0.12)]))
    older = table([obs(2, site="zz-quay")]).drop(columns=["ceiling_m", "precip_mm"])
    assert db.add_observations(older) == 1
    back = db.window(None, NOW - timedelta(hours=12), NOW).set_index("site")
    assert back.loc["zz-vale", "ceiling_m"] == pytest.approx(121.92)
    assert back.loc["zz-vale", "precip_mm"] == pytest.approx(3.048)  # 0.12 in × 25.4 mm
    assert pd.isna(back.loc["zz-quay", "ceiling_m"]) and pd.isna(back.loc["zz-quay", "precip_mm"])


def test_a_store_from_before_ceilings_gains_the_columns_and_keeps_its_rows(
    tmp_path: Path, monkeypatch
):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"
    monkeypatch.setattr(store_module, "MIGRATIONS", MIGRATIONS[:8])
    with Store(url) as old:
        with old.atomic() as conn:  # a version-8 store written by the earlier code
            conn.exec_driver_sql(
                "INSERT INTO observations (site, time, kind, temp_c, dewpoint_c, received_at) "
                "VALUES ('zz-vale', 1705035600, 'obs', 2.0, 1.0, 1705035600)"
            )
    monkeypatch.setattr(store_module, "MIGRATIONS", MIGRATIONS)
    with Store(url) as db:
        assert db.applied_migrations()[8] == "0009_ceiling_precip"
        back = db.window(None, NOW - timedelta(hours=12), None)
        assert len(back) == 1 and pd.isna(back.loc[0, "ceiling_m"])


def test_rows_from_before_the_batch_numbers_count_as_batch_zero(tmp_path: Path, monkeypatch):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"
    monkeypatch.setattr(store_module, "MIGRATIONS", MIGRATIONS[:2])
    with Store(url) as old:
        with old.atomic() as conn:  # a version-2 store written by the earlier code
            conn.exec_driver_sql(
                "INSERT INTO observations (site, time, kind, temp_c, dewpoint_c, received_at) "
                "VALUES ('zz-vale', 1705035600, 'obs', 2.0, 1.0, 1705035600)"
            )
    monkeypatch.setattr(store_module, "MIGRATIONS", MIGRATIONS)
    with Store(url) as db:
        assert db.applied_migrations()[2] == "0003_observation_batches"
        start = NOW - timedelta(hours=12)
        assert len(db.window(None, start, None)) == 1
        assert db.window(None, start, None, after=0).empty
        db.add_observations(table([obs(2)]))
        assert len(db.window(None, start, None, after=0)) == 1


def test_values_keep_double_precision_and_times_go_past_2038(db):
    # PostgreSQL's REAL and INTEGER are 4 bytes (migration 0004 widens them); SQLite's 8
    frame = table([obs(3, temp_c=2.345678901234)])
    frame["time"] = pd.Timestamp("2040-01-12T03:00:00Z")  # past 2**31 s from the epoch
    db.add_observations(frame)
    back = db.window(None, datetime(2040, 1, 1, tzinfo=UTC), None)
    assert back["temp_c"].tolist() == [2.345678901234]
    assert back["time"].tolist() == [pd.Timestamp("2040-01-12T03:00:00Z")]


def test_trim_deletes_older_rows_and_says_how_many(db):
    db.add_observations(table([obs(h) for h in range(6)]))
    assert db.trim_observations(datetime(2024, 1, 12, 2, tzinfo=UTC)) == 2
    left = db.window(None, NOW - timedelta(days=1), NOW)
    assert [t.hour for t in left["time"]] == [2, 3, 4, 5]


def test_window_survives_a_restart(tmp_path: Path):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"
    frame = table([obs(h, temp_c=3.0 - h / 2) for h in range(6)])
    with Store(url) as first:
        first.add_observations(frame)
        before = first.window(["zz-vale"], NOW - timedelta(hours=12), NOW)
    with Store(url) as second:
        after = second.window(["zz-vale"], NOW - timedelta(hours=12), NOW)
    assert len(after) == 6
    pd.testing.assert_frame_equal(before, after)


def test_sqlite_connections_use_wal_and_a_busy_timeout(tmp_path: Path):
    with Store(f"sqlite:///{tmp_path / 'fw.sqlite'}") as db:
        with db.engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
            assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == 10_000


def test_migrations_are_applied_once_and_recorded(tmp_path: Path):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"
    with Store(url) as db:
        assert db.applied_migrations() == [m.name for m in MIGRATIONS]
        assert db.schema_version == len(MIGRATIONS)
    with Store(url) as db:  # reopening applies nothing again
        assert db.applied_migrations() == [m.name for m in MIGRATIONS]


def test_an_appended_migration_runs_once_on_the_next_open(tmp_path: Path, monkeypatch):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"
    Store(url).close()
    runs = []

    def add_notes(conn: sa.Connection) -> None:
        runs.append(1)
        conn.exec_driver_sql("CREATE TABLE notes (id INTEGER PRIMARY KEY, text TEXT)")

    monkeypatch.setattr(
        store_module, "MIGRATIONS", [*MIGRATIONS, Migration("0099_notes", add_notes)]
    )
    with Store(url) as db:
        assert db.applied_migrations()[-1] == "0099_notes"
    with Store(url) as db:
        assert db.schema_version == len(MIGRATIONS) + 1
    assert runs == [1]


def test_a_failing_migration_leaves_nothing_behind(tmp_path: Path, monkeypatch):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"

    def half_done(conn: sa.Connection) -> None:
        conn.exec_driver_sql("CREATE TABLE half (id INTEGER)")
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(
        store_module, "MIGRATIONS", [*MIGRATIONS, Migration("0099_half", half_done)]
    )
    with pytest.raises(StoreError, match="store migration 0099_half failed: disk on fire"):
        Store(url)
    monkeypatch.setattr(store_module, "MIGRATIONS", MIGRATIONS)
    with Store(url) as db:
        assert db.applied_migrations() == [m.name for m in MIGRATIONS]
        with db.engine.connect() as conn:
            names = sa.inspect(conn).get_table_names()
        assert "half" not in names, "the DDL must roll back with its migration"


def test_a_reordered_migration_is_refused(tmp_path: Path, monkeypatch):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"
    Store(url).close()
    renamed = [Migration("0001_something_else", MIGRATIONS[0].apply), *MIGRATIONS[1:]]
    monkeypatch.setattr(store_module, "MIGRATIONS", renamed)
    with pytest.raises(StoreError, match="was a migration reordered"):
        Store(url)


def test_atomic_rolls_back_every_write_on_error(db):
    with pytest.raises(ZeroDivisionError):
        with db.atomic() as conn:
            db.add_observations(table([obs(1)]), conn=conn)
            db.mark_file("ab" * 32, "a.csv", "processed", "drop", NOW, conn=conn)
            1 / 0  # noqa: B018
    assert db.window(None, NOW - timedelta(days=1), NOW).empty
    assert not db.file_seen("ab" * 32)


def test_record_poll_counts_and_keeps_last_success_and_error(db):
    db.record_poll("feed", NOW, True, 10, 1, None)
    later = NOW + timedelta(minutes=10)
    db.record_poll("feed", later, False, 0, 0, "HTTP 503 Service Unavailable")
    db.record_poll("drop", NOW, True, 3, 0, None)
    health = {h["source_id"]: h for h in db.source_health()}
    assert health["feed"] == {
        "source_id": "feed",
        "last_success": NOW,
        "last_error": "HTTP 503 Service Unavailable",
        "last_error_at": later,
        "rows_ok": 10,
        "rows_rejected": 1,
        "polls": 2,
        "failures": 1,
    }
    assert [h["source_id"] for h in db.source_health()] == ["drop", "feed"]


def test_seen_files_first_record_wins(db):
    sha = "0f" * 32
    assert not db.file_seen(sha)
    db.mark_file(sha, "night.csv", "partial", "drop", NOW)
    db.mark_file(sha, "copy.csv", "processed", "drop", NOW + timedelta(hours=1))
    assert db.file_seen(sha)
    seen = db.seen_file(sha)
    assert seen is not None
    assert (seen["name"], seen["status"], seen["taken_at"]) == ("night.csv", "partial", NOW)


def test_an_unopenable_url_is_a_store_error(tmp_path: Path):
    with pytest.raises(StoreError, match="cannot open store"):
        Store(f"sqlite:///{tmp_path / 'missing-dir' / 'fw.sqlite'}")


def test_a_hundred_thousand_csv_rows_are_parsed_and_stored_quickly(tmp_path):
    # Guards the vectorised path: a per-row Python loop would be an order slower.
    import time

    import numpy as np

    from notifier.ingest.file_formats import parse_file

    n = 100_000
    rng = np.random.default_rng(7)
    start = pd.Timestamp("2024-01-01T00:00:00Z")
    times = (start + pd.to_timedelta(np.arange(n) * 30, unit="s")).strftime("%Y-%m-%dT%H:%M:%SZ")
    csv = pd.DataFrame(
        {
            "site": rng.choice(["zz-vale", "zz-quay"], n),
            "time": times,
            "temp_c": rng.uniform(-5, 10, n).round(1),
            "rh_pct": rng.uniform(60, 100, n).round(0),
            "wind_kt": rng.uniform(0, 12, n).round(0),
        }
    ).to_csv(index=False)
    began = time.perf_counter()
    parsed = parse_file(
        csv.encode(),
        "csv",
        origin="big.csv",
        sites=SITE_MAP,
        now=(start + pd.Timedelta(days=40)).to_pydatetime(),
        source_id="bulk",
    )
    with Store(f"sqlite:///{tmp_path / 'fw.sqlite'}") as db:
        assert db.add_observations(parsed.frame) == n
    elapsed = time.perf_counter() - began
    assert parsed.rejections == []
    assert elapsed < 4.0, f"{n} rows took {elapsed:.1f} s"


def test_an_empty_categorical_read_is_categorical_too(db):
    empty = db.window(None, NOW, None, categorical=True)
    assert empty.empty and list(empty.columns) == CANONICAL_COLUMNS
    assert all(isinstance(empty[c].dtype, pd.CategoricalDtype) for c in ("site", "kind"))


def test_a_store_upgraded_by_a_newer_version_is_refused(tmp_path: Path):
    url = f"sqlite:///{tmp_path / 'fw.sqlite'}"
    with Store(url) as db:
        with db.atomic() as conn:  # as a later fogwatch with one more migration would leave it
            conn.execute(
                migrations_module.schema_migrations.insert().values(
                    version=len(MIGRATIONS) + 1, name="0099_from_the_future", applied_at="x"
                )
            )
    with pytest.raises(StoreError, match="upgraded by a newer fogwatch.*0099_from_the_future"):
        Store(url)


def test_too_old_a_sqlite_is_refused_by_name(monkeypatch):
    import sqlite3

    monkeypatch.setattr(sqlite3, "sqlite_version_info", (3, 31, 1))
    monkeypatch.setattr(sqlite3, "sqlite_version", "3.31.1")
    with pytest.raises(
        StoreError, match=r"SQLite 3\.35 or newer is needed; this Python has 3\.31\.1"
    ):
        Store.memory()
