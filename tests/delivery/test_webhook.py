"""Webhook: signed POSTs to a real HTTP receiver on 127.0.0.1, which also plays the
statuses, headers and stalls a real receiver answers with; `responses` only for network
faults a local server cannot easily make (a connect timeout, a reset mid-stream)."""

from __future__ import annotations

import json
import socket
import time
from datetime import UTC, datetime, timedelta
from email.utils import format_datetime

import pytest
import requests
import responses
from standardwebhooks import Webhook

from notifier.core.config import WebhookChannel
from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.core.signing import ID_HEADER, format_secret
from notifier.delivery.channels import RetryLater, build_channel
from notifier.delivery.channels.webhook import WebhookSender
from notifier.delivery.messages import render
from notifier.storage.deliveries import Delivery
from tests.delivery.conftest import WEBHOOK_SECRET, HookServer, Wire
from tests.delivery.scenes import RULES, event, site
from tests.webhook_reference import reference_accepts, reference_refusal

URL = "http://hooks.example.test/fogwatch"
WRONG_SECRET = format_secret(b"not the receiver's key, 32 bytes")
NOW_S = 1_768_075_200  # 2026-01-10 20:00 UTC


def config(url: str = URL, **kw) -> WebhookChannel:
    return WebhookChannel.model_validate(
        {
            "id": "ops-hook",
            "type": "webhook",
            "url": url,
            "secret": WEBHOOK_SECRET,
            "timeout": 3,
            **kw,
        }
    )


def delivery(n: int = 0) -> Delivery:
    return Delivery(event_id=f"ev{n}", subscriber_id="ops-bot", channel_id="ops-hook", address=None)


def message():
    return render(event("escalated", "warning", "watch"), site("quay-two", use="port"), RULES)


def test_signed_posts_arrive_and_500s_are_transient(webhook_server):
    hook = webhook_server.hook
    hook.fail_first_attempt = True  # the receiver answers 500 to each first attempt
    with build_channel(config(webhook_server.url)) as channel:
        for n in range(5):
            key = f"fw-hook-{n}"
            with pytest.raises(TransientDeliveryError, match="HTTP 500"):
                channel.send(message(), delivery(n), key, None)
            channel.send(message(), delivery(n), key, None)  # the retry gets through
    assert hook.rejected_signatures == 0
    assert [a["headers"][ID_HEADER] for a in hook.accepted] == [f"fw-hook-{n}" for n in range(5)]
    body = hook.accepted[0]["body"]
    assert body["type"] == "escalated" and body["level"] == "warning"
    assert body["previous_level"] == "watch" and body["site"] == "quay-two"
    assert body["delivery"] == "fw-hook-0"
    assert "not an official forecast" in body["caution"]
    assert body["reasons"] == ["dew-point depression 0.8 °C ≤ 1 °C", "wind 1.2 m/s ≤ 3.5 m/s"]


def test_receiver_refuses_a_wrong_secret_and_that_is_permanent(webhook_server):
    with WebhookSender(config(webhook_server.url, secret=WRONG_SECRET)) as channel:
        with pytest.raises(PermanentDeliveryError, match="HTTP 401"):
            channel.send(message(), delivery(), "fw-wrong", None)
    assert webhook_server.hook.rejected_signatures == 1
    assert webhook_server.hook.accepted == []


def header(headers: dict[str, str], name: str) -> str:
    """A header as received, matched without regard to case (as HTTP does)."""
    (value,) = [v for k, v in headers.items() if k.lower() == name.lower()]
    return value


def reference_signature(secret: str, delivery_id: str, timestamp: str, body: bytes) -> str:
    """Worked out by the Standard Webhooks reference library, not fogwatch's code.
    README, Webhooks: ``webhook-signature: v1,<base64 HMAC-SHA256 of
    "{webhook-id}.{webhook-timestamp}.{body}">`` keyed with the channel's whsec_ secret."""
    at = datetime.fromtimestamp(int(timestamp), UTC)
    return Webhook(secret).sign(delivery_id, at, body)


