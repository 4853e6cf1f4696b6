"""The canonical table: columns, unit conversion at the edge, each range check rejecting."""

from __future__ import annotations

import logging
import math
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
import pandas as pd
import pytest

from notifier import physics
from notifier.core import columns, observations, row_checks
from notifier.core.columns import (
    ALTERNATIVES,
    CANONICAL_COLUMNS,
    Rejection,
    missing_columns,
    unit_registry,
)
from notifier.core.config import Site
from notifier.core.observations import normalize
from tests.conftest import SITES

NOW = datetime(2024, 1, 12, 7, 0, tzinfo=UTC)
SITE_MAP = {s["id"]: Site(**s) for s in SITES}


def run(records: list[dict[str, Any]], **kwargs: Any):
    options: dict[str, Any] = {
        "sites": SITE_MAP,
        "now": NOW,
        "origin": "feed.json",
        "source_id": "test",
        "lines": list(range(1, len(records) + 1)),
    }
    options.update(kwargs)
    return normalize(records, **options)


def row(**values: Any) -> dict[str, Any]:
    base: dict[str, Any] = {"site": "zz-vale", "time": "2024-01-12T05:00:00Z", "temp_c": 2.0}
    base["dewpoint_c"] = 1.0
    base.update(values)
    return {k: v for k, v in base.items() if v is not ...}


def test_public_names():
    assert set(observations.__all__) == {"normalize", "normalize_frame"}
    assert set(columns.__all__) >= {"CANONICAL_COLUMNS", "Rejection", "empty_frame"}
    assert CANONICAL_COLUMNS == [
        "site", "time", "kind", "temp_c", "dewpoint_c", "rh_pct", "wind_ms", "wind_dir_deg",
        "cloud_pct", "surface_temp_c", "water_temp_c", "visibility_m", "pressure_hpa",
        "ceiling_m", "precip_mm", "weather", "source",
    ]  # fmt: skip


def test_output_has_exactly_the_canonical_columns_and_dtypes():
    frame, rejections, _ = run([row(wind_ms=1.5, weather="BR")])
    assert rejections == []
    assert list(frame.columns) == CANONICAL_COLUMNS
    assert str(frame["time"].dtype) == "datetime64[ns, UTC]"
    for column in columns.FLOAT_COLUMNS:
        assert frame[column].dtype == np.float64, column
    assert frame.loc[0, "site"] == "zz-vale"
    assert frame.loc[0, "kind"] == "obs"
    assert frame.loc[0, "source"] == "test"
    assert frame.loc[0, "weather"] == "BR"
    assert math.isnan(frame.loc[0, "cloud_pct"])


def test_rejection_text_is_origin_line_column_reason():
    assert str(Rejection("a.csv", 4, "temp_c", "too cold")) == "a.csv:4: temp_c: too cold"
    assert str(Rejection("a.csv", None, None, "empty file")) == "a.csv: empty file"
    assert str(Rejection("a.csv", 2, None, "bad")) == "a.csv:2: bad"


# -- unit conversion -------------------------------------------------------------------

# Exact definitions: °F by its formula, 1 kt = 1852 m/h, 1 statute mile = 1609.344 m,
# 1 okta = 1/8 of the sky, 1 inHg = 3386.389 Pa (conventional, at 0 °C and standard g),
# 1 ft = 0.3048 m and 1 in = 25.4 mm (the international foot and inch of 1959, from
# memory).
EXACT = {
    "temp_f": (50.0, (50.0 - 32.0) * 5.0 / 9.0),
    "temp_k": (275.15, 2.0),
    "dewpoint_f": (33.8, (33.8 - 32.0) * 5.0 / 9.0),
    "wind_kt": (10.0, 10.0 * 1852.0 / 3600.0),
    "wind_kmh": (36.0, 10.0),
    "wind_mph": (10.0, 10.0 * 1609.344 / 3600.0),
    "cloud_okta": (6.0, 75.0),
    "surface_temp_f": (14.0, -10.0),
    "water_temp_f": (41.0, 5.0),
    "visibility_km": (0.8, 800.0),
    "visibility_mi": (0.25, 402.336),
    "pressure_inhg": (29.92, 29.92 * 33.86389),
    "ceiling_ft": (300.0, 91.44),
    "precip_in": (0.12, 3.048),
}


