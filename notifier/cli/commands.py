"""Handlers of the one-off commands (check, assess, explain, sources, ...).

Each is a thin layer over the library; ``cli.py`` only parses arguments and maps
exceptions to exit codes.
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any, cast

from notifier.core.config import Config
from notifier.core.config_file import load_config
from notifier.core.errors import DataError, FogwatchError, UsageError
from notifier.core.timefmt import iso_z
from notifier.service.loading import (
    Loaded,
    evaluate,
    load,
    observations_for,
    open_store,
    parse_time,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


@dataclass
class ObservationBatch:
    frame: pd.DataFrame
    rejections: list[Any] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def read_data(paths: list[str], config: Config, now: datetime) -> ObservationBatch:
    """The ``--data`` files of any command as one table.

    A file that does not exist or cannot be read is an error (exit 2), and so is input
    of which not one row could be taken: a command must not judge (or score) a night on
    no data as if it had been quiet. Every rejection is shown on stderr first.
    """
    from notifier.ingest.poll import read_files

    unreadable = []
    for name in paths:
        path = Path(name)
        if not path.exists():
            unreadable.append(f"{path}: file not found")
        elif path.is_dir():
            unreadable.append(f"{path}: is a folder, not a file")
    if unreadable:
        raise DataError("\n".join(unreadable))
    frame, rejections, warnings = read_files([Path(p) for p in paths], config, now)
    batch = ObservationBatch(frame, rejections, warnings)
    cannot = [r for r in rejections if r.line is None and r.reason.startswith("cannot read")]
    if cannot:
        _report_input(ObservationBatch(frame, [r for r in rejections if r not in cannot], warnings))
        raise DataError("\n".join(str(r) for r in cannot))
    if frame.empty:
        _report_input(batch)
        raise DataError(
            f"no observation could be taken from {', '.join(paths)}: every input row was "
            f"rejected ({len(rejections)} reason(s) listed above)"
        )
    return batch


# A history read for a past --at: its later rows are what came next, not errors, so none
# is "ahead" when it is read; they are set aside after (``_known_at``).
HISTORY_READ_AT = datetime(2200, 1, 1, tzinfo=UTC)


def _known_at(batch: ObservationBatch, at: datetime) -> None:
    """Sets aside the observations of a history file newer than ``at`` (beyond the 10 min
    a live reading may be ahead), with one line on stderr rather than one per row."""
    import pandas as pd

    from notifier.core.observations import FUTURE_TOLERANCE

    frame = batch.frame
    later = (frame["kind"] == "obs") & (frame["time"] > pd.Timestamp(at) + FUTURE_TOLERANCE)
    if later.any():
        batch.frame = frame[~later]
        batch.warnings.append(
            f"{int(later.sum())} observation row(s) after --at {iso_z(at)} left out: the "
            "evaluation sees only what was known then"
        )


def _data_for(loaded: Loaded, args: argparse.Namespace) -> tuple[ObservationBatch, datetime]:
    """Observations for a one-off command: the --data files, or a poll into the store."""
    config = loaded.config
    if getattr(args, "data", None):
        at_guess = parse_time(args.at) if args.at else datetime.now(UTC)
        batch = read_data(args.data, config, HISTORY_READ_AT if args.at else at_guess)
        if args.at:
            _known_at(batch, at_guess)
        frame = batch.frame
        if args.at is None and len(frame):
            # replaying a file: judge it at its newest observation, not at today's clock
            observed = frame[frame["kind"] == "obs"]
            if len(observed):
                at_guess = observed["time"].max().to_pydatetime().astimezone(UTC)
        return batch, at_guess
    at = parse_time(args.at)
    from notifier.ingest.poll import poll_all

    with open_store(config) as store:
        results = poll_all(config, store, at)
        frame = observations_for(config, store, at)
    batch = ObservationBatch(frame)
    for r in results:
        batch.rejections.extend(r.rejections)
        batch.warnings.extend(r.warnings)
        if not r.ok:
            batch.warnings.append(f"source {r.source_id}: {r.error}")
    return batch, at


def _report_input(batch: ObservationBatch) -> None:
    """Warnings and rejected rows of the input, on stderr."""
    import sys

    stream = sys.stderr
    for w in batch.warnings:
        print(f"warning: {w}", file=stream)
    for r in batch.rejections[:20]:
        print(f"rejected: {r}", file=stream)
    if len(batch.rejections) > 20:
        print(f"rejected: … and {len(batch.rejections) - 20} more", file=stream)


def cli_assess(args: argparse.Namespace) -> int:
    from notifier.cli.views import assessment_table
    from notifier.core.freshness import freshness
    from notifier.engine.assessment import to_json

    loaded = load(args.config)
    batch, at = _data_for(loaded, args)
    _report_input(batch)
    assessments = evaluate(loaded, batch.frame, at)
    newest = _store_newest(loaded.config) if not args.data else {}
    if args.json:
        records = to_json(assessments)
        for record, sa in zip(records, assessments, strict=True):
            # a reading older than the window is still the newest one: say when it was
            if record["data"]["last_time"] is None and sa.site.id in newest:
                fresh = freshness(newest[sa.site.id], at, sa.site.timezone, sa.stale_after_min)
                record["data"] = fresh.as_json()
        print(json.dumps(records, indent=2, ensure_ascii=False))
    else:
        print(assessment_table(assessments, newest))
    return 0


def _store_newest(config: Config) -> dict[str, datetime]:
    """The newest observed reading of each site in the store, however old (the window
    the rules read holds only the last hours: older rows are not "no readings")."""
    from notifier.cli.state_views import newest_by

    with open_store(config) as store:
        return newest_by(store.newest_readings(), 0)


def cli_explain(args: argparse.Namespace) -> int:
    from notifier.cli.views import explanation

    loaded = load(args.config)
    ids = [s.id for s in loaded.config.sites]
    if args.site not in ids:
        raise UsageError(f"unknown site {args.site!r} (known: {', '.join(ids)})")
    batch, at = _data_for(loaded, args)
    _report_input(batch)
    assessments = evaluate(loaded, batch.frame, at)
    (sa,) = [a for a in assessments if a.site.id == args.site]
    print(explanation(sa, loaded.rules))
    return 0


def cli_sources(args: argparse.Namespace) -> int:
    """Each source's poll health and the newest reading it brought, with its age."""
    from notifier.cli.state_views import public, source_states, sources_text

    config = load_config(args.config)
    now = parse_time(getattr(args, "at", None))
    with open_store(config) as store:
        records = source_states(config, store.source_health(), store.newest_readings(), now)
    if getattr(args, "json", False):
        out = {"time": iso_z(now), "sources": public(records)}
        print(json.dumps(out, indent=2, ensure_ascii=False))
    else:
        print(sources_text(records, now, _zone(config)))
    return 0