def test_the_signature_sent_over_the_wire_is_the_standard_one(webhook_server: HookServer):
    # README, Webhooks: headers webhook-id (the delivery's idempotency key),
    # webhook-timestamp and webhook-signature, by the Standard Webhooks specification.
    # Captured raw at a real receiver, checked with the specification's reference library.
    hook = webhook_server.hook
    hook.answer = lambda _wire: (204, {})
    clock = lambda: NOW_S + 0.7  # noqa: E731
    with WebhookSender(
        config(webhook_server.url, headers={"X-Team": "harbour"}), clock=clock
    ) as ch:
        ch.send(message(), delivery(), "fw-sig", None)
    (wire,) = hook.wire
    assert (wire.method, wire.path) == ("POST", "/fogwatch")
    h = wire.headers
    assert header(h, "webhook-id") == "fw-sig"
    assert header(h, "webhook-timestamp") == str(NOW_S)  # whole POSIX seconds
    assert header(h, "webhook-signature") == reference_signature(
        WEBHOOK_SECRET, "fw-sig", str(NOW_S), wire.body
    )
    assert not any(k.lower().startswith("x-fogwatch") for k in h)  # the old headers are gone
    assert header(h, "Content-Type").startswith("application/json")
    assert header(h, "X-Team") == "harbour"
    # README, Webhooks: the body is JSON with these fields, the event's type among them
    # (README names the event id `event`; the body, and docs/schema, call it `id`)
    doc = json.loads(wire.body)
    readme_fields = (
        "type site hazard level previous_level headline text reasons eta time data_age_min "
        "caution delivery recipient"
    ).split()
    assert set(readme_fields) <= set(doc)
    assert doc["id"] == message().json["id"] and doc["delivery"] == "fw-sig"
    assert doc["type"] == "escalated"


def test_the_reference_library_verifies_a_delivery_and_its_retry(webhook_server: HookServer):
    # the specification's reference library, verifying what reached a real receiver on
    # 127.0.0.1 against the real clock: the retry carries the same webhook-id
    hook = webhook_server.hook
    hook.answer = lambda _wire: (503 if len(hook.wire) == 1 else 200, {})
    with WebhookSender(config(webhook_server.url)) as channel:
        with pytest.raises(RetryLater):
            channel.send(message(), delivery(), "fw-retry", None)
        channel.send(message(), delivery(), "fw-retry", None)
    first, retry = hook.wire
    for wire in (first, retry):
        assert reference_refusal(WEBHOOK_SECRET, wire.headers, wire.body) is None
    assert header(first.headers, "webhook-id") == header(retry.headers, "webhook-id")
    assert header(retry.headers, "webhook-id") == "fw-retry"


def test_the_reference_library_refuses_a_changed_stale_or_wrongly_keyed_delivery(
    webhook_server: HookServer,
):
    hook = webhook_server.hook
    hook.answer = lambda _wire: (204, {})
    now = time.time()
    with WebhookSender(config(webhook_server.url)) as channel:
        channel.send(message(), delivery(), "fw-fresh", None)
    with WebhookSender(config(webhook_server.url), clock=lambda: now - 301) as channel:
        channel.send(message(), delivery(), "fw-stale", None)
    fresh, stale = hook.wire
    assert reference_accepts(WEBHOOK_SECRET, fresh.headers, fresh.body)
    tampered = fresh.body.replace(b'"escalated"', b'"cleared"')
    assert tampered != fresh.body
    assert reference_refusal(WEBHOOK_SECRET, fresh.headers, tampered) == (
        "No matching signature found"
    )
    assert reference_refusal(WRONG_SECRET, fresh.headers, fresh.body) == (
        "No matching signature found"
    )
    assert reference_refusal(WEBHOOK_SECRET, stale.headers, stale.body) == (
        "Message timestamp too old"
    )


# -- what a real receiver answers ------------------------------------------------------
# README, Webhooks: "5xx, 408 and 429 are retried; other 4xx are not."


