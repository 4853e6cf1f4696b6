"""File drop: formats, settle time, taken once, moved never deleted, every problem listed."""

from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from notifier.core.config import Config, FileDropSource, Site
from notifier.ingest import filedrop
from notifier.ingest.file_formats import parse_file
from notifier.ingest.filedrop import FileDrop
from notifier.storage.store import Store
from tests.conftest import SITES

DATA = Path(__file__).resolve().parent.parent / "data" / "ingest"
NOW = datetime(2024, 1, 12, 7, 0, tzinfo=UTC)
STATIONS = {"ZZQA": "zz-vale", "ZZQB": "zz-quay"}


def put(folder: Path, name: str, content: bytes | str, age_s: float = 60.0) -> Path:
    """Write a file whose last change was ``age_s`` before NOW."""
    path = folder / name
    data = content.encode() if isinstance(content, str) else content
    path.write_bytes(data)
    os.utime(path, (NOW.timestamp() - age_s, NOW.timestamp() - age_s))
    return path


def fixture(folder: Path, name: str, as_name: str | None = None) -> Path:
    return put(folder, as_name or name, (DATA / name).read_bytes())


class Drop:
    def __init__(self, config: Config, store: Store):
        source = config.sources[0]
        assert isinstance(source, FileDropSource)
        self.folder = source.path
        self.folder.mkdir(parents=True, exist_ok=True)
        self.store = store
        self.source = FileDrop(source, sites={s.id: s for s in config.sites}, store=store)

    def poll(self, now: datetime = NOW):
        return self.source.poll(now)

    def why(self, where: str, name: str) -> str:
        return (self.folder / where / (name + ".why.txt")).read_text(encoding="utf-8")

    def rows(self) -> int:
        return len(self.store.window(None, NOW - timedelta(days=2), NOW + timedelta(days=2)))


@pytest.fixture
def drop(make_config: Callable[..., Config]) -> Drop:
    config = make_config(
        sources=[{"id": "drop", "type": "filedrop", "path": "incoming", "stations": STATIONS}]
    )
    with Store.memory() as store:
        yield Drop(config, store)


def test_a_good_csv_is_taken_and_moved_to_processed(drop: Drop):
    fixture(drop.folder, "vale_night.csv")
    result = drop.poll()
    assert result.ok and result.error is None
    assert result.files == [("vale_night.csv", "processed")]
    assert result.stored and len(result.frame) == 8 and result.rejections == []
    assert drop.rows() == 8
    assert (drop.folder / "processed" / "vale_night.csv").exists()
    assert not (drop.folder / "vale_night.csv").exists()
    assert not (drop.folder / "processed" / "vale_night.csv.why.txt").exists()


def test_a_half_bad_csv_goes_to_processed_with_its_bad_lines_listed(drop: Drop):
    fixture(drop.folder, "half_bad.csv")
    result = drop.poll()
    assert result.files == [("half_bad.csv", "partial")]
    assert len(result.frame) == 3 and drop.rows() == 3
    assert result.rows_rejected == 4
    why = drop.why("processed", "half_bad.csv").splitlines()
    assert why[:6] == [
        "half_bad.csv: partial",
        "3 rows taken; these were not:",
        "line 3, column temp_c: 99 °C is outside -80 to 60 °C",
        "line 5: expected 5 fields, saw 6",
        "line 6, column site: unknown site 'zz-nowhere' (known: zz-quay, zz-vale)",
        "line 8, column temp_c: not a number: 'cold'",
    ]
    assert "clipped to 100 % on lines 7" in why[-1]


def test_fahrenheit_and_knots_arrive_in_canonical_units(drop: Drop):
    fixture(drop.folder, "quay_night_f.csv")
    frame = drop.poll().frame
    first = frame.iloc[0]
    assert first["temp_c"] == pytest.approx(5.0)
    assert first["dewpoint_c"] == pytest.approx(3.0)
    assert first["wind_ms"] == pytest.approx(6 * 1852 / 3600)
    assert first["visibility_m"] == pytest.approx(8 * 1609.344)
    assert first["water_temp_c"] == pytest.approx(8.0)