def _zone(config: Config) -> str:
    """The zone times are shown in when they belong to no one site: the first site's."""
    return config.sites[0].timezone if config.sites else "UTC"


def cli_once(args: argparse.Namespace) -> int:
    """One full cycle; exit 3 if a source failed, 4 if a delivery failed for good."""
    from notifier.service.cycle import Service

    service = Service(args.config)
    try:
        now = parse_time(args.at)
        report, sent = service.cycle(now)
    finally:
        service.close()
    failed_sources = [p for p in report.polls if not p.ok]
    if getattr(args, "json", False):
        print(json.dumps(_once_json(report, sent), indent=2, ensure_ascii=False))
        return 3 if failed_sources else 4 if sent.failed or sent.expired else 0
    print(
        f"{len(report.assessments)} site(s) assessed, {len(report.events)} event(s), "
        f"{report.deliveries_added} delivery(ies) queued; sent {sent.sent}, "
        f"retrying {sent.retried}, failed {sent.failed}, expired {sent.expired}"
        + (f", cancelled {sent.cancelled} (hushed or unfollowed since)" if sent.cancelled else "")
    )
    for poll in report.polls:
        if not poll.ok:
            print(f"source {poll.source_id}: {poll.error}")
    if any(not p.ok for p in report.polls):
        return 3
    return 4 if sent.failed or sent.expired else 0


def _once_json(report: Any, sent: Any) -> dict[str, Any]:
    from notifier.core.timefmt import iso_text

    return {
        "at": iso_text(report.at),
        "sites": {sa.site.id: sa.level for sa in report.assessments},
        "events": [
            {"site": e.site_id, "hazard": e.hazard, "type": e.type, "level": e.level}
            for e in report.events
        ],
        "queued": report.deliveries_added,
        "deliveries": {
            "sent": sent.sent,
            "retrying": sent.retried,
            "failed": sent.failed,
            "expired": sent.expired,
            "cancelled": sent.cancelled,
        },
        "sources": [{"id": p.source_id, "ok": p.ok, "error": p.error} for p in report.polls],
    }


def cli_run(args: argparse.Namespace) -> int:
    from notifier.service.cycle import Service
    from notifier.service.scheduler import run_forever

    return run_forever(Service(args.config))