@pytest.mark.parametrize(
    ("status", "error", "match"),
    [
        (500, TransientDeliveryError, "HTTP 500 Internal Server Error"),
        (503, TransientDeliveryError, "HTTP 503 Service Unavailable"),
        (408, TransientDeliveryError, "HTTP 408 Request Timeout"),
        (429, TransientDeliveryError, "HTTP 429 Too Many Requests"),
        (400, PermanentDeliveryError, "HTTP 400 Bad Request"),
        (404, PermanentDeliveryError, "HTTP 404 Not Found"),
        (410, PermanentDeliveryError, "HTTP 410 Gone"),
        (301, PermanentDeliveryError, "HTTP 301 Moved Permanently"),
    ],
    ids=["500", "503", "408", "429", "400", "404", "410", "redirect"],
)
def test_status_codes_from_a_real_receiver(webhook_server: HookServer, status, error, match):
    hook = webhook_server.hook
    hook.answer = lambda _wire: (status, {"Location": webhook_server.url + "/moved"})
    with WebhookSender(config(webhook_server.url)) as channel:
        with pytest.raises(error, match=match) as info:
            channel.send(message(), delivery(), "fw-s", None)
    assert isinstance(info.value, RetryLater) is (error is TransientDeliveryError)
    # one request each: a redirect is not followed, nothing is retried inside send()
    assert [w.path for w in hook.wire] == ["/fogwatch"]


@pytest.mark.parametrize("status", [429, 503])
def test_retry_after_in_seconds_is_passed_on(webhook_server: HookServer, status):
    webhook_server.hook.answer = lambda _wire: (status, {"Retry-After": "30"})
    with WebhookSender(config(webhook_server.url)) as channel:
        with pytest.raises(RetryLater) as info:
            channel.send(message(), delivery(), "fw-r", None)
    assert info.value.retry_after_s == 30.0
    assert isinstance(info.value, TransientDeliveryError)


def test_retry_after_as_an_http_date_is_passed_on(webhook_server: HookServer):
    # RFC 9110 §10.2.3: Retry-After is delay-seconds or an HTTP-date
    when = datetime.now(UTC).replace(microsecond=0) + timedelta(minutes=2)
    webhook_server.hook.answer = lambda _wire: (503, {"Retry-After": format_datetime(when, True)})
    with WebhookSender(config(webhook_server.url)) as channel:
        with pytest.raises(RetryLater) as info:
            channel.send(message(), delivery(), "fw-d", None)
    left = (when - datetime.now(UTC)).total_seconds()
    assert info.value.retry_after_s is not None
    assert left - 5 <= info.value.retry_after_s <= 120.0


def test_a_receiver_that_never_answers_times_out_as_transient(webhook_server: HookServer):
    hook = webhook_server.hook
    answered = []

    def hang(wire: Wire) -> tuple[int, dict[str, str]]:
        hook.stall()  # until the test is over: only the sender's timeout can end this
        answered.append(wire)
        return 200, {}

    hook.answer = hang
    started = time.monotonic()
    with WebhookSender(config(webhook_server.url, timeout=0.5)) as channel:
        with pytest.raises(TransientDeliveryError, match="webhook ops-hook: timed out"):
            channel.send(message(), delivery(), "fw-t", None)
    assert time.monotonic() - started < 30  # the timeout ended it, not the stall's limit
    assert len(hook.wire) == 1 and answered == []


@pytest.mark.parametrize(
    "failure",
    [
        requests.exceptions.ConnectTimeout("slow"),
        requests.exceptions.ConnectionError("reset mid-stream"),
        requests.exceptions.ChunkedEncodingError("cut"),
    ],
    ids=["connect-timeout", "connection-reset", "cut-off"],
)
def test_network_failures_are_transient(failure):
    # faults a loopback server cannot easily make; a read timeout and a refused
    # connection are made for real above and below
    session = requests.Session()
    with responses.RequestsMock() as rsps, session:
        rsps.post(URL, body=failure)
        with pytest.raises(TransientDeliveryError) as info:
            WebhookSender(config(), session=session).send(message(), delivery(), "fw-n", None)
    assert info.value.__cause__ is failure


def test_real_connection_refused_is_transient():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    dead = f"http://127.0.0.1:{port}/fogwatch"
    with WebhookSender(config(dead)) as channel:
        with pytest.raises(TransientDeliveryError, match="cannot connect"):
            channel.send(message(), delivery(), "fw-dead", None)
