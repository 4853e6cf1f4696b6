"""A dispatcher SIGKILLed at random points, many times, loses nothing and duplicates at
most one delivery per kill (at-least-once, with the idempotency key to tell).

Each run is killed after a number of its POSTs drawn in advance: either just as the last
of them is accepted (the receiver has it, the outbox does not know yet: a duplicate
follows) or while the next one is held at the receiver, unanswered (nothing delivered:
it must go again). The receiver holds every POST beyond the drawn number until the kill
has landed, so no run gets further than it may, however fast or slow this machine runs
the worker, the receiver or the test."""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import threading
import time
from collections import Counter
from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest

from notifier.service.cycle import Service
from notifier.storage.outbox import Outbox
from notifier.storage.store import Store
from tests.delivery.conftest import WEBHOOK_SECRET, HookServer, Wire
from tests.delivery.outbox_kit import HOOK_ENV, SMTP_ENV, queue, webhook_channel, write_config
from tests.delivery.scenes import event, utc
from tests.webhook_reference import reference_accepts

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL")

ROOT = Path(__file__).resolve().parents[2]
T0 = utc(2026, 1, 10, 20, 0)
EVENTS = 20
SUBSCRIBERS = ("quay-bridge", "yard-bridge")  # 20 events × 2 = 40 deliveries
KILLS = 16
SEND_DELAY_S = 0.15  # after each POST: the window where "received" is not yet "sent"
CLAIM_LEASE_S = 0.5
SEED = 20260110
# POSTs a run may make before it is killed, and when the kill lands (drawn per run):
# "accepted" as the last of them is counted (0: as the worker starts up), "in-flight"
# while the next is held unanswered. At most 2 new deliveries a run: 16 kills can never
# drain all 40.
POSTS_BEFORE_KILL = (0, 1, 2, 2)
KILL_WHEN = ("accepted", "in-flight")
DEADLINE_S = 60.0  # generous: only a broken worker takes this long to POST twice


class Gate:
    """The receiver's answers: each POST of the current run is let through (checked,
    counted, 200) while the run has POSTs left, else held until the test moves on to
    the next run — by then its sender is dead, so it is dropped: nothing delivered."""

    def __init__(self, secret: str):
        self.secret = secret
        self.cond = threading.Condition()
        self.run = 0
        self.left = 0  # POSTs the current run may still make
        self.posts = 0  # POSTs let through in the current run
        self.held = 0  # POSTs of the current run waiting, unanswered
        self.delivered: Counter[str] = Counter()
        self.bodies: dict[str, dict[str, Any]] = {}
        self.bad_signatures = 0

    def next_run(self, posts: int) -> None:
        with self.cond:
            self.run += 1
            self.left, self.posts, self.held = posts, 0, 0
            self.cond.notify_all()

    def wait_until(self, when: str, posts: int, proc: subprocess.Popen[str]) -> bool:
        """Until ``posts`` POSTs are accepted, or (``in-flight``) one more is held."""

        def done() -> bool:
            if proc.poll() is not None:
                return True
            return self.posts >= posts if when == "accepted" else self.held > 0

        with self.cond:
            return self.cond.wait_for(done, DEADLINE_S)

    def answer(self, wire: Wire) -> tuple[int, dict[str, str]]:
        with self.cond:
            run = self.run
            if self.left <= 0:
                self.held += 1
                self.cond.notify_all()
            self.cond.wait_for(lambda: self.run != run or self.left > 0, DEADLINE_S)
            if self.run != run or self.left <= 0:
                return 503, {}  # held past its sender's death: not delivered
            if not reference_accepts(self.secret, wire.headers, wire.body):
                self.bad_signatures += 1
                return 401, {}
            self.left -= 1
            self.posts += 1
            body = json.loads(wire.body)
            self.delivered[body["delivery"]] += 1
            self.bodies[body["delivery"]] = body
            self.cond.notify_all()
            return 200, {}


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
    tmp_path, monkeypatch, webhook_server: HookServer
):
    monkeypatch.setenv(HOOK_ENV, WEBHOOK_SECRET)
    env = {**os.environ, HOOK_ENV: WEBHOOK_SECRET, SMTP_ENV: "unused"}
    rng = random.Random(SEED)
    started = time.monotonic()
    gate = Gate(WEBHOOK_SECRET)
    webhook_server.hook.answer = gate.answer
    subs = [{"id": s, "channel": "hook", "address": s} for s in SUBSCRIBERS]
    # a killed run's claims lapse after CLAIM_LEASE_S of wall time, and the next run
    # takes what it held; a run longer than that renews its claim as it goes
    config = write_config(
        tmp_path,
        [webhook_channel(webhook_server.url)],
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
    while kills < KILLS:
        posts, when = rng.choice(POSTS_BEFORE_KILL), rng.choice(KILL_WHEN)
        gate.next_run(posts)
        proc = worker(config, env)
        runs += 1
        assert proc.stdout is not None
        assert proc.stdout.readline().strip() == "ready"
        assert gate.wait_until(when, posts, proc), f"run {runs}: {when} {posts} not in time"
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            kills += 1
        proc.wait(timeout=10)
        proc.stdout.close()
        if proc.returncode == 0:
            break  # it finished the whole outbox before a kill could land
    sent_before_final = len(gate.delivered)

    gate.next_run(10**6)  # the last run may POST all it wants
    final = worker(config, env, stderr=subprocess.PIPE)
    out, err = final.communicate(timeout=DEADLINE_S)
    assert final.returncode == 0 and out.strip() == "ready", err
    gate.next_run(0)
    delivered = Counter(gate.delivered)
    assert gate.bad_signatures == 0

    with Store(service.config.store_url) as store:
        rows = Outbox(store).deliveries()
    duplicates = sum(n - 1 for n in delivered.values())
    print(
        f"\ncrash test: {runs} runs, {kills} kills, {sent_before_final} of {len(keys)} "
        f"arrived before the final run, {duplicates} duplicate(s), "
        f"{time.monotonic() - started:.1f} s"
    )
    assert kills == KILLS  # every run was killed: none could drain the outbox
    assert sent_before_final < len(keys)  # the kills really landed mid-batch
    assert set(delivered) == keys  # nothing lost
    assert duplicates <= kills  # at most one per kill
    assert {r.key: r.status for r in rows} == {k: "sent" for k in keys}
    bodies = gate.bodies
    assert {b["recipient"] for b in bodies.values()} == set(SUBSCRIBERS)
    assert {b["id"] for b in bodies.values()} == {e.id for e in events}
