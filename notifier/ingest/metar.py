"""METAR text (one report per line, or WMO bulletins) → observation records.

Decoding is done by the ``metar`` package (MetPy's parser needs a station table from
the internet and fails offline). This module adds what a report alone does not say:
which month it belongs to (from the injected clock), which site a station is, and how
sky groups become one cloud-cover percentage.

Values and the practice behind them:

- visibility in metres: ``0200`` → 200 m, ``9999`` and ``CAVOK`` → 10 000 m, ``1/4SM``
  → 402 m (statute mile 1609.344 m) — the package's decoding;
- cloud_pct from the most extensive layer: FEW 25, SCT 50, BKN 75, OVC 100 (the okta
  bands 1–2, 3–4, 5–7 and 8, each taken at or near its upper end, as is common
  practice); vertical visibility ``VV///`` or ``VV001`` (sky obscured) → 100;
  SKC/CLR/NSC/NCD and CAVOK (no cloud of operational significance) → 0;
- ceiling_m: the height of the lowest BKN or OVC layer, or the vertical visibility VV,
  in metres (hundreds of feet × 30.48); no such layer (SKC, CLR, NSC, NCD, FEW, SCT,
  CAVOK) is :data:`~notifier.core.columns.NO_CEILING_M`, "no ceiling"; ``VV///`` (sky
  obscured, height not measured) is unknown (docs/references.md [FMH-1],
  [WMO-No. 306]);
- precip_mm: the US hourly remark ``Prrrr`` in hundredths of an inch (``P0000`` is a
  trace, 0 mm), × 0.254; a report without it says nothing (docs/references.md [FMH-1]);
- weather: the present-weather groups as written, e.g. ``FZFG``, ``BR``, ``MIFG``,
  ``-DZ BR`` (WMO-No. 306, FM 15, code table 4678);
- wind in knots or m/s as reported, converted at the canonical table's edge; a calm
  ``00000KT`` or variable ``VRB`` wind has no direction (NaN).
"""

from __future__ import annotations

import calendar
import re
import warnings
from collections.abc import Collection, Mapping
from datetime import datetime
from typing import Any, cast

from metar import Metar

from notifier.core.columns import NO_CEILING_M, Rejection

__all__ = ["MetarError", "decode_report", "parse_metar_text", "report_month", "split_reports"]

# Common practice: each okta band at or near its upper end (FEW 1-2, SCT 3-4, BKN 5-7,
# OVC 8); a vertical visibility means the sky cannot be seen at all.
COVER_PCT = {
    "SKC": 0.0,
    "CLR": 0.0,
    "NSC": 0.0,
    "NCD": 0.0,
    "FEW": 25.0,
    "SCT": 50.0,
    "BKN": 75.0,
    "OVC": 100.0,
    "VV": 100.0,
}

_HEADING = re.compile(r"^[A-Z]{4}\d{2}\s+[A-Z]{4}\s+\d{6}(\s+[A-Z]{3})?$")  # SAZZ31 ZZQA 120600
_DATE_LINE = re.compile(r"^\d{4}/\d{2}/\d{2}\s+\d{2}:\d{2}$")  # 2024/01/12 05:50
_MARKER = re.compile(r"^(METAR|SPECI|ZCZC|NNNN|\d{1,5})$")
_DAY_TIME = re.compile(r"(?:^|\s)(\d{2})(\d{2})(\d{2})Z(?=\s|$)")
_CAVOK = re.compile(r"(?:^|\s)CAVOK(?=\s|=|$)")


class MetarError(ValueError):
    """A report that cannot be used, with the reason."""


def _is_header(line: str) -> bool:
    return (
        not line
        or line.startswith("#")
        or bool(_HEADING.match(line) or _DATE_LINE.match(line) or _MARKER.match(line))
    )


def split_reports(text: str) -> list[tuple[int, str]]:
    """(first line, report) for each report; bulletin headings and ``=`` are removed.

    A file that uses ``=`` terminators may spread a report over several lines; one that
    does not has one report per line.
    """
    text = "".join(ch for ch in text if ch in "\n\t" or ch >= " ")  # SOH/ETX, CR
    terminated = "=" in text
    reports: list[tuple[int, str]] = []
    pending: list[str] = []
    start = 0
    for number, raw_line in enumerate(text.split("\n"), start=1):
        line = " ".join(raw_line.split())
        if _is_header(line):
            if pending:  # a heading ends an unterminated report
                reports.append((start, " ".join(pending)))
                pending = []
            continue
        if not terminated:
            reports.append((number, line))
            continue
        while line:
            head, sep, line = line.partition("=")
            head = head.strip()
            if head:
                if not pending:
                    start = number
                pending.append(head)
            if sep and pending:
                reports.append((start, " ".join(pending)))
                pending = []
            line = line.strip()
    if pending:
        reports.append((start, " ".join(pending)))
    return reports


def report_month(day: int, now: datetime) -> tuple[int, int]:
    """(year, month) of a report dated ``day`` and read at ``now``.

    A report carries only its day of the month: a day still ahead of today belongs to
    an earlier month, the latest one that has such a day (a 31st read on 1 March is
    from January).
    """
    if not 1 <= day <= 31:
        raise MetarError(f"day {day:02d} is not a day of the month")
    year, month = now.year, now.month
    if day > now.day:
        year, month = (year - 1, 12) if month == 1 else (year, month - 1)
    while day > calendar.monthrange(year, month)[1]:
        year, month = (year - 1, 12) if month == 1 else (year, month - 1)
    return year, month