def cli_status(args: argparse.Namespace) -> int:
    """Each site's last level with its data's date and age, the sources, the outbox."""
    from notifier.cli import state_views
    from notifier.cli.state_views import public, site_states, source_states, status_text
    from notifier.storage.outbox import Outbox

    config = load_config(args.config)
    now = parse_time(getattr(args, "at", None))
    with open_store(config) as store:
        outbox = Outbox(store)
        readings = store.newest_readings()
        sites = site_states(config, outbox.snapshots(), readings, now)
        sources = source_states(config, store.source_health(), readings, now)
        backlog = outbox.backlog()
        trouble = outbox.deliveries(["failed", "expired", "cancelled"])[-10:]
        pending_rows = outbox.deliveries(["pending"])
        retrying = [r for r in pending_rows if r.attempts][-10:]
        matrix = state_views.matrix_state(config, store)
    if getattr(args, "json", False):
        problem = [
            {
                "status": r.status,
                "subscriber": r.subscriber,
                "channel": r.channel,
                "attempts": r.attempts,
                "last_error": r.last_error,
            }
            for r in [*trouble, *retrying]
        ]
        out = {
            "time": iso_z(now),
            "sites": public(sites),
            "sources": public(sources),
            "outbox": {"backlog": dict(sorted(backlog.items())), "problems": problem},
            "matrix": matrix,
        }
        print(json.dumps(out, indent=2, ensure_ascii=False))
        return 0
    lines = ["Outbox: " + (", ".join(f"{n} {s}" for s, n in sorted(backlog.items())) or "empty")]
    lines += [f"  {r.status}: {r.subscriber} via {r.channel}: {r.last_error}" for r in trouble]
    lines += [
        f"  retrying ({r.attempts} tries): {r.subscriber} via {r.channel}: {r.last_error}"
        for r in retrying
    ]
    lines += ["", state_views.matrix_text(matrix, now, _zone(config))] if matrix else []
    print(status_text(sites, sources, lines, now, _zone(config)))
    _print_holds(pending_rows, config)
    return 0


def _print_holds(rows: Sequence[Any], config: Any) -> None:
    """Deliveries held for quiet hours, each with the local time its hold ends."""
    from notifier.core.timefmt import local_time

    now = datetime.now(UTC)
    zones = {s.id: s.timezone for s in config.subscribers}
    held = [r for r in rows if r.not_before is not None and r.not_before > now]
    for row in held[-10:]:
        zone = zones.get(row.subscriber) or "UTC"
        print(
            f"  held until {local_time(row.not_before, zone)}: {row.subscriber} via {row.channel}"
        )


def cli_ask(args: argparse.Namespace) -> int:
    from notifier.bot.grammar import handle
    from notifier.service.botbackend import ServiceBackend
    from notifier.service.cycle import Service

    service = Service(args.config)
    try:
        now = parse_time(args.at)
        print(handle(ServiceBackend(service, now), args.sender, args.text, now))
    finally:
        service.close()
    return 0


def cli_bot_serve(args: argparse.Namespace) -> int:
    """Serve the signed bot endpoint until SIGTERM or SIGINT; answers in flight finish."""
    import logging
    import signal
    import threading

    from notifier.bot.grammar import handle
    from notifier.bot.server import BotHTTPServer
    from notifier.service.botbackend import ServiceBackend
    from notifier.service.cycle import Service
    from notifier.storage.seen import SeenMessages

    log = logging.getLogger(__name__)
    service = Service(args.config)
    try:
        secret = service.config.bot.secret
        if not secret:
            raise UsageError(
                "bot serve needs bot.secret in the config (e.g. ${FOGWATCH_BOT_SECRET})"
            )

        def answer(sender: str, text: str, now: datetime) -> str:
            # new allow-lists, join codes and sites apply without a restart
            if service.files_changed():
                ok, message = service.reload()
                if not ok:
                    log.error("reload failed, keeping the running config: %s", message)
            return handle(ServiceBackend(service, now), sender, text, now)

        try:
            server = BotHTTPServer(
                (args.host, args.port),
                secret,
                answer,
                # replay protection in the store: across restarts and instances
                seen=SeenMessages(service.store),
                rate_per_minute=service.config.bot.rate_per_minute,
            )
        except OSError as exc:  # the port is taken or the address is not ours: exit 1
            raise FogwatchError(
                f"bot serve: cannot listen on {args.host}:{args.port}: {exc.strerror or exc}"
            ) from exc
    except BaseException:
        service.close()
        raise

    def stop(signum: int, _frame: object) -> None:
        log.info("signal %s: stopping the bot endpoint", signum)
        # shutdown() waits for serve_forever, which runs in this (the main) thread
        threading.Thread(target=server.shutdown, daemon=True).start()

    previous = {sig: signal.signal(sig, stop) for sig in (signal.SIGTERM, signal.SIGINT)}
    host, port = server.server_address[:2]
    log.info("bot listening on http://%s:%d/message", host, port)
    # an AF_INET socket names its host as text; the stubs also allow bytes
    print(f"listening on http://{cast(str, host)}:{port}/message", flush=True)
    try:
        server.serve_forever(poll_interval=0.2)
    finally:
        server.server_close()
        server.wait_idle(timeout_s=10.0)  # answers in flight finish before the store closes
        service.close()
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        log.info("bot stopped")
    return 0
