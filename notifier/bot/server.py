"""The bot's signed HTTP endpoint.

``POST /message`` with a JSON body ``{"sender": "...", "text": "..."}`` answers
``{"reply": "..."}``. Every request is signed by the open Standard Webhooks
specification (:mod:`notifier.core.signing`), keyed with ``bot.secret``:

- ``webhook-id``: a message id, new for every message (a retry of the same message may
  reuse it: it is answered once),
- ``webhook-timestamp``: POSIX seconds when it was signed,
- ``webhook-signature``: ``v1,`` + base64 HMAC-SHA256 of ``"{id}.{timestamp}.{body}"``.

Refused: no or bad signature (401), a timestamp more than 5 minutes off (401), a message
id already taken (409, a replay: the ids are kept in the store, so this holds across a
restart and across instances sharing the store), a body over 8 KiB (413), no
Content-Length (411), bad JSON (400), and more than the configured messages per minute
from one sender (429). When the store cannot record the id, 503: a request is never
taken without replay protection.
"""

from __future__ import annotations

import json
import logging
import threading
import time
from collections import deque
from collections.abc import Callable
from datetime import UTC, datetime
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any, Protocol

from notifier.core.signing import ID_HEADER, TIMESTAMP_HEADER, secret_key, why_refused

__all__ = ["MAX_BODY", "BotHTTPServer", "ReplayMemory"]

log = logging.getLogger(__name__)

MAX_BODY = 8 * 1024
DRAIN_LIMIT = 256 * 1024  # a larger body is not read at all: the connection is closed


class ReplayMemory(Protocol):
    """Where taken message ids are kept (:class:`notifier.storage.seen.SeenMessages`)."""

    def first_time(self, message_id: str, timestamp: int, now_s: float) -> bool: ...


class _Guard:
    """Per-sender rate limits, shared by the handler threads."""

    def __init__(self, rate_per_minute: int):
        self.rate = rate_per_minute
        self.calls: dict[str, deque[float]] = {}
        self.lock = threading.Lock()

    def over_rate(self, sender: str, now_s: float) -> bool:
        with self.lock:
            q = self.calls.setdefault(sender, deque())
            while q and now_s - q[0] > 60:
                q.popleft()
            if len(q) >= self.rate:
                return True
            q.append(now_s)
            return False


class BotHTTPServer(ThreadingHTTPServer):
    """Serves the bot on ``host:port``; ``answer(sender, text, now)`` makes the reply;
    ``seen`` keeps the message ids taken (in the store, for replay protection)."""

    daemon_threads = True

    def __init__(
        self,
        address: tuple[str, int],
        secret: str,
        answer: Callable[[str, str, datetime], str],
        seen: ReplayMemory,
        rate_per_minute: int = 20,
        clock: Callable[[], float] = time.time,
    ):
        if not secret:
            raise ValueError("the bot needs a shared secret (bot.secret: ${NAME})")
        secret_key(secret)  # a secret of another form: ValueError now, not 500s later
        self.secret = secret
        self.answer = answer
        self.seen = seen
        self.clock = clock
        self.guard = _Guard(rate_per_minute)
        self._busy = 0
        self._idle = threading.Condition()
        super().__init__(address, _Handler)

    def _answer(self, sender: str, text: str, now: datetime) -> str:
        with self._idle:
            self._busy += 1
        try:
            return self.answer(sender, text, now)
        finally:
            with self._idle:
                self._busy -= 1
                self._idle.notify_all()

    def wait_idle(self, timeout_s: float) -> bool:
        """Wait until no answer is being made; False if one still is after ``timeout_s``."""
        with self._idle:
            return self._idle.wait_for(lambda: self._busy == 0, timeout=timeout_s)

    def handle_error(self, request: Any, client_address: Any) -> None:
        # a client that hangs up mid-request is not worth a traceback on stderr
        log.warning(
            "bot: request from %s failed",
            client_address[0],
            exc_info=log.isEnabledFor(logging.DEBUG),
        )


class _Handler(BaseHTTPRequestHandler):
    server: BotHTTPServer
    protocol_version = "HTTP/1.1"
    timeout = 15  # seconds a client may take to send its request: no stalled threads

    def log_message(self, format: str, *args: Any) -> None:  # noqa: A002
        log.debug("bot http: " + format, *args)

    def _reply(self, code: int, payload: dict[str, Any]) -> None:
        data = json.dumps(payload, ensure_ascii=False).encode()
        self.send_response(code)
        self.send_header("Content-Type", "application/json; charset=utf-8")
        self.send_header("Content-Length", str(len(data)))
        self.end_headers()
        self.wfile.write(data)

    def _first_time(self, now_s: float) -> bool | None:
        """Record the (verified) message id: True the first time, False for a replay,
        None when the store cannot record it."""
        message_id = self.headers[ID_HEADER]
        timestamp = int(self.headers[TIMESTAMP_HEADER].strip())
        try:
            return self.server.seen.first_time(message_id, timestamp, now_s)
        except Exception as exc:  # the store is down or locked: refuse, never go unguarded
            # (the exception's text may hold the store's URL: only its kind is logged)
            log.error("bot: cannot record the message id: %s", type(exc).__name__)
            return None

    def do_GET(self) -> None:  # noqa: N802
        if self.path == "/health":
            self._reply(200, {"ok": True})
        else:
            self._reply(404, {"error": "not found"})

    def do_POST(self) -> None:  # noqa: N802
        if self.path != "/message":
            self._reply(404, {"error": "not found"})
            return
        if self.headers.get("Transfer-Encoding") or "Content-Length" not in self.headers:
            self.close_connection = True
            self._reply(411, {"error": "a Content-Length is required"})
            return
        try:
            length = int(self.headers["Content-Length"])
            if length < 0:
                raise ValueError
        except ValueError:
            self.close_connection = True
            self._reply(400, {"error": "bad Content-Length"})
            return
        if length > MAX_BODY:
            self.close_connection = True
            if length <= DRAIN_LIMIT:
                # read what was sent, so that closing does not reset the connection
                # before the client has read the answer
                self.rfile.read(length)
            self._reply(413, {"error": f"body over {MAX_BODY} bytes"})
            return
        body = self.rfile.read(length)
        now_s = self.server.clock()
        why = why_refused(self.server.secret, self.headers, body, now_s)
        if why:
            log.warning("bot: refused request: %s", why)
            self._reply(401, {"error": why})
            return
        first = self._first_time(now_s)
        if first is None:
            self._reply(503, {"error": "cannot check for a replay now; try again later"})
            return
        if not first:
            self._reply(409, {"error": "replayed request"})
            return
        try:
            msg = json.loads(body)
            sender, text = msg["sender"], msg["text"]
            if not isinstance(sender, str) or not isinstance(text, str) or not sender:
                raise TypeError
        except (ValueError, KeyError, TypeError):
            self._reply(400, {"error": 'expected JSON {"sender": "...", "text": "..."}'})
            return
        if self.server.guard.over_rate(sender, now_s):
            self._reply(429, {"error": "too many messages; try again in a minute"})
            return
        try:
            reply = self.server._answer(sender, text[:500], datetime.fromtimestamp(now_s, UTC))
        except Exception:  # a bug must not kill the endpoint
            log.exception("bot: command failed")
            self._reply(500, {"error": "internal error"})
            return
        self._reply(200, {"reply": reply})
