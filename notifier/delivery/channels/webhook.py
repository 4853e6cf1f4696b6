"""Webhook: POST of the message's JSON body, signed with HMAC-SHA256.

Headers sent with every request::

    Content-Type: application/json
    X-Fogwatch-Delivery: <idempotency key>     same on every retry of this delivery
    X-Fogwatch-Timestamp: <unix seconds>       when this attempt was signed
    X-Fogwatch-Signature: v1=<hex>             HMAC-SHA256(secret, "{id}.{timestamp}.{body}")

A receiver recomputes the signature over the raw body bytes, compares in constant time,
refuses a timestamp more than 5 minutes from its own clock (a replayed request), and
dedupes on ``X-Fogwatch-Delivery``. :func:`verify_signature` does the first two::

    ok = verify_signature(secret, request.headers, request.body, time.time())

Several ``v1=`` values, comma-separated, may appear while a secret is being rotated;
any one matching is enough.

Responses: 2xx delivered. 408, 429 and 5xx → TransientDeliveryError (``RetryLater``
with the server's ``Retry-After`` when given); a timeout or connection error →
TransientDeliveryError; any other status (3xx, 4xx) → PermanentDeliveryError.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import time
from collections.abc import Callable, Mapping
from datetime import datetime
from email.utils import parsedate_to_datetime
from typing import TYPE_CHECKING

import requests

from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels.base import BaseChannel, RetryLater, clean_header, safe_key

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import WebhookChannel
    from notifier.delivery.messages import Message
    from notifier.storage.deliveries import Delivery

__all__ = [
    "DELIVERY_HEADER",
    "SIGNATURE_HEADER",
    "TIMESTAMP_HEADER",
    "WebhookSender",
    "encode_body",
    "sign",
    "verify_signature",
]

DELIVERY_HEADER = "X-Fogwatch-Delivery"
TIMESTAMP_HEADER = "X-Fogwatch-Timestamp"
SIGNATURE_HEADER = "X-Fogwatch-Signature"
SIGNATURE_VERSION = "v1"
TOLERANCE_S = 300  # 5 minutes, the usual webhook replay window
CONNECT_TIMEOUT_S = 5.0
USER_AGENT = "fogwatch-webhook/1"


def encode_body(payload: Mapping[str, object]) -> bytes:
    return json.dumps(payload, ensure_ascii=False, sort_keys=True, separators=(",", ":")).encode(
        "utf-8"
    )


def sign(secret: str, delivery_id: str, timestamp: int, body: bytes) -> str:
    """``v1=<hex HMAC-SHA256 over "{id}.{timestamp}.{body}">``."""
    signed = f"{delivery_id}.{timestamp}.".encode() + body
    digest = hmac.new(secret.encode("utf-8"), signed, hashlib.sha256).hexdigest()
    return f"{SIGNATURE_VERSION}={digest}"


def _header(headers: Mapping[str, str], name: str) -> str | None:
    lowered = name.lower()
    for key, value in headers.items():
        if key.lower() == lowered:
            return value
    return None


def verify_signature(
    secret: str,
    headers: Mapping[str, str],
    body: bytes,
    now: float | datetime,
    tolerance_s: float = TOLERANCE_S,
) -> bool:
    """True when the request is signed with ``secret`` and its timestamp is fresh.

    ``body`` is the raw request body as received; ``now`` the receiver's clock (unix
    seconds or an aware datetime). Header names are matched case-insensitively.
    """
    delivery_id = _header(headers, DELIVERY_HEADER)
    stamp = _header(headers, TIMESTAMP_HEADER)
    given = _header(headers, SIGNATURE_HEADER)
    if not delivery_id or not stamp or not given:
        return False
    try:
        timestamp = int(stamp)
    except ValueError:
        return False
    now_s = now.timestamp() if isinstance(now, datetime) else float(now)
    if abs(now_s - timestamp) > tolerance_s:
        return False
    expected = sign(secret, delivery_id, timestamp, body).encode()
    matched = False
    for candidate in given.split(","):
        # compare every candidate, so the time taken does not say which one matched
        matched |= hmac.compare_digest(candidate.strip().encode(), expected)
    return matched


def _retry_after(value: str | None) -> float | None:
    if not value:
        return None
    try:
        return max(0.0, float(value))
    except ValueError:
        pass
    try:
        when = parsedate_to_datetime(value)
    except (TypeError, ValueError):
        return None
    return max(0.0, when.timestamp() - time.time())


class WebhookSender(BaseChannel):
    def __init__(
        self,
        config: WebhookChannel,
        session: requests.Session | None = None,
        clock: Callable[[], float] = time.time,
    ):
        self.id = config.id
        self.config = config
        self._own_session = session is None
        self._session = session
        self._clock = clock

    def open(self) -> None:
        if self._session is None:
            self._session = requests.Session()

    def close(self) -> None:
        if self._own_session and self._session is not None:
            self._session.close()
            self._session = None

    def send(
        self,
        message: Message,
        delivery: Delivery,
        idempotency_key: str,
        chart_png: bytes | None = None,
    ) -> None:
        self.open()
        assert self._session is not None
        key = safe_key(idempotency_key)
        # the recipient lets one endpoint fan messages out (e.g. a chat bridge)
        body = encode_body({**message.json, "delivery": key, "recipient": delivery.address})
        timestamp = int(self._clock())
        headers = {clean_header(k): clean_header(v) for k, v in self.config.headers.items()}
        headers.update(
            {
                "Content-Type": "application/json; charset=utf-8",
                "User-Agent": USER_AGENT,
                DELIVERY_HEADER: key,
                TIMESTAMP_HEADER: str(timestamp),
                SIGNATURE_HEADER: sign(self.config.secret, key, timestamp, body),
            }
        )
        timeout = (min(CONNECT_TIMEOUT_S, self.config.timeout), self.config.timeout)
        where = f"webhook {self.config.id}"
        try:
            response = self._session.post(
                self.config.url, data=body, headers=headers, timeout=timeout, allow_redirects=False
            )
        except requests.Timeout as exc:
            raise TransientDeliveryError(f"{where}: timed out") from exc
        except requests.ConnectionError as exc:
            raise TransientDeliveryError(f"{where}: cannot connect: {exc}") from exc
        except (
            requests.exceptions.InvalidURL,
            requests.exceptions.MissingSchema,
            requests.exceptions.InvalidSchema,
            requests.exceptions.InvalidHeader,
        ) as exc:
            raise PermanentDeliveryError(f"{where}: {exc}") from exc
        except requests.RequestException as exc:
            raise TransientDeliveryError(f"{where}: {type(exc).__name__}: {exc}") from exc
        status = response.status_code
        response.close()
        if 200 <= status < 300:
            return
        reason = f"{where}: HTTP {status} {response.reason or ''}".strip()
        if status in (408, 429) or status >= 500:
            raise RetryLater(reason, _retry_after(response.headers.get("Retry-After")))
        raise PermanentDeliveryError(reason)
