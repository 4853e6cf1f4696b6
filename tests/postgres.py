"""A throwaway PostgreSQL server on 127.0.0.1 for the store's PostgreSQL path.

Started once per test session from the machine's own server binaries (``initdb``,
``pg_ctl``; PostgreSQL 15 here), with trust authentication on loopback, ``fsync`` off,
in a temporary folder that is removed afterwards. As root, the server runs as the
``postgres`` user (PostgreSQL refuses to run as root). Where no server binaries exist,
the tests that need one are skipped and say why.
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest


def _binary(name: str) -> str | None:
    found = shutil.which(name)
    if found:
        return found
    candidates = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{name}"))
    return candidates[-1] if candidates else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class Server:
    def __init__(self, port: int):
        self.port = port

    def url(self, database: str = "postgres") -> str:
        return f"postgresql+psycopg://fogwatch@127.0.0.1:{self.port}/{database}"

    def new_database(self) -> str:
        """A fresh, empty database; its SQLAlchemy URL."""
        import psycopg

        name = "t_" + uuid.uuid4().hex[:12]
        with psycopg.connect(
            f"host=127.0.0.1 port={self.port} user=fogwatch dbname=postgres", autocommit=True
        ) as conn:
            conn.execute(f'CREATE DATABASE "{name}"')
        return self.url(name)


@pytest.fixture(scope="session")
def postgres() -> Iterator[Server]:
    pytest.importorskip("psycopg")
    initdb, pg_ctl = _binary("initdb"), _binary("pg_ctl")
    if not initdb or not pg_ctl:
        pytest.skip("no PostgreSQL server binaries (initdb, pg_ctl) on this machine")
    base = Path(tempfile.mkdtemp(prefix="fogwatch-pg-"))
    prefix: list[str] = []
    if os.geteuid() == 0:
        if shutil.which("runuser") is None:
            pytest.skip("running as root without runuser: cannot start PostgreSQL")
        shutil.chown(base, "postgres")
        base.chmod(0o755)
        prefix = ["runuser", "-u", "postgres", "--"]
    data = base / "data"
    port = _free_port()
    options = f"-p {port} -k {base} -c listen_addresses=127.0.0.1 -c fsync=off"
    steps = [
        [*prefix, initdb, "-D", str(data), "-U", "fogwatch", "--auth=trust",
         "--encoding=UTF8", "--locale=C"],
        [*prefix, pg_ctl, "-D", str(data), "-l", str(base / "log"), "-w", "-o", options,
         "start"],
    ]  # fmt: skip
    for step in steps:
        done = subprocess.run(step, capture_output=True, text=True)
        if done.returncode != 0:  # the machine's server cannot run here: say why
            stop = [*prefix, pg_ctl, "-D", str(data), "-m", "immediate", "stop"]
            subprocess.run(stop, capture_output=True)  # in case "start" only timed out
            shutil.rmtree(base, ignore_errors=True)
            reason = (done.stderr or done.stdout).strip().splitlines()[-1:] or ["no output"]
            pytest.skip(f"PostgreSQL server did not start ({Path(step[len(prefix)]).name}): "
                        f"{reason[0]}")  # fmt: skip
    try:
        yield Server(port)
    finally:
        subprocess.run(
            [*prefix, pg_ctl, "-D", str(data), "-m", "immediate", "-w", "stop"],
            capture_output=True,
        )
        shutil.rmtree(base, ignore_errors=True)
