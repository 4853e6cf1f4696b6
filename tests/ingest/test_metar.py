"""METAR decoding: worked examples, the month boundary, bulletins, bad reports.

Each check names where its expected value comes from: "WMO-No. 306 FM 15" (the Manual
on Codes, FM 15 METAR), "metar package behaviour" (what the parser does, read from its
source), or "common practice" (a convention fogwatch adopts and documents).
"""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from notifier.ingest.metar import (
    MetarError,
    decode_report,
    parse_metar_text,
    report_month,
    split_reports,
)

NOW = datetime(2024, 1, 12, 7, 0, tzinfo=UTC)


def decode(report: str) -> dict:
    record, notes = decode_report(report, NOW)
    assert notes == []
    return record


def test_freezing_fog_with_sky_obscured():
    r = decode("METAR ZZQA 120550Z 00000KT 0200 FZFG VV001 M01/M02 Q1025=")
    assert r["station"] == "ZZQA"
    assert r["time"] == "2024-01-12T05:50:00Z"
    assert r["visibility_m"] == 200.0  # WMO-No. 306 FM 15: VVVV in metres, 0200 = 200 m
    assert r["weather"] == "FZFG"  # WMO-No. 306 FM 15: FZ descriptor + FG, fog below 0 °C
    assert r["temp_c"] == -1.0  # WMO-No. 306 FM 15: M marks a negative value
    assert r["dewpoint_c"] == -2.0  # WMO-No. 306 FM 15
    assert r["cloud_pct"] == 100.0  # common practice: vertical visibility = sky obscured
    assert r["pressure_hpa"] == 1025.0  # WMO-No. 306 FM 15: QPPPP in whole hPa
    assert r["wind_kt"] == 0.0
    assert r["wind_dir_deg"] is None  # WMO-No. 306 FM 15: 00000 is calm, no direction


def test_cavok_is_ten_kilometres_and_clear():
    r = decode("ZZQB 120550Z 24005KT CAVOK 08/06 Q1018")
    assert r["visibility_m"] == 10_000.0  # metar package behaviour: CAVOK → 10 km
    assert r["cloud_pct"] == 0.0  # common practice: no cloud of operational significance
    assert r["weather"] is None
    assert r["wind_dir_deg"] == 240.0
    assert r["wind_kt"] == 5.0


def test_quarter_statute_mile_fog():
    r = decode("ZZQC 120550Z 18004KT 1/4SM FG OVC002 02/02 A3001 RMK AO2")
    assert r["visibility_m"] == pytest.approx(402.336)  # metar package: 1 SM = 1609.344 m
    assert r["weather"] == "FG"
    assert r["cloud_pct"] == 100.0  # common practice: OVC = 8 okta = 100 %
    assert r["pressure_hpa"] == pytest.approx(30.01 * 33.86398)  # metar package: A in inHg


def test_9999_reads_as_ten_kilometres():
    r = decode("ZZQA 120550Z 27010KT 9999 FEW030 07/03 Q1012")
    assert r["visibility_m"] == 10_000.0  # metar package behaviour (WMO: 9999 = 10 km or more)
    assert r["cloud_pct"] == 25.0  # common practice: FEW = 1-2 okta, taken as 25 %


@pytest.mark.parametrize(
    ("groups", "weather"),
    [("0800 BR", "BR"), ("0150 MIFG", "MIFG"), ("0400 BCFG", "BCFG"), ("0600 PRFG", "PRFG"),
     ("3000 -DZ BR", "-DZ BR"), ("0100 FZFG", "FZFG")],
)  # fmt: skip
def test_present_weather_groups_go_into_weather(groups, weather):
    # WMO-No. 306 FM 15, code table 4678: MI shallow, BC patches, PR partial, BR mist.
    assert decode(f"ZZQA 120550Z 00000KT {groups} NSC 01/01 Q1020")["weather"] == weather