@pytest.mark.parametrize("column", sorted(EXACT), ids=sorted(EXACT))
def test_alternative_column_converts_to_exact_definition_and_pint(column):
    given, expected = EXACT[column]
    target, unit = ALTERNATIVES[column]
    record = row(**{column: given})
    if target == "temp_c":
        record.pop("temp_c")
        record["dewpoint_c"] = expected - 1.0
    if target == "dewpoint_c":
        record.pop("dewpoint_c")
        record["temp_c"] = 5.0
    frame, rejections, _ = run([record])
    assert rejections == []
    assert frame.loc[0, target] == pytest.approx(expected, abs=1e-3)
    by_pint = unit_registry().Quantity(given, unit).to(columns.UNITS[target]).magnitude
    assert frame.loc[0, target] == pytest.approx(by_pint, rel=1e-12)
    assert column not in frame.columns


def test_one_pint_call_per_column_not_per_row(monkeypatch):
    calls = []
    real = row_checks._convert

    def counting(values, unit_in, unit_out):
        calls.append((len(values), unit_in))
        return real(values, unit_in, unit_out)

    monkeypatch.setattr(row_checks, "_convert", counting)
    records = [row(temp_c=..., temp_f=40.0 + i / 10, wind_kt=5.0) for i in range(500)]
    frame, rejections, _ = run(records)
    assert rejections == [] and len(frame) == 1  # same time: the last wins
    converting = [c for c in calls if c[1] in ("degF", "knot")]
    assert sorted(converting) == [(500, "degF"), (500, "knot")]


def test_units_override_says_a_column_is_in_another_unit():
    frame, rejections, _ = run(
        [row(temp_c=41.0, wind_ms=10.0)], units={"temp_c": "degF", "wind_ms": "knot"}
    )
    assert rejections == []
    assert frame.loc[0, "temp_c"] == pytest.approx(5.0)
    assert frame.loc[0, "wind_ms"] == pytest.approx(10 * 1852 / 3600)


def test_an_unknown_unit_rejects_the_cells_with_a_reason():
    frame, rejections, _ = run([row(wind_ms=3.0)], units={"wind_ms": "furlong_per_fortnightx"})
    assert frame.empty
    assert rejections[0].column == "wind_ms"
    assert rejections[0].reason.startswith("cannot convert 'furlong_per_fortnightx' to m/s")


def night(temps_c: list[float]) -> list[dict[str, Any]]:
    start = datetime(2024, 1, 11, 18, 0, tzinfo=UTC)
    out = []
    for hour, temp_c in enumerate(temps_c):
        out.append(
            {
                "site": "zz-vale",
                "time": (start + timedelta(hours=hour)).isoformat(),
                "temp_c": temp_c,
                "dewpoint_c": temp_c - 1.2 + hour * 0.1,
                "wind_ms": 3.0 - hour * 0.25,
                "surface_temp_c": temp_c - 2.0,
                "visibility_m": 9000.0 - hour * 700,
                "pressure_hpa": 1021.3,
            }
        )
    return out


def to_imperial(record: dict[str, Any]) -> dict[str, Any]:
    def f(c: float) -> float:
        return c * 9.0 / 5.0 + 32.0

    return {
        "site": record["site"],
        "time": record["time"],
        "temp_f": f(record["temp_c"]),
        "dewpoint_f": f(record["dewpoint_c"]),
        "wind_kt": record["wind_ms"] * 3600.0 / 1852.0,
        "surface_temp_f": f(record["surface_temp_c"]),
        "visibility_mi": record["visibility_m"] / 1609.344,
        "pressure_inhg": record["pressure_hpa"] / 33.86389,
    }


def test_the_same_night_in_fahrenheit_and_knots_gives_the_same_table():
    metric = night([6.0, 5.1, 4.0, 3.2, 2.5, 1.9, 1.4, 1.0, 0.7, 0.5, 0.4, 0.3])
    imperial = [to_imperial(r) for r in metric]
    a, rej_a, _ = run(metric)
    b, rej_b, _ = run(imperial)
    assert rej_a == [] and rej_b == []
    pd.testing.assert_frame_equal(a, b, check_exact=False, atol=0.01, rtol=0)


# -- moisture ----------------------------------------------------------------------------


def test_rh_is_derived_from_a_given_dewpoint():
    frame, _, _ = run([row(temp_c=10.0, dewpoint_c=8.43)])
    assert frame.loc[0, "rh_pct"] == pytest.approx(physics.relative_humidity_pct(10.0, 8.43))
    assert frame.loc[0, "rh_pct"] == pytest.approx(90.0, abs=0.05)  # docs/references.md [Td check]


