"""``fogwatch status`` and ``fogwatch sources``: what the service last concluded and how old
its data is, as terminal text and as JSON for scripts.

Every level is shown beside the date and age of the newest reading it rests on, marked
STALE past ``alerts.stale_after``: a level worked out from old data must not read as
current (core.freshness).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from datetime import datetime
from typing import Any

from notifier.core.config import Config
from notifier.core.freshness import freshness, when_text
from notifier.core.timefmt import iso_z, parse_iso

__all__ = [
    "matrix_state",
    "matrix_text",
    "newest_by",
    "site_states",
    "source_states",
    "sources_text",
    "status_text",
]

Reading = tuple[str, str | None, datetime]  # (site, source, time of its newest row)


def newest_by(readings: Iterable[Reading], key: int) -> dict[str, datetime]:
    """The newest reading per site (``key=0``) or per source (``key=1``)."""
    out: dict[str, datetime] = {}
    for site, source, t in readings:
        name = site if key == 0 else source
        if name is not None:
            out[name] = max(t, out.get(name, t))
    return out


def site_states(
    config: Config,
    snapshots: Mapping[str, tuple[datetime, str, dict[str, Any]]],
    readings: Sequence[Reading],
    now: datetime,
) -> list[dict[str, Any]]:
    """One record per site: its last stored level and hazards, and its data's age at ``now``."""
    newest = newest_by(readings, 0)
    stale_after_min = config.alerts.stale_after / 60.0
    out = []
    for site in config.sites:
        snap = snapshots.get(site.id)
        stored = parse_iso(snap[2].get("data", {}).get("last_time")) if snap else None
        last = max([t for t in (newest.get(site.id), stored) if t is not None], default=None)
        fresh = freshness(last, now, site.timezone, stale_after_min)
        record: dict[str, Any] = {
            "site": site.id,
            "name": site.name,
            "level": snap[1] if snap else None,
            "assessed_at": iso_z(snap[0]) if snap else None,
            "hazards": [
                {key: h.get(key) for key in ("hazard", "level", "kind", "eta")}
                for h in (snap[2].get("hazards", []) if snap else [])
            ],
            "data": fresh.as_json(),
            # for the text view; left out of the JSON
            "_data_text": fresh.text,
            "_assessed_text": when_text(snap[0], now, site.timezone) if snap else "",
        }
        out.append(record)
    return out


def source_states(
    config: Config, health: Sequence[Mapping[str, Any]], readings: Sequence[Reading], now: datetime
) -> list[dict[str, Any]]:
    """One record per source (configured, or polled once and since removed): its poll
    counts, and the newest reading it brought with that reading's age at ``now``."""
    by_id = {row["source_id"]: row for row in health}
    newest = newest_by(readings, 1)
    configured = [(s.id, s.type) for s in config.sources]
    ids = {source_id for source_id, _ in configured}
    extra = [(source_id, None) for source_id in by_id if source_id not in ids]
    stale_after_min = config.alerts.stale_after / 60.0
    zone = config.sites[0].timezone if config.sites else "UTC"
    out = []
    for source_id, kind in configured + extra:
        row = by_id.get(source_id, {})
        fresh = freshness(newest.get(source_id), now, zone, stale_after_min)
        out.append(
            {
                "source": source_id,
                "type": kind,
                "configured": kind is not None,
                "last_success": iso_z(row.get("last_success")),
                "rows_ok": int(row.get("rows_ok") or 0),
                "rows_rejected": int(row.get("rows_rejected") or 0),
                "polls": int(row.get("polls") or 0),
                "failures": int(row.get("failures") or 0),
                "last_error": row.get("last_error") or None,
                "last_error_at": iso_z(row.get("last_error_at")),
                "newest_reading": fresh.as_json(),
                "_data_text": fresh.text if newest.get(source_id) else "no reading yet",
                "_stale": fresh.stale and newest.get(source_id) is not None,
            }
        )
    return out


