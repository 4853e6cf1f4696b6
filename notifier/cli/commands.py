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
from typing import TYPE_CHECKING, Any, cast

from notifier.core.config_file import load_config
from notifier.core.errors import FogwatchError, UsageError
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


def _data_for(loaded: Loaded, args: argparse.Namespace) -> tuple[ObservationBatch, datetime]:
    """Observations for a one-off command: the --data files, or a poll into the store."""
    config = loaded.config
    if getattr(args, "data", None):
        at_guess = parse_time(args.at) if args.at else datetime.now(UTC)
        from notifier.ingest.poll import read_files

        frame, rejections, warnings = read_files([Path(p) for p in args.data], config, at_guess)
        if args.at is None and len(frame):
            # replaying a file: judge it at its newest observation, not at today's clock
            observed = frame[frame["kind"] == "obs"]
            if len(observed):
                at_guess = observed["time"].max().to_pydatetime().astimezone(UTC)
        return ObservationBatch(frame, rejections, warnings), at_guess
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
    from notifier.engine.assessment import to_json

    loaded = load(args.config)
    batch, at = _data_for(loaded, args)
    _report_input(batch)
    assessments = evaluate(loaded, batch.frame, at)
    if args.json:
        print(json.dumps(to_json(assessments), indent=2, ensure_ascii=False))
    else:
        print(assessment_table(assessments))
    return 0


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
    from notifier.ingest.poll import health_report

    config = load_config(args.config)
    with open_store(config) as store:
        print(health_report(store, config))
    return 0


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
    from notifier.core.timefmt import local_time
    from notifier.ingest.poll import health_report
    from notifier.storage.outbox import Outbox

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
        for row in outbox.deliveries(["failed", "expired", "cancelled"])[-10:]:
            print(f"  {row.status}: {row.subscriber} via {row.channel}: {row.last_error}")
        pending = [r for r in outbox.deliveries(["pending"]) if r.attempts]
        for row in pending[-10:]:
            print(
                f"  retrying ({row.attempts} tries): {row.subscriber} via {row.channel}: "
                f"{row.last_error}"
            )
    return 0


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


def cli_replay(args: argparse.Namespace) -> int:
    """Run the rules over history and score them; optionally a second rule set too."""
    from notifier.core.config import parse_duration_s
    from notifier.engine.rule_files import load_rule_set
    from notifier.history import replay as rp
    from notifier.history import report as rt
    from notifier.ingest.poll import read_files

    loaded = load(args.config)
    start, end = parse_time(args.start), parse_time(args.end)
    if end <= start:
        raise UsageError("--to must be after --from")
    try:
        step_s = parse_duration_s(args.step)
    except ValueError as exc:
        raise UsageError(f"--step: {exc}") from exc
    if step_s <= 0:
        raise UsageError("--step must be positive")
    frame, rejections, warnings = read_files(
        [Path(p) for p in args.data], loaded.config, datetime.now(UTC)
    )
    _report_input(ObservationBatch(frame, rejections, warnings))
    sets = [(loaded, "rules")]
    if args.rules_b:
        other = Loaded(loaded.config, load_rule_set([Path(args.rules_b)]))
        sets.append((other, "rules-b"))
    import sys

    n_steps = int((end - start).total_seconds() // step_s) + 1
    results = []
    for which, label in sets:
        bar = (
            rt.progress_bar() if (n_steps > 300 and not args.json and sys.stderr.isatty()) else None
        )
        deliver = Path(args.deliver_to) / label if args.deliver_to else None
        results.append(
            rp.replay(
                which, frame, start, end, step_s, label=label, deliver_to=deliver, progress=bar
            )
        )
    if args.json:
        print(json.dumps(rt.to_json(results), indent=2, ensure_ascii=False))
    else:
        print(rt.report_text(results))
    if args.csv:
        rt.write_csv(results, Path(args.csv))
    if args.png:
        rt.write_png(results, frame, Path(args.png))  # every rule set, one column each
    if args.deliver_to:
        for res in results:
            print(
                f"replay ({res.label}): {res.delivered} message(s) the subscribers would have "
                f"received, written into {Path(args.deliver_to) / res.label}",
                file=sys.stderr,
            )
    return 0