def test_dewpoint_is_derived_from_rh_by_the_magnus_inverse():
    frame, _, _ = run([row(temp_c=10.0, dewpoint_c=..., rh_pct=90.0)])
    # Td(10 °C, 90 %) = 8.43 °C: docs/references.md [Td check]
    assert frame.loc[0, "dewpoint_c"] == pytest.approx(8.43, abs=0.005)
    assert frame.loc[0, "rh_pct"] == 90.0


def test_rh_overshoot_up_to_103_is_clipped_with_a_warning():
    frame, rejections, warnings = run([row(dewpoint_c=..., rh_pct=102.4)])
    assert rejections == []
    assert frame.loc[0, "rh_pct"] == 100.0
    assert frame.loc[0, "dewpoint_c"] == pytest.approx(frame.loc[0, "temp_c"])
    assert warnings == [
        "feed.json: rh_pct above 100 % (sensor overshoot, at most 103 %) clipped to 100 % "
        "on lines 1"
    ]


def test_dewpoint_slightly_above_temperature_is_set_equal_with_a_warning():
    frame, rejections, warnings = run([row(temp_c=2.0, dewpoint_c=2.4)])
    assert rejections == []
    assert frame.loc[0, "dewpoint_c"] == 2.0
    assert frame.loc[0, "rh_pct"] == pytest.approx(100.0)
    assert any("dew point up to 0.5 °C above the air temperature" in w for w in warnings)


# -- each validator rejects ----------------------------------------------------------------

VALIDATORS = [
    ("temp-low", row(temp_c=-80.5, dewpoint_c=..., rh_pct=50.0), "temp_c",
     "-80.5 °C is outside -80 to 60 °C"),
    ("temp-high", row(temp_c=61.0), "temp_c", "61 °C is outside -80 to 60 °C"),
    ("temp-f", row(temp_c=..., temp_f=150.0), "temp_f",
     "150 °F (65.56 °C) is outside -80 to 60 °C"),
    ("surface-temp", row(surface_temp_c=-85.0), "surface_temp_c",
     "-85 °C is outside -80 to 60 °C"),
    ("dewpoint-low", row(dewpoint_c=-81.0), "dewpoint_c", "-81 °C is outside -80 to 60 °C"),
    ("rh-negative", row(dewpoint_c=..., rh_pct=-1.0), "rh_pct",
     "-1 % is outside 0 to 100 % (up to 103 % is read as 100)"),
    ("rh-over-103", row(dewpoint_c=..., rh_pct=103.5), "rh_pct",
     "103.5 % is outside 0 to 100 % (up to 103 % is read as 100)"),
    ("dewpoint-above-temp", row(temp_c=2.0, dewpoint_c=2.6), "dewpoint_c",
     "dew point 2.6 °C is above the air temperature 2 °C by more than 0.5 °C"),
    ("wind-high", row(wind_ms=75.5), "wind_ms", "75.5 m/s is outside 0 to 75 m/s"),
    ("wind-negative", row(wind_ms=-0.1), "wind_ms", "-0.1 m/s is outside 0 to 75 m/s"),
    ("wind-kt", row(wind_kt=150.0), "wind_kt", "150 kt (77.17 m/s) is outside 0 to 75 m/s"),
    ("wind-dir", row(wind_dir_deg=361.0), "wind_dir_deg", "361 ° is outside 0 to 360 °"),
    ("cloud-pct", row(cloud_pct=101.0), "cloud_pct",
     "101 % is outside 0 to 100 % (0 to 8 okta)"),
    ("cloud-okta", row(cloud_okta=9.0), "cloud_okta",
     "9 okta (112.5 %) is outside 0 to 100 % (0 to 8 okta)"),
    ("visibility-far", row(visibility_m=100_001.0), "visibility_m",
     "1e+05 m is outside 0 to 1e+05 m"),
    ("visibility-km", row(visibility_km=120.0), "visibility_km",
     "120 km (1.2e+05 m) is outside 0 to 1e+05 m"),
    ("visibility-negative", row(visibility_m=-5.0), "visibility_m",
     "-5 m is outside 0 to 1e+05 m"),
    # a ceiling is a height above ground, and NO_CEILING_M (30 000 m) is "none"
    ("ceiling-negative", row(ceiling_ft=-100.0), "ceiling_ft",
     "-100 ft (-30.48 m) is outside 0 to 3e+04 m"),
    ("ceiling-high", row(ceiling_m=30_001.0), "ceiling_m",
     "3e+04 m is outside 0 to 3e+04 m"),
    # about 305 mm is the wettest hour on record (WMO extremes archive, from memory)
    ("precip-high", row(precip_in=20.0), "precip_in",
     "20 in (508 mm) is outside 0 to 400 mm"),
    ("precip-negative", row(precip_mm=-0.1), "precip_mm", "-0.1 mm is outside 0 to 400 mm"),
    ("future-obs", row(time="2024-01-12T07:11:00Z"), "time",
     "2024-01-12T07:11Z is 11 min ahead of now (2024-01-12T07:00Z); observations may be at "
     "most 10 min ahead"),
    ("bad-time", row(time="yesterday"), "time",
     "not an ISO 8601 time: 'yesterday' (expected e.g. 2024-01-05T03:00:00Z)"),
    ("no-time", row(time=...), "time", "time missing"),
    # found by the file-drop fuzz test: the parser read ".8" as year 0, which the
    # table's nanosecond clock cannot hold, and the whole file failed
    ("year-zero", row(time=".8"), "time",
     "not an ISO 8601 time: '.8' (expected e.g. 2024-01-05T03:00:00Z)"),
    ("year-one-utc", row(time="0001-01-01T00:00:00Z"), "time",
     "not an ISO 8601 time: '0001-01-01T00:00:00Z' (expected e.g. 2024-01-05T03:00:00Z)"),
    ("unknown-site", row(site="zz-nowhere"), "site",
     "unknown site 'zz-nowhere' (known: zz-quay, zz-vale)"),
    ("no-site", row(site=...), "site", "site missing"),
    ("bad-kind", row(kind="guess"), "kind", "kind must be obs or forecast, got 'guess'"),
    ("no-temp", row(temp_c=None), "temp_c",
     "temperature missing (temp_c, temp_f or temp_k is required)"),
    ("no-humidity", row(dewpoint_c=None), "dewpoint_c",
     "humidity missing (dewpoint_c, dewpoint_f or rh_pct is required)"),
    ("not-a-number", row(temp_c="warm"), "temp_c", "not a number: 'warm'"),
    ("boolean", row(wind_ms=True), "wind_ms", "not a number: True"),
    ("infinite", row(pressure_hpa=float("inf")), "pressure_hpa", "not a finite number: inf"),
]  # fmt: skip


