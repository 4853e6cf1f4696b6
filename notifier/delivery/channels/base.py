"""The channel interface a dispatcher drives, and what every channel shares.

A dispatcher uses a channel like this::

    with build_channel(channel_config) as channel:      # open(): one SMTP connection
        for row in due_rows:
            try:
                channel.send(message, delivery, row.key, chart_png)
            except TransientDeliveryError:  ...         # back off, try again later
            except PermanentDeliveryError:  ...         # record the failure, no retry

``send`` returns normally only when the far side has taken the message (an SMTP 250, an
HTTP 2xx, a file renamed into place). It raises only the two errors from
:mod:`notifier.core.errors`; errors of the libraries underneath are translated here, in the
adapter, with ``raise ... from exc``. The ``idempotency_key`` is the same on every retry
of one delivery, and each channel passes it on (email Message-ID, webhook header, file
name), so a crash between send and mark costs at most one duplicate the far side can
recognise.
"""

from __future__ import annotations

import re
from types import TracebackType
from typing import TYPE_CHECKING, Protocol, runtime_checkable

from notifier.core.errors import TransientDeliveryError

if TYPE_CHECKING:  # pragma: no cover
    import requests

    from notifier.delivery.messages import Message
    from notifier.storage.deliveries import Delivery

__all__ = ["BaseChannel", "Channel", "RetryLater", "clean_header", "safe_key"]


@runtime_checkable
class Channel(Protocol):
    """Something that can deliver a rendered message to one recipient."""

    id: str

    def open(self) -> None:
        """Get ready for a batch (e.g. connect). Sending also opens on demand."""

    def close(self) -> None:
        """Release what ``open`` took. Safe to call twice."""

    def send(
        self,
        message: Message,
        delivery: Delivery,
        idempotency_key: str,
        chart_png: bytes | None = None,
    ) -> None:
        """Deliver, or raise TransientDeliveryError / PermanentDeliveryError."""

    def __enter__(self) -> Channel: ...

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None: ...


class RetryLater(TransientDeliveryError):
    """Transient, with the far side's own hint of when to retry (HTTP Retry-After)."""

    def __init__(self, message: str, retry_after_s: float | None = None):
        super().__init__(message)
        self.retry_after_s = retry_after_s


class BaseChannel:
    """Context-manager plumbing; channels with nothing to open inherit no-op hooks."""

    id: str = ""

    def open(self) -> None:
        return None

    def close(self) -> None:
        return None

    def __enter__(self) -> BaseChannel:
        self.open()
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()


class SessionChannel(BaseChannel):
    """A channel that talks HTTP through one ``requests`` session: one handed in (the
    caller closes it) or its own, made by ``open`` and closed by ``close``."""

    _session: requests.Session | None = None
    _own_session: bool = True

    def _use_session(self, session: requests.Session | None) -> None:
        self._own_session = session is None
        self._session = session

    def open(self) -> None:
        if self._session is None:
            import requests

            self._session = requests.Session()

    def close(self) -> None:
        if self._own_session and self._session is not None:
            self._session.close()
            self._session = None


_CONTROL = re.compile(r"[\x00-\x1f\x7f]+")
_UNSAFE_KEY = re.compile(r"[^A-Za-z0-9._-]+")


def clean_header(value: str, limit: int = 300) -> str:
    """A header value with every CR, LF and other control character folded to a space.

    >>> clean_header("Quay\\r\\nBcc: x@example.test")
    'Quay Bcc: x@example.test'
    """
    return " ".join(_CONTROL.sub(" ", value).split())[:limit]


def safe_key(key: str) -> str:
    """An idempotency key usable in a file name, a Message-ID and an HTTP header."""
    cleaned = _UNSAFE_KEY.sub("-", key).strip(".-")[:120]
    if not cleaned:
        raise ValueError(f"unusable idempotency key: {key!r}")
    return cleaned
