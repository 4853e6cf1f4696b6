"""The outbox worker against real servers on 127.0.0.1: an aiosmtpd server with login that
refuses for a while and recovers, and signed webhook receivers that answer 500 or 400.
Retries, backoff, permanent failures, expiry, one connection per batch, morning summaries,
and what `fogwatch status` shows of it all."""

from __future__ import annotations

import email
import random
from datetime import UTC, datetime, timedelta
from email import policy
from email.message import EmailMessage
from pathlib import Path

import pytest

from notifier.cli import main as cli
from notifier.core.signing import ID_HEADER
from notifier.delivery.dispatch import MAX_TRANSIENT_IN_A_ROW, backoff_s
from notifier.delivery.messages import CAUTION
from notifier.service.cycle import Service
from notifier.storage.deliveries import DeliveryRow
from tests.delivery.outbox_kit import (
    SITES,
    email_channel,
    queue,
    secrets_env,
    signed_receiver,
    webhook_channel,
    write_config,
)
from tests.delivery.scenes import event, utc

T0 = utc(2026, 1, 10, 20, 0)  # January: Europe/London is on UTC
OPS = {"id": "harbour-ops", "channel": "mail", "address": "harbour-ops@example.test"}
BOT = {"id": "ops-bridge", "channel": "hook", "address": "ops-room"}


@pytest.fixture(autouse=True)
def _secrets(monkeypatch):
    secrets_env(monkeypatch)


@pytest.fixture
def make_service(tmp_path: Path):
    made: list[Service] = []

    def make(channels, subscribers, **extra) -> Service:
        path = write_config(tmp_path, channels, subscribers, **extra)
        service = Service(path, rng=random.Random(5))
        made.append(service)
        return service

    yield make
    for service in made:
        service.close()


def parse(data: bytes) -> EmailMessage:
    return email.message_from_bytes(data, policy=policy.default)  # type: ignore[return-value]


def rows(service: Service) -> dict[str, DeliveryRow]:
    return {r.subscriber: r for r in service.outbox.deliveries()}


def status_text(service: Service, capsys) -> str:
    capsys.readouterr()
    assert cli.main(["status", str(service.config_path)]) == 0
    return capsys.readouterr().out


def test_backoff_doubles_with_jitter_and_is_capped():
    rng = random.Random(1)
    for attempts, base in [(0, 60), (1, 120), (2, 240), (4, 960), (5, 1800), (12, 1800)]:
        delays = [backoff_s(attempts, rng) for _ in range(200)]
        assert base * 0.8 <= min(delays) and max(delays) <= base * 1.2
        assert max(delays) - min(delays) > base * 0.2  # jitter spreads retries out


def test_smtp_refusing_for_a_while_is_retried_with_backoff_then_sent_once(
    smtp_server, make_service
):
    inbox = smtp_server.inbox
    inbox.fail_data = 10**6  # 451 to every DATA until it recovers
    service = make_service([email_channel(smtp_server.port)], [OPS])
    ev = event("escalated", "warning", "watch", at=T0)
    (d,) = queue(service, [ev], T0)

    report = service.deliver(T0)
    assert (report.sent, report.retried, report.failed) == (0, 1, 0)
    row = rows(service)["harbour-ops"]
    assert row.status == "pending" and row.attempts == 1
    assert "451" in (row.last_error or "")
    wait = (row.next_attempt_at - T0).total_seconds()
    assert 60 * 0.8 <= wait <= 60 * 1.2  # ≈ 60 s ± 20 % (stored to the second)

    # before the backoff has passed nothing is attempted
    tried = 10**6 - inbox.fail_data
    report = service.deliver(T0 + timedelta(seconds=30))
    assert (report.sent, report.retried) == (0, 0)
    assert 10**6 - inbox.fail_data == tried

    # the second failure backs off about twice as long
    second = row.next_attempt_at
    service.deliver(second)
    row = rows(service)["harbour-ops"]
    assert row.attempts == 2
    assert 120 * 0.8 <= (row.next_attempt_at - second).total_seconds() <= 120 * 1.2

    inbox.fail_data = 0  # the server recovers
    report = service.deliver(row.next_attempt_at)
    assert (report.sent, report.retried) == (1, 0)
    row = rows(service)["harbour-ops"]
    assert row.status == "sent" and row.attempts == 3 and row.sent_at is not None
    assert service.deliver(row.next_attempt_at + timedelta(hours=1)).sent == 0

    (got,) = inbox.messages
    assert got.rcpt_tos == ["harbour-ops@example.test"]
    msg = parse(got.data)
    assert msg["Message-ID"] == f"<{d.key}@example.test>"
    assert msg["X-Fogwatch-Delivery"] == d.key
    assert msg["X-Fogwatch-Event"] == ev.id
    assert msg["Subject"] == "Fog now a warning · Quay Two · 20:00 GMT"
    body = msg.get_body(preferencelist=("plain",)).get_content()  # type: ignore[union-attr]
    assert " ".join(CAUTION.split()) in " ".join(body.split())


