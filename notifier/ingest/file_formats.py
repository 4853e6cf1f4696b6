"""One input file's bytes to the canonical table: CSV, JSON, NDJSON or METAR text.

Formats, by the source's ``format`` or else by extension: ``.csv``; ``.json`` (an array
of records, or ``{"observations": [...]}``); ``.ndjson``/``.jsonl`` (one record per
line); ``.txt``/``.metar`` (METAR reports or bulletins). Line numbers are the file's own,
the CSV header being line 1. Nothing here touches the file system: the file drop and
``fogwatch assess --data`` hand in the bytes.
"""

from __future__ import annotations

import csv
import io
import json
import re
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from notifier.core.columns import INPUT_COLUMNS, Rejection, empty_frame, missing_columns
from notifier.core.observations import normalize, normalize_frame
from notifier.ingest.metar import parse_metar_text

if TYPE_CHECKING:
    from notifier.core.config import Site

__all__ = ["EXTENSIONS", "ParsedFile", "format_for", "parse_file"]


EXTENSIONS = {
    ".csv": "csv",
    ".json": "json",
    ".ndjson": "ndjson",
    ".jsonl": "ndjson",
    ".txt": "metar",
    ".metar": "metar",
}

_SKIPPED_LINE = re.compile(r"Skipping line (\d+): (.*)")


class _Unreadable(Exception):
    """The whole file cannot be read; the message is the reason."""


@dataclass
class ParsedFile:
    """What one file held: good rows, rejected rows, notes, or why none could be read."""

    frame: pd.DataFrame = field(default_factory=empty_frame)
    rejections: list[Rejection] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    fatal: str | None = None

    @property
    def status(self) -> str:
        if self.fatal is not None or self.frame.empty:
            return "rejected"
        return "partial" if self.rejections else "processed"


def format_for(path: Path, configured: str = "auto") -> str | None:
    """The format to read ``path`` with, or None for an unknown extension."""
    if configured != "auto":
        return configured
    return EXTENSIONS.get(path.suffix.lower())


def parse_file(
    data: bytes,
    fmt: str | None,
    *,
    origin: str,
    sites: Mapping[str, Site],
    now: datetime,
    source_id: str,
    default_kind: str = "obs",
    default_site: str | None = None,
    stations: Mapping[str, str] | None = None,
) -> ParsedFile:
    """Bytes of one file → :class:`ParsedFile`. Never raises for bad content."""
    common: dict[str, Any] = {
        "sites": sites,
        "now": now,
        "origin": origin,
        "source_id": source_id,
        "default_kind": default_kind,
        "default_site": default_site,
    }
    try:
        if fmt is None:
            known = ", ".join(sorted(EXTENSIONS))
            raise _Unreadable(f"unknown file type (expected one of {known})")
        text = _decode(data)
        if fmt == "csv":
            raw, csv_lines, rejections = _read_csv(text, origin)
            problems = missing_columns(raw.columns, default_site=default_site)
            if problems:
                raise _Unreadable("line 1: " + "; ".join(problems))
            frame, more, notes = normalize_frame(raw, lines=csv_lines, **common)
            return _result(frame, rejections + more, notes)
        if fmt in ("json", "ndjson"):
            reader = _json_records if fmt == "json" else _ndjson_records
            records, lines, rejections = reader(text, origin)
            keys = {k for r in records if isinstance(r, dict) for k in r}
            problems = missing_columns(keys, default_site=default_site)
            if records and problems:
                raise _Unreadable("; ".join(problems))
            frame, more, notes = normalize(records, lines=lines, **common)
            return _result(frame, rejections + more, notes)
        if fmt == "metar":
            records, lines, rejections, notes = parse_metar_text(
                text, origin=origin, stations=stations or {}, site_ids=sites, now=now
            )
            frame, more, more_notes = normalize(records, lines=lines, **common)
            return _result(frame, rejections + more, notes + more_notes)
        raise _Unreadable(f"unknown format {fmt!r}")
    except _Unreadable as exc:
        return ParsedFile(fatal=str(exc))
    except Exception as exc:  # a parser's own failure is a reason too: the file is filed
        return ParsedFile(fatal=f"cannot be read: {type(exc).__name__}: {_first_line(exc)}")


def _first_line(exc: BaseException) -> str:
    return (str(exc).strip().splitlines() or [""])[0][:200]


def _json_value_error(exc: ValueError) -> str:
    """Why ``json`` refused a syntactically valid text (an integer too long to convert)."""
    if "digits" in str(exc):
        # Python refuses int strings over sys.get_int_max_str_digits() (4300 by default)
        return "a number has more digits than can be read (over 4300)"
    return f"not usable JSON: {_first_line(exc)}"


def _result(frame: pd.DataFrame, rejections: list[Rejection], notes: list[str]) -> ParsedFile:
    rejections = sorted(rejections, key=lambda r: (r.line is None, r.line or 0))
    parsed = ParsedFile(frame=frame, rejections=rejections, warnings=notes)
    if frame.empty and not rejections:
        parsed.fatal = "no observation rows found"
    elif frame.empty:
        parsed.fatal = "no row could be taken"
    return parsed


def _decode(data: bytes) -> str:
    if not data.strip():
        raise _Unreadable("empty file")
    if b"\x00" in data:
        raise _Unreadable("binary data (NUL bytes), not text")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise _Unreadable(
            f"not UTF-8 text: {exc.reason} at byte {exc.start} (line {line})"
        ) from exc


_TEXT_COLUMNS = {"site": str, "time": str, "kind": str, "weather": str}


