"""A real Matrix homeserver (Synapse, from the package registry) on 127.0.0.1 for the
Matrix tests: one per test session, because it takes seconds to start.

The config is Synapse's own ``--generate-config`` output, edited: SQLite, a
``registration_shared_secret``, one client listener on 127.0.0.1 and no federation
listener, ``federation_domain_whitelist: []``, no key servers, the rate limits raised so
that quick tests are not throttled, cheap password hashing, and ``report_stats: false``.
Users are registered through the shared-secret admin API
(``/_synapse/admin/v1/register``, an HMAC-SHA1 of nonce, user, password and admin flag:
docs/references.md [Synapse shared-secret registration]). Where Synapse is not installed
or cannot start, the tests that need it skip and say why.

Every user and room here is invented.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import socket
import subprocess
import sys
import time
import uuid
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
import requests
import yaml

SERVER_NAME = "fog.test"  # the users' domain; nothing resolves it: federation is off
START_TIMEOUT_S = 120.0
PLENTY = {"per_second": 1000, "burst_count": 1000}

LOG_CONFIG = """\
version: 1
formatters:
  plain: {format: '%(asctime)s %(levelname)s %(name)s %(message)s'}
handlers:
  file: {class: logging.FileHandler, formatter: plain, filename: LOGFILE}
root: {level: WARNING, handlers: [file]}
disable_existing_loggers: false
"""


@dataclass
class MatrixUser:
    user_id: str
    access_token: str


@dataclass
class Homeserver:
    """A running Synapse: its base URL and how long it took to start."""

    url: str
    folder: Path
    shared_secret: str
    start_s: float
    users: dict[str, MatrixUser] = field(default_factory=dict)

    def register(self, localpart: str, admin: bool = False) -> MatrixUser:
        """A new account by shared secret (each test names its own, so tests stay apart)."""
        endpoint = f"{self.url}/_synapse/admin/v1/register"
        nonce = requests.get(endpoint, timeout=10).json()["nonce"]
        password = uuid.uuid4().hex
        # HMAC-SHA1 over nonce, user, password and admin flag joined by NULs
        mac = hmac.new(self.shared_secret.encode(), digestmod=hashlib.sha1)
        flag = "admin" if admin else "notadmin"
        mac.update("\x00".join((nonce, localpart, password, flag)).encode())
        body = {
            "nonce": nonce,
            "username": localpart,
            "password": password,
            "admin": admin,
            "mac": mac.hexdigest(),
        }
        reply = requests.post(endpoint, json=body, timeout=30)
        reply.raise_for_status()
        got = reply.json()
        user = MatrixUser(got["user_id"], got["access_token"])
        self.users[localpart] = user
        return user

    def client(self, user: MatrixUser) -> Client:
        return Client(self.url, user)


class Client:
    """A person's Matrix app, as far as the tests need one: plain client-server calls."""

    def __init__(self, url: str, user: MatrixUser):
        self.url = url
        self.user = user
        self.session = requests.Session()
        self.session.headers["Authorization"] = f"Bearer {user.access_token}"

    def call(self, method: str, path: str, body: Any = None, **params: Any) -> Any:
        reply = self.session.request(
            method, f"{self.url}/_matrix/client/v3{path}", json=body, params=params, timeout=30
        )
        reply.raise_for_status()
        return reply.json()

    def create_room(self, invite: list[str] = (), encrypted: bool = False, **extra: Any) -> str:
        body: dict[str, Any] = {"preset": "private_chat", "invite": list(invite), **extra}
        if encrypted:
            body["initial_state"] = [
                {
                    "type": "m.room.encryption",
                    "state_key": "",
                    "content": {"algorithm": "m.megolm.v1.aes-sha2"},
                }
            ]
        return str(self.call("POST", "/createRoom", body)["room_id"])

    def say(self, room_id: str, text: str) -> str:
        txn = uuid.uuid4().hex
        path = f"/rooms/{room_id}/send/m.room.message/{txn}"
        return str(self.call("PUT", path, {"msgtype": "m.text", "body": text})["event_id"])

    def join(self, room_id: str) -> None:
        self.call("POST", f"/join/{room_id}", {})

    def messages(self, room_id: str) -> list[dict[str, Any]]:
        """The room's message events, oldest first (the last 100)."""
        got = self.call("GET", f"/rooms/{room_id}/messages", dir="b", limit=100)
        events = [e for e in got["chunk"] if e["type"] == "m.room.message"]
        return list(reversed(events))

    def replies_from(self, room_id: str, sender: str) -> list[str]:
        return [e["content"]["body"] for e in self.messages(room_id) if e["sender"] == sender]

    def wait_for_reply(
        self, room_id: str, sender: str, count: int = 1, timeout_s: float = 30.0
    ) -> list[str]:
        """The bodies of ``sender``'s messages in the room once there are ``count``."""
        deadline = time.monotonic() + timeout_s
        while True:
            got = self.replies_from(room_id, sender)
            if len(got) >= count or time.monotonic() > deadline:
                return got
            time.sleep(0.1)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _configure(folder: Path, port: int) -> tuple[Path, str]:
    """Synapse's generated config, edited for a private test server."""
    config_path = folder / "homeserver.yaml"
    generate = [
        sys.executable,
        "-m",
        "synapse.app.homeserver",
        "--server-name",
        SERVER_NAME,
        "--config-path",
        str(config_path),
        "--generate-config",
        "--report-stats=no",
        "--data-directory",
        str(folder),
    ]
    subprocess.run(generate, check=True, capture_output=True, timeout=120, cwd=folder)
    config = yaml.safe_load(config_path.read_text(encoding="utf-8"))
    secret = config.get("registration_shared_secret") or uuid.uuid4().hex
    log_config = folder / "log.yaml"
    log_config.write_text(
        LOG_CONFIG.replace("LOGFILE", str(folder / "homeserver.log")), encoding="utf-8"
    )
    config.update(
        {
            "listeners": [
                {
                    "port": port,
                    "bind_addresses": ["127.0.0.1"],
                    "type": "http",
                    "tls": False,
                    "x_forwarded": False,
                    "resources": [{"names": ["client"], "compress": False}],
                }
            ],
            "database": {"name": "sqlite3", "args": {"database": str(folder / "hs.db")}},
            "registration_shared_secret": secret,
            "federation_domain_whitelist": [],
            "trusted_key_servers": [],
            "suppress_key_server_warning": True,
            "report_stats": False,
            "bcrypt_rounds": 4,  # the fewest bcrypt allows: registering is quick, not safe
            "log_config": str(log_config),
            "enable_metrics": False,
            "presence": {"enabled": False},
            "url_preview_enabled": False,
            "rc_message": PLENTY,
            "rc_registration": PLENTY,
            "rc_joins": {"local": PLENTY, "remote": PLENTY},
            "rc_invites": {"per_room": PLENTY, "per_user": PLENTY, "per_issuer": PLENTY},
            "rc_login": {"address": PLENTY, "account": PLENTY, "failed_attempts": PLENTY},
            "rc_admin_redaction": PLENTY,
            "rc_room_creation": PLENTY,
            "rc_joins_per_room": PLENTY,
            "rc_3pid_validation": PLENTY,
        }
    )
    config_path.write_text(yaml.safe_dump(config), encoding="utf-8")
    return config_path, secret