def test_a_550_fails_for_good_and_status_shows_it(smtp_server, make_service, capsys):
    smtp_server.inbox.refuse = {"gone@example.test"}
    gone = {"id": "old-desk", "channel": "mail", "address": "gone@example.test"}
    service = make_service([email_channel(smtp_server.port)], [OPS, gone])
    queue(service, [event(at=T0)], T0)

    report = service.deliver(T0)
    assert (report.sent, report.failed, report.retried) == (1, 1, 0)
    failed = rows(service)["old-desk"]
    assert failed.status == "failed" and failed.attempts == 1
    assert "550" in (failed.last_error or "")
    assert service.deliver(T0 + timedelta(hours=2)).failed == 0  # never retried
    assert [m.rcpt_tos for m in smtp_server.inbox.messages] == [["harbour-ops@example.test"]]

    out = status_text(service, capsys)
    assert "Outbox: 1 failed, 1 sent" in out
    (line,) = [x for x in out.splitlines() if x.strip().startswith("failed:")]
    assert "old-desk via mail" in line and "550" in line


def test_a_delivery_past_the_maximum_age_is_expired_and_shown(smtp_server, make_service, capsys):
    smtp_server.inbox.fail_data = 10**6  # down all night
    service = make_service([email_channel(smtp_server.port)], [OPS])
    queue(service, [event(at=T0)], T0)
    now = T0
    while now < T0 + timedelta(hours=12):
        report = service.deliver(now)
        assert report.expired == 0 and report.sent == 0
        now += timedelta(minutes=20)
    row = rows(service)["harbour-ops"]
    assert row.status == "pending" and row.attempts >= 8
    assert (row.next_attempt_at - T0) <= timedelta(hours=12, minutes=36)  # capped at 30 min

    out = status_text(service, capsys)
    assert f"retrying ({row.attempts} tries): harbour-ops via mail" in out

    smtp_server.inbox.fail_data = 0  # back, but too late: an alert that old is not news
    report = service.deliver(T0 + timedelta(hours=12, minutes=1))
    assert (report.expired, report.sent) == (1, 0)
    assert rows(service)["harbour-ops"].status == "expired"
    assert smtp_server.inbox.messages == []
    out = status_text(service, capsys)
    assert "Outbox: 1 expired" in out
    assert "expired: harbour-ops via mail: gave up: still undelivered after 12 h" in out
    assert any("expired undelivered" in p for p in service.health(T0 + timedelta(hours=13)))


def test_one_smtp_connection_for_a_batch(smtp_server, make_service):
    subs = [
        {"id": f"desk-{n}", "channel": "mail", "address": f"desk-{n}@example.test"}
        for n in range(4)
    ]
    service = make_service([email_channel(smtp_server.port)], subs)
    events = [event(at=T0 + timedelta(minutes=m)) for m in range(5)]
    queued = queue(service, events, T0)
    assert len(queued) == 20

    report = service.deliver(T0)
    assert report.sent == 20
    assert smtp_server.inbox.connections == 1
    ids = [parse(m.data)["Message-ID"] for m in smtp_server.inbox.messages]
    assert sorted(ids) == sorted(f"<{d.key}@example.test>" for d in queued)


def test_a_down_channel_is_left_alone_for_the_rest_of_the_run(smtp_server, make_service):
    smtp_server.inbox.fail_data = 10**6
    subs = [
        {"id": f"desk-{n}", "channel": "mail", "address": f"desk-{n}@example.test"}
        for n in range(10)
    ]
    service = make_service([email_channel(smtp_server.port)], subs)
    queue(service, [event(at=T0)], T0)
    report = service.deliver(T0)
    assert report.retried == MAX_TRANSIENT_IN_A_ROW
    assert 10**6 - smtp_server.inbox.fail_data == MAX_TRANSIENT_IN_A_ROW
    untried = [r for r in service.outbox.deliveries() if r.attempts == 0]
    assert len(untried) == 10 - MAX_TRANSIENT_IN_A_ROW
    assert len(service.outbox.due(T0 + timedelta(seconds=1))) == len(untried)  # next run
    smtp_server.inbox.fail_data = 0
    later = T0 + timedelta(minutes=5)
    assert service.deliver(later).sent == 10
    assert len(smtp_server.inbox.messages) == 10


