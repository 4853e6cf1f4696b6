"""The bot endpoint inside the web app: each ``POST /message`` is handed to the bot
server's own request handler (:class:`notifier.bot.server.BotHTTPServer`), so signing,
replay memory, rate limits and size limits are the bot's, not a copy of them.

The bot server is built without binding a socket; each request is replayed to its
handler over an in-memory connection, and the handler's HTTP answer is read back.
"""

from __future__ import annotations

import http.client
import io
from collections.abc import Callable, Iterable
from datetime import datetime
from typing import Any

from notifier.bot.server import BotHTTPServer

__all__ = ["BotBridge"]

READ_LIMIT = 256 * 1024  # past this the bot refuses the body anyway (413, unread)


class _Unbound(BotHTTPServer):
    """The bot server's state and handler, with no socket of its own."""

    def server_bind(self) -> None:
        return None

    def server_activate(self) -> None:
        return None


class _Connection:
    """What the handler reads the request from and writes its answer to."""

    def __init__(self, request: bytes):
        self.request = request
        self.answer = bytearray()

    def settimeout(self, _timeout: float | None) -> None:
        return None

    def setsockopt(self, *_args: Any) -> None:
        return None

    def makefile(self, mode: str, *_args: Any) -> io.BytesIO:
        return io.BytesIO(self.request if "r" in mode else b"")

    def sendall(self, data: bytes) -> None:
        self.answer += data


class _Reply:
    def __init__(self, data: bytes):
        self.data = data

    def makefile(self, *_args: Any) -> io.BytesIO:
        return io.BytesIO(self.data)


class BotBridge:
    def __init__(
        self,
        secret: str,
        answer: Callable[[str, str, datetime], str],
        seen: Any,
        rate_per_minute: int = 20,
    ):
        self.server = _Unbound(
            ("127.0.0.1", 0), secret, answer, seen, rate_per_minute=rate_per_minute
        )
        self.server.socket.close()  # never bound: nothing listens

    def handle(
        self, method: str, path: str, headers: Iterable[tuple[str, str]], body: bytes, client: str
    ) -> tuple[int, list[tuple[str, str]], bytes]:
        """One request through the bot's handler: (status, headers, body)."""
        lines = [f"{method} {path} HTTP/1.1"]
        lines += [f"{k}: {v}" for k, v in headers if "\r" not in v and "\n" not in v]
        raw = ("\r\n".join(lines) + "\r\n\r\n").encode("latin-1", "replace") + body
        conn = _Connection(raw)
        self.server.RequestHandlerClass(conn, (client, 0), self.server)
        response = http.client.HTTPResponse(_Reply(bytes(conn.answer)))  # type: ignore[arg-type]
        response.begin()
        data = response.read()
        keep = [(k, v) for k, v in response.getheaders() if k.lower() in ("content-type",)]
        return response.status, keep, data

    def wait_idle(self, timeout_s: float) -> bool:
        return self.server.wait_idle(timeout_s)
