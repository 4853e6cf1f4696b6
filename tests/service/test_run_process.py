"""``fogwatch run`` as a real process: it keeps running through a dead source, a garbage
file and a broken rule file, never logs a secret, and stops cleanly on SIGTERM."""

from __future__ import annotations

import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path

from notifier.core.config import default_rules_dir
from tests.service.scene import BOT_SECRET, CONFIG, HEADER, HOOK_SECRET, Scene


def closed_port() -> int:
    """A port on 127.0.0.1 that nothing listens on (bound, then released)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def wait_for(what: Callable[[], bool], timeout_s: float, why: Callable[[], str]) -> None:
    deadline = time.monotonic() + timeout_s
    while not what():
        if time.monotonic() > deadline:
            raise AssertionError(why())
        time.sleep(0.1)


def test_run_survives_outage_garbage_and_a_bad_reload_then_stops_on_sigterm(scene: Scene):
    dead = closed_port()
    text = CONFIG.replace("    settle: 0\n", "    settle: 0\n    interval: 1s\n")
    text = text.replace(
        "channels:\n",
        f"""  - id: far-feed
    type: http_json
    url: http://127.0.0.1:{dead}/obs.json
    interval: 1s
    retries: 0
    connect_timeout: 0.5
    read_timeout: 0.5
channels:
  - id: office-hook
    type: webhook
    url: http://127.0.0.1:{dead}/hook
    secret: ${{FW_TEST_HOOK_SECRET}}
    timeout: 1s
""",
        1,
    )
    text = text.replace(
        "subscribers:\n",
        "subscribers:\n  - id: office\n    channel: office-hook\n    sites: [zz-quay]\n",
        1,
    )
    text += "rules: [rules]\nschedule:\n  evaluate_every: 1s\n  deliver_every: 1s\n"
    scene.config_path.write_text(text, encoding="utf-8")
    shutil.copytree(default_rules_dir(), scene.root / "rules")

    err_path = scene.root / "stderr.txt"
    env = {
        **os.environ,
        "FW_TEST_BOT_SECRET": BOT_SECRET,
        "FW_TEST_HOOK_SECRET": HOOK_SECRET,
        "PYTHONUNBUFFERED": "1",
    }
    with open(err_path, "w", encoding="utf-8") as err_file:
        proc = subprocess.Popen(
            [sys.executable, "-m", "notifier", "-v", "run", str(scene.config_path)],
            stdout=subprocess.DEVNULL,
            stderr=err_file,
            env=env,
            cwd=scene.root,
        )
    try:

        def err() -> str:
            return err_path.read_text(encoding="utf-8", errors="replace")

        def alive() -> bool:
            return proc.poll() is None

        def state() -> str:
            return f"exit={proc.poll()}\n{err()}"

        # the dead feed is reported, and the service goes on polling it
        wait_for(lambda: err().count("source far-feed:") >= 2, 20, state)
        assert alive(), state()

        # SIGHUP reloads the (unchanged, valid) files
        proc.send_signal(signal.SIGHUP)
        wait_for(lambda: f"reloaded {scene.config_path}" in err(), 10, state)
        assert alive(), state()

        # a garbage file is filed away in rejected/ with its reasons
        (scene.drop / "junk.csv").write_bytes(b"\x00\x01\x02 not readings \xff\xfe")
        rejected = scene.drop / "rejected"
        wait_for(lambda: (rejected / "junk.csv.why.txt").exists(), 10, state)
        assert (rejected / "junk.csv").read_bytes().startswith(b"\x00\x01")
        assert alive(), state()

        # a broken rule file is refused on reload; the running rules stay
        fog = scene.root / "rules" / "fog.yaml"
        fog.write_text(fog.read_text(encoding="utf-8") + "  - id: [unclosed\n", encoding="utf-8")
        wait_for(lambda: "reload failed, keeping the running config" in err(), 15, state)
        assert f"{fog}:" in err()
        assert alive(), state()

        # still at work after the bad reload: a good file is taken
        stamp = f"{datetime.now(UTC) - timedelta(minutes=5):%Y-%m-%dT%H:%M:%SZ}"
        (scene.drop / "now.csv.part").write_text(
            f"{HEADER}\nzz-quay,{stamp},9.0,3.0,4.0,90,25000,\n"
        )
        (scene.drop / "now.csv.part").rename(scene.drop / "now.csv")
        wait_for(lambda: (scene.drop / "processed" / "now.csv").exists(), 10, state)
        assert alive(), state()

        started = time.monotonic()
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=10)
        assert time.monotonic() - started < 8
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=5)
    log = err_path.read_text(encoding="utf-8", errors="replace")
    assert code == 0, log
    assert "fogwatch stopped" in log
    # a normal stop is INFO, in the time-stamped layout of notifier.core.logs
    assert re.search(r"^\S+Z INFO notifier\.service\.scheduler: fogwatch stopped$", log, re.M), log
    assert "Traceback" not in log
    for secret in (HOOK_SECRET, BOT_SECRET):
        assert secret not in log
    assert (scene.root / "fogwatch.sqlite").exists()


def test_run_with_a_bad_config_exits_2_at_once(tmp_path: Path):
    config = tmp_path / "fogwatch.yaml"
    config.write_text("version: 1\nsites:\n  - id: zz-vale\n", encoding="utf-8")
    done = subprocess.run(
        [sys.executable, "-m", "notifier", "run", str(config)],
        capture_output=True,
        text=True,
        timeout=30,
    )
    assert done.returncode == 2
    assert f"{config}:" in done.stderr
