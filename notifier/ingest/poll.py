"""Observation sources: build them from config, poll them, report their health.

- :func:`build_sources` — one adapter per configured source (file drop, HTTP JSON);
- :func:`poll_all` / :func:`poll_sources` — poll each, store the good rows, record each
  source's health; a source that fails (or has a bug) never stops the others;
- :func:`read_files` — parse given files by extension without moving or recording them
  (``fogwatch assess --data``);
- :func:`health_report` — the table behind ``fogwatch sources CONFIG``.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from notifier.core.columns import Rejection, empty_frame
from notifier.ingest.base import ObservationSource, PollResult

if TYPE_CHECKING:
    import requests

    from notifier.core.config import Config
    from notifier.storage.store import Store

__all__ = [
    "ObservationSource",
    "PollResult",
    "build_sources",
    "health_report",
    "poll_all",
    "poll_sources",
    "read_files",
]

log = logging.getLogger(__name__)


def build_sources(
    config: Config, store: Store, session: requests.Session | None = None
) -> list[ObservationSource]:
    """One adapter per configured source. Without a session, the HTTP sources share a new
    ``requests.Session``, which the caller may close through any feed's ``session``."""
    from notifier.core.config import FileDropSource, HttpJsonSource
    from notifier.ingest.filedrop import FileDrop
    from notifier.ingest.http_json import HttpJsonFeed

    sites = {site.id: site for site in config.sites}
    out: list[ObservationSource] = []
    for source in config.sources:
        if isinstance(source, FileDropSource):
            out.append(FileDrop(source, sites=sites, store=store))
        elif isinstance(source, HttpJsonSource):
            if session is None:
                import requests

                session = requests.Session()
            out.append(HttpJsonFeed(source, sites=sites, session=session))
    return out


def poll_sources(
    sources: Sequence[ObservationSource], store: Store, now: datetime
) -> list[PollResult]:
    """Poll each source, store its good rows, record its health."""
    results = []
    for source in sources:
        try:
            result = source.poll(now)
        except Exception as exc:  # a bug in one adapter must not silence the others
            log.exception("source %s: poll failed", source.id)
            result = PollResult(
                source_id=source.id, ok=False, error=f"internal error: {type(exc).__name__}: {exc}"
            )
        if not result.stored and not result.frame.empty:
            try:
                store.add_observations(result.frame, received_at=now)
            except Exception as exc:
                log.exception("source %s: storing rows failed", source.id)
                result.ok = False
                result.error = f"storing rows failed: {type(exc).__name__}: {exc}"
        store.record_poll(
            source.id,
            now,
            result.ok,
            len(result.frame),
            result.rows_rejected,
            result.error,
        )
        if not result.ok:
            log.warning("source %s: %s", source.id, result.error)
        results.append(result)
    return results


def poll_all(
    config: Config, store: Store, now: datetime, session: requests.Session | None = None
) -> list[PollResult]:
    """Build every configured source and poll it once (see :func:`poll_sources`).

    A session made here is closed before returning; a session handed in is left open.
    """
    if session is not None or not any(s.type == "http_json" for s in config.sources):
        return poll_sources(build_sources(config, store, session), store, now)
    import requests

    with requests.Session() as own:
        return poll_sources(build_sources(config, store, own), store, now)


