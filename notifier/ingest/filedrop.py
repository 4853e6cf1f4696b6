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

File formats are read by :mod:`notifier.ingest.file_formats`.
"""

from __future__ import annotations

import errno
import hashlib
import logging
import os
import time
from collections.abc import Callable, Mapping
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from notifier.core.columns import Rejection
from notifier.ingest.base import FileOutcome, PollResult
from notifier.ingest.file_formats import ParsedFile, format_for, parse_file

if TYPE_CHECKING:
    from notifier.core.config import FileDropSource, Site
    from notifier.storage.store import Store

__all__ = ["FileDrop", "why_text"]


log = logging.getLogger(__name__)


IN_PROGRESS_SUFFIXES = (".part", ".tmp")
PROCESSED = "processed"
REJECTED = "rejected"
WHY_SUFFIX = ".why.txt"


#: a line of a why file longer than this is cut, saying how long it was (a 20 MB bad line
#: must not become a 20 MB why file)
WHY_LINE_CHARS = 300


def _cut(line: str) -> str:
    if len(line) <= WHY_LINE_CHARS:
        return line
    return f"{line[:WHY_LINE_CHARS]}… (cut: the line was {len(line):,} characters)"


def why_text(name: str, status: str, parsed: ParsedFile | None, note: str | None = None) -> str:
    """The NAME.why.txt beside a moved file: one problem per line, each cut to
    :data:`WHY_LINE_CHARS` characters."""
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
    return "\n".join(_cut(line) for line in out) + "\n"


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
        # files modified "in the future", by (size, mtime) at the last poll
        self._future: dict[Path, tuple[int, float]] = {}

    @property
    def id(self) -> str:
        return self.source.id

    def candidates(self, now: datetime) -> list[Path]:
        """Complete files waiting in the folder, in name order."""
        return self.scan(now)[0]

    def waiting(self, now: datetime) -> list[tuple[str, str]]:
        """What matches the glob but is not taken yet, with why (``fogwatch sources``)."""
        return self.scan(now, remember=False)[1]

    def scan(
        self, now: datetime, remember: bool = True
    ) -> tuple[list[Path], list[tuple[str, str]]]:
        """(complete files, in name order; (name, why) for each entry left waiting).

        A file whose modification time is ahead of both ``now`` and the wall clock (an
        uploader's clock running fast, or ``touch -d`` in the future) cannot be judged by
        its age: it is taken once two polls in a row saw the same size and time
        (``remember``: this scan is a poll's, and counts as the first look).
        """
        folder = self.source.path
        ready: list[Path] = []
        waiting: list[tuple[str, str]] = []
        future: dict[Path, tuple[int, float]] = {}
        for path in sorted(folder.glob(self.source.glob)):
            rel = path.relative_to(folder).parts
            if rel[0] in (PROCESSED, REJECTED) or any(part.startswith(".") for part in rel):
                continue
            name = str(path.relative_to(folder))
            if path.name.endswith(WHY_SUFFIX):
                continue
            if path.name.endswith(IN_PROGRESS_SUFFIXES):
                waiting.append((name, "upload in progress (waits until renamed)"))
                continue
            try:
                if path.is_dir():
                    waiting.append((name, "a folder, not a file: left alone"))
                    continue
                if not path.is_file():
                    waiting.append((name, "not a regular file: left alone"))
                    continue
                stat = path.stat()
            except OSError as exc:
                waiting.append((name, f"cannot be read: {exc.strerror or exc}"))
                continue  # gone or unreadable since the listing; next poll will tell
            age_s = now.timestamp() - stat.st_mtime
            if age_s < 0:  # a simulated clock behind the file: judge by the wall clock
                age_s = self.wall_clock() - stat.st_mtime
            if age_s < 0:
                seen = (stat.st_size, stat.st_mtime)
                future[path] = seen
                if remember and self._future.get(path) == seen:
                    ready.append(path)
                else:
                    waiting.append((name, f"modified {-age_s:.0f} s in the future: taken when "
                                    "two polls running find it unchanged"))  # fmt: skip
            elif age_s >= self.source.settle:
                ready.append(path)
            else:
                waiting.append((name, f"changed {age_s:.0f} s ago: waits {self.source.settle:g} s"))
        if remember:
            self._future = future
        return ready, waiting

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
        return result.finish(frames, errors)

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