def test_webhook_500s_are_retried_then_delivered_once(webhook_server, make_service):
    hook = webhook_server.hook
    hook.fail_first_attempt = True  # 500 to the first attempt of each delivery
    service = make_service([webhook_channel(webhook_server.url)], [BOT])
    events = [event(at=T0 + timedelta(minutes=m)) for m in range(5)]
    queued = queue(service, events, T0)

    now = T0
    for _ in range(20):
        service.deliver(now)
        if not service.outbox.deliveries(["pending"]):
            break
        now += timedelta(minutes=1)
    assert now <= T0 + timedelta(minutes=5)
    assert hook.rejected_signatures == 0  # every request was signed correctly
    got = [a["headers"][ID_HEADER] for a in hook.accepted]
    assert sorted(got) == sorted(d.key for d in queued)  # each exactly once
    assert len(hook.attempts) == 10
    assert all(r.status == "sent" and r.attempts == 2 for r in service.outbox.deliveries())
    body = hook.accepted[0]["body"]
    assert body["recipient"] == "ops-room" and body["delivery"] == got[0]
    assert body["headline"].startswith("Fog watch · Quay Two")
    assert body["caution"] == CAUTION


def test_a_webhook_400_is_permanent(make_service, capsys):
    with signed_receiver(answer=lambda _d, _n: 400) as receiver:
        service = make_service([webhook_channel(receiver.url)], [BOT])
        queue(service, [event(at=T0)], T0)
        report = service.deliver(T0)
        assert (report.failed, report.retried) == (1, 0)
        service.deliver(T0 + timedelta(hours=1))
        assert len(receiver.ids()) == 1 and receiver.bad_signatures == 0
    row = rows(service)["ops-bridge"]
    assert row.status == "failed" and "HTTP 400" in (row.last_error or "")
    assert "failed: ops-bridge via hook: webhook hook: HTTP 400" in status_text(service, capsys)


@pytest.mark.parametrize("status", [408, 429, 503], ids=["timeout", "too-many", "unavailable"])
def test_webhook_statuses_worth_retrying(make_service, status):
    answers = {1: status}
    with signed_receiver(answer=lambda _d, n: answers.get(n, 204)) as receiver:
        service = make_service([webhook_channel(receiver.url)], [BOT])
        queue(service, [event(at=T0)], T0)
        assert service.deliver(T0).retried == 1
        assert service.deliver(T0 + timedelta(minutes=2)).sent == 1
        assert [s for _, s in receiver.attempts] == [status, 204]


def test_held_watch_news_goes_as_one_morning_summary_per_subscriber(
    smtp_server, webhook_server, make_service
):
    night_desk = {
        "id": "night-desk",
        "channel": "mail",
        "address": "night-desk@example.test",
        "quiet_hours": "22:00-06:30",
        "timezone": "Europe/London",
    }
    yard = {**BOT, "id": "yard-lead", "quiet_hours": "23:00-06:00"}
    service = make_service(
        [email_channel(smtp_server.port), webhook_channel(webhook_server.url)],
        [night_desk, yard],
    )
    inbox, hook = smtp_server.inbox, webhook_server.hook
    watch_quay = event(at=utc(2026, 1, 10, 22, 40))
    watch_field = event(site_id="north-field", at=utc(2026, 1, 10, 23, 30))
    warning = event("escalated", "warning", "watch", at=utc(2026, 1, 11, 2, 0))
    for ev in (watch_quay, watch_field, warning):
        queue(service, [ev], ev.time)
        service.deliver(ev.time)
    # inside quiet hours only the warning went to night-desk; yard-lead's quiet
    # hours began at 23:00, so it had the first watch at once
    assert [parse(m.data)["Subject"] for m in inbox.messages] == [
        "Fog now a warning · Quay Two · 02:00 GMT"
    ]
    assert [a["body"]["id"] for a in hook.accepted] == [watch_quay.id, warning.id]

    assert service.deliver(utc(2026, 1, 11, 5, 59)).sent == 0
    assert service.deliver(utc(2026, 1, 11, 6, 0)).sent == 1  # yard-lead's morning
    assert service.deliver(utc(2026, 1, 11, 6, 29)).sent == 0
    assert service.deliver(utc(2026, 1, 11, 6, 30)).sent == 2  # two rows, one message
    assert service.deliver(utc(2026, 1, 11, 9, 0)).sent == 0

    assert len(inbox.messages) == 2
    summary = parse(inbox.messages[1].data)
    assert summary["Subject"] == "Overnight: 2 updates for 2 sites · 06:30 GMT"
    assert summary["Message-ID"].startswith("<fw-sum-")
    text = summary.get_body(preferencelist=("plain",)).get_content()  # type: ignore[union-attr]
    assert "Quay Two" in text and "North Field" in text and "held for quiet hours" in text
    assert "Fog watch raised" in text
    (posted,) = [a["body"] for a in hook.accepted if a["body"].get("type") == "summary"]
    assert [e["id"] for e in posted["events"]] == [watch_field.id]
    assert posted["headline"] == "Overnight: 1 update for 1 site · 06:00 GMT"
    assert posted["caution"] == CAUTION
    assert all(r.status == "sent" for r in service.outbox.deliveries())
    held = [r for r in service.outbox.deliveries() if r.summary]
    assert {r.subscriber for r in held} == {"night-desk", "yard-lead"} and len(held) == 3