def _read_csv(text: str, origin: str) -> tuple[pd.DataFrame, np.ndarray, list[Rejection]]:
    """(raw frame, each row's line, rejected lines). Header = line 1."""
    if '"' in text:
        # A quoted field may hold a newline, which would break the line arithmetic below.
        return _read_csv_quoted(text, origin)
    with warnings.catch_warnings(record=True) as caught:
        # pandas reports each malformed line as a ParserWarning carrying its number.
        warnings.simplefilter("always")
        try:
            raw = pd.read_csv(
                io.StringIO(text),
                dtype=_TEXT_COLUMNS,
                skip_blank_lines=False,
                on_bad_lines="warn",
                skipinitialspace=True,
            )
        except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as exc:
            raise _Unreadable(f"not readable as CSV: {str(exc).strip()}") from exc
    rejections = []
    bad_lines = []
    for warning in caught:
        for match in _SKIPPED_LINE.finditer(str(warning.message)):
            bad_lines.append(int(match.group(1)))
            rejections.append(Rejection(origin, int(match.group(1)), None, match.group(2)))
    raw.columns = [str(c).strip().lower() for c in raw.columns]
    lines = np.setdiff1d(np.arange(2, 2 + len(raw) + len(bad_lines)), bad_lines)
    blank = raw.isna().all(axis=1).to_numpy()
    if blank.any():
        raw, lines = raw[~blank], lines[~blank]
    return raw, lines, rejections


def _read_csv_quoted(text: str, origin: str) -> tuple[pd.DataFrame, np.ndarray, list[Rejection]]:
    reader = csv.reader(io.StringIO(text, newline=""), skipinitialspace=True)
    try:
        header = next(reader, None)
        if header is None:
            raise _Unreadable("empty file")
        rows: list[list[str]] = []
        lines: list[int] = []
        rejections = []
        end = reader.line_num
        for row in reader:
            start, end = end + 1, reader.line_num
            if not any(cell.strip() for cell in row):
                continue
            if len(row) != len(header):
                reason = f"expected {len(header)} fields, saw {len(row)}"
                rejections.append(Rejection(origin, start, None, reason))
                continue
            rows.append(row)
            lines.append(start)
    except csv.Error as exc:
        raise _Unreadable(f"not readable as CSV: line {reader.line_num}: {exc}") from exc
    names = [c.strip().lower() for c in header]
    raw = pd.DataFrame(rows, columns=names, dtype=object)
    for name in raw.columns:
        if name not in _TEXT_COLUMNS and name in INPUT_COLUMNS:
            raw[name] = raw[name].replace("", None)
    return raw, np.asarray(lines, dtype="int64"), rejections


def _json_records(text: str, origin: str) -> tuple[list[Any], list[int] | None, list[Rejection]]:
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise _Unreadable(
            f"not valid JSON: {exc.msg} (line {exc.lineno}, column {exc.colno})"
        ) from exc
    except RecursionError as exc:
        raise _Unreadable("not usable JSON: nested too deeply") from exc
    except ValueError as exc:
        raise _Unreadable(_json_value_error(exc)) from exc
    if isinstance(doc, list):
        records = doc
    elif isinstance(doc, dict) and isinstance(doc.get("observations"), list):
        records = doc["observations"]
    else:
        raise _Unreadable('expected a JSON array of records or {"observations": [...]}')
    lines = _record_lines(text, len(records))
    return records, lines, []


def _record_lines(text: str, count: int) -> list[int] | None:
    """The line on which each record starts, found by stepping through the JSON text.

    ``json`` gives no positions for parsed values; stepping element by element with
    ``raw_decode`` does, at the cost of a second pass over an already valid document.
    """
    decoder = json.JSONDecoder()
    skip = re.compile(r"[\s,]*")

    def elements(pos: int) -> list[int]:
        starts: list[int] = []
        pos += 1  # past "["
        while True:
            pos = skip.match(text, pos).end()  # type: ignore[union-attr]
            if pos >= len(text) or text[pos] == "]":
                return starts
            starts.append(pos)
            _, pos = decoder.raw_decode(text, pos)

    try:
        pos = skip.match(text, 0).end()  # type: ignore[union-attr]
        if text[pos] == "[":
            starts = elements(pos)
        else:
            starts = []
            pos += 1  # past "{"
            while True:
                pos = skip.match(text, pos).end()  # type: ignore[union-attr]
                if text[pos] == "}":
                    break
                key, pos = decoder.raw_decode(text, pos)
                pos = re.compile(r"\s*:\s*").match(text, pos).end()  # type: ignore[union-attr]
                if key == "observations" and text[pos] == "[":
                    starts = elements(pos)  # the last such key wins, as in json.loads
                _, pos = decoder.raw_decode(text, pos)
    except (ValueError, IndexError, AttributeError):
        return None
    if len(starts) != count:
        return None
    lines = []
    line, previous = 1, 0
    for start in starts:
        line += text.count("\n", previous, start)
        previous = start
        lines.append(line)
    return lines


def _ndjson_records(text: str, origin: str) -> tuple[list[Any], list[int], list[Rejection]]:
    records: list[Any] = []
    lines: list[int] = []
    rejections = []
    for number, line in enumerate(text.split("\n"), start=1):
        if not line.strip():
            continue
        try:
            records.append(json.loads(line))
            lines.append(number)
        except json.JSONDecodeError as exc:
            reason = f"not valid JSON: {exc.msg} (column {exc.colno})"
            rejections.append(Rejection(origin, number, None, reason))
        except RecursionError:
            rejections.append(Rejection(origin, number, None, "JSON nested too deeply"))
        except ValueError as exc:
            rejections.append(Rejection(origin, number, None, _json_value_error(exc)))
    return records, lines, rejections
