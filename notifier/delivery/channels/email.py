"""Email by SMTP: STARTTLS, implicit TLS or plain; login; one connection per batch.

Error translation (RFC 5321 reply classes):

- 4xx reply (greylisting, mailbox busy, 421 closing) → TransientDeliveryError
- 5xx reply (550 no such user, 553 bad address, 535 bad login) → PermanentDeliveryError
- connection refused, reset, timeout, dropped connection → TransientDeliveryError
- a recipient or sender address that does not parse, no STARTTLS or AUTH offered, a
  certificate that fails verification → PermanentDeliveryError

A 250 after DATA means the server owns the message (RFC 5321 §6.1); ``send`` returns.
The Message-ID is made from the idempotency key, so a resend after a crash carries the
same Message-ID and a mail client can recognise the duplicate.
"""

from __future__ import annotations

import smtplib
import ssl
from collections.abc import Callable
from datetime import UTC, datetime
from email import errors as email_errors
from email import policy
from email.headerregistry import Address
from email.message import EmailMessage
from email.utils import format_datetime
from typing import TYPE_CHECKING

from notifier.core.errors import DeliveryError, PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels.base import BaseChannel, clean_header, safe_key

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import EmailChannel
    from notifier.delivery.messages import Message
    from notifier.storage.deliveries import Delivery

__all__ = ["ConnectionFactory", "EmailSender", "build_email", "default_connect", "parse_address"]

ConnectionFactory = Callable[["EmailChannel"], smtplib.SMTP]
Clock = Callable[[], datetime]
CHART_NAME = "fogwatch-chart.png"


def _utc_now() -> datetime:
    return datetime.now(UTC)


def parse_address(value: str, what: str = "address") -> Address:
    """Exactly one ``ops@example.test`` or ``Ops <ops@example.test>``; else a permanent error.

    Parsed with the stdlib's RFC 5322 header parser: a value with a defect, a second
    address, or any control character (a CR/LF header-injection attempt) is refused.
    """
    if any(ord(c) < 32 or ord(c) == 127 for c in value):
        raise PermanentDeliveryError(f"bad {what} {value!r}: control characters")
    try:
        header = policy.default.header_factory("To", value.strip())
        addresses = header.addresses  # type: ignore[attr-defined]
        defects = header.defects  # type: ignore[attr-defined]
    except (ValueError, IndexError, email_errors.MessageError) as exc:
        raise PermanentDeliveryError(f"bad {what} {value!r}: {exc}") from exc
    if defects or len(addresses) != 1:
        problem = defects[0] if defects else "expected exactly one address"
        raise PermanentDeliveryError(f"bad {what} {value!r}: {problem}")
    address: Address = addresses[0]
    if not address.username or "." not in address.domain:
        raise PermanentDeliveryError(f"bad {what} {value!r}: no domain")
    return address


def build_email(
    message: Message,
    sender: str,
    to: str | None,
    idempotency_key: str,
    chart_png: bytes | None,
    date: datetime,
) -> EmailMessage:
    """The MIME message: text/plain UTF-8, plus the chart as a PNG attachment."""
    from_addr = parse_address(sender, "sender")
    key = safe_key(idempotency_key)
    msg = EmailMessage(policy=policy.SMTP)
    msg["Subject"] = clean_header(message.subject)
    msg["From"] = from_addr
    if to is not None:
        msg["To"] = parse_address(to, "recipient")
    msg["Date"] = format_datetime(date.astimezone(UTC))
    msg["Message-ID"] = f"<{key}@{safe_key(from_addr.domain)}>"
    msg["Auto-Submitted"] = "auto-generated"  # RFC 3834: no auto-replies, please
    msg["X-Fogwatch-Delivery"] = key
    event_id = message.json.get("id")
    if isinstance(event_id, str):
        msg["X-Fogwatch-Event"] = clean_header(event_id, 80)
    msg.set_content(message.text, charset="utf-8")
    if chart_png:
        msg.add_attachment(chart_png, maintype="image", subtype="png", filename=CHART_NAME)
    return msg


def default_connect(config: EmailChannel, context: ssl.SSLContext | None = None) -> smtplib.SMTP:
    """A connected client: implicit TLS for ``ssl``, plain TCP otherwise."""
    if config.security == "ssl":
        return smtplib.SMTP_SSL(
            config.host,
            config.port,
            timeout=config.timeout,
            context=context or ssl.create_default_context(),
        )
    return smtplib.SMTP(config.host, config.port, timeout=config.timeout)


