"""File drop: a watched folder of CSV, JSON, NDJSON or METAR files.

A file is read once it is complete: its modification time is at least ``settle``
seconds before the injected ``now`` (or before the wall clock, when ``now`` is a
simulated time earlier than the file itself, as in the demo and replays). Names
ending ``.part`` or ``.tmp``, and hidden names (``.obs.csv.x3F2``, as rsync writes),
are in-progress uploads and are left alone until renamed. Each file is taken once:
the SHA-256 of its content is recorded in the store in the same transaction as its
rows. Then it is moved, never deleted:

- ``processed/NAME`` — every row taken;
- ``processed/NAME`` and ``processed/NAME.why.txt`` — a half-bad file: the good rows
  were taken, and the why file lists each bad row as ``line N, column C: reason``;
- ``rejected/NAME`` and ``rejected/NAME.why.txt`` — nothing could be taken (binary,
  bad encoding, truncated JSON, empty, wrong columns, every row bad), with the reasons;
- a file whose content was taken before goes where its first copy went, with a why
  file saying so.

The two folders sit inside the watched folder and are created when needed; a name that
is already there gets a numeric suffix (``obs.1.csv``), so nothing is overwritten.

Formats, by ``format`` or else by extension: ``.csv``; ``.json`` (an array of records,
or ``{"observations": [...]}``); ``.ndjson``/``.jsonl`` (one record per line);
``.txt``/``.metar`` (METAR reports or bulletins). Line numbers are the file's own, the
CSV header being line 1.
"""

from __future__ import annotations

import csv
import errno
import hashlib
import io
import json
import logging
import os
import re
import time
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from notifier.core.observations import (
    INPUT_COLUMNS,
    Rejection,
    empty_frame,
    missing_columns,
    normalize,
    normalize_frame,
)
from notifier.ingest.base import FileOutcome, PollResult
from notifier.ingest.metar import parse_metar_text

if TYPE_CHECKING:
    from notifier.core.config import FileDropSource, Site
    from notifier.storage.store import Store

__all__ = ["EXTENSIONS", "FileDrop", "ParsedFile", "format_for", "parse_file", "why_text"]

log = logging.getLogger(__name__)

EXTENSIONS = {
    ".csv": "csv",
    ".json": "json",
    ".ndjson": "ndjson",
    ".jsonl": "ndjson",
    ".txt": "metar",
    ".metar": "metar",
}
IN_PROGRESS_SUFFIXES = (".part", ".tmp")
PROCESSED = "processed"
REJECTED = "rejected"
WHY_SUFFIX = ".why.txt"

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
            return REJECTED
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


# -- CSV ---------------------------------------------------------------------------


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


# -- JSON --------------------------------------------------------------------------


def _json_records(text: str, origin: str) -> tuple[list[Any], list[int] | None, list[Rejection]]:
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise _Unreadable(
            f"not valid JSON: {exc.msg} (line {exc.lineno}, column {exc.colno})"
        ) from exc
    except RecursionError as exc:
        raise _Unreadable("not usable JSON: nested too deeply") from exc
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
    return records, lines, rejections


# -- the watched folder ------------------------------------------------------------


def why_text(name: str, status: str, parsed: ParsedFile | None, note: str | None = None) -> str:
    """The NAME.why.txt beside a moved file: one problem per line."""
    out = [f"{name}: {status}"]
    if note:
        out.append(note)
    if parsed is not None:
        if parsed.fatal:
            out.append(f"file: {parsed.fatal}")
        if not parsed.frame.empty:
            out.append(f"{len(parsed.frame)} rows taken; these were not:")
        for r in parsed.rejections:
            where = "file" if r.line is None else f"line {r.line}"
            out.append(
                f"{where}, column {r.column}: {r.reason}" if r.column else f"{where}: {r.reason}"
            )
        if parsed.warnings:
            out.append("notes:")
            out.extend(f"  {w}" for w in parsed.warnings)
    return "\n".join(out) + "\n"


def _free_name(folder: Path, name: str) -> Path:
    """``folder/name``, or ``stem.N.ext`` if that (or its why file) exists already."""
    path = Path(name)
    stem, suffix = (path.stem, path.suffix) if path.suffix else (name, "")
    candidate = folder / name
    n = 0
    while candidate.exists() or candidate.with_name(candidate.name + WHY_SUFFIX).exists():
        n += 1
        candidate = folder / f"{stem}.{n}{suffix}"
    return candidate


