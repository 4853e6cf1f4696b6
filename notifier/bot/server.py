"""The bot's signed HTTP endpoint.

``POST /message`` with a JSON body ``{"sender": "...", "text": "..."}`` answers
``{"reply": "..."}``. Every request must carry

- ``X-Fogwatch-Timestamp``: POSIX seconds when it was sent, and
- ``X-Fogwatch-Signature``: ``v1=`` + hex HMAC-SHA256, keyed with the shared secret,
  over ``"{timestamp}.{body}"``.

Refused: no or bad signature (401), a timestamp more than 5 minutes off (401), the same
signature seen before (409, a replay), a body over 8 KiB (413), no Content-Length (411),
bad JSON (400), and more than the configured messages per minute from one sender (429).

Extra keys in the body are ignored, so a client that may send the same text twice in
one second (the same timestamp, hence the same signature) adds a unique ``"id"``.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import threading
import time
from collections import deque
from collections.abc import Callable
from datetime import UTC, datetime
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

__all__ = ["MAX_BODY", "BotHTTPServer", "sign_request", "verify_request"]

log = logging.getLogger(__name__)

MAX_BODY = 8 * 1024
DRAIN_LIMIT = 256 * 1024  # a larger body is not read at all: the connection is closed
TOLERANCE_S = 300
TS_HEADER = "X-Fogwatch-Timestamp"
SIG_HEADER = "X-Fogwatch-Signature"


def sign_request(secret: str, body: bytes, timestamp: int) -> dict[str, str]:
    """Headers that sign ``body`` at ``timestamp`` (for clients and tests)."""
    mac = hmac.new(secret.encode(), f"{timestamp}.".encode() + body, hashlib.sha256)
    return {TS_HEADER: str(timestamp), SIG_HEADER: "v1=" + mac.hexdigest()}


def verify_request(secret: str, headers: Any, body: bytes, now_s: float) -> str | None:
    """None when the signature is good and fresh, else the reason it is refused."""
    ts = headers.get(TS_HEADER)
    sig = headers.get(SIG_HEADER)
    if not ts or not sig:
        return "unsigned request"
    ts = ts.strip()
    if not ts.isascii() or not ts.isdigit() or len(ts) > 12:
        return "bad timestamp"
    ts_i = int(ts)
    if abs(now_s - ts_i) > TOLERANCE_S:
        return "stale timestamp"
    expected = sign_request(secret, body, ts_i)[SIG_HEADER]
    # compare bytes: a header may hold any Latin-1 text, which compare_digest rejects as str
    if not hmac.compare_digest(expected.encode(), sig.strip().encode("utf-8", "replace")):
        return "bad signature"
    return None


class _Guard:
    """Replay memory and per-sender rate limits, shared by the handler threads."""

    def __init__(self, rate_per_minute: int):
        self.rate = rate_per_minute
        self.seen: dict[str, float] = {}
        self.calls: dict[str, deque[float]] = {}
        self.lock = threading.Lock()

    def replayed(self, signature: str, now_s: float) -> bool:
        with self.lock:
            for sig, t in list(self.seen.items()):
                if now_s - t > 2 * TOLERANCE_S:
                    del self.seen[sig]
            if signature in self.seen:
                return True
            self.seen[signature] = now_s
            return False

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
    """Serves the bot on ``host:port``; ``answer(sender, text, now)`` makes the reply."""

    daemon_threads = True

    def __init__(
        self,
        address: tuple[str, int],
        secret: str,
        answer: Callable[[str, str, datetime], str],
        rate_per_minute: int = 20,
        clock: Callable[[], float] = time.time,
    ):
        if not secret:
            raise ValueError("the bot needs a shared secret (bot.secret: ${NAME})")
        self.secret = secret
        self.answer = answer
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
        why = verify_request(self.server.secret, self.headers, body, now_s)
        if why:
            log.warning("bot: refused request: %s", why)
            self._reply(401, {"error": why})
            return
        if self.server.guard.replayed(self.headers[SIG_HEADER].strip(), now_s):
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
