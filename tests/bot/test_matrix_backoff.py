"""The Matrix connection backs off as the homeserver asks: a 429 with ``retry_after_ms``
is waited out before the next sync (the client-server API's rate-limit answer:
docs/references.md [Matrix client-server API]). The homeserver here is a stub on
127.0.0.1 that answers the first sync with a 429 and every later one with an empty
sync; the real homeserver's tests are in test_matrix.py."""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

import pytest

from notifier.bot.matrix import MatrixBot, MatrixLink
from notifier.core.config import MatrixSettings
from notifier.storage.matrixstate import MatrixState
from notifier.storage.store import Store

RETRY_AFTER_MS = 700


class _Stub(BaseHTTPRequestHandler):
    syncs: list[float] = []

    def log_message(self, format: str, *args: Any) -> None:  # noqa: A002
        return None

    def do_GET(self) -> None:  # noqa: N802
        if not self.path.startswith("/_matrix/client/v3/sync"):
            self._answer(404, {"errcode": "M_UNRECOGNIZED", "error": "not here"})
            return
        self.syncs.append(time.monotonic())
        if len(self.syncs) == 1:
            body = {"errcode": "M_LIMIT_EXCEEDED", "error": "Too many requests"}
            self._answer(429, {**body, "retry_after_ms": RETRY_AFTER_MS})
        else:
            time.sleep(0.05)
            self._answer(200, {"next_batch": f"s{len(self.syncs)}"})

    def _answer(self, status: int, body: dict[str, Any]) -> None:
        data = json.dumps(body).encode()
        self.send_response(status)
        self.send_header("Content-Type", "application/json")
        self.send_header("Content-Length", str(len(data)))
        self.end_headers()
        self.wfile.write(data)


@pytest.fixture
def stub() -> Iterator[str]:
    _Stub.syncs = []
    server = ThreadingHTTPServer(("127.0.0.1", 0), _Stub)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_address[1]}"
    finally:
        server.shutdown()
        server.server_close()


def test_a_rate_limited_sync_waits_the_servers_retry_after(stub):
    settings = MatrixSettings(
        homeserver=stub, user_id="@fogbot:example.test", access_token="invented-token"
    )
    with Store.memory() as store:
        memory = MatrixState(store, settings.user_id)
        link = MatrixLink(MatrixBot(settings, lambda *_: "", memory, sync_timeout_ms=100))
        link.start()
        try:
            deadline = time.monotonic() + 20
            while len(_Stub.syncs) < 3 and time.monotonic() < deadline:
                time.sleep(0.05)
        finally:
            link.stop()
        assert len(_Stub.syncs) >= 3
        waited_s = _Stub.syncs[1] - _Stub.syncs[0]
        assert waited_s >= RETRY_AFTER_MS / 1000 - 0.01  # never sooner than asked
        shown = memory.status()
        assert shown is not None and "M_LIMIT_EXCEEDED" in shown["last_error"]
        assert memory.next_batch() is not None  # it went on syncing after the wait
