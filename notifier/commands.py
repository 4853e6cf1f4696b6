"""Handlers of the one-off commands (check, assess, explain, sources, ...).

Each is a thin layer over the library; ``cli.py`` only parses arguments and maps
exceptions to exit codes.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

from notifier.config import load_config
from notifier.errors import UsageError
from notifier.service import Loaded, evaluate, load, observations_for, open_store, parse_time

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


@dataclass
class ObservationBatch:
    frame: pd.DataFrame
    rejections: list[Any] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def _data_for(loaded: Loaded, args: argparse.Namespace) -> tuple[ObservationBatch, datetime]:
    """Observations for a one-off command: the --data files, or a poll into the store."""
    config = loaded.config
    if getattr(args, "data", None):
        at_guess = parse_time(args.at) if args.at else datetime.now(UTC)
        from notifier.sources import read_files

        frame, rejections, warnings = read_files([Path(p) for p in args.data], config, at_guess)
        if args.at is None and len(frame):
            # replaying a file: judge it at its newest observation, not at today's clock
            observed = frame[frame["kind"] == "obs"]
            if len(observed):
                at_guess = observed["time"].max().to_pydatetime().astimezone(UTC)
        return ObservationBatch(frame, rejections, warnings), at_guess
    at = parse_time(args.at)
    from notifier.sources import poll_all

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


def _report_input(batch: ObservationBatch, stream: Any) -> None:
    import sys

    stream = stream or sys.stderr
    for w in batch.warnings:
        print(f"warning: {w}", file=stream)
    for r in batch.rejections[:20]:
        print(f"rejected: {r}", file=stream)
    if len(batch.rejections) > 20:
        print(f"rejected: … and {len(batch.rejections) - 20} more", file=stream)


def cli_assess(args: argparse.Namespace) -> int:
    from notifier.assess import to_json
    from notifier.views import assessment_table

    loaded = load(args.config)
    batch, at = _data_for(loaded, args)
    _report_input(batch, None)
    assessments = evaluate(loaded, batch.frame, at)
    if args.json:
        print(json.dumps(to_json(assessments), indent=2, ensure_ascii=False))
    else:
        print(assessment_table(assessments))
    return 0


def cli_explain(args: argparse.Namespace) -> int:
    from notifier.views import explanation

    loaded = load(args.config)
    ids = [s.id for s in loaded.config.sites]
    if args.site not in ids:
        raise UsageError(f"unknown site {args.site!r} (known: {', '.join(ids)})")
    batch, at = _data_for(loaded, args)
    _report_input(batch, None)
    assessments = evaluate(loaded, batch.frame, at)
    (sa,) = [a for a in assessments if a.site.id == args.site]
    print(explanation(sa, loaded.rules))
    return 0


def cli_sources(args: argparse.Namespace) -> int:
    from notifier.sources import health_report

    config = load_config(args.config)
    with open_store(config) as store:
        print(health_report(store, config))
    return 0


def cli_once(args: argparse.Namespace) -> int:
    """One full cycle; exit 3 if a source failed, 4 if a delivery failed for good."""
    from notifier.service import Service

    service = Service(args.config)
    try:
        now = parse_time(args.at)
        report, sent = service.cycle(now)
    finally:
        service.close()
    print(
        f"{len(report.assessments)} site(s) assessed, {len(report.events)} event(s), "
        f"{report.deliveries_added} delivery(ies) queued; sent {sent.sent}, "
        f"retrying {sent.retried}, failed {sent.failed}, expired {sent.expired}"
    )
    for poll in report.polls:
        if not poll.ok:
            print(f"source {poll.source_id}: {poll.error}")
    if any(not p.ok for p in report.polls):
        return 3
    return 4 if sent.failed or sent.expired else 0


def cli_run(args: argparse.Namespace) -> int:
    from notifier.scheduler import run_forever
    from notifier.service import Service

    return run_forever(Service(args.config))


def cli_status(args: argparse.Namespace) -> int:
    from notifier.outbox import Outbox
    from notifier.sources import health_report
    from notifier.views import local_time

    config = load_config(args.config)
    with open_store(config) as store:
        outbox = Outbox(store)
        snaps = outbox.snapshots()
        print("Sites")
        for site in config.sites:
            snap = snaps.get(site.id)
            if snap is None:
                print(f"  {site.id:<24} not assessed yet")
                continue
            when, level, payload = snap
            hazards = ", ".join(f"{h['hazard']} {h['level']}" for h in payload["hazards"])
            stale = " DATA STALE" if payload["data"]["stale"] else ""
            print(
                f"  {site.id:<24} {level.upper():<8} {hazards or '-'}{stale} "
                f"(at {local_time(when, site.timezone)})"
            )
        print()
        print(health_report(store, config))
        print()
        backlog = outbox.backlog()
        print("Outbox: " + (", ".join(f"{n} {s}" for s, n in sorted(backlog.items())) or "empty"))
        for row in outbox.deliveries(["failed", "expired"])[-10:]:
            print(f"  {row.status}: {row.subscriber} via {row.channel}: {row.last_error}")
        pending = [r for r in outbox.deliveries(["pending"]) if r.attempts]
        for row in pending[-10:]:
            print(
                f"  retrying ({row.attempts} tries): {row.subscriber} via {row.channel}: "
                f"{row.last_error}"
            )
    return 0


def cli_ask(args: argparse.Namespace) -> int:
    from notifier.bot import handle
    from notifier.botbackend import ServiceBackend
    from notifier.service import Service

    service = Service(args.config)
    try:
        now = parse_time(args.at)
        print(handle(ServiceBackend(service, now), args.sender, args.text, now))
    finally:
        service.close()
    return 0


def cli_bot_serve(args: argparse.Namespace) -> int:
    import logging

    from notifier.bot import handle
    from notifier.botbackend import ServiceBackend
    from notifier.botserver import BotHTTPServer
    from notifier.service import Service

    service = Service(args.config)
    secret = service.config.bot.secret
    if not secret:
        service.close()
        raise UsageError("bot serve needs bot.secret in the config (e.g. ${FOGWATCH_BOT_SECRET})")

    def answer(sender: str, text: str, now: datetime) -> str:
        return handle(ServiceBackend(service, now), sender, text, now)

    server = BotHTTPServer(
        (args.host, args.port), secret, answer, rate_per_minute=service.config.bot.rate_per_minute
    )
    logging.getLogger(__name__).warning(
        "bot listening on http://%s:%d/message", *server.server_address[:2]
    )
    print(
        f"listening on http://{server.server_address[0]}:{server.server_address[1]}/message",
        flush=True,
    )
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
        service.close()
    return 0