def _move(path: Path, folder: Path) -> Path:
    """Move without ever overwriting: link to a free name, then drop the old name."""
    folder.mkdir(parents=True, exist_ok=True)
    while True:
        target = _free_name(folder, path.name)
        try:
            os.link(path, target)
        except FileExistsError:
            continue  # taken between the check and the link: pick the next name
        except OSError as exc:
            if exc.errno not in (errno.EXDEV, errno.EPERM, errno.ENOTSUP, errno.EMLINK):
                raise
            os.rename(path, target)  # no hard links here: rename into a name just checked free
            return target
        os.unlink(path)
        return target


class FileDrop:
    """An :class:`~notifier.ingest.base.ObservationSource` over a watched folder."""

    def __init__(
        self,
        source: FileDropSource,
        *,
        sites: Mapping[str, Site],
        store: Store,
        wall_clock: Callable[[], float] = time.time,
    ):
        self.source = source
        self.sites = sites
        self.store = store
        self.wall_clock = wall_clock

    @property
    def id(self) -> str:
        return self.source.id

    def candidates(self, now: datetime) -> list[Path]:
        """Complete files waiting in the folder, in name order."""
        folder = self.source.path
        ready = []
        for path in sorted(folder.glob(self.source.glob)):
            rel = path.relative_to(folder).parts
            if rel[0] in (PROCESSED, REJECTED) or any(part.startswith(".") for part in rel):
                continue
            if path.name.endswith(IN_PROGRESS_SUFFIXES) or path.name.endswith(WHY_SUFFIX):
                continue
            try:
                if not path.is_file():
                    continue
                mtime = path.stat().st_mtime
            except OSError:
                continue  # gone or unreadable since the listing; next poll will tell
            age_s = now.timestamp() - mtime
            if age_s < 0:  # a simulated clock behind the file: judge by the wall clock
                age_s = self.wall_clock() - mtime
            if age_s >= self.source.settle:
                ready.append(path)
        return ready

    def poll(self, now: datetime) -> PollResult:
        result = PollResult(source_id=self.id, stored=True)
        folder = self.source.path
        if not folder.is_dir():
            result.ok = False
            result.error = f"folder not found: {folder}"
            return result
        frames = []
        errors = []
        for path in self.candidates(now):
            try:
                frame = self._take(path, now, result)
            except Exception as exc:  # a poll must never crash; the file stays where it is
                log.exception("file drop %s: %s", self.id, path)
                errors.append(f"{path.name}: {type(exc).__name__}: {exc}")
                continue
            if frame is not None and not frame.empty:
                frames.append(frame)
        if frames:
            result.frame = pd.concat(frames, ignore_index=True)
        if errors:
            result.ok = False
            result.error = "; ".join(errors)
        return result

    def _take(self, path: Path, now: datetime, result: PollResult) -> pd.DataFrame | None:
        data = path.read_bytes()
        digest = hashlib.sha256(data).hexdigest()
        seen = self.store.seen_file(digest)
        if seen is not None:
            folder = REJECTED if seen["status"] == REJECTED else PROCESSED
            note = (
                f"same content as {seen['name']}, taken {seen['taken_at']:%Y-%m-%dT%H:%M:%SZ} "
                f"({seen['status']}); not read again"
            )
            self._file_away(path, folder, "duplicate", None, note)
            result.files.append((path.name, "duplicate"))
            return None
        parsed = parse_file(
            data,
            format_for(path, self.source.format),
            origin=path.name,
            sites=self.sites,
            now=now,
            source_id=self.id,
            default_kind=self.source.kind,
            default_site=self.source.site,
            stations=self.source.stations,
        )
        status = parsed.status
        with self.store.atomic() as conn:
            self.store.add_observations(parsed.frame, conn=conn, received_at=now)
            self.store.mark_file(digest, path.name, status, self.id, now, conn=conn)
        folder = REJECTED if status == REJECTED else PROCESSED
        self._file_away(path, folder, status, parsed if status != "processed" else None)
        result.files.append((path.name, status))
        if parsed.fatal:
            result.rejections.append(Rejection(path.name, None, None, parsed.fatal))
        result.rejections.extend(parsed.rejections)
        result.warnings.extend(parsed.warnings)
        return parsed.frame

    def _file_away(
        self,
        path: Path,
        folder_name: str,
        status: str,
        parsed: ParsedFile | None,
        note: str | None = None,
    ) -> FileOutcome:
        target = _move(path, self.source.path / folder_name)
        if parsed is not None or note is not None:
            why = target.with_name(target.name + WHY_SUFFIX)
            with why.open("x", encoding="utf-8") as handle:  # "x": never overwrite
                handle.write(why_text(path.name, status, parsed, note))
        log.info(
            "file drop %s: %s → %s/%s (%s)", self.id, path.name, folder_name, target.name, status
        )
        return target.name, status