def _from_reply(code: int, text: object, what: str) -> DeliveryError:
    detail = text.decode("utf-8", "replace") if isinstance(text, bytes) else str(text)
    msg = f"{what}: SMTP {code} {detail}".strip()
    if 500 <= code < 600:
        return PermanentDeliveryError(msg)
    return TransientDeliveryError(msg)


def _translate(exc: Exception, what: str) -> DeliveryError:
    if isinstance(exc, smtplib.SMTPRecipientsRefused):
        codes = [v[0] for v in exc.recipients.values()] or [550]
        text = "; ".join(f"{k}: {v[1]!r}" for k, v in exc.recipients.items())
        return _from_reply(min(codes), text, f"{what}: recipient refused")
    if isinstance(exc, smtplib.SMTPResponseException):
        return _from_reply(exc.smtp_code, exc.smtp_error, what)
    if isinstance(exc, smtplib.SMTPNotSupportedError):
        return PermanentDeliveryError(f"{what}: server does not support it: {exc}")
    if isinstance(exc, ssl.SSLCertVerificationError):
        return PermanentDeliveryError(f"{what}: TLS certificate not trusted: {exc}")
    if isinstance(exc, TimeoutError):
        return TransientDeliveryError(f"{what}: timed out")
    return TransientDeliveryError(f"{what}: {type(exc).__name__}: {exc}")


class EmailSender(BaseChannel):
    """SMTP channel. Keeps one connection open across sends until :meth:`close`."""

    def __init__(
        self,
        config: EmailChannel,
        connect: ConnectionFactory | None = None,
        ssl_context: ssl.SSLContext | None = None,
        clock: Clock = _utc_now,
    ):
        self.id = config.id
        self.config = config
        self._context = ssl_context
        self._connect_fn = connect or (lambda cfg: default_connect(cfg, self._context))
        self._clock = clock
        self._conn: smtplib.SMTP | None = None
        self._sent_on_conn = 0
        self.connections_opened = 0

    def __enter__(self) -> EmailSender:
        # lazy: connect at the first send, so every failure surfaces from send()
        return self

    # -- connection ---------------------------------------------------------------------

    def open(self) -> None:
        if self._conn is not None:
            return
        where = f"SMTP {self.config.host}:{self.config.port}"
        conn: smtplib.SMTP | None = None
        try:
            conn = self._connect_fn(self.config)
            conn.ehlo_or_helo_if_needed()
            if self.config.security == "starttls":
                conn.starttls(context=self._context or ssl.create_default_context())
                conn.ehlo()
            if self.config.username:
                conn.login(self.config.username, self.config.password or "")
        except (OSError, smtplib.SMTPException) as exc:
            if conn is not None:
                self._discard(conn)
            raise _translate(exc, f"connect to {where}") from exc
        self._conn = conn
        self._sent_on_conn = 0
        self.connections_opened += 1

    def close(self) -> None:
        conn, self._conn = self._conn, None
        if conn is None:
            return
        try:
            conn.quit()
        except (OSError, smtplib.SMTPException):
            pass
        self._discard(conn)

    @staticmethod
    def _discard(conn: smtplib.SMTP) -> None:
        try:
            conn.close()
        except OSError:
            pass

    def _drop(self) -> None:
        conn, self._conn = self._conn, None
        if conn is not None:
            self._discard(conn)

    # -- sending ------------------------------------------------------------------------

    def send(
        self,
        message: Message,
        delivery: Delivery,
        idempotency_key: str,
        chart_png: bytes | None = None,
    ) -> None:
        if not delivery.address:
            raise PermanentDeliveryError(f"no email address for {delivery.subscriber_id!r}")
        chart = chart_png if self.config.chart else None
        msg = build_email(
            message, self.config.sender, delivery.address, idempotency_key, chart, self._clock()
        )
        sender = parse_address(self.config.sender, "sender").addr_spec
        recipient = parse_address(delivery.address, "recipient").addr_spec
        for attempt in (1, 2):
            self.open()
            assert self._conn is not None
            reused = self._sent_on_conn > 0
            try:
                self._conn.send_message(msg, from_addr=sender, to_addrs=[recipient])
                self._sent_on_conn += 1
                return
            except smtplib.SMTPServerDisconnected as exc:
                self._drop()
                if reused and attempt == 1:
                    continue  # the server closed an idle connection: reconnect once
                raise _translate(exc, f"send to {recipient}") from exc
            except smtplib.SMTPRecipientsRefused as exc:
                raise _translate(exc, f"send to {recipient}") from exc
            except (OSError, smtplib.SMTPException) as exc:
                self._drop()
                raise _translate(exc, f"send to {recipient}") from exc