@pytest.mark.parametrize(
    ("sky", "cloud_pct"),
    [("FEW010", 25.0), ("SCT010", 50.0), ("BKN010", 75.0), ("OVC010", 100.0),
     ("FEW005 SCT020 BKN040", 75.0), ("NSC", 0.0), ("SKC", 0.0), ("VV///", 100.0)],
)  # fmt: skip
def test_cloud_is_the_most_extensive_layer(sky, cloud_pct):
    # common practice: okta bands 1-2, 3-4, 5-7, 8 taken as 25, 50, 75, 100 %
    assert decode(f"ZZQA 120550Z 20003KT 5000 {sky} 04/03 Q1015")["cloud_pct"] == cloud_pct


def test_wind_in_metres_per_second_is_converted_to_knots_for_the_table():
    # metar package behaviour: MPS values converted with 1 kt = 0.514444 m/s
    r = decode("ZZQA 120550Z 09004MPS 6000 SCT008 03/02 Q1009")
    assert r["wind_kt"] == pytest.approx(4 / 0.514444)


@pytest.mark.parametrize(
    ("day", "now", "year_month"),
    [
        (12, datetime(2024, 1, 12, 7, tzinfo=UTC), (2024, 1)),
        (31, datetime(2024, 4, 1, 0, 5, tzinfo=UTC), (2024, 3)),  # read on the 1st
        (31, datetime(2024, 3, 1, 0, 5, tzinfo=UTC), (2024, 1)),  # February has no 31st
        (29, datetime(2024, 3, 1, 0, 5, tzinfo=UTC), (2024, 2)),  # leap year
        (31, datetime(2024, 1, 1, 0, 5, tzinfo=UTC), (2023, 12)),  # across the year
    ],
    ids=["same-day", "month-end", "skip-february", "leap-day", "year-end"],
)
def test_the_report_month_comes_from_the_clock(day, now, year_month):
    assert report_month(day, now) == year_month


def test_a_report_from_the_31st_read_on_the_1st_is_dated_last_month():
    record, _ = decode_report(
        "ZZQA 312350Z 00000KT 0300 FG VV002 01/01 Q1030", datetime(2024, 11, 1, 0, 10, tzinfo=UTC)
    )
    assert record["time"] == "2024-10-31T23:50:00Z"


BULLETIN = """\x01
231
SAZZ31 ZZQA 120600
METAR
ZZQA 120550Z 00000KT 0200 FZFG VV001 M01/M02 Q1025=
ZZQB 120550Z 24005KT CAVOK 08/06
      Q1018=
ZZQC 120550Z NIL=
ZZQD 120550Z 18004KT 1/4SM FG OVC002 02/02 A3001 RMK AO2=
\x03
"""


def test_bulletin_headings_and_terminators_are_removed_and_lines_kept():
    assert split_reports(BULLETIN) == [
        (5, "ZZQA 120550Z 00000KT 0200 FZFG VV001 M01/M02 Q1025"),
        (6, "ZZQB 120550Z 24005KT CAVOK 08/06 Q1018"),
        (8, "ZZQC 120550Z NIL"),
        (9, "ZZQD 120550Z 18004KT 1/4SM FG OVC002 02/02 A3001 RMK AO2"),
    ]


def test_one_report_per_line_without_terminators():
    text = (
        "# night of the 11th\nZZQA 120550Z 00000KT 0200 FZFG VV001 M01/M02 Q1025\n\n"
        "ZZQB 120550Z 24005KT CAVOK 08/06 Q1018\n"
    )
    assert [line for line, _ in split_reports(text)] == [2, 4]


def test_parse_maps_stations_to_sites_and_explains_each_rejection():
    stations = {"ZZQA": "zz-vale", "ZZQB": "zz-quay"}
    records, lines, rejections, _ = parse_metar_text(
        BULLETIN,
        origin="bulletin.txt",
        stations=stations,
        site_ids={"zz-vale", "zz-quay"},
        now=NOW,
    )
    assert [(r["site"], line) for r, line in zip(records, lines, strict=True)] == [
        ("zz-vale", 5),
        ("zz-quay", 6),
    ]
    assert [(r.line, r.column, r.reason) for r in rejections] == [
        (8, None, "NIL report: the station sent no observation: 'ZZQC 120550Z NIL'"),
        (9, "station", "station ZZQD is not mapped to a site (stations: ZZQA, ZZQB)"),
    ]


