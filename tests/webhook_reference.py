"""The Standard Webhooks specification's reference Python library (``standardwebhooks``),
as the receivers and clients in the tests use it: what fogwatch signs is checked by
code that is not fogwatch's, and what that code signs must pass fogwatch's checks.
"""

from __future__ import annotations

from collections.abc import Mapping
from datetime import UTC, datetime

from standardwebhooks import Webhook, WebhookVerificationError

__all__ = ["reference_accepts", "reference_headers", "reference_refusal"]


def reference_refusal(secret: str, headers: Mapping[str, str], body: bytes) -> str | None:
    """None when the reference library verifies ``body`` (against the real clock, with
    its own 5-minute tolerance), else its error message."""
    try:
        Webhook(secret).verify(body, dict(headers))
    except WebhookVerificationError as exc:
        return str(exc)
    return None


def reference_accepts(secret: str, headers: Mapping[str, str], body: bytes) -> bool:
    return reference_refusal(secret, headers, body) is None


def reference_headers(secret: str, message_id: str, body: bytes, at_s: float) -> dict[str, str]:
    """The three headers, signed by the reference library at POSIX second ``at_s``."""
    signature = Webhook(secret).sign(message_id, datetime.fromtimestamp(at_s, UTC), body)
    return {
        "webhook-id": message_id,
        "webhook-timestamp": str(int(at_s)),
        "webhook-signature": signature,
    }
