"""``fogwatch serve`` as a process: it says where it listens, answers, and stops on
SIGTERM with exit 0; beyond loopback without a token it refuses with exit 2."""

from __future__ import annotations

import signal
import subprocess
import sys
from pathlib import Path

import requests

from notifier.service.starter import write_starter
from tests.web.conftest import LAST


def test_serve_answers_and_stops_on_sigterm(tmp_path: Path):
    write_starter(tmp_path, LAST)
    proc = subprocess.Popen(
        [sys.executable, "-m", "notifier", "serve", str(tmp_path / "fogwatch.yaml"), "--port", "0"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        line = proc.stdout.readline()  # type: ignore[union-attr]
        assert line.startswith("serving on http://127.0.0.1:"), line
        url = line.split()[-1]
        health = requests.get(url + "health", timeout=10)
        assert health.status_code == 503  # nothing polled yet
        assert "source logger-drop: no successful poll yet" in health.json()["reasons"]
        assert requests.get(url, timeout=10).status_code == 200
    finally:
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=20)
    assert proc.returncode == 0, err


def test_serve_beyond_loopback_without_a_token_is_refused(tmp_path: Path):
    write_starter(tmp_path, LAST)
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "notifier",
            "serve",
            str(tmp_path / "fogwatch.yaml"),
            "--host",
            "0.0.0.0",
            "--port",
            "0",
        ],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == 2
    assert "needs web.token" in done.stderr