def decode_report(report: str, now: datetime) -> tuple[dict[str, Any], list[str]]:
    """One report → (record with ``station`` and canonical fields, notes).

    Raises :class:`MetarError` with the parser's reason for a report that cannot be used.
    """
    match = _DAY_TIME.search(report)
    if not match:
        raise MetarError("no observation time group (DDHHMMZ)")
    year, month = report_month(int(match.group(1)), now)
    with warnings.catch_warnings(record=True) as caught:
        # The package reports problems as warnings when not strict; collect them.
        warnings.simplefilter("always")
        parsed = Metar.Metar(report, month=month, year=year, strict=False)
    problems = [str(w.message).split("\n")[0] for w in caught]
    failed = [p for p in problems if "failed while processing" in p]
    if failed:
        raise MetarError(f"metar parser: {failed[0]}")
    if parsed.station_id is None or parsed.time is None:
        reason = problems[0] if problems else "no station or time group"
        raise MetarError(f"not a METAR report ({reason})")
    if parsed.mod == "NO DATA":
        raise MetarError("NIL report: the station sent no observation")
    notes = [f"metar parser: {p}" for p in problems]
    return _record(parsed, report), notes


def _record(parsed: Metar.Metar, report: str) -> dict[str, Any]:
    speed = parsed.wind_speed.value("KT") if parsed.wind_speed is not None else None
    direction = parsed.wind_dir.value() if parsed.wind_dir is not None else None
    if speed == 0:
        direction = None  # 00000KT: calm has no direction
    covers = [COVER_PCT[cover] for cover, _height, _cloud in parsed.sky if cover in COVER_PCT]
    if _CAVOK.search(report):
        covers.append(0.0)
    weather = " ".join(
        "".join(part for part in group if part) for group in parsed.weather if any(group)
    )
    precip = parsed.precip_1hr.value("IN") if parsed.precip_1hr is not None else None
    return {
        "station": parsed.station_id,
        # the caller has rejected a report without a time group
        "time": cast(datetime, parsed.time).strftime("%Y-%m-%dT%H:%M:00Z"),
        "temp_c": parsed.temp.value("C") if parsed.temp is not None else None,
        "dewpoint_c": parsed.dewpt.value("C") if parsed.dewpt is not None else None,
        "wind_kt": speed,
        "wind_dir_deg": direction,
        "visibility_m": parsed.vis.value("M") if parsed.vis is not None else None,
        "cloud_pct": max(covers) if covers else None,
        "pressure_hpa": parsed.press.value("HPA") if parsed.press is not None else None,
        "ceiling_m": ceiling_m(parsed.sky, cavok=bool(_CAVOK.search(report))),
        # hundredths of an inch, read by the package as inches: 0.01 in = 0.254 mm
        "precip_mm": None if precip is None else round(precip * 25.4, 3),
        "weather": weather or None,
    }


def ceiling_m(sky: list[tuple[Any, Any, Any]], *, cavok: bool = False) -> float | None:
    """The ceiling of a report's sky groups in metres: the lowest BKN or OVC layer, or the
    vertical visibility; :data:`NO_CEILING_M` if none; None if the sky says nothing, or the
    ceiling layer's height is not given (``VV///``, ``BKN///``).

    >>> from metar import Metar
    >>> sky = Metar.Metar("METAR ZZZZ 120550Z 00000KT 9999 FEW005 BKN012 OVC030 05/04").sky
    >>> ceiling_m(sky)
    365.8
    >>> ceiling_m(Metar.Metar("METAR ZZZZ 120550Z 00000KT 9999 SCT008 05/04 Q1020").sky)
    30000.0
    """
    # METAR lists the layers from the lowest up, so the first BKN, OVC or VV is the ceiling
    for cover, height, _cloud in sky:
        if cover in ("BKN", "OVC", "VV"):
            return None if height is None else round(height.value("FT") * 0.3048, 1)
    if cavok or any(cover in COVER_PCT for cover, _h, _c in sky):
        return NO_CEILING_M
    return None


def parse_metar_text(
    text: str,
    *,
    origin: str,
    stations: Mapping[str, str],
    site_ids: Collection[str],
    now: datetime,
) -> tuple[list[dict[str, Any]], list[int], list[Rejection], list[str]]:
    """METAR text → (records with ``site``, their lines, rejections, warnings).

    A station maps to a site through ``stations``; a station id that is itself a site
    id needs no mapping.
    """
    records: list[dict[str, Any]] = []
    lines: list[int] = []
    rejections: list[Rejection] = []
    notes: list[str] = []
    for line, report in split_reports(text):
        try:
            record, report_notes = decode_report(report, now)
        except MetarError as exc:
            rejections.append(Rejection(origin, line, None, f"{exc}: {report[:60]!r}"))
            continue
        station = record.pop("station")
        site = stations.get(station) or (station if station in site_ids else None)
        if site is None:
            known = ", ".join(sorted(stations)) or "none"
            rejections.append(
                Rejection(
                    origin,
                    line,
                    "station",
                    f"station {station} is not mapped to a site (stations: {known})",
                )
            )
            continue
        record["site"] = site
        records.append(record)
        lines.append(line)
        notes.extend(f"{origin}:{line}: {note}" for note in report_notes)
    return records, lines, rejections, notes
