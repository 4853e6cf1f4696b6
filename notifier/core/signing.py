"""Signatures by the open Standard Webhooks specification (docs/references.md
[Standard Webhooks]), both ways: the webhooks
fogwatch sends and the bot requests it receives. Pure: no IO, no clock (the caller
passes the time).

Three headers travel with each signed request::

    webhook-id: <message id>            the same on every retry of one message
    webhook-timestamp: <unix seconds>   when this attempt was signed
    webhook-signature: v1,<base64>      HMAC-SHA256 of "{id}.{timestamp}.{body}"

The key is the secret's bytes: a secret is written ``whsec_`` + base64 (of 24 to 64
random bytes, the specification's recommendation), and the part after ``whsec_`` is
base64-decoded to make the HMAC key. ``fogwatch secret`` prints a fresh one.

A receiver checks the timestamp is within :data:`TOLERANCE_S` of its own clock, works
out the signature over the raw body bytes and compares in constant time with each
space-separated ``v1,`` signature in the header (several appear while a secret is being
rotated; signatures of other versions are skipped). Then it remembers the ``webhook-id``
for as long as the timestamp window lasts, so a captured request cannot be replayed.
"""

from __future__ import annotations

import base64
import binascii
import hashlib
import hmac
from collections.abc import Iterable
from typing import Protocol

__all__ = [
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
]

ID_HEADER = "webhook-id"
TIMESTAMP_HEADER = "webhook-timestamp"
SIGNATURE_HEADER = "webhook-signature"
SECRET_PREFIX = "whsec_"
# The specification's suggested tolerance, and its reference library's: 5 minutes.
TOLERANCE_S = 300
# The specification recommends a secret of between 24 and 64 random bytes.
MIN_KEY_BYTES = 24
MAX_KEY_BYTES = 64
MAX_ID_CHARS = 256  # a message id longer than this is refused unread (common practice)


class Headers(Protocol):
    """A dict of headers, or an HTTP message's (``http.client.HTTPMessage``)."""

    def items(self) -> Iterable[tuple[str, str]]: ...


SECRET_HINT = (
    f"expected the Standard Webhooks form {SECRET_PREFIX}<base64 of "
    f"{MIN_KEY_BYTES} to {MAX_KEY_BYTES} random bytes>; `fogwatch secret` prints a fresh one"
)


def format_secret(key: bytes) -> str:
    """``whsec_`` + base64 of ``key`` (random bytes: see ``fogwatch secret``)."""
    if not MIN_KEY_BYTES <= len(key) <= MAX_KEY_BYTES:
        raise ValueError(f"a key must be {MIN_KEY_BYTES} to {MAX_KEY_BYTES} bytes, got {len(key)}")
    return SECRET_PREFIX + base64.b64encode(key).decode("ascii")


def secret_problem(secret: str) -> str | None:
    """None when ``secret`` has the ``whsec_`` + base64 form, else what is wrong (never
    the value itself)."""
    if not secret.startswith(SECRET_PREFIX):
        return f"not a Standard Webhooks secret (no {SECRET_PREFIX} prefix)"
    encoded = secret[len(SECRET_PREFIX) :]
    try:
        key = base64.b64decode(encoded.encode("ascii"), validate=True)
    except (binascii.Error, UnicodeEncodeError, ValueError):
        return f"the part after {SECRET_PREFIX} is not base64"
    if not MIN_KEY_BYTES <= len(key) <= MAX_KEY_BYTES:
        return f"the key is {len(key)} bytes"
    return None


def secret_key(secret: str) -> bytes:
    """The HMAC key of a ``whsec_`` secret; ``ValueError`` (without the value) if it has
    another form."""
    problem = secret_problem(secret)
    if problem:
        raise ValueError(f"{problem}; {SECRET_HINT}")
    return base64.b64decode(secret[len(SECRET_PREFIX) :])


def sign(secret: str, message_id: str, timestamp: int, body: bytes) -> str:
    """``v1,`` + base64 of HMAC-SHA256(key, ``"{id}.{timestamp}.{body}"``)."""
    signed = f"{message_id}.{timestamp}.".encode() + body
    digest = hmac.new(secret_key(secret), signed, hashlib.sha256).digest()
    return "v1," + base64.b64encode(digest).decode("ascii")


def sign_headers(secret: str, message_id: str, timestamp: int, body: bytes) -> dict[str, str]:
    """The three headers that sign ``body`` as message ``message_id`` at ``timestamp``."""
    return {
        ID_HEADER: message_id,
        TIMESTAMP_HEADER: str(timestamp),
        SIGNATURE_HEADER: sign(secret, message_id, timestamp, body),
    }


def _header(headers: Headers, name: str) -> str | None:
    """A header by name, whatever its case (a plain dict, or an HTTP message's headers)."""
    get = getattr(headers, "get_all", None)
    if get is not None:  # email.message.Message and http.client.HTTPMessage
        values = get(name)
        return values[0] if values else None
    for key, value in headers.items():
        if key.lower() == name:
            return value
    return None


def why_refused(
    secret: str,
    headers: Headers,
    body: bytes,
    now_s: float,
    tolerance_s: float = TOLERANCE_S,
) -> str | None:
    """None when ``body`` is signed with ``secret`` and the timestamp is fresh; else why
    not, in a few words (never a secret or a signature)."""
    message_id = _header(headers, ID_HEADER)
    stamp = _header(headers, TIMESTAMP_HEADER)
    given = _header(headers, SIGNATURE_HEADER)
    if not message_id or not stamp or not given:
        return "unsigned request"
    if len(message_id) > MAX_ID_CHARS or not message_id.isascii() or not message_id.isprintable():
        return "bad message id"
    stamp = stamp.strip()
    if not stamp.isascii() or not stamp.isdigit() or len(stamp) > 12:
        return "bad timestamp"
    timestamp = int(stamp)
    if now_s - timestamp > tolerance_s:
        return "timestamp too old"
    if timestamp - now_s > tolerance_s:
        return "timestamp too new"
    expected = base64.b64decode(sign(secret, message_id, timestamp, body)[3:])
    matched = False
    for candidate in given.split(" "):
        version, _, encoded = candidate.partition(",")
        if version != "v1":
            continue  # another scheme (e.g. v1a, asymmetric): not ours to check
        try:
            given_digest = base64.b64decode(encoded.encode("ascii"), validate=True)
        except (binascii.Error, UnicodeEncodeError, ValueError):
            continue
        # compare every candidate, so the time taken does not say which one matched
        matched |= hmac.compare_digest(given_digest, expected)
    return None if matched else "bad signature"


def verify(
    secret: str,
    headers: Headers,
    body: bytes,
    now_s: float,
    tolerance_s: float = TOLERANCE_S,
) -> bool:
    """True when ``body`` is signed with ``secret`` and its timestamp is fresh."""
    return why_refused(secret, headers, body, now_s, tolerance_s) is None