def public(records: Sequence[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """The records without the keys kept for the text view."""
    return [{k: v for k, v in r.items() if not k.startswith("_")} for r in records]


def _when(t: datetime | None, now: datetime, zone: str) -> str:
    return when_text(t, now, zone) if t else "never"


def sources_text(records: Sequence[Mapping[str, Any]], now: datetime, zone: str) -> str:
    """A table: each source's newest reading and its age, last success, counts, last error.

    The last error comes last so that a long one does not push the counts around.
    """
    if not records:
        return "no sources configured"
    table: list[tuple[str, ...]] = [
        ("source", "type", "newest reading", "last success", "rows ok", "rejected", "polls")
        + ("failures", "last error")
    ]
    for r in records:
        error = ""
        if r["last_error"]:
            error = f"{_when(parse_iso(r['last_error_at']), now, zone)}: {r['last_error']}"
        table.append(
            (
                r["source"],
                r["type"] or "(not in config)",
                r["_data_text"].removeprefix("newest reading "),
                _when(parse_iso(r["last_success"]), now, zone),
                *(str(r[k]) for k in ("rows_ok", "rows_rejected", "polls", "failures")),
                error,
            )
        )
    widths = [max(len(row[i]) for row in table) for i in range(len(table[0]) - 1)]
    lines = []
    for row in table:
        cells = [row[i].ljust(widths[i]) for i in range(len(widths))]
        lines.append("  ".join([*cells, row[-1]]).rstrip())
    stale = [r["source"] for r in records if r["_stale"]]
    if stale:
        lines.append(
            f"STALE: {', '.join(stale)} brought nothing newer than alerts.stale_after; "
            "a level worked out from this data is old news."
        )
    return "\n".join(lines)


def status_text(
    sites: Sequence[Mapping[str, Any]],
    sources: Sequence[Mapping[str, Any]],
    outbox_lines: Sequence[str],
    now: datetime,
    zone: str,
) -> str:
    """Sites (level, hazards, when assessed, newest reading and its age), sources, outbox."""
    width = max((len(s["site"]) for s in sites), default=4)
    lines = ["Sites"]
    for s in sites:
        if s["level"] is None:
            lines.append(f"  {s['site']:<{width}} not assessed yet; {s['_data_text']}")
            continue
        hazards = ", ".join(f"{h['hazard']} {h['level']}" for h in s["hazards"]) or "-"
        level = s["level"].upper() + (" (on old data)" if s["data"]["stale"] else "")
        lines.append(
            f"  {s['site']:<{width}} {level:<8} {hazards}; assessed {s['_assessed_text']}; "
            f"{s['_data_text']}"
        )
    lines += ["", sources_text(sources, now, zone), "", *outbox_lines]
    return "\n".join(lines)


def matrix_state(config: Config, store: Any) -> dict[str, Any] | None:
    """The Matrix connection as ``fogwatch run`` last recorded it (None: not configured)."""
    if config.matrix is None:
        return None
    from notifier.storage.matrixstate import MatrixState

    got = MatrixState(store, config.matrix.user_id).status() or {}
    return {
        "user_id": config.matrix.user_id,
        "homeserver": config.matrix.homeserver,
        "state": got.get("state", "never started"),
        "last_sync": got.get("last_sync_at"),
        "last_error": got.get("last_error"),
        "last_error_at": got.get("last_error_at"),
        "updated": got.get("updated_at"),
    }


def matrix_text(record: Mapping[str, Any], now: datetime, zone: str) -> str:
    """One line, and one for the last error: ``Matrix @bot:server: connected; …``."""
    synced = parse_iso(record["last_sync"]) if record["last_sync"] else None
    line = f"Matrix {record['user_id']}: {record['state']}; last sync {_when(synced, now, zone)}"
    if record["last_error"]:
        when = parse_iso(record["last_error_at"]) if record["last_error_at"] else None
        line += f"\n  last error {_when(when, now, zone)}: {record['last_error']}"
    return line
