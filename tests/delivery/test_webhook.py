"""Webhook: signed POSTs to a real HTTP receiver on 127.0.0.1; failures via `responses`."""

from __future__ import annotations

import json
import socket

import pytest
import requests
import responses

from notifier.core.config import WebhookChannel
from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels import RetryLater, build_channel, verify_signature
from notifier.delivery.channels.webhook import (
    DELIVERY_HEADER,
    SIGNATURE_HEADER,
    TIMESTAMP_HEADER,
    WebhookSender,
    sign,
)
from notifier.delivery.messages import render
from notifier.storage.deliveries import Delivery
from tests.delivery.conftest import WEBHOOK_SECRET
from tests.delivery.scenes import RULES, event, site

URL = "http://hooks.example.test/fogwatch"
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
    assert [a["headers"][DELIVERY_HEADER] for a in hook.accepted] == [
        f"fw-hook-{n}" for n in range(5)
    ]
    body = hook.accepted[0]["body"]
    assert body["type"] == "escalated" and body["level"] == "warning"
    assert body["previous_level"] == "watch" and body["site"] == "quay-two"
    assert body["delivery"] == "fw-hook-0"
    assert "not an official forecast" in body["caution"]
    assert body["reasons"] == ["dew-point depression 0.8 °C ≤ 1 °C", "wind 1.2 m/s ≤ 3.5 m/s"]


def test_receiver_refuses_a_wrong_secret_and_that_is_permanent(webhook_server):
    with WebhookSender(config(webhook_server.url, secret="not-the-secret")) as channel:
        with pytest.raises(PermanentDeliveryError, match="HTTP 401"):
            channel.send(message(), delivery(), "fw-wrong", None)
    assert webhook_server.hook.rejected_signatures == 1
    assert webhook_server.hook.accepted == []


def _sent(rsps: responses.RequestsMock) -> tuple[dict[str, str], bytes]:
    request = rsps.calls[-1].request
    body = request.body
    assert isinstance(body, bytes)
    return dict(request.headers), body


def test_headers_and_signature():
    session = requests.Session()
    with responses.RequestsMock() as rsps, session:
        rsps.post(URL, status=204)
        channel = WebhookSender(
            config(headers={"X-Team": "harbour"}), session=session, clock=lambda: NOW_S + 0.7
        )
        channel.send(message(), delivery(), "fw-sig", None)
        headers, body = _sent(rsps)
    assert headers[DELIVERY_HEADER] == "fw-sig"
    assert headers[TIMESTAMP_HEADER] == str(NOW_S)
    assert headers[SIGNATURE_HEADER] == sign(WEBHOOK_SECRET, "fw-sig", NOW_S, body)
    assert headers[SIGNATURE_HEADER].startswith("v1=") and len(headers[SIGNATURE_HEADER]) == 67
    assert headers["Content-Type"].startswith("application/json")
    assert headers["X-Team"] == "harbour"
    assert json.loads(body)["id"] == message().json["id"]
    assert verify_signature(WEBHOOK_SECRET, headers, body, NOW_S + 10)


@pytest.mark.parametrize(
    ("status", "error", "match"),
    [
        (500, TransientDeliveryError, "HTTP 500"),
        (503, TransientDeliveryError, "HTTP 503"),
        (408, TransientDeliveryError, "HTTP 408"),
        (429, TransientDeliveryError, "HTTP 429"),
        (400, PermanentDeliveryError, "HTTP 400"),
        (404, PermanentDeliveryError, "HTTP 404"),
        (410, PermanentDeliveryError, "HTTP 410"),
        (301, PermanentDeliveryError, "HTTP 301"),
    ],
    ids=["500", "503", "408", "429", "400", "404", "410", "redirect"],
)
def test_status_codes(status, error, match):
    session = requests.Session()
    with responses.RequestsMock() as rsps, session:
        rsps.post(URL, status=status, headers={"Location": URL + "/moved"})
        with pytest.raises(error, match=match):
            WebhookSender(config(), session=session).send(message(), delivery(), "fw-s", None)


def test_429_passes_on_retry_after():
    session = requests.Session()
    with responses.RequestsMock() as rsps, session:
        rsps.post(URL, status=429, headers={"Retry-After": "30"})
        with pytest.raises(RetryLater) as info:
            WebhookSender(config(), session=session).send(message(), delivery(), "fw-r", None)
    assert info.value.retry_after_s == 30.0
    assert isinstance(info.value, TransientDeliveryError)


@pytest.mark.parametrize(
    "failure",
    [
        requests.exceptions.ConnectTimeout("slow"),
        requests.exceptions.ReadTimeout("slow"),
        requests.exceptions.ConnectionError("refused"),
        requests.exceptions.ChunkedEncodingError("cut"),
    ],
    ids=["connect-timeout", "read-timeout", "connection-error", "cut-off"],
)
def test_network_failures_are_transient(failure):
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


# -- verify_signature, as a receiver would use it ---------------------------------------


def signed(body: bytes = b'{"a":1}', key: str = "fw-v", at: int = NOW_S) -> dict[str, str]:
    return {
        DELIVERY_HEADER: key,
        TIMESTAMP_HEADER: str(at),
        SIGNATURE_HEADER: sign(WEBHOOK_SECRET, key, at, body),
    }


@pytest.mark.parametrize(
    ("headers", "body", "now", "ok"),
    [
        (signed(), b'{"a":1}', NOW_S, True),
        ({k.lower(): v for k, v in signed().items()}, b'{"a":1}', NOW_S, True),
        (signed(), b'{"a":1}', NOW_S + 299, True),
        (signed(), b'{"a":1}', NOW_S + 301, False),
        (signed(), b'{"a":1}', NOW_S - 301, False),
        (signed(), b'{"a":2}', NOW_S, False),
        ({**signed(), DELIVERY_HEADER: "fw-other"}, b'{"a":1}', NOW_S, False),
        ({**signed(), TIMESTAMP_HEADER: str(NOW_S + 1)}, b'{"a":1}', NOW_S, False),
        ({**signed(), TIMESTAMP_HEADER: "soon"}, b'{"a":1}', NOW_S, False),
        ({k: v for k, v in signed().items() if k != SIGNATURE_HEADER}, b'{"a":1}', NOW_S, False),
        (
            {**signed(), SIGNATURE_HEADER: "v1=00, " + signed()[SIGNATURE_HEADER]},
            b'{"a":1}',
            NOW_S,
            True,
        ),
    ],
    ids=[
        "valid",
        "lower-case-headers",
        "within-5-min",
        "stale",
        "from-the-future",
        "body-changed",
        "id-changed",
        "timestamp-changed",
        "timestamp-not-a-number",
        "unsigned",
        "rotated-secret-list",
    ],
)
def test_verify_signature(headers, body, now, ok):
    assert verify_signature(WEBHOOK_SECRET, headers, body, now) is ok
