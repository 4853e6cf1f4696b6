"""Webhook: POST of the message's JSON body, signed by the open Standard Webhooks
specification (:mod:`notifier.core.signing`).

Headers sent with every request::

    Content-Type: application/json; charset=utf-8
    webhook-id: <idempotency key>        the same on every retry of this delivery
    webhook-timestamp: <unix seconds>    when this attempt was signed
    webhook-signature: v1,<base64>       HMAC-SHA256 of "{id}.{timestamp}.{body}", keyed
                                         with the channel's whsec_ secret

The event's type is in the body (``type``: raised, cleared, …, or summary), as is the
delivery key (``delivery``, equal to ``webhook-id``). A receiver verifies with any
Standard Webhooks library, or :func:`notifier.core.signing.verify`, over the raw body
bytes; refuses a timestamp more than 5 minutes from its own clock; and dedupes on
``webhook-id``.

Responses: 2xx delivered. 408, 429 and 5xx → TransientDeliveryError (``RetryLater``
with the server's ``Retry-After`` when given); a timeout or connection error →
TransientDeliveryError; any other status (3xx, 4xx) → PermanentDeliveryError.
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable, Mapping
from email.utils import parsedate_to_datetime
from typing import TYPE_CHECKING

import requests

from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.core.signing import sign_headers
from notifier.delivery.channels.base import RetryLater, SessionChannel, clean_header, safe_key

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import WebhookChannel
    from notifier.delivery.messages import Message
    from notifier.storage.deliveries import Delivery

__all__ = ["WebhookSender", "encode_body"]

CONNECT_TIMEOUT_S = 5.0
USER_AGENT = "fogwatch-webhook/1"


def encode_body(payload: Mapping[str, object]) -> bytes:
    return json.dumps(payload, ensure_ascii=False, sort_keys=True, separators=(",", ":")).encode(
        "utf-8"
    )


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


class WebhookSender(SessionChannel):
    def __init__(
        self,
        config: WebhookChannel,
        session: requests.Session | None = None,
        clock: Callable[[], float] = time.time,
    ):
        self.id = config.id
        self.config = config
        self._use_session(session)
        self._clock = clock

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
        headers["Content-Type"] = "application/json; charset=utf-8"
        headers["User-Agent"] = USER_AGENT
        # the delivery key is the message id: the same on every retry, so a receiver dedupes
        headers.update(sign_headers(self.config.secret, key, timestamp, body))
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