def _why_not_up(process: subprocess.Popen[bytes], url: str, deadline: float) -> str | None:
    while time.monotonic() < deadline:
        if process.poll() is not None:
            return f"Synapse exited with code {process.returncode}"
        try:
            if requests.get(f"{url}/_matrix/client/versions", timeout=2).ok:
                return None
        except requests.RequestException:
            pass
        time.sleep(0.2)
    return f"Synapse did not answer within {START_TIMEOUT_S:.0f} s"


@pytest.fixture(scope="session")
def homeserver(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Homeserver]:
    """One Synapse for the whole session; skips (saying why) where it cannot start."""
    try:
        import synapse  # noqa: F401
    except ImportError:
        pytest.skip("matrix-synapse is not installed (pip install '.[test]')")
    folder = tmp_path_factory.mktemp("synapse")
    port = _free_port()
    began = time.monotonic()
    try:
        config_path, secret = _configure(folder, port)
    except (OSError, subprocess.SubprocessError) as exc:
        pytest.skip(f"cannot generate a Synapse config: {exc}")
    url = f"http://127.0.0.1:{port}"
    log = (folder / "stdout.log").open("wb")
    env = {**os.environ, "SYNAPSE_CACHE_FACTOR": "0.1"}
    process = subprocess.Popen(
        [sys.executable, "-m", "synapse.app.homeserver", "--config-path", str(config_path)],
        cwd=folder,
        stdout=log,
        stderr=subprocess.STDOUT,
        env=env,
    )
    try:
        why = _why_not_up(process, url, time.monotonic() + START_TIMEOUT_S)
        if why:
            tail = (folder / "stdout.log").read_text(errors="replace")[-600:]
            pytest.skip(f"{why}: {tail}")
        server = Homeserver(url, folder, secret, time.monotonic() - began)
        print(f"\nSynapse up on {url} in {server.start_s:.1f} s")
        yield server
    finally:
        process.terminate()
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
        log.close()
