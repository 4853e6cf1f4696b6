"""Loopback servers for delivery tests: a real SMTP server (aiosmtpd, with login) and a
real HTTP receiver that checks webhook signatures, keeps every request as it arrived
(raw body bytes) and can answer as a test chooses (any status and headers, or no answer
at all). Both listen on 127.0.0.1 only, on an ephemeral port. Every name and address here
is invented."""

from __future__ import annotations

import http.server
import json
import sys
import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any

import pytest
from aiosmtpd.controller import Controller
from aiosmtpd.smtp import SMTP, AuthResult, LoginPassword

from notifier.core.signing import ID_HEADER
from tests.webhook_reference import reference_accepts

SMTP_USER = "alerts"
SMTP_PASSWORD = "loopback-secret"
# a Standard Webhooks secret: whsec_ + base64 of 33 invented bytes
WEBHOOK_SECRET = "whsec_dGVzdCB3ZWJob29rIGtleSBvbiBsb29wYmFjayBvbmx5"


@dataclass
class Received:
    mail_from: str
    rcpt_tos: list[str]
    data: bytes


@dataclass
class Inbox:
    """What the SMTP server saw, and how it should misbehave."""

    messages: list[Received] = field(default_factory=list)
    connections: int = 0
    fail_data: int = 0  # answer 451 to this many DATA commands, then 250
    refuse: set[str] = field(default_factory=set)  # recipients answered with 550
    lock: threading.Lock = field(default_factory=threading.Lock)

    async def handle_RCPT(
        self, server: Any, session: Any, envelope: Any, address: str, rcpt_options: list[str]
    ) -> str:
        if address in self.refuse:
            return "550 5.1.1 no such mailbox here"
        envelope.rcpt_tos.append(address)
        return "250 OK"

    async def handle_DATA(self, server: Any, session: Any, envelope: Any) -> str:
        if not session.authenticated:
            return "530 5.7.0 authentication required"
        with self.lock:
            if self.fail_data > 0:
                self.fail_data -= 1
                return "451 4.3.0 busy, try again later"
            self.messages.append(
                Received(envelope.mail_from, list(envelope.rcpt_tos), envelope.original_content)
            )
        return "250 OK queued"


def _authenticator(
    server: Any, session: Any, envelope: Any, mechanism: str, auth_data: Any
) -> AuthResult:
    ok = (
        isinstance(auth_data, LoginPassword)
        and auth_data.login == SMTP_USER.encode()
        and auth_data.password == SMTP_PASSWORD.encode()
    )
    return AuthResult(success=ok, handled=False)


class _LoopbackController(Controller):
    """aiosmtpd's Controller on an ephemeral port, counting connections."""

    def __init__(self, inbox: Inbox, **kw: Any):
        super().__init__(inbox, hostname="127.0.0.1", port=0, **kw)
        self.inbox = inbox

    def factory(self) -> SMTP:
        with self.inbox.lock:
            self.inbox.connections += 1
        return super().factory()

    def _trigger_server(self) -> None:
        assert self.server is not None
        self.port = self.server.sockets[0].getsockname()[1]
        super()._trigger_server()


@dataclass
class SmtpServer:
    host: str
    port: int
    inbox: Inbox


@pytest.fixture
def smtp_server() -> Iterator[SmtpServer]:
    inbox = Inbox()
    controller = _LoopbackController(
        inbox,
        authenticator=_authenticator,
        auth_require_tls=False,
        auth_exclude_mechanism=["CRAM-MD5"],
    )
    controller.start()
    inbox.connections = 0  # start() opens one connection of its own
    try:
        yield SmtpServer("127.0.0.1", controller.port, inbox)
    finally:
        controller.stop()


@dataclass
class Wire:
    """One request exactly as it arrived: the raw body bytes, before any parsing."""

    method: str
    path: str
    headers: dict[str, str]
    body: bytes


# a test's own answer to a request: (status, extra response headers)
HookAnswer = Callable[[Wire], tuple[int, dict[str, str]]]


@dataclass
class Hook:
    """What the webhook receiver saw, and how it should misbehave."""

    secret: str = WEBHOOK_SECRET
    accepted: list[dict[str, Any]] = field(default_factory=list)
    attempts: list[str] = field(default_factory=list)  # delivery ids, every attempt
    wire: list[Wire] = field(default_factory=list)  # every request, raw
    rejected_signatures: int = 0
    fail_first_attempt: bool = False  # answer 500 to the first attempt of each delivery
    answer: HookAnswer | None = None  # when set, answers every request (no checks)
    released: threading.Event = field(default_factory=threading.Event)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def stall(self, limit_s: float = 60.0) -> None:
        """For an ``answer``: hang, as a stuck receiver would, until the test is over."""
        self.released.wait(limit_s)


class _HookHandler(http.server.BaseHTTPRequestHandler):
    hook: Hook

    def do_POST(self) -> None:  # noqa: N802 (http.server's naming)
        length = int(self.headers.get("Content-Length", "0"))
        body = self.rfile.read(length)
        if len(body) < length:
            return  # the sender died mid-request: nothing was delivered
        hook = self.server.hook  # type: ignore[attr-defined]
        headers = {k: v for k, v in self.headers.items()}
        delivery = headers.get(ID_HEADER, "")
        wire = Wire(self.command, self.path, headers, body)
        extra: dict[str, str] = {}
        with hook.lock:
            hook.wire.append(wire)
        if hook.answer is not None:
            status, extra = hook.answer(wire)  # outside the lock: it may stall
        else:
            with hook.lock:
                first = delivery not in hook.attempts
                hook.attempts.append(delivery)
                # checked by the Standard Webhooks reference library, not fogwatch's code
                if not reference_accepts(hook.secret, headers, body):
                    hook.rejected_signatures += 1
                    status = 401
                elif hook.fail_first_attempt and first:
                    status = 500
                else:
                    hook.accepted.append({"headers": headers, "body": json.loads(body)})
                    status = 200
        try:
            self.send_response(status)
            for name, value in extra.items():
                self.send_header(name, value)
            self.send_header("Content-Length", "0")
            self.end_headers()
        except (BrokenPipeError, ConnectionResetError):
            pass  # the sender gave up waiting (a timeout test): nothing to answer

    def log_message(self, format: str, *args: Any) -> None:  # noqa: A002
        return None


class _HookHttpServer(http.server.ThreadingHTTPServer):
    daemon_threads = True

    def handle_error(self, request: Any, client_address: Any) -> None:
        if isinstance(sys.exc_info()[1], ConnectionError):
            return  # a sender killed mid-request (the crash test) is expected here
        super().handle_error(request, client_address)


@dataclass
class HookServer:
    url: str
    hook: Hook


@pytest.fixture
def webhook_server() -> Iterator[HookServer]:
    hook = Hook()
    server = _HookHttpServer(("127.0.0.1", 0), _HookHandler)
    server.hook = hook  # type: ignore[attr-defined]
    thread = threading.Thread(
        target=server.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True
    )
    thread.start()
    try:
        yield HookServer(f"http://127.0.0.1:{server.server_address[1]}/fogwatch", hook)
    finally:
        hook.released.set()  # let stalled answers finish
        server.shutdown()
        server.server_close()
        thread.join(timeout=5)
