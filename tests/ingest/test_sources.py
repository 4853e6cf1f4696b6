"""Building and polling every source; health; read_files; the issue's done-when scenario."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from collections.abc import Callable, Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pandas as pd
import pytest
import requests

from notifier.core.columns import CANONICAL_COLUMNS
from notifier.core.config import Config
from notifier.ingest import poll as sources
from notifier.ingest.filedrop import FileDrop
from notifier.ingest.http_json import HttpJsonFeed
from notifier.ingest.poll import (
    ObservationSource,
    PollResult,
    build_sources,
    health_report,
    poll_all,
    poll_sources,
    read_files,
)
from notifier.storage.store import Store
from tests.conftest import LoopbackJson

DATA = Path(__file__).resolve().parent.parent / "data" / "ingest"
NOW = datetime(2024, 1, 12, 7, 0, tzinfo=UTC)
STATIONS = {"ZZQA": "zz-vale", "ZZQB": "zz-quay"}
QUAY_FIELDS = {
    "time": "at",
    "temp_f": "air.t_f",
    "dewpoint_f": "air.td_f",
    "wind_kt": "wind.kt",
}


@pytest.fixture
def session() -> Iterator[requests.Session]:
    with requests.Session() as s:
        yield s


def settle_all(folder: Path) -> None:
    for path in folder.iterdir():
        os.utime(path, (NOW.timestamp() - 60, NOW.timestamp() - 60))


def test_public_names():
    assert set(sources.__all__) == {
        "ObservationSource",
        "PollResult",
        "build_sources",
        "health_report",
        "poll_all",
        "poll_sources",
        "read_files",
    }


def test_build_sources_makes_one_adapter_per_source(make_config, session):
    config = make_config(
        sources=[
            {"id": "drop", "type": "filedrop", "path": "incoming"},
            {"id": "feed", "type": "http_json", "url": "http://127.0.0.1:9/obs"},
        ]
    )
    with Store.memory() as store:
        built = build_sources(config, store, session)
    assert [type(s) for s in built] == [FileDrop, HttpJsonFeed]
    assert [s.id for s in built] == ["drop", "feed"]
    assert all(isinstance(s, ObservationSource) for s in built)


class Exploding:
    id = "exploding"

    def poll(self, now: datetime) -> PollResult:
        raise KeyError("a bug")


class Fixed:
    id = "fixed"

    def __init__(self, frame: pd.DataFrame):
        self.frame = frame

    def poll(self, now: datetime) -> PollResult:
        return PollResult(source_id=self.id, frame=self.frame)


def test_a_failing_source_never_stops_the_others(make_config):
    config = make_config()
    frame, _, _ = read_files([DATA / "vale_night.csv"], config, NOW)
    with Store.memory() as store:
        results = poll_sources([Exploding(), Fixed(frame)], store, NOW)
        assert [r.ok for r in results] == [False, True]
        assert results[0].error == "internal error: KeyError: 'a bug'"
        assert len(store.window(None, NOW - timedelta(days=1), NOW)) == 8
        health = {h["source_id"]: h for h in store.source_health()}
    assert health["exploding"]["failures"] == 1 and health["exploding"]["last_success"] is None
    assert health["fixed"]["rows_ok"] == 8 and health["fixed"]["last_success"] == NOW


def test_read_files_parses_by_extension_and_moves_nothing(make_config, tmp_path: Path):
    folder = tmp_path / "copies"
    folder.mkdir()
    names = ["vale_night.csv", "bulletin.txt", "truncated.json", "quay.ndjson"]
    for name in names:
        shutil.copy(DATA / name, folder / name)
    config = make_config(
        sources=[{"id": "drop", "type": "filedrop", "path": "copies", "stations": STATIONS}]
    )
    frame, rejections, _ = read_files([folder / n for n in names], config, NOW)
    assert list(frame.columns) == CANONICAL_COLUMNS
    assert sorted(p.name for p in folder.iterdir()) == sorted(names)
    assert set(frame["site"]) == {"zz-vale", "zz-quay"}
    assert frame.duplicated(subset=["site", "time", "kind"]).sum() == 0
    reasons = [str(r) for r in rejections]
    assert any(r.startswith(f"{folder / 'truncated.json'}: not valid JSON") for r in reasons)
    assert any("NIL report" in r for r in reasons)


def test_health_report_is_a_plain_table(make_config, session, loopback_json: LoopbackJson):
    loopback_json.json("/obs", {"nope": []}, status=503)
    config = make_config(
        sources=[
            {"id": "drop", "type": "filedrop", "path": "incoming"},
            {"id": "feed", "type": "http_json", "url": loopback_json.url("/obs"), "retries": 0},
            {"id": "spare", "type": "filedrop", "path": "spare"},
        ]
    )
    (config.base_dir / "incoming").mkdir()
    with Store.memory() as store:
        poll_sources(build_sources(config, store, session)[:2], store, NOW)
        store.record_poll("retired", NOW - timedelta(days=3), True, 5, 0, None)
        report = health_report(store, config)
    lines = report.splitlines()
    assert lines[0].split() == [
        "source", "type", "last", "success", "rows", "ok", "rejected", "polls", "failures",
        "last", "error",
    ]  # fmt: skip
    assert lines[1].split() == ["drop", "filedrop", "2024-01-12", "07:00Z", "0", "0", "1", "0"]
    assert lines[2].split()[:7] == ["feed", "http_json", "never", "0", "0", "1", "1"]
    assert lines[2].endswith(
        f"2024-01-12 07:00Z: {loopback_json.url('/obs')}: HTTP 503 Service Unavailable"
    )
    assert lines[3].split() == ["spare", "filedrop", "never", "polled", "0", "0", "0", "0"]
    assert lines[4].split()[:4] == ["retired", "(not", "in", "config)"]


def test_done_when_mixed_folder_and_live_feed_land_explained_and_survive_restart(
    make_config: Callable[..., Config], session, loopback_json: LoopbackJson, tmp_path: Path
):
    # A live loopback feed for the quay, in °F and knots, nested.
    loopback_json.json("/quay", json.loads((DATA / "quay_feed.json").read_text()))
    # A folder of mixed files: good, half-bad, garbage, °F, METAR, still uploading.
    incoming = tmp_path / "incoming"
    incoming.mkdir()
    for name in ["vale_night.csv", "half_bad.csv", "truncated.json", "quay_night_f.csv",
                 "bulletin.txt", "quay.ndjson", "vale_forecast.json"]:  # fmt: skip
        shutil.copy(DATA / name, incoming / name)
    (incoming / "garbage.csv").write_bytes(bytes(range(256)) * 8)
    (incoming / "late.csv.part").write_text("site,time\n")
    settle_all(incoming)
    dropped = {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in incoming.iterdir()}

    config = make_config(
        sources=[
            {"id": "drop", "type": "filedrop", "path": "incoming", "stations": STATIONS},
            {
                "id": "quay-feed",
                "type": "http_json",
                "url": loopback_json.url("/quay"),
                "records": "data.readings",
                "fields": QUAY_FIELDS,
                "sites": ["zz-quay"],
            },
        ],  # fmt: skip
        store={"url": "sqlite:///fogwatch.sqlite"},
    )
    with Store(config.store_url) as store:
        results = poll_all(config, store, NOW, session)
        window = store.window(None, NOW - timedelta(hours=48), NOW + timedelta(hours=12))
        report = health_report(store, config)
    drop, feed = results
    assert drop.ok and feed.ok, (drop.error, feed.error)

    # Nothing lost: every settled file moved (never deleted), the upload left alone.
    kept = {
        p.name: hashlib.sha256(p.read_bytes()).hexdigest()
        for p in incoming.rglob("*")
        if p.is_file() and not p.name.endswith(".why.txt")
    }
    assert sorted(kept.values()) == sorted(dropped.values())
    assert (incoming / "late.csv.part").exists()
    statuses = dict(drop.files)
    assert statuses == {
        "bulletin.txt": "partial",
        "garbage.csv": "rejected",
        "half_bad.csv": "partial",
        "quay.ndjson": "partial",
        "quay_night_f.csv": "processed",
        "truncated.json": "rejected",
        "vale_forecast.json": "partial",
        "vale_night.csv": "processed",
    }
    # Every rejection explained, beside its file.
    for name, status in statuses.items():
        if status == "processed":
            continue
        folder = "rejected" if status == "rejected" else "processed"
        why = (incoming / folder / f"{name}.why.txt").read_text(encoding="utf-8")
        for rejection in (r for r in drop.rejections if r.origin == name):
            assert rejection.reason in why
    assert all(r.reason for r in drop.rejections)

    # Both sources land in the one table, in canonical units.
    assert set(window["source"]) == {"drop", "quay-feed"}
    from_feed = window[window["source"] == "quay-feed"]
    assert len(from_feed) == 3
    assert from_feed["temp_c"].iloc[0] == pytest.approx((35.6 - 32) * 5 / 9)
    assert set(window["kind"]) == {"obs", "forecast"}
    assert "quay-feed" in report and "drop" in report

    # A restart keeps the window.
    with Store(config.store_url) as reopened:
        again = reopened.window(None, NOW - timedelta(hours=48), NOW + timedelta(hours=12))
        assert reopened.file_seen(dropped["vale_night.csv"])
    pd.testing.assert_frame_equal(window, again)

    # And the next poll takes nothing twice.
    with Store(config.store_url) as store:
        second = poll_all(config, store, NOW + timedelta(minutes=10), session)
        assert second[0].files == []
        assert len(store.window(None, NOW - timedelta(hours=48), NOW + timedelta(hours=12))) == len(
            window
        )