def read_files(
    paths: Sequence[Path], config: Config, now: datetime
) -> tuple[pd.DataFrame, list[Rejection], list[str]]:
    """Parse files by extension into one canonical table; nothing is moved or recorded.

    A file inside a file-drop source's folder is read with that source's settings
    (site, kind, stations); otherwise METAR stations of every file-drop source apply,
    and a config with a single site lends it to rows that name none.
    """
    from notifier.core.config import FileDropSource
    from notifier.ingest.file_formats import format_for, parse_file

    sites = {site.id: site for site in config.sites}
    drops = [s for s in config.sources if isinstance(s, FileDropSource)]
    stations = {k: v for s in drops for k, v in s.stations.items()}
    frames = []
    rejections: list[Rejection] = []
    warnings: list[str] = []
    for path in paths:
        path = Path(path)
        owner = next((s for s in drops if path.resolve().is_relative_to(s.path)), None)
        try:
            data = path.read_bytes()
        except OSError as exc:
            rejections.append(Rejection(str(path), None, None, f"cannot read: {exc.strerror}"))
            continue
        parsed = parse_file(
            data,
            format_for(path, owner.format if owner else "auto"),
            origin=str(path),
            sites=sites,
            now=now,
            source_id=owner.id if owner else "file",
            default_kind=owner.kind if owner else "obs",
            default_site=(owner.site if owner else None)
            or (config.sites[0].id if len(config.sites) == 1 else None),
            stations=owner.stations if owner else stations,
        )
        if parsed.fatal:
            rejections.append(Rejection(str(path), None, None, parsed.fatal))
        rejections.extend(parsed.rejections)
        warnings.extend(parsed.warnings)
        if not parsed.frame.empty:
            frames.append(parsed.frame)
    if not frames:
        return empty_frame(), rejections, warnings
    frame = pd.concat(frames, ignore_index=True)
    repeated = frame.duplicated(subset=["site", "time", "kind"], keep="last")
    if repeated.any():
        warnings.append(
            f"{int(repeated.sum())} rows repeat a (site, time, kind) of a later file; "
            "the later file wins"
        )
        frame = frame[~repeated]
    frame = frame.sort_values(["site", "time", "kind"], kind="stable").reset_index(drop=True)
    return frame, rejections, warnings


def _when(moment: datetime | None) -> str:
    return moment.astimezone(UTC).strftime("%Y-%m-%d %H:%MZ") if moment else "never"


def _waiting_files(config: Config, store: Store, now: datetime) -> list[str]:
    """One line per entry of a file-drop folder that is not taken yet, and why."""
    from notifier.core.config import FileDropSource
    from notifier.ingest.filedrop import FileDrop

    sites = {site.id: site for site in config.sites}
    lines = []
    for source in config.sources:
        if isinstance(source, FileDropSource) and source.path.is_dir():
            for name, why in FileDrop(source, sites=sites, store=store).waiting(now):
                lines.append(f"  {source.id}: {name}: {why}")
    return lines


def health_report(store: Store, config: Config, now: datetime | None = None) -> str:
    """A plain-text table: each source's last success, rows, polls and last error; then
    every file left waiting in a drop folder, with why.

    The last error comes last so that a long one does not push the counts around.
    """
    health = {row["source_id"]: row for row in store.source_health()}
    configured = [(s.id, s.type) for s in config.sources]
    ids = {source_id for source_id, _ in configured}
    extra = [(source_id, "(not in config)") for source_id in health if source_id not in ids]
    table: list[tuple[str, ...]] = [
        ("source", "type", "last success", "rows ok", "rejected", "polls", "failures", "last error")
    ]
    for source_id, kind in configured + extra:
        row = health.get(source_id)
        if row is None:
            table.append((source_id, kind, "never polled", "0", "0", "0", "0", ""))
            continue
        error = ""
        if row["last_error"]:
            error = f"{_when(row['last_error_at'])}: {row['last_error']}"
        counts = (row["rows_ok"], row["rows_rejected"], row["polls"], row["failures"])
        table.append((source_id, kind, _when(row["last_success"]), *map(str, counts), error))
    if len(table) == 1:
        return "no sources configured"
    widths = [max(len(r[i]) for r in table) for i in range(len(table[0]) - 1)]
    lines = []
    for r in table:
        cells = [r[i].ljust(widths[i]) for i in range(len(widths))]
        lines.append("  ".join([*cells, r[-1]]).rstrip())
    waiting = _waiting_files(config, store, now or datetime.now(UTC))
    if waiting:
        lines += ["", "waiting in file drops:", *waiting]
    return "\n".join(lines)