def test_a_row_that_cannot_be_composed_fails_and_the_rest_go(smtp_server, make_service, tmp_path):
    service = make_service([email_channel(smtp_server.port)], [OPS])
    queue(service, [event(at=T0), event(site_id="north-field", at=T0)], T0)
    # the site is removed from the config before the dispatcher runs
    path = write_config(
        tmp_path,
        [email_channel(smtp_server.port)],
        [OPS],
        sites=[s for s in SITES if s["id"] == "quay-two"],
    )
    assert path == service.config_path
    assert service.reload() == (True, "reloaded")
    report = service.deliver(T0)
    assert (report.sent, report.failed) == (1, 1)
    (bad,) = service.outbox.deliveries(["failed"])
    assert bad.last_error == "cannot compose: missing 'north-field'"


def test_an_adapter_bug_on_one_channel_does_not_stop_another(
    smtp_server, webhook_server, make_service
):
    def broken_connect(_config):
        raise RuntimeError("adapter bug")

    service = make_service(
        [email_channel(smtp_server.port), webhook_channel(webhook_server.url)],
        [OPS, BOT],
    )
    service.channel_kwargs = {"mail": {"connect": broken_connect}}
    queue(service, [event(at=T0)], T0)
    report = service.deliver(T0)
    assert (report.sent, report.retried) == (1, 1)
    assert len(webhook_server.hook.accepted) == 1
    mail = rows(service)["harbour-ops"]
    assert mail.status == "pending" and mail.attempts == 1
    assert mail.last_error == "internal error: RuntimeError: adapter bug"
    service.channel_kwargs = {}
    assert service.deliver(mail.next_attempt_at).sent == 1
    assert len(smtp_server.inbox.messages) == 1


def test_a_subscriber_removed_from_the_config_has_its_rows_cancelled(
    smtp_server, make_service, tmp_path
):
    service = make_service([email_channel(smtp_server.port)], [OPS])
    queue(service, [event(at=T0)], T0)
    write_config(tmp_path, [], [])
    assert service.reload()[0]
    report = service.deliver(T0)
    assert (report.cancelled, report.sent, report.failed) == (1, 0, 0)
    (row,) = service.outbox.deliveries(["cancelled"])
    assert row.last_error == "cancelled: no longer subscribed"
    assert smtp_server.inbox.messages == []


def test_a_channel_removed_from_the_config_fails_its_rows(smtp_server, make_service, tmp_path):
    # dispatch() called without the subscriber list (as a tool outside the service might)
    from notifier.delivery.dispatch import dispatch

    service = make_service([email_channel(smtp_server.port)], [OPS])
    queue(service, [event(at=T0)], T0)
    write_config(tmp_path, [], [])
    assert service.reload()[0]
    report = dispatch(service.outbox, service.config, service.rules, T0)
    assert report.failed == 1
    (row,) = service.outbox.deliveries(["failed"])
    assert row.last_error == "channel 'mail' is no longer configured"