def test_csv_line_numbers_count_quoted_newlines(drop: Drop):
    text = (
        "site,time,temp_c,dewpoint_c,weather\n"
        'zz-vale,2024-01-12T01:00:00Z,1.0,0.5,"BR\nnoted by hand"\n'
        'zz-vale,2024-01-12T02:00:00Z,75.0,0.5,""\n'
        "\n"
        '"zz-vale","2024-01-12T03:00:00Z","0.2","0.1","FG"\n'
        "zz-vale,2024-01-12T04:00:00Z,0.2\n"
    )
    put(drop.folder, "quoted.csv", text)
    result = drop.poll()
    assert len(result.frame) == 2
    assert [(r.line, r.column) for r in result.rejections] == [(4, "temp_c"), (7, None)]


def test_json_with_an_observations_key_and_record_lines(drop: Drop):
    fixture(drop.folder, "vale_forecast.json")
    result = drop.poll()
    assert result.files == [("vale_forecast.json", "partial")]
    assert set(result.frame["kind"]) == {"forecast"}
    assert [(r.line, r.column) for r in result.rejections] == [(6, "cloud_okta")]
    assert "line 6, column cloud_okta: 12 okta (150 %) is outside" in drop.why(
        "processed", "vale_forecast.json"
    )


def test_ndjson_takes_good_lines_and_lists_the_broken_one(drop: Drop):
    fixture(drop.folder, "quay.ndjson")
    result = drop.poll()
    assert len(result.frame) == 2
    assert [r.line for r in result.rejections] == [2]
    assert result.rejections[0].reason.startswith("not valid JSON: Expecting ',' delimiter")


def test_a_metar_bulletin_lands_with_its_nil_report_listed(drop: Drop):
    fixture(drop.folder, "bulletin.txt")
    result = drop.poll()
    assert result.files == [("bulletin.txt", "partial")]
    assert sorted(result.frame["site"]) == ["zz-quay", "zz-vale", "zz-vale", "zz-vale"]
    vale = result.frame[result.frame["site"] == "zz-vale"].sort_values("time")
    assert vale["weather"].tolist() == ["FG", "FZFG", "FZFG"]
    assert vale["visibility_m"].tolist() == [300.0, 200.0, 150.0]
    assert "line 8: NIL report" in drop.why("processed", "bulletin.txt")


@pytest.mark.parametrize(
    ("name", "content", "reason"),
    [
        ("blob.csv", bytes(range(256)) * 4, "file: binary data (NUL bytes), not text"),
        ("latin.csv", "site,time,temp_c\nzz-vale,2024,café\n".encode("latin-1"),
         "file: not UTF-8 text: invalid continuation byte at byte 33 (line 2)"),
        ("empty.json", b"  \n", "file: empty file"),
        ("notes.csv", "when,how\nlate,foggy\n", "file: line 1: no site column (and the source "
         "names no site); no time column; no temperature column (expected temp_c, temp_f or "
         "temp_k); no humidity column (expected dewpoint_c, dewpoint_f or rh_pct)"),
        ("shape.json", '{"readings": []}', 'file: expected a JSON array of records or '
         '{"observations": [...]}'),
        ("nothing.json", "[]", "file: no observation rows found"),
        ("photo.jpeg", b"\xff\xd8\xff\xe0 not really", "file: unknown file type (expected one "
         "of .csv, .json, .jsonl, .metar, .ndjson, .txt)"),
    ],
    ids=["binary", "encoding", "empty", "wrong-columns", "wrong-shape", "no-rows", "extension"],
)  # fmt: skip
def test_an_unreadable_file_is_rejected_with_the_reason(drop: Drop, name, content, reason):
    put(drop.folder, name, content)
    result = drop.poll()
    assert result.ok, "a rejected file is not a failed poll"
    assert result.files == [(name, "rejected")]
    assert (drop.folder / "rejected" / name).read_bytes() == (
        content if isinstance(content, bytes) else content.encode()
    )
    assert reason in drop.why("rejected", name).splitlines()


