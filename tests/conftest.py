"""Shared fixtures: a loopback JSON HTTP server, a config factory, invented sites.

Every site, station and place here is invented; station ids use the unassigned ``ZZ``
prefix so that they can never be mistaken for a real aerodrome.
"""

from __future__ import annotations

import json
import os
import threading
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import pytest
import yaml

from notifier.core.config import Config
from notifier.core.config_file import load_config
from tests import oracle_check

# every assessment and lifecycle step of the suite is checked against the per-site
# oracles (before any test module imports ``assess`` or ``step`` by name);
# FOGWATCH_ORACLE=0 leaves them out (to time the suite without them)
if os.environ.get("FOGWATCH_ORACLE", "1") != "0":
    oracle_check.install()

SITES: list[dict[str, Any]] = [
    {
        "id": "zz-vale",
        "name": "Lower Vale Orchard",
        "lat": 52.41,
        "lon": -2.37,
        "timezone": "Europe/London",
        "exposure": "valley",
        "use": "farm",
    },
    {
        "id": "zz-quay",
        "name": "North Quay Basin",
        "lat": 53.02,
        "lon": -3.11,
        "timezone": "Europe/London",
        "exposure": "waterside",
        "use": "port",
    },
]

# (status, headers, body). ``body`` is bytes, or an iterable of byte chunks written and
# flushed one at a time (a generator may stall between them, see LoopbackJson.stall).
# A "Content-Length" among the headers is sent as given, even when it is not the body's
# length (a server that dies mid-body); without one, bytes get their own length, and
# chunks are sent with "Connection: close", the body ending when the server hangs up.
Responder = Callable[["Request"], tuple[int, dict[str, str], bytes | Iterable[bytes]]]


@dataclass
class Request:
    path: str
    headers: dict[str, str]
    client: tuple[str, int] | None = None  # the client's address and port (its connection)


@dataclass
class LoopbackJson:
    """A real HTTP server on 127.0.0.1 (ephemeral port) whose answers tests set."""

    base_url: str
    routes: dict[str, Responder] = field(default_factory=dict)
    requests: list[Request] = field(default_factory=list)
    released: threading.Event = field(default_factory=threading.Event)

    def url(self, path: str) -> str:
        return self.base_url + path

    def stall(self, limit_s: float = 60.0) -> None:
        """Block the answering thread, as a hung peer would, until the test is over (the
        fixture releases it) or ``limit_s`` has passed: a client's timeout, not the
        machine's speed, decides what happens meanwhile."""
        self.released.wait(limit_s)

    def json(self, path: str, doc: Any, status: int = 200) -> None:
        body = json.dumps(doc).encode()
        self.routes[path] = lambda _req: (status, {"Content-Type": "application/json"}, body)

    def respond(self, path: str, responder: Responder) -> None:
        self.routes[path] = responder

    def sequence(self, path: str, answers: list[tuple[int, Any]]) -> None:
        """Answer successive requests in turn; the last answer repeats."""
        remaining = list(answers)

        def responder(_req: Request) -> tuple[int, dict[str, str], bytes]:
            status, doc = remaining.pop(0) if len(remaining) > 1 else remaining[0]
            return status, {"Content-Type": "application/json"}, json.dumps(doc).encode()

        self.routes[path] = responder


@pytest.fixture
def loopback_json() -> Iterator[LoopbackJson]:
    state: dict[str, LoopbackJson] = {}

    class Handler(BaseHTTPRequestHandler):
        protocol_version = "HTTP/1.1"

        def do_GET(self) -> None:  # noqa: N802 - the name http.server calls
            server = state["server"]
            headers = {k.lower(): v for k, v in self.headers.items()}
            request = Request(self.path, headers, tuple(self.client_address[:2]))
            server.requests.append(request)
            path = self.path.split("?", 1)[0]
            responder = server.routes.get(path)
            if responder is None:
                status, headers, body = 404, {"Content-Type": "text/plain"}, b"no such route"
            else:
                status, headers, body = responder(request)
            declared = {name.lower() for name in headers}
            self.send_response(status)
            for name, value in headers.items():
                self.send_header(name, value)
            if isinstance(body, bytes):
                if "content-length" not in declared:
                    self.send_header("Content-Length", str(len(body)))
                chunks: Iterable[bytes] = (body,)
            else:
                if "content-length" not in declared:
                    self.send_header("Connection", "close")  # the body ends at hang-up
                chunks = body
            if "content-length" in declared:
                self.close_connection = True  # a lying length ends at hang-up too
            self.end_headers()
            try:
                for chunk in chunks:
                    self.wfile.write(chunk)
                    self.wfile.flush()
            except (BrokenPipeError, ConnectionResetError):
                self.close_connection = True  # the client stopped reading: as intended

        def log_message(self, format: str, *args: Any) -> None:  # noqa: A002
            pass  # keep test output clean

    httpd = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    httpd.daemon_threads = True
    host, port = httpd.server_address[:2]
    state["server"] = LoopbackJson(base_url=f"http://{host}:{port}")
    thread = threading.Thread(target=httpd.serve_forever, kwargs={"poll_interval": 0.05})
    thread.start()
    try:
        yield state["server"]
    finally:
        state["server"].released.set()  # let stalled answers finish
        httpd.shutdown()
        httpd.server_close()
        thread.join(timeout=5)


@pytest.fixture
def make_config(tmp_path: Path) -> Callable[..., Config]:
    """Write a config file in ``tmp_path`` and load it (so paths and ${ENV} resolve)."""
    counter = {"n": 0}

    def make(
        sources: list[dict[str, Any]] | None = None,
        sites: list[dict[str, Any]] | None = None,
        **extra: Any,
    ) -> Config:
        counter["n"] += 1
        doc: dict[str, Any] = {"version": 1, "sites": sites if sites is not None else SITES}
        if sources:
            doc["sources"] = sources
        doc.update(extra)
        path = tmp_path / f"fogwatch-{counter['n']}.yaml"
        path.write_text(yaml.safe_dump(doc, sort_keys=False), encoding="utf-8")
        return load_config(path)

    return make


# ---- stores: every store test runs on SQLite and on a real PostgreSQL server --------------

from tests.postgres import postgres  # noqa: E402,F401  (a session fixture)


@pytest.fixture(params=["sqlite", "postgresql"])
def any_store(request: pytest.FixtureRequest) -> Iterator[Any]:
    """A new, empty store: in-memory SQLite, or a fresh database on the test PostgreSQL
    server (see tests/postgres.py; skipped where the machine has no server binaries)."""
    from notifier.storage.store import Store

    if request.param == "sqlite":
        url = None
    else:
        url = request.getfixturevalue("postgres").new_database()
    with Store.memory() if url is None else Store(url) as store:
        yield store


# the service scene (a config, a drop folder and a store in a temporary folder) serves the
# service, bot and delivery tests alike
# a real Matrix homeserver (Synapse on 127.0.0.1), one per session, for the bot on Matrix
from tests.bot.matrix_server import homeserver  # noqa: E402,F401
from tests.service.scene import bot_env, scene  # noqa: E402,F401
