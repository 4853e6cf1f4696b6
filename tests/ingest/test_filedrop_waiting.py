"""Every file in a drop ends in processed/ or rejected/ with its reason, or is reported
by ``fogwatch sources`` as waiting, with why (issue 16, defect 2)."""

from __future__ import annotations

import os
import time
from datetime import timedelta

import pytest

from notifier.ingest.poll import health_report
from notifier.storage.store import Store
from tests.ingest.test_filedrop import NOW, Drop, put


@pytest.fixture
def drop(make_config):
    config = make_config(sources=[{"id": "drop", "type": "filedrop", "path": "incoming"}])
    with Store.memory() as store:
        yield Drop(config, store)


GOOD = '{"site": "zz-quay", "time": "2024-01-12T04:00:00Z", "temp_c": 2.0, "rh_pct": 91}'
# Python refuses to convert an integer string of more than 4300 digits (the default of
# sys.int_info.default_max_str_digits; Python docs, "Integer string conversion length
# limitation"), and json.loads raises ValueError for it, not JSONDecodeError
HUGE = "9" * 5000


def test_json_with_a_5000_digit_integer_is_rejected_with_why(drop: Drop):
    put(drop.folder, "huge.json", f'[{{"site": "zz-quay", "time": "2024-01-12T04:00:00Z", '
        f'"temp_c": {HUGE}, "rh_pct": 91}}]')  # fmt: skip
    result = drop.poll()
    assert result.ok, result.error
    assert result.files == [("huge.json", "rejected")]
    assert not (drop.folder / "huge.json").exists()
    assert "a number has more digits than can be read (over 4300)" in drop.why(
        "rejected", "huge.json"
    )


def test_ndjson_with_a_5000_digit_integer_keeps_its_good_lines(drop: Drop):
    bad = f'{{"site": "zz-quay", "time": "2024-01-12T05:00:00Z", "temp_c": {HUGE}}}'
    put(drop.folder, "mixed.ndjson", "\n".join([GOOD, bad]) + "\n")
    result = drop.poll()
    assert result.files == [("mixed.ndjson", "partial")]
    assert len(result.frame) == 1 and drop.rows() == 1
    assert [(r.line, r.reason) for r in result.rejections] == [
        (2, "a number has more digits than can be read (over 4300)")
    ]


def test_a_folder_named_like_a_data_file_is_reported_as_waiting(drop: Drop):
    (drop.folder / "x.csv").mkdir()
    result = drop.poll()
    assert result.ok and result.files == []
    assert drop.source.waiting(NOW) == [("x.csv", "a folder, not a file: left alone")]


def test_a_file_from_the_future_is_reported_then_taken_when_it_holds_still(drop: Drop):
    path = put(drop.folder, "ahead.ndjson", GOOD + "\n")
    ahead = time.time() + 3 * 3600  # an uploader's clock three hours fast
    os.utime(path, (ahead, ahead))
    first = drop.poll()
    assert first.files == [] and path.exists()
    ((name, why),) = drop.source.waiting(NOW)
    assert name == "ahead.ndjson" and "in the future" in why
    second = drop.poll(NOW + timedelta(minutes=1))  # unchanged since the last look
    assert second.files == [("ahead.ndjson", "processed")]


def test_sources_lists_what_waits_and_why(make_config):
    config = make_config(sources=[{"id": "drop", "type": "filedrop", "path": "incoming"}])
    folder = config.sources[0].path
    folder.mkdir()
    (folder / "x.csv").mkdir()
    put(folder, "slow.csv", "site,time,temp_c\n", age_s=2)
    put(folder, "half.csv.part", "site,time\n")
    with Store.memory() as store:
        text = health_report(store, config, now=NOW)
    assert text.splitlines()[-4:] == [
        "waiting in file drops:",
        "  drop: half.csv.part: upload in progress (waits until renamed)",
        "  drop: slow.csv: changed 2 s ago: waits 5 s",
        "  drop: x.csv: a folder, not a file: left alone",
    ]


def test_a_huge_bad_value_is_cut_in_the_why_file(drop: Drop):
    # regression (issue 16, defect 8): a 20 MB bad line was copied whole into .why.txt
    huge = "x" * 3_000_000
    rows = ["site,time,temp_c,rh_pct", "zz-quay,2024-01-12T04:00:00Z,2.0,91"]
    put(drop.folder, "long.csv", "\n".join([*rows, f"zz-quay,2024-01-12T05:00:00Z,{huge},93"]))
    result = drop.poll()
    assert result.files == [("long.csv", "partial")]
    why = (drop.folder / "processed" / "long.csv.why.txt").read_text(encoding="utf-8")
    assert len(why) < 2000
    line = next(x for x in why.splitlines() if x.startswith("line 3"))
    assert line.endswith("characters)") and "(cut: the line was 3,0" in line