def test_truncated_json_is_rejected_with_the_parsers_position(drop: Drop):
    fixture(drop.folder, "truncated.json")
    drop.poll()
    why = drop.why("rejected", "truncated.json")
    assert "file: not valid JSON: Unterminated string starting at (line 2, column 54)" in why


def test_a_file_where_every_row_is_bad_is_rejected_listing_each(drop: Drop):
    text = "site,time,temp_c,rh_pct\nzz-vale,2024-01-12T01:00:00Z,95,50\nzz-x,soon,1,50\n"
    put(drop.folder, "bad.csv", text)
    result = drop.poll()
    assert result.files == [("bad.csv", "rejected")]
    why = drop.why("rejected", "bad.csv").splitlines()
    assert why[1] == "file: no row could be taken"
    assert why[2:] == [
        "line 2, column temp_c: 95 °C is outside -80 to 60 °C",
        "line 3, column site: unknown site 'zz-x' (known: zz-quay, zz-vale)",
        "line 3, column time: not an ISO 8601 time: 'soon' (expected e.g. 2024-01-05T03:00:00Z)",
    ]


def test_a_file_still_being_written_waits_for_the_settle_time(drop: Drop):
    put(drop.folder, "vale_night.csv", (DATA / "vale_night.csv").read_bytes(), age_s=2)
    assert drop.poll().files == []
    assert (drop.folder / "vale_night.csv").exists()
    assert drop.poll(NOW + timedelta(seconds=4)).files == [("vale_night.csv", "processed")]


def test_part_and_tmp_files_wait_until_renamed(drop: Drop):
    part = fixture(drop.folder, "vale_night.csv", "vale_night.csv.part")
    fixture(drop.folder, "quay_night_f.csv", "quay.tmp")
    fixture(drop.folder, "quay.ndjson", ".quay.ndjson.x3F2")
    assert drop.poll().files == []
    part.rename(drop.folder / "vale_night.csv")  # rename keeps the old mtime
    assert drop.poll().files == [("vale_night.csv", "processed")]
    assert sorted(p.name for p in drop.folder.iterdir() if p.is_file()) == [
        ".quay.ndjson.x3F2",
        "quay.tmp",
    ]


def test_the_same_content_is_taken_once(drop: Drop):
    fixture(drop.folder, "vale_night.csv")
    drop.poll()
    fixture(drop.folder, "vale_night.csv", "vale_night_again.csv")
    result = drop.poll()
    assert result.files == [("vale_night_again.csv", "duplicate")]
    assert result.frame.empty and drop.rows() == 8
    why = drop.why("processed", "vale_night_again.csv")
    assert "same content as vale_night.csv, taken 2024-01-12T07:00:00Z (processed)" in why


def test_a_name_clash_gets_a_suffix_and_overwrites_nothing(drop: Drop):
    (drop.folder / "processed").mkdir()
    (drop.folder / "processed" / "vale_night.csv").write_text("an older file\n")
    fixture(drop.folder, "vale_night.csv")
    drop.poll()
    assert (drop.folder / "processed" / "vale_night.csv").read_text() == "an older file\n"
    moved = drop.folder / "processed" / "vale_night.1.csv"
    assert moved.read_bytes() == (DATA / "vale_night.csv").read_bytes()


def test_a_missing_folder_is_a_failed_poll(drop: Drop):
    shutil.rmtree(drop.folder)
    result = drop.poll()
    assert not result.ok
    assert result.error == f"folder not found: {drop.folder}"


