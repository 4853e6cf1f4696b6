"""The store's sent_at is when a message left, not when the dispatch run began, and
``fogwatch status`` shows a quiet-hours hold as "held until HH:MM" (issue 16, finding e)."""

from __future__ import annotations

import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from notifier.cli import main as cli
from notifier.service.cycle import Service
from tests.delivery.outbox_kit import queue, secrets_env, signed_receiver, webhook_channel
from tests.delivery.outbox_kit import write_config as write
from tests.delivery.scenes import event

BOT = {"id": "ops-bridge", "channel": "hook", "address": "ops-room"}


@pytest.fixture(autouse=True)
def _secrets(monkeypatch):
    secrets_env(monkeypatch)


def test_sent_at_is_when_each_message_left(tmp_path: Path):
    def slow(_delivery: str, _attempt: int) -> int:
        time.sleep(1.5)  # a receiver that takes a second and a half to answer
        return 204

    with signed_receiver(answer=slow) as receiver:
        service = Service(write(tmp_path, [webhook_channel(receiver.url)], [BOT]))
        try:
            now = datetime.now(UTC).replace(microsecond=0)  # the store keeps whole seconds
            events = [event(at=now - timedelta(minutes=m)) for m in range(2)]
            queue(service, events, now)
            assert service.deliver(now).sent == 2
            sent = sorted(r.sent_at for r in service.outbox.deliveries())
        finally:
            service.close()
    # the first left after one answer (1.5 s), the second after two (3 s)
    assert sent[0] - now >= timedelta(seconds=1)
    assert sent[1] - now >= timedelta(seconds=3)


def test_status_shows_a_quiet_hours_hold_with_its_end(tmp_path: Path, capsys):
    # status judges holds by the real clock: quiet hours from an hour ago to two hours on
    now = datetime.now(UTC).replace(second=0, microsecond=0)
    start, end = now - timedelta(hours=1), now + timedelta(hours=2)
    quiet = f"{start:%H:%M}-{end:%H:%M}"
    desk = {**BOT, "id": "night-desk", "quiet_hours": quiet, "timezone": "UTC"}
    service = Service(write(tmp_path, [webhook_channel("http://127.0.0.1:9/x")], [desk]))
    try:
        queue(service, [event(at=now)], now)
        (row,) = service.outbox.deliveries(["pending"])
        assert row.not_before == end
    finally:
        service.close()
    capsys.readouterr()
    assert cli.main(["status", str(tmp_path / "fogwatch.yaml")]) == 0
    out = capsys.readouterr().out
    assert f"  held until {end:%H:%M} UTC: night-desk via hook" in out
