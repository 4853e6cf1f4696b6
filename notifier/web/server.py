"""Serving the web app with waitress on one port, in a thread or in the foreground.

waitress is a pure-Python WSGI server with a fixed pool of threads: the app's work is
blocking (SQL reads, the bot's answers), which a threaded WSGI server suits, and it
needs no compiler or event loop (DEVELOPERS.md says why Flask and waitress).
"""

from __future__ import annotations

import logging
import threading
from typing import Any

from notifier.core.errors import FogwatchError

__all__ = ["MAX_BODY", "WebServer"]

log = logging.getLogger(__name__)

TICK_S = 0.2  # how often the serving loop looks for a stop
MAX_BODY = 1024 * 1024  # no request of this app needs more (the bot takes 8 KiB)


class WebServer:
    def __init__(self, app: Any, host: str, port: int, threads: int = 4):
        from waitress import create_server

        try:
            self.server: Any = create_server(
                app,
                host=host,
                port=port,
                threads=threads,
                ident="fogwatch",
                max_request_body_size=MAX_BODY,
                channel_timeout=30,
                clear_untrusted_proxy_headers=True,
            )
        except OSError as exc:
            raise FogwatchError(
                f"serve: cannot listen on {host}:{port}: {exc.strerror or exc}"
            ) from exc
        self._thread: threading.Thread | None = None
        self._stop = threading.Event()

    @property
    def url(self) -> str:
        host, port = self.server.effective_host, self.server.effective_port
        host = f"[{host}]" if ":" in str(host) else host
        return f"http://{host}:{port}/"

    def run(self) -> None:
        """Serve in this thread until :meth:`close` is called from another.

        The loop turns every :data:`TICK_S` to look for a stop, and on its way out closes
        every connection too: a browser's kept-alive connection must not hold the
        process up until its timeout."""
        from waitress import wasyncore

        server = self.server
        try:
            while not self._stop.is_set():
                server.asyncore.loop(timeout=TICK_S, map=server._map, use_poll=True, count=1)
        finally:
            server.task_dispatcher.shutdown()
            wasyncore.close_all(server._map)

    def start(self) -> WebServer:
        self._thread = threading.Thread(target=self.run, name="fogwatch-web", daemon=True)
        self._thread.start()
        return self

    def close(self, timeout_s: float = 10.0) -> None:
        """Stop serving; from another thread than :meth:`run`'s, or after ``start``."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=timeout_s)