@pytest.mark.parametrize(
    ("record", "column", "reason"),
    [v[1:] for v in VALIDATORS],
    ids=[v[0] for v in VALIDATORS],
)
def test_each_validator_rejects_with_its_reason(record, column, reason):
    good = row(time="2024-01-12T04:00:00Z")
    frame, rejections, _ = run([good, record])
    assert len(frame) == 1, "the good row must survive the bad one"
    assert frame.loc[0, "time"] == pd.Timestamp("2024-01-12T04:00:00Z")
    assert [(r.line, r.column, r.reason) for r in rejections] == [(2, column, reason)]


def test_a_row_with_several_problems_lists_each():
    _, rejections, _ = run([row(site="zz-nowhere", temp_c=99.0, wind_ms=-3.0)])
    assert [r.column for r in rejections] == ["site", "temp_c", "wind_ms"]


def test_forecast_rows_may_lie_in_the_future():
    frame, rejections, _ = run([row(time="2024-01-12T18:00:00Z")], default_kind="forecast")
    assert rejections == []
    assert frame.loc[0, "kind"] == "forecast"


def test_observation_just_within_ten_minutes_ahead_is_kept():
    frame, rejections, _ = run([row(time="2024-01-12T07:10:00Z")])
    assert rejections == [] and len(frame) == 1


def test_non_object_records_are_rejected_in_place():
    frame, rejections, _ = run([row(), ["not", "a", "record"]])
    assert len(frame) == 1
    assert rejections == [Rejection("feed.json", 2, None, "expected an object, got list")]


def test_missing_columns_names_each_missing_group():
    assert missing_columns(["site", "time", "temp_f", "rh_pct"]) == []
    assert missing_columns(["time", "temp_c"], default_site="zz-vale") == [
        "no humidity column (expected dewpoint_c, dewpoint_f or rh_pct)"
    ]
    assert missing_columns([]) == [
        "no site column (and the source names no site)",
        "no time column",
        "no temperature column (expected temp_c, temp_f or temp_k)",
        "no humidity column (expected dewpoint_c, dewpoint_f or rh_pct)",
    ]


