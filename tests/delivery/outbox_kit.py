"""Helpers for the outbox, dispatch, crash and service tests: a config file written into
``tmp_path``, events queued straight into the outbox, and a signed webhook receiver on
127.0.0.1 whose answers a test chooses. Every site, person and address is invented."""

from __future__ import annotations

import http.server
import json
import threading
from collections import Counter
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import yaml

from notifier.core.signing import ID_HEADER
from notifier.delivery.routing import route
from notifier.engine.alerts import Event
from notifier.storage.deliveries import Delivery
from tests.delivery.conftest import SMTP_PASSWORD, SMTP_USER, WEBHOOK_SECRET
from tests.webhook_reference import reference_accepts

SMTP_ENV = "FOGWATCH_TEST_SMTP_PASSWORD"
HOOK_ENV = "FOGWATCH_TEST_HOOK_SECRET"
SENDER = "fogwatch <alerts@example.test>"

SITES: list[dict[str, Any]] = [
    {
        "id": "quay-two",
        "name": "Quay Two",
        "lat": 52.3,
        "lon": -1.8,
        "timezone": "Europe/London",
        "exposure": "waterside",
        "use": "port",
        "tags": ["harbour"],
    },
    {
        "id": "north-field",
        "name": "North Field",
        "lat": 52.3,
        "lon": -1.8,
        "timezone": "Europe/London",
        "exposure": "open",
        "use": "farm",
        "tags": ["fields"],
    },
]


def secrets_env(monkeypatch: Any) -> None:
    """Secrets never sit in YAML: the config reads them from the environment."""
    monkeypatch.setenv(SMTP_ENV, SMTP_PASSWORD)
    monkeypatch.setenv(HOOK_ENV, WEBHOOK_SECRET)


def email_channel(port: int, channel_id: str = "mail", **kw: Any) -> dict[str, Any]:
    return {
        "id": channel_id,
        "type": "email",
        "host": "127.0.0.1",
        "port": port,
        "security": "none",
        "username": SMTP_USER,
        "password": "${" + SMTP_ENV + "}",
        "sender": SENDER,
        "timeout": 5,
        **kw,
    }


def webhook_channel(url: str, channel_id: str = "hook", **kw: Any) -> dict[str, Any]:
    return {
        "id": channel_id,
        "type": "webhook",
        "url": url,
        "secret": "${" + HOOK_ENV + "}",
        "timeout": 5,
        **kw,
    }


def write_config(
    folder: Path,
    channels: Sequence[dict[str, Any]],
    subscribers: Sequence[dict[str, Any]],
    *,
    sites: Sequence[dict[str, Any]] = SITES,
    name: str = "fogwatch.yaml",
    **extra: Any,
) -> Path:
    """A config file in ``folder``; its store is the SQLite file beside it."""
    doc: dict[str, Any] = {
        "version": 1,
        "sites": list(sites),
        "channels": list(channels),
        "subscribers": list(subscribers),
        **extra,
    }
    path = folder / name
    path.write_text(yaml.safe_dump(doc, sort_keys=False, allow_unicode=True), encoding="utf-8")
    return path


def queue(service: Any, events: Sequence[Event], now: datetime) -> list[Delivery]:
    """Route events to the service's subscribers and commit them to its outbox."""
    deliveries = route(events, service.subscribers(), service.config, service.mutes(now))
    states = service.outbox.states()
    service.outbox.commit_cycle(states, states, events, deliveries, now)
    return deliveries


# ---------------------------------------------------------------------------------------
# a signed webhook receiver with answers chosen by the test

Answer = Callable[[str, int], int]  # (delivery id, attempt number from 1) → HTTP status


def always_ok(_delivery: str, _attempt: int) -> int:
    return 200


@dataclass
class Receiver:
    """Checks every signature; ``answer`` picks the status of each signed request."""

    url: str
    secret: str
    answer: Answer = always_ok
    attempts: list[tuple[str, int]] = field(default_factory=list)  # (delivery, status)
    bodies: list[dict[str, Any]] = field(default_factory=list)  # every signed body seen
    bad_signatures: int = 0
    lock: threading.Lock = field(default_factory=threading.Lock)

    def ids(self, status: int | None = None) -> list[str]:
        with self.lock:
            return [d for d, s in self.attempts if status is None or s == status]

    def delivered(self) -> Counter[str]:
        """Delivery id → how many times it was accepted (2xx)."""
        with self.lock:
            return Counter(d for d, s in self.attempts if 200 <= s < 300)

    def accepted_bodies(self) -> list[dict[str, Any]]:
        with self.lock:
            return [b for (_, s), b in zip(self.attempts, self.bodies, strict=True) if s < 300]


class _Handler(http.server.BaseHTTPRequestHandler):
    protocol_version = "HTTP/1.1"

    def do_POST(self) -> None:  # noqa: N802 (http.server's naming)
        receiver: Receiver = self.server.receiver  # type: ignore[attr-defined]
        length = int(self.headers.get("Content-Length", "0"))
        body = self.rfile.read(length)
        if len(body) < length:
            return  # the sender died mid-request: nothing was delivered
        headers = dict(self.headers.items())
        delivery = headers.get(ID_HEADER, "")
        with receiver.lock:
            # checked by the Standard Webhooks reference library, not fogwatch's code
            if not reference_accepts(receiver.secret, headers, body):
                receiver.bad_signatures += 1
                status = 401
            else:
                n = sum(1 for d, _ in receiver.attempts if d == delivery) + 1
                status = receiver.answer(delivery, n)
                receiver.attempts.append((delivery, status))
                receiver.bodies.append(json.loads(body))
        self.send_response(status)
        self.send_header("Content-Length", "0")
        self.end_headers()

    def log_message(self, format: str, *args: Any) -> None:  # noqa: A002
        return None


class _Server(http.server.ThreadingHTTPServer):
    daemon_threads = True

    def handle_error(self, request: Any, client_address: Any) -> None:
        return None  # a client killed mid-request (the crash test) is expected here


@contextmanager
def signed_receiver(secret: str = WEBHOOK_SECRET, answer: Answer = always_ok) -> Iterator[Receiver]:
    server = _Server(("127.0.0.1", 0), _Handler)
    receiver = Receiver(f"http://127.0.0.1:{server.server_address[1]}/fogwatch", secret, answer)
    server.receiver = receiver  # type: ignore[attr-defined]
    thread = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.05})
    thread.daemon = True
    thread.start()
    try:
        yield receiver
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=5)
