"""Sites from a CSV table (notifier/core/sites_file.py), through the config reader.

The sites are invented. Latitude and longitude ranges are WGS 84's (±90°, ±180°); time
zone names are the IANA database's, as the config file takes them.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from notifier.core import sites_file
from notifier.core.config_file import check_config, load_config
from notifier.core.errors import ConfigError
from notifier.core.sites_file import read_sites_file

HEADER = "id,name,lat,lon,timezone,exposure,use,tags,water_temp_monthly_c\n"
QUAY = "north-quay,North Quay,50.9,-3.2,Europe/London,coast,port,harbour;pilots,9;8;8;9;11;13;15;16;15;13;11;10\n"  # noqa: E501
FARM = "hollow-farm,Hollow Farm,51.3,-3.6,Europe/London,valley,farm,,\n"


def _config(tmp_path: Path, table: str, extra: str = "") -> Path:
    (tmp_path / "sites.csv").write_text(table, encoding="utf-8")
    path = tmp_path / "fogwatch.yaml"
    path.write_text(f"version: 1\n{extra}sites_file: sites.csv\n", encoding="utf-8")
    return path


def test_public_names():
    assert sites_file.__all__ == ["LIST_COLUMNS", "MAX_SITES_FILE_BYTES", "read_sites_file"]


def test_a_table_gives_the_sites_after_those_written_in_the_config(tmp_path):
    extra = "sites:\n  - {id: ridge, name: Ridge, lat: 52, lon: -3, timezone: UTC}\n"
    table = HEADER + "# harbour first\n" + QUAY + "\n" + FARM
    config = load_config(_config(tmp_path, table, extra))
    assert [s.id for s in config.sites] == ["ridge", "north-quay", "hollow-farm"]
    quay, farm = config.sites[1], config.sites[2]
    assert quay.tags == ("harbour", "pilots") and quay.exposure == "coast" and quay.use == "port"
    assert quay.water_temp_monthly_c is not None and quay.water_temp_monthly_c[7] == 16.0
    # empty cells leave the defaults
    assert farm.tags == () and farm.water_temp_monthly_c is None and farm.elevation_m is None
    assert config.sites_file == (tmp_path / "sites.csv").resolve()


def test_a_spreadsheets_byte_order_mark_is_not_part_of_the_first_column(tmp_path):
    (tmp_path / "s.csv").write_bytes(("\ufeff" + HEADER + FARM).encode("utf-8"))
    sites, problems = read_sites_file(tmp_path / "s.csv")
    assert problems == [] and [s.id for s in sites] == ["hollow-farm"]


def test_every_bad_row_is_reported_by_line_and_column(tmp_path):
    table = (
        HEADER
        + QUAY.replace("50.9", "95.0")  # line 2: beyond the pole
        + FARM.replace("valley", "gully")  # line 3: not an exposure
        + "ridge,Ridge,52,-3\n"  # line 4: cells missing
        + QUAY.replace("North Quay", "again")  # line 5: the id again
        + FARM.replace("hollow-farm", "lee-farm").replace("Europe/London", "Europe/Nowhere")
    )
    with pytest.raises(ConfigError) as info:
        load_config(_config(tmp_path, table))
    text = str(info.value)
    where = str((tmp_path / "sites.csv").resolve())
    assert f"{where}:2: lat: Input should be less than or equal to 90, got: '95.0'" in text
    assert f"{where}:3: exposure: Input should be" in text and "got: 'gully'" in text
    assert f"{where}:4: 4 cells where the header names 9 columns" in text
    assert f"{where}:5: id: site 'north-quay' is already on line" not in text  # line 2 failed
    assert f"{where}:6: timezone: unknown time zone 'Europe/Nowhere'" in text
    assert text.count("'Europe/Nowhere'") == 1  # the value is not echoed twice


def test_a_repeated_id_names_the_line_it_was_first_on(tmp_path):
    sites, problems = read_sites_file(
        _config(tmp_path, HEADER + FARM + QUAY + FARM).with_name("sites.csv")
    )
    assert [s.id for s in sites] == ["hollow-farm", "north-quay"]
    assert [(p.line, p.message) for p in problems] == [
        (4, "id: site 'hollow-farm' is already on line 2")
    ]


def test_an_id_in_both_the_config_and_the_table_is_a_duplicate(tmp_path):
    extra = "sites:\n  - {id: hollow-farm, name: H, lat: 51, lon: -3, timezone: UTC}\n"
    _, problems, _ = check_config(_config(tmp_path, HEADER + FARM, extra))
    assert any("duplicate site id 'hollow-farm'" in p.message for p in problems)


@pytest.mark.parametrize(
    ("header", "expected"),
    [
        ("id,name,lat,lon,timezone,colour", "unknown column 'colour'"),
        ("id,name,lat,lon,timezone,name", "column 'name' is named twice"),
        ("id,name,lat,lon", "missing column(s): timezone"),
    ],
    ids=["unknown", "twice", "missing"],
)
def test_a_bad_header_is_reported_at_its_line(tmp_path, header, expected):
    (tmp_path / "s.csv").write_text(f"# sites of the estate\n{header}\n", encoding="utf-8")
    sites, problems = read_sites_file(tmp_path / "s.csv")
    assert sites == [] and problems and problems[0].line == 2
    assert expected in problems[0].message


def test_a_missing_empty_or_oversized_table_is_a_problem(tmp_path, monkeypatch):
    _, problems = read_sites_file(tmp_path / "none.csv")
    assert "cannot read the sites table" in problems[0].message
    (tmp_path / "empty.csv").write_text("# nothing yet\n", encoding="utf-8")
    _, problems = read_sites_file(tmp_path / "empty.csv")
    assert [p.message for p in problems] == ["the sites table has no header row"]
    (tmp_path / "big.csv").write_text(HEADER + FARM, encoding="utf-8")
    monkeypatch.setattr(sites_file, "MAX_SITES_FILE_BYTES", 10)
    _, problems = read_sites_file(tmp_path / "big.csv")
    assert "over the limit of 10" in problems[0].message


def test_a_second_read_keeps_the_sites_of_unchanged_rows(tmp_path):
    path = tmp_path / "s.csv"
    path.write_text(HEADER + QUAY + FARM, encoding="utf-8")
    first, _ = read_sites_file(path)
    path.write_text(HEADER + QUAY + FARM.replace("Hollow Farm", "Hollow Farm (east)"), "utf-8")
    second, _ = read_sites_file(path)
    assert second[0] is first[0]  # not validated again
    assert second[1] is not first[1] and second[1].name == "Hollow Farm (east)"
    # a changed header validates every row again
    path.write_text(HEADER.replace("tags", "tags ") + QUAY + FARM, encoding="utf-8")
    third, _ = read_sites_file(path)
    assert third[0] is first[0]  # the header is taken stripped: the same columns
    swapped = "North Quay,north-quay," + QUAY.split(",", 2)[2]
    path.write_text(HEADER.replace("id,name", "name,id") + swapped, encoding="utf-8")
    fourth, problems = read_sites_file(path)
    assert problems == [] and fourth[0] is not first[0] and fourth[0] == first[0]


def test_a_changed_table_is_seen_by_the_running_service(tmp_path):
    from notifier.service.cycle import Service

    config_path = _config(tmp_path, HEADER + FARM)
    service = Service(config_path, sources=[])
    try:
        assert [s.id for s in service.sites] == ["hollow-farm"]
        table = tmp_path / "sites.csv"
        table.write_text(HEADER + FARM + QUAY, encoding="utf-8")
        stat = table.stat()
        os.utime(table, (stat.st_atime, stat.st_mtime + 5))
        assert service.files_changed()
        ok, _ = service.reload()
        assert ok and [s.id for s in service.sites] == ["hollow-farm", "north-quay"]
    finally:
        service.close()
