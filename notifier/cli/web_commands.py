"""Handlers of ``serve``, ``init`` and ``schema``: thin layers over the library."""

from __future__ import annotations

import argparse
import json
import logging
import signal
import threading
from datetime import UTC, datetime
from pathlib import Path

__all__ = ["cli_init", "cli_schema", "cli_serve"]

log = logging.getLogger(__name__)


def cli_serve(args: argparse.Namespace) -> int:
    """The web app until SIGTERM or SIGINT (the bot's answers in flight finish)."""
    from notifier.service.cycle import Service
    from notifier.service.loading import parse_time
    from notifier.service.webapp import build_web

    service = Service(args.config)
    try:
        web = service.config.web
        host = args.host or (web.host if web else "127.0.0.1")
        port = args.port if args.port is not None else (web.port if web else 8750)
        clock = None
        if args.at:  # look at a store as it stood then (the demo's night, a replay)
            fixed = parse_time(args.at)

            def clock() -> datetime:
                return fixed

        server = build_web(service, host, port, clock=clock)
    except BaseException:
        service.close()
        raise

    def stop(signum: int, _frame: object) -> None:
        log.info("signal %s: stopping the web app", signum)
        threading.Thread(target=server.close, daemon=True).start()

    previous = {sig: signal.signal(sig, stop) for sig in (signal.SIGTERM, signal.SIGINT)}
    print(f"serving on {server.url}", flush=True)
    try:
        server.run()
    finally:
        service.close()
        for sig, handler in previous.items():
            signal.signal(sig, handler)
    return 0


def cli_init(args: argparse.Namespace) -> int:
    from notifier.service.starter import CONFIG_NAME, write_starter

    folder = Path(args.dir)
    written = write_starter(folder, datetime.now(UTC))
    if args.json:
        print(json.dumps({"folder": str(folder), "files": [str(p) for p in written]}, indent=2))
        return 0
    print(f"wrote {len(written)} files into {folder}; next:")
    print(f"  fogwatch check {folder / CONFIG_NAME}")
    print(f"  fogwatch once {folder / CONFIG_NAME}")
    return 0


def cli_schema(args: argparse.Namespace) -> int:
    from notifier.service.starter import write_schemas

    for path in write_schemas(Path(args.out)):
        print(path)
    return 0
