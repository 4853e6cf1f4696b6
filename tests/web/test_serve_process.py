"""``fogwatch serve`` as a process: it says where it listens, answers, and stops on
SIGTERM with exit 0; beyond loopback without a token it refuses with exit 2."""

from __future__ import annotations

import signal
import subprocess
import sys
import time
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


def test_run_serves_the_app_when_the_config_has_a_web_section(tmp_path: Path):
    import socket

    with socket.socket() as s:  # a free port on 127.0.0.1 (bound, then released)
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    write_starter(tmp_path, LAST)
    config = tmp_path / "fogwatch.yaml"
    config.write_text(
        config.read_text(encoding="utf-8")
        + f"web:\n  port: {port}\nschedule:\n  evaluate_every: 1s\n",
        encoding="utf-8",
    )
    proc = subprocess.Popen(
        [sys.executable, "-m", "notifier", "run", str(config)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        deadline = time.monotonic() + 30
        metrics = None
        while time.monotonic() < deadline:
            try:
                metrics = requests.get(f"http://127.0.0.1:{port}/metrics", timeout=5)
                if "fogwatch_cycle_duration_seconds_count 0.0" not in metrics.text:
                    break  # a cycle of this process was measured
            except requests.ConnectionError:
                pass
            time.sleep(0.2)
        assert metrics is not None and metrics.status_code == 200
        assert "fogwatch_cycle_duration_seconds_count 0.0" not in metrics.text
        assert requests.get(f"http://127.0.0.1:{port}/", timeout=10).status_code == 200
    finally:
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=60)
    assert proc.returncode == 0, err