def test_an_unexpected_error_leaves_the_file_in_place_and_fails_the_poll(drop: Drop, monkeypatch):
    def broken(*args: Any, **kwargs: Any) -> Any:
        raise RuntimeError("parser exploded")

    monkeypatch.setattr(filedrop, "parse_file", broken)
    fixture(drop.folder, "vale_night.csv")
    fixture(drop.folder, "quay.ndjson")
    result = drop.poll()
    assert not result.ok
    assert "quay.ndjson: RuntimeError: parser exploded" in (result.error or "")
    assert "vale_night.csv: RuntimeError: parser exploded" in (result.error or "")
    assert (drop.folder / "vale_night.csv").exists()


def test_parse_file_reads_without_a_store_or_a_folder():
    parsed = parse_file(
        (DATA / "half_bad.csv").read_bytes(),
        "csv",
        origin="half_bad.csv",
        sites={s["id"]: Site(**s) for s in SITES},
        now=NOW,
        source_id="x",
    )
    assert parsed.status == "partial" and len(parsed.frame) == 3


# -- fuzzing -----------------------------------------------------------------------------

GOOD = {
    ".csv": (DATA / "vale_night.csv").read_bytes(),
    ".json": (DATA / "vale_forecast.json").read_bytes(),
    ".ndjson": (DATA / "quay.ndjson").read_bytes(),
    ".txt": (DATA / "bulletin.txt").read_bytes(),
}


@st.composite
def mangled(draw: st.DrawFn) -> tuple[str, bytes]:
    extension = draw(st.sampled_from([*GOOD, ".metar", ".jsonl", ".dat"]))
    if draw(st.booleans()):
        return extension, draw(st.binary(max_size=600))
    data = bytearray(GOOD.get(extension, GOOD[".csv"]))
    for _ in range(draw(st.integers(1, 6))):
        op = draw(st.sampled_from(["cut", "insert", "delete", "flip"]))
        at = draw(st.integers(0, max(len(data) - 1, 0)))
        if op == "cut":
            del data[at:]
        elif op == "insert":
            data[at:at] = draw(st.binary(min_size=1, max_size=12))
        elif op == "delete":
            del data[at : at + draw(st.integers(1, 40))]
        elif data:
            data[at] ^= draw(st.integers(1, 255))
    return extension, bytes(data)


# FUZZ_EXAMPLES=2000 for a longer hunt; 50 keeps the suite quick.
@settings(
    max_examples=int(os.environ.get("FUZZ_EXAMPLES", "50")),
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)
@given(files=st.lists(mangled(), min_size=1, max_size=4))
def test_fuzzed_files_never_crash_the_poll_and_none_is_lost(files: list[tuple[str, bytes]]):
    source = {"id": "drop", "type": "filedrop", "path": "in", "stations": STATIONS}
    with tempfile.TemporaryDirectory() as tmp, Store.memory() as store:
        root = Path(tmp)
        folder = root / "in"
        folder.mkdir()
        config = Config.model_validate({"sites": SITES, "sources": [source]})
        config = config.model_copy(
            update={"sources": (config.sources[0].model_copy(update={"path": folder}),)}
        )
        written = []
        for i, (extension, content) in enumerate(files):
            put(folder, f"f{i}{extension}", content)
            written.append(hashlib.sha256(content).hexdigest())
        drop = FileDrop(config.sources[0], sites={s.id: s for s in config.sites}, store=store)
        result = drop.poll(NOW)
        assert result.ok, result.error
        assert [p.name for p in folder.iterdir() if p.is_file()] == [], "every file moves"
        moved = [
            p
            for sub in ("processed", "rejected")
            if (folder / sub).exists()
            for p in (folder / sub).iterdir()
            if not p.name.endswith(".why.txt")
        ]
        assert sorted(hashlib.sha256(p.read_bytes()).hexdigest() for p in moved) == sorted(
            written
        ), "no input lost or changed"
        for path in moved:
            if path.parent.name == "rejected":
                why = path.with_name(path.name + ".why.txt").read_text(encoding="utf-8")
                assert len(why.splitlines()) >= 2, "a rejected file says why"
        assert len(result.files) == len(files)