def test_text_that_is_not_a_report_is_rejected_with_the_reason():
    with pytest.raises(MetarError, match=r"no observation time group \(DDHHMMZ\)"):
        decode_report("hello fog", NOW)
    with pytest.raises(MetarError, match="not a METAR report"):
        decode_report("zzqa 120550Z 00000KT", NOW)
    with pytest.raises(MetarError, match="day 32 is not a day of the month"):
        decode_report("ZZQA 320550Z 00000KT 0200 FG", NOW)


def test_an_unknown_group_is_noted_and_the_rest_kept():
    record, notes = decode_report("ZZQA 120550Z 00000KT 0150 MIFG XYZZY FEW001 M03/M03 Q1030", NOW)
    assert record["temp_c"] == -3.0
    assert notes and "Unparsed groups in body 'XYZZY'" in notes[0]  # metar package behaviour


# The ceiling: the lowest layer reported BKN or OVC, or the vertical visibility into an
# obscured sky (docs/references.md [FMH-1]; WMO-No. 306 FM 15 gives heights in hundreds
# of feet, hhh). 1 ft = 0.3048 m exactly (the international foot of 1959, from memory).
@pytest.mark.parametrize(
    ("sky", "ceiling_m"),
    [
        ("FEW005 BKN012 OVC030", 1200 * 0.3048),  # FMH-1: the lowest BKN/OVC, not FEW
        ("SCT003 OVC008", 800 * 0.3048),  # FMH-1: SCT (3-4 okta) is no ceiling
        ("BKN250", 25000 * 0.3048),
        ("VV002", 200 * 0.3048),  # FMH-1: vertical visibility is the ceiling
        ("OVC000", 0.0),  # FMH-1: a surface-based layer is height 0
        ("FEW010 SCT020", 30000.0),  # no BKN/OVC/VV: "no ceiling"
        ("CLR", 30000.0),  # FMH-1: CLR, no cloud below 12 000 ft (automated)
        ("SKC", 30000.0),
        ("NSC", 30000.0),  # WMO-No. 306 FM 15: no significant cloud
        ("VV///", None),  # FMH-1: obscured, height not measured: unknown
    ],
    ids=["bkn-above-few", "ovc-above-sct", "high-bkn", "vv", "ovc000", "few-sct",
         "clr", "skc", "nsc", "vv-unmeasured"],
)  # fmt: skip
def test_ceiling_from_the_sky_groups(sky, ceiling_m):
    r = decode(f"ZZQA 120550Z 00000KT 9999 {sky} 05/04 Q1020")
    if ceiling_m is None:
        assert r["ceiling_m"] is None
    else:
        assert r["ceiling_m"] == pytest.approx(ceiling_m, abs=0.05)


def test_cavok_has_no_ceiling_and_a_report_without_sky_says_nothing():
    # WMO-No. 306 FM 15: CAVOK, no cloud below 5000 ft and no CB/TCU: no ceiling
    assert decode("ZZQB 120550Z 24005KT CAVOK 08/06 Q1018")["ceiling_m"] == 30000.0
    assert decode("ZZQB 120550Z 24005KT 9999 08/06 Q1018")["ceiling_m"] is None


@pytest.mark.parametrize(
    ("remark", "precip_mm"),
    [("P0012", 0.12 * 25.4), ("P0000", 0.0), ("P0100", 25.4), (None, None)],
    ids=["twelve-hundredths", "trace", "one-inch", "no-remark"],
)
def test_hourly_precipitation_from_the_us_remark(remark, precip_mm):
    # docs/references.md [FMH-1]: Prrrr, precipitation in the past hour in hundredths of
    # an inch, P0000 a trace; 1 in = 25.4 mm exactly (the international inch, from memory)
    rmk = f" RMK AO2 {remark}" if remark else " RMK AO2"
    r = decode(f"KZZQ 120551Z 18004KT 3SM -RA BR OVC004 08/08 A3001{rmk}")
    if precip_mm is None:
        assert r["precip_mm"] is None
    else:
        assert r["precip_mm"] == pytest.approx(precip_mm, abs=1e-9)
    assert r["ceiling_m"] == pytest.approx(400 * 0.3048, abs=0.05)
