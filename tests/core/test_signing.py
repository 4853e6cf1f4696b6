"""Signatures by the Standard Webhooks specification (notifier.core.signing), checked
against the specification's published test vector and its reference Python library
(``standardwebhooks``), never against fogwatch's own code."""

from __future__ import annotations

import base64
import hashlib
import hmac
import os
from datetime import UTC, datetime

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from standardwebhooks import Webhook

from notifier.core import signing
from notifier.core.signing import (
    format_secret,
    secret_key,
    secret_problem,
    sign,
    sign_headers,
    verify,
    why_refused,
)
from tests.webhook_reference import reference_accepts, reference_headers

# The test vector of the Standard Webhooks specification (the one its libraries' own
# tests sign): secret, message id, timestamp, body and the expected signature.
VECTOR_SECRET = "whsec_MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw"
VECTOR_ID = "msg_p5jXN8AQM9LWM0D4loKWxJek"
VECTOR_TS = 1614265330
VECTOR_BODY = b'{"test": 2432232314}'
VECTOR_SIGNATURE = "v1,g0hM9SsE+OTPJTGt/tmIKtSyZlE3uFJELVlNIOLJ1OE="

SECRET = format_secret(b"k" * 32)
OTHER_SECRET = format_secret(b"o" * 32)


def vector_headers(**change: str) -> dict[str, str]:
    return {
        "webhook-id": VECTOR_ID,
        "webhook-timestamp": str(VECTOR_TS),
        "webhook-signature": VECTOR_SIGNATURE,
        **change,
    }


def test_the_published_test_vector_is_signed_and_verified():
    # Standard Webhooks specification, test vector (see VECTOR_* above)
    assert sign(VECTOR_SECRET, VECTOR_ID, VECTOR_TS, VECTOR_BODY) == VECTOR_SIGNATURE
    assert sign_headers(VECTOR_SECRET, VECTOR_ID, VECTOR_TS, VECTOR_BODY) == vector_headers()
    assert verify(VECTOR_SECRET, vector_headers(), VECTOR_BODY, VECTOR_TS)


def test_the_key_is_the_base64_decoded_part_after_whsec():
    # Standard Webhooks specification, "Signature scheme": HMAC-SHA256 keyed with the
    # base64-decoded secret (without its whsec_ prefix), over "{id}.{timestamp}.{body}",
    # base64-encoded after "v1,". Worked out with hmac here, not with fogwatch's code.
    key = base64.b64decode("MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw")
    assert secret_key(VECTOR_SECRET) == key
    mac = hmac.new(key, f"{VECTOR_ID}.{VECTOR_TS}.".encode() + VECTOR_BODY, hashlib.sha256)
    assert VECTOR_SIGNATURE == "v1," + base64.b64encode(mac.digest()).decode()


@settings(max_examples=40, deadline=None)
@given(
    body=st.binary(max_size=300),
    message_id=st.from_regex(r"[A-Za-z0-9_-]{1,40}", fullmatch=True),
    timestamp=st.integers(min_value=0, max_value=4_000_000_000),
    key=st.binary(min_size=24, max_size=64),
)
def test_fogwatch_signs_as_the_reference_library_does(body, message_id, timestamp, key):
    # the specification's reference library (standardwebhooks.Webhook.sign)
    secret = format_secret(key)
    reference = Webhook(secret).sign(message_id, datetime.fromtimestamp(timestamp, UTC), body)
    assert sign(secret, message_id, timestamp, body) == reference


def test_the_reference_library_verifies_what_fogwatch_signs_now_and_not_when_changed():
    # the reference library checks against the real clock, with a 5-minute tolerance
    now = int(datetime.now(UTC).timestamp())
    body = b'{"type":"raised","site":"quay-two"}'
    headers = sign_headers(SECRET, "fw-now", now, body)
    assert reference_accepts(SECRET, headers, body)
    assert not reference_accepts(SECRET, headers, body.replace(b"raised", b"cleared"))
    assert not reference_accepts(OTHER_SECRET, headers, body)
    old = sign_headers(SECRET, "fw-now", now - 600, body)
    assert not reference_accepts(SECRET, old, body)


def test_fogwatch_verifies_what_the_reference_library_signs():
    body = b'{"sender":"deck-7","text":"status"}'
    headers = reference_headers(SECRET, "msg-ref-1", body, VECTOR_TS)
    assert why_refused(SECRET, headers, body, VECTOR_TS + 10) is None
    assert why_refused(SECRET, headers, body + b" ", VECTOR_TS) == "bad signature"
    assert why_refused(OTHER_SECRET, headers, body, VECTOR_TS) == "bad signature"
    assert why_refused(SECRET, headers, body, VECTOR_TS + 301) == "timestamp too old"


def headers_with(**change: str) -> dict[str, str]:
    return {**vector_headers(), **{k.replace("_", "-"): v for k, v in change.items()}}