@pytest.mark.parametrize("backend", ["sqlite", "postgresql"])
def test_two_dispatchers_on_one_store_send_each_delivery_once(tmp_path, request, backend):
    # two services sharing one store (the SQLite file, or a PostgreSQL database as several
    # instances would share). One starts a run of 24 sends lasting longer than the claim
    # lease (2.4 s of wall time against 1 s); the other tries to dispatch between every
    # two of those sends. The first renews its claim as it goes, so the second never
    # takes what the first is still sending.
    # Wall time is a clock both outboxes share (Outbox's wall_clock), moved on 0.1 s by
    # each send, and the two dispatchers take turns through a Condition: the outcome
    # rests on the lease logic, not on how quickly this machine runs two threads.
    import threading

    import requests

    from notifier.delivery.dispatch import dispatch
    from notifier.storage.outbox import Outbox

    store = {}
    if backend == "postgresql":
        store = {"store": {"url": request.getfixturevalue("postgres").new_database()}}
    subs = [{"id": f"bridge-{n}", "channel": "hook", "address": f"room-{n}"} for n in range(3)]
    wall = [datetime.now(UTC)]
    began = wall[0]
    turn = threading.Condition()
    progress = {"sends": 0, "tries": 0, "first_done": False, "stuck": False}

    class TurnTakingSession(requests.Session):
        """The first dispatcher's HTTP: each POST reaches the real receiver; then 0.1 s of
        wall time passes and the second dispatcher has its turn before the next POST."""

        def post(self, *args, **kwargs):  # type: ignore[override]
            response = super().post(*args, **kwargs)
            with turn:
                wall[0] += timedelta(seconds=0.1)
                progress["sends"] += 1
                turn.notify_all()
                if not turn.wait_for(lambda: progress["tries"] >= progress["sends"], 60):
                    progress["stuck"] = True
            return response

    with signed_receiver() as receiver:
        path = write_config(
            tmp_path, [webhook_channel(receiver.url)], subs, alerts={"claim_lease": "1s"}, **store
        )
        services = [Service(path) for _ in range(2)]
        try:
            queued = queue(services[0], [event(at=T0 - timedelta(minutes=m)) for m in range(8)], T0)
            outboxes = [
                Outbox(s.store, lease=s.outbox.lease, wall_clock=lambda: wall[0]) for s in services
            ]
            assert outboxes[0].lease == timedelta(seconds=1)
            at = T0 + timedelta(minutes=1)
            sent = [0, 0]

            def run(n: int, session: requests.Session) -> int:
                config, rules = services[n].config, services[n].rules
                kwargs = {"hook": {"session": session}}
                return dispatch(outboxes[n], config, rules, at, channel_kwargs=kwargs).sent

            def first() -> None:
                try:
                    sent[0] += run(0, TurnTakingSession())
                finally:
                    with turn:
                        progress["first_done"] = True
                        turn.notify_all()

            def second() -> None:
                while True:
                    with turn:
                        turn.wait_for(
                            lambda: progress["first_done"] or progress["sends"] > progress["tries"],
                            60,
                        )
                        if progress["sends"] <= progress["tries"]:
                            return  # the first has finished and had no send since
                    sent[1] += run(1, requests.Session())
                    with turn:
                        progress["tries"] += 1
                        turn.notify_all()

            threads = [threading.Thread(target=first), threading.Thread(target=second)]
            for t in threads:
                t.start()
            for t in threads:
                t.join(timeout=120)
            assert not any(t.is_alive() for t in threads)
            delivered = receiver.delivered()
            final = {r.key: r.status for r in services[0].outbox.deliveries()}
        finally:
            for service in services:
                service.close()
    assert not progress["stuck"]
    assert len(queued) == 24
    assert delivered == {d.key: 1 for d in queued}  # every one, exactly once
    assert progress["tries"] == 24  # the second tried between every two sends ...
    assert sent == [24, 0]  # ... and the first kept its claim for the whole 2.4 s run
    assert wall[0] - began == timedelta(seconds=2.4)  # 24 sends of 0.1 s, > the 1 s lease
    assert set(final.values()) == {"sent"}


