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

    @property
    def url(self) -> str:
        host, port = self.server.effective_host, self.server.effective_port
        host = f"[{host}]" if ":" in str(host) else host
        return f"http://{host}:{port}/"

    def run(self) -> None:
        """Serve in this thread until :meth:`close` is called from another."""
        try:
            self.server.run()
        except (OSError, ValueError):  # the loop ends with its sockets closed under it
            pass

    def start(self) -> WebServer:
        self._thread = threading.Thread(target=self.run, name="fogwatch-web", daemon=True)
        self._thread.start()
        return self

    def close(self, timeout_s: float = 10.0) -> None:
        self.server.close()
        if self._thread is not None:
            self._thread.join(timeout=timeout_s)