@pytest.mark.parametrize(
    ("headers", "body", "now", "why"),
    [
        (vector_headers(), VECTOR_BODY, VECTOR_TS, None),
        ({k.upper(): v for k, v in vector_headers().items()}, VECTOR_BODY, VECTOR_TS, None),
        # the specification's tolerance, and its reference library's: 5 minutes each way
        (vector_headers(), VECTOR_BODY, VECTOR_TS + 300, None),
        (vector_headers(), VECTOR_BODY, VECTOR_TS + 301, "timestamp too old"),
        (vector_headers(), VECTOR_BODY, VECTOR_TS - 301, "timestamp too new"),
        (vector_headers(), VECTOR_BODY + b"\n", VECTOR_TS, "bad signature"),
        (headers_with(webhook_id="msg_other"), VECTOR_BODY, VECTOR_TS, "bad signature"),
        (
            headers_with(webhook_timestamp=str(VECTOR_TS + 1)),
            VECTOR_BODY,
            VECTOR_TS,
            "bad signature",
        ),
        (headers_with(webhook_timestamp="soon"), VECTOR_BODY, VECTOR_TS, "bad timestamp"),
        (headers_with(webhook_timestamp="9" * 400), VECTOR_BODY, VECTOR_TS, "bad timestamp"),
        (headers_with(webhook_id="x" * 300), VECTOR_BODY, VECTOR_TS, "bad message id"),
        (
            {k: v for k, v in vector_headers().items() if k != "webhook-signature"},
            VECTOR_BODY,
            VECTOR_TS,
            "unsigned request",
        ),
        # several signatures, space-separated (a secret being rotated): any one will do
        (
            headers_with(webhook_signature="v1,AAAA " + VECTOR_SIGNATURE),
            VECTOR_BODY,
            VECTOR_TS,
            None,
        ),
        # another scheme's signature is skipped, not taken for v1
        (
            headers_with(webhook_signature="v1a," + VECTOR_SIGNATURE[3:]),
            VECTOR_BODY,
            VECTOR_TS,
            "bad signature",
        ),
        (headers_with(webhook_signature="v1,not base64!"), VECTOR_BODY, VECTOR_TS, "bad signature"),
        # the form fogwatch used before (hex after "v1=") is no longer accepted
        (
            headers_with(webhook_signature="v1=" + base64.b64decode(VECTOR_SIGNATURE[3:]).hex()),
            VECTOR_BODY,
            VECTOR_TS,
            "bad signature",
        ),
    ],
    ids=[
        "valid",
        "header-case",
        "edge-of-window",
        "too-old",
        "too-new",
        "body-changed",
        "id-changed",
        "timestamp-changed",
        "timestamp-not-a-number",
        "absurd-timestamp",
        "absurd-id",
        "unsigned",
        "rotation-list",
        "other-scheme",
        "not-base64",
        "old-hex-form",
    ],
)
def test_why_refused(headers, body, now, why):
    assert why_refused(VECTOR_SECRET, headers, body, now) == why
    assert verify(VECTOR_SECRET, headers, body, now) is (why is None)


def test_headers_of_an_http_message_are_read_whatever_their_case():
    import email.message

    msg = email.message.Message()
    for name, value in vector_headers().items():
        msg[name.title()] = value
    assert why_refused(VECTOR_SECRET, msg, VECTOR_BODY, VECTOR_TS) is None  # type: ignore[arg-type]


# -- secrets in the whsec_ form ---------------------------------------------------------


def test_a_fresh_secret_is_usable_by_the_reference_library():
    secret = format_secret(os.urandom(32))
    assert secret.startswith("whsec_") and secret_problem(secret) is None
    assert secret_key(secret) == base64.b64decode(secret.removeprefix("whsec_"))
    now = int(datetime.now(UTC).timestamp())
    assert reference_accepts(secret, sign_headers(secret, "fw-fresh", now, b"{}"), b"{}")


@pytest.mark.parametrize(
    ("secret", "problem"),
    [
        ("hook-s3cret-1", "no whsec_ prefix"),
        ("MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw", "no whsec_ prefix"),
        ("whsec_not base64!", "not base64"),
        ("whsec_caf\u00e9", "not base64"),
        ("whsec_" + base64.b64encode(b"short").decode(), "the key is 5 bytes"),
        ("whsec_" + base64.b64encode(b"x" * 65).decode(), "the key is 65 bytes"),
        ("whsec_", "the key is 0 bytes"),
    ],
    ids=["plain", "no-prefix", "spaces", "non-ascii", "short", "long", "empty"],
)
def test_a_secret_of_another_form_is_refused_without_showing_it(secret, problem):
    found = secret_problem(secret)
    assert found is not None and problem in found
    with pytest.raises(ValueError, match="`fogwatch secret` prints a fresh one") as info:
        secret_key(secret)
    value = secret.removeprefix("whsec_")
    assert not value or value not in str(info.value)  # the value itself is never shown


def test_the_module_exports():
    assert set(signing.__all__) == {
        "ID_HEADER",
        "SECRET_PREFIX",
        "SIGNATURE_HEADER",
        "TIMESTAMP_HEADER",
        "TOLERANCE_S",
        "format_secret",
        "secret_key",
        "secret_problem",
        "sign",
        "sign_headers",
        "verify",
        "why_refused",
    }
    assert (signing.ID_HEADER, signing.TIMESTAMP_HEADER, signing.SIGNATURE_HEADER) == (
        "webhook-id",
        "webhook-timestamp",
        "webhook-signature",
    )