def test_unknown_columns_are_named_in_a_warning():
    _, _, warnings = run([row(colour="grey")])
    assert warnings == ["feed.json: ignored unknown columns: colour"]


# -- time --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("given", "utc"),
    [
        ("2024-01-12T05:00:00Z", "2024-01-12T05:00:00Z"),
        ("2024-01-12T06:00:00+01:00", "2024-01-12T05:00:00Z"),
        ("2024-01-12T01:30-0330", "2024-01-12T05:00:00Z"),
        ("2024-01-12 05:00:00z", "2024-01-12T05:00:00Z"),
    ],
)
def test_times_with_an_offset_are_converted_to_utc(given, utc):
    frame, rejections, warnings = run([row(time=given)])
    assert rejections == [] and warnings == []
    assert frame.loc[0, "time"] == pd.Timestamp(utc)


def test_naive_times_take_the_sites_zone_across_daylight_saving():
    # Europe/London: GMT in January, BST (UTC+1) in July.
    records = [row(time="2024-01-10T03:00:00"), row(time="2023-07-10T03:00:00")]
    frame, rejections, warnings = run(records, now=datetime(2024, 1, 12, 7, tzinfo=UTC))
    assert rejections == []
    assert sorted(frame["time"]) == [
        pd.Timestamp("2023-07-10T02:00:00Z"),
        pd.Timestamp("2024-01-10T03:00:00Z"),
    ]
    assert warnings == [
        "feed.json: 2 times for site zz-vale had no UTC offset; read as local time in Europe/London"
    ]


def test_a_local_time_skipped_by_the_clocks_is_rejected():
    # 2024-03-31 01:00 GMT the clocks in Europe/London go forward to 02:00 BST.
    records = [row(time="2024-03-31T01:30:00"), row(time="2024-03-31T00:30:00")]
    frame, rejections, _ = run(records, now=datetime(2024, 3, 31, 6, tzinfo=UTC))
    assert list(frame["time"]) == [pd.Timestamp("2024-03-31T00:30:00Z")]
    assert [(r.line, r.reason) for r in rejections] == [
        (
            1,
            "local time 2024-03-31T01:30:00 does not exist in Europe/London (the clocks skip "
            "it); give a UTC offset",
        )
    ]


def test_an_ambiguous_local_time_is_rejected_naming_the_ambiguity():
    # 2024-10-27 02:00 BST the clocks go back to 01:00 GMT: 01:30 happens twice.
    records = [row(time="2024-10-27T01:30:00"), row(time="2024-10-27T01:30:00+01:00")]
    frame, rejections, _ = run(records, now=datetime(2024, 10, 27, 6, tzinfo=UTC))
    assert list(frame["time"]) == [pd.Timestamp("2024-10-27T00:30:00Z")]
    assert len(rejections) == 1
    assert rejections[0].reason == (
        "local time 2024-10-27T01:30:00 is ambiguous in Europe/London (it happens twice as "
        "the clocks go back); give a UTC offset"
    )


def test_now_must_be_timezone_aware():
    with pytest.raises(ValueError, match="now must be timezone-aware"):
        run([row()], now=datetime(2024, 1, 12, 7))


# -- duplicates --------------------------------------------------------------------------


def test_duplicate_site_time_kind_last_wins_and_is_logged(caplog):
    records = [row(temp_c=1.0), row(temp_c=3.0, site="zz-quay"), row(temp_c=2.0)]
    with caplog.at_level(logging.INFO, logger="notifier.core.observations"):
        frame, rejections, warnings = run(records)
    assert rejections == []
    vale = frame[frame["site"] == "zz-vale"]
    assert list(vale["temp_c"]) == [2.0]
    assert len(frame) == 2
    expected = (
        "feed.json: 1 rows repeat a (site, time, kind) given again later in the same input; "
        "the later row wins (dropped lines 1)"
    )
    assert warnings == [expected]
    assert expected in caplog.text


def test_same_time_different_kind_is_not_a_duplicate():
    frame, _, warnings = run([row(kind="obs"), row(kind="forecast")])
    assert sorted(frame["kind"]) == ["forecast", "obs"]
    assert warnings == []
