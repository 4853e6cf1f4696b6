"""A dispatcher SIGKILLed at random points, many times, loses nothing and duplicates at
most one delivery per kill (at-least-once, with the idempotency key to tell)."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from datetime import timedelta
from pathlib import Path

import pytest

from notifier.service.cycle import Service
from notifier.storage.outbox import Outbox
from notifier.storage.store import Store
from tests.delivery.conftest import WEBHOOK_SECRET
from tests.delivery.outbox_kit import (
    HOOK_ENV,
    SMTP_ENV,
    queue,
    signed_receiver,
    webhook_channel,
    write_config,
)
from tests.delivery.scenes import event, utc

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL")

ROOT = Path(__file__).resolve().parents[2]
T0 = utc(2026, 1, 10, 20, 0)
EVENTS = 20
SUBSCRIBERS = ("quay-bridge", "yard-bridge")  # 20 events × 2 = 40 deliveries
KILLS = 16
SEND_DELAY_S = 0.15  # per send: at most a few sends between two kills
CLAIM_LEASE_S = 0.5
SEED = 20260110


def worker(config: Path, env: dict[str, str], stderr: int = subprocess.DEVNULL):
    at = (T0 + timedelta(minutes=1)).isoformat()
    return subprocess.Popen(
        [sys.executable, "-m", "tests.delivery.crash_worker", str(config), at, str(SEND_DELAY_S)],
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=stderr,
        text=True,
    )


def test_killed_dispatcher_loses_nothing_and_duplicates_at_most_once_per_kill(
    tmp_path, monkeypatch
):
    monkeypatch.setenv(HOOK_ENV, WEBHOOK_SECRET)
    env = {**os.environ, HOOK_ENV: WEBHOOK_SECRET, SMTP_ENV: "unused"}
    rng = random.Random(SEED)
    started = time.monotonic()
    with signed_receiver() as receiver:
        subs = [{"id": s, "channel": "hook", "address": s} for s in SUBSCRIBERS]
        # a killed run's claims lapse after CLAIM_LEASE_S of wall time, and the next run
        # takes what it held; a run longer than that renews its claim as it goes
        config = write_config(
            tmp_path,
            [webhook_channel(receiver.url)],
            subs,
            alerts={"claim_lease": f"{CLAIM_LEASE_S}s"},
        )
        service = Service(config)
        events = [event(at=T0 - timedelta(minutes=m)) for m in range(EVENTS)]
        queued = queue(service, events, T0)
        service.close()
        keys = {d.key for d in queued}
        assert len(keys) == EVENTS * len(SUBSCRIBERS)

        kills = 0
        runs = 0
        while kills < KILLS:  # ~1.3 s a run here, mostly the worker's imports
            proc = worker(config, env)
            runs += 1
            assert proc.stdout is not None
            assert proc.stdout.readline().strip() == "ready"
            time.sleep(rng.uniform(0.05, 0.4))
            if proc.poll() is None:
                proc.send_signal(signal.SIGKILL)
                kills += 1
            proc.wait(timeout=10)
            proc.stdout.close()
            if proc.returncode == 0:
                break  # it finished the whole outbox before a kill could land
        sent_before_final = len(receiver.delivered())

        final = worker(config, env, stderr=subprocess.PIPE)
        out, err = final.communicate(timeout=60)
        assert final.returncode == 0 and out.strip() == "ready", err
        delivered = receiver.delivered()
        assert receiver.bad_signatures == 0

    with Store(service.config.store_url) as store:
        rows = Outbox(store).deliveries()
    duplicates = sum(n - 1 for n in delivered.values())
    print(
        f"\ncrash test: {runs} runs, {kills} kills, {sent_before_final} of {len(keys)} "
        f"arrived before the final run, {duplicates} duplicate(s), "
        f"{time.monotonic() - started:.1f} s"
    )
    assert kills >= 15
    assert sent_before_final < len(keys)  # the kills really landed mid-batch
    assert set(delivered) == keys  # nothing lost
    assert duplicates <= kills  # at most one per kill
    assert {r.key: r.status for r in rows} == {k: "sent" for k in keys}
    bodies = {b["delivery"]: b for b in receiver.accepted_bodies()}
    assert {b["recipient"] for b in bodies.values()} == set(SUBSCRIBERS)
    assert {b["id"] for b in bodies.values()} == {e.id for e in events}