@pytest.mark.parametrize("outcome", ["sent", "retry"])
def test_a_run_whose_claim_lapsed_leaves_the_rows_another_took(any_store, outcome):
    # dispatcher A's first send hangs for longer than the lease (a stuck server, a paused
    # process); B takes the claim over and sends everything. A then sends nothing more,
    # and its late outcome for the stuck row does not overwrite B's "sent".
    # Both send through the real stdout channel, given a stream of the test's own through
    # dispatch(channel_kwargs=...): A's "hangs" while B runs.
    import re

    from notifier.delivery.dispatch import dispatch
    from notifier.storage.outbox import Outbox
    from tests.delivery.scenes import RULES, config_with
    from tests.storage.test_outbox import QUAY, deliveries_for, state

    wall = [T0]
    a, b = (Outbox(any_store, wall_clock=lambda: wall[0]) for _ in range(2))
    events = [event(at=T0 - timedelta(minutes=m)) for m in range(3)]
    rows = [d for ev in events for d in deliveries_for(ev, "ops", channel="stdout")]
    a.commit_cycle({}, {QUAY: state()}, events, rows, T0)
    config = config_with([{"id": "ops", "channel": "stdout"}])
    sends: list[tuple[str, str]] = []

    class Stream:
        """Where the stdout channel writes one block per message, ending "[key]"."""

        def __init__(self, who: str):
            self.who = who

        def write(self, block: str) -> int:
            key = re.search(r"\[([^\]]+)\]\n\Z", block)
            assert key, block
            sends.append((self.who, key.group(1)))
            if self.who == "a" and len(sends) == 1:  # the lease runs out while A hangs
                wall[0] += a.lease + timedelta(minutes=1)
                run(b, "b")
                if outcome == "retry":
                    raise OSError("stdout went away")  # the channel: a transient failure
            return len(block)

        def flush(self) -> None:
            pass

    def run(outbox: Outbox, who: str) -> None:
        kwargs = {"stdout": {"stream": Stream(who)}}
        dispatch(outbox, config, RULES, T0, channel_kwargs=kwargs, rng=random.Random(1))

    run(a, "a")
    by_a = [k for who, k in sends if who == "a"]
    by_b = [k for who, k in sends if who == "b"]
    assert len(by_a) == 1 and sorted(by_b) == sorted(d.key for d in rows)
    assert {r.key: r.status for r in a.deliveries()} == {d.key: "sent" for d in rows}
    assert b.due(T0 + timedelta(hours=1)) == []  # nothing left to send a third time


def test_a_reload_takes_a_new_claim_lease(make_service, tmp_path, smtp_server):
    service = make_service([email_channel(smtp_server.port)], [OPS])
    assert service.outbox.lease == timedelta(minutes=15)
    write_config(tmp_path, [email_channel(smtp_server.port)], [OPS], alerts={"claim_lease": "2min"})
    assert service.reload()[0]
    assert service.outbox.lease == timedelta(minutes=2)


# -- one message per site and moment -----------------------------------------------------


def test_fog_and_icing_of_one_moment_go_as_one_email_but_two_webhook_bodies(
    make_service, smtp_server, webhook_server
):
    service = make_service(
        [email_channel(smtp_server.port), webhook_channel(webhook_server.url)], [OPS, BOT]
    )
    fog = event("escalated", "warning", "watch", hazard="fog", at=T0)
    ice = event("raised", "warning", hazard="icing", at=T0)
    later = event("raised", "watch", hazard="fog", site_id="quay-two", at=T0 + timedelta(hours=1))
    queue(service, [fog, ice], T0)
    report = service.deliver(T0)
    assert report.sent == 4 and report.failed == 0  # each delivery recorded as sent
    (mail,) = smtp_server.inbox.messages  # the email reader gets one message ...
    msg = parse(mail.data)
    assert msg["Subject"] == "Fog now a warning; Icing warning · Quay Two · 20:00 GMT"
    text = msg.get_body(preferencelist=("plain",)).get_content()  # type: ignore[union-attr]
    flat = " ".join(text.split())
    assert "2 updates for this site" in flat and flat.count(" ".join(CAUTION.split())) == 1
    assert msg["Message-ID"].startswith("<fw-site-")
    # ... the program behind the webhook one body per event (docs/schema/)
    assert sorted(a["body"]["hazard"] for a in webhook_server.hook.accepted) == ["fog", "icing"]
    # the same set of deliveries again (a retry after a lost answer) gets the same key
    key = msg["Message-ID"]
    for row in service.outbox.deliveries():
        service.outbox.mark([row.key], "pending", T0)
    service.deliver(T0 + timedelta(minutes=1))
    assert parse(smtp_server.inbox.messages[-1].data)["Message-ID"] == key
    # news of another moment is a message of its own
    queue(service, [later], later.time)
    service.deliver(later.time)
    assert parse(smtp_server.inbox.messages[-1].data)["Subject"].startswith("Fog watch ·")
