"""Email against a real SMTP server on 127.0.0.1 (aiosmtpd) with login."""

from __future__ import annotations

import email
import smtplib
import socket
from email import policy
from email.message import EmailMessage

import pytest

from notifier.core.config import EmailChannel
from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels import build_channel
from notifier.delivery.channels.email import EmailSender, build_email
from notifier.delivery.messages import render
from notifier.storage.deliveries import Delivery
from tests.delivery.conftest import SMTP_PASSWORD, SMTP_USER
from tests.delivery.scenes import RULES, event, site, utc

PNG = b"\x89PNG\r\n\x1a\n" + b"\x00" * 64  # stands in for a chart here
TO = "harbour-ops@example.test"
CLOCK = lambda: utc(2026, 1, 10, 20, 1)  # noqa: E731


def channel_config(server, **kw) -> EmailChannel:
    base = dict(
        id="mail",
        type="email",
        host=server.host,
        port=server.port,
        security="none",
        username=SMTP_USER,
        password=SMTP_PASSWORD,
        sender="fogwatch <alerts@example.test>",
        timeout=5,
    )
    base.update(kw)
    return EmailChannel.model_validate(base)


def delivery(address: str = TO, n: int = 0) -> Delivery:
    return Delivery(
        event_id=f"ev{n}", subscriber_id="harbour-ops", channel_id="mail", address=address
    )


def message(name: str = "Quay Two"):
    return render(
        event("escalated", "warning", "watch"), site("quay-two", use="port", name=name), RULES
    )


def parse(data: bytes) -> EmailMessage:
    return email.message_from_bytes(data, policy=policy.default)  # type: ignore[return-value]


def test_message_arrives_with_mime_message_id_and_chart(smtp_server):
    sender = build_channel(channel_config(smtp_server), clock=CLOCK)
    with sender:
        sender.send(message(), delivery(), "fw-key-one", PNG)
    (got,) = smtp_server.inbox.messages
    assert got.rcpt_tos == [TO] and got.mail_from == "alerts@example.test"
    msg = parse(got.data)
    assert msg.get_content_type() == "multipart/mixed"
    assert msg["Message-ID"] == "<fw-key-one@example.test>"
    assert msg["Date"] == "Sat, 10 Jan 2026 20:01:00 +0000"
    assert msg["To"] == TO and msg["From"] == "fogwatch <alerts@example.test>"
    assert msg["Subject"].startswith("Fog now a warning · Quay Two")
    assert msg["X-Fogwatch-Delivery"] == "fw-key-one"
    body = msg.get_body(preferencelist=("plain",))
    assert body is not None and body.get_content_charset() == "utf-8"
    assert "This is an automated estimate" in body.get_content()
    (chart,) = list(msg.iter_attachments())
    assert chart.get_content_type() == "image/png"
    assert chart.get_filename() == "fogwatch-chart.png"
    assert chart.get_content() == PNG


def test_resend_has_the_same_message_id(smtp_server):
    with EmailSender(channel_config(smtp_server)) as sender:
        sender.send(message(), delivery(), "fw-same", None)
        sender.send(message(), delivery(), "fw-same", None)
    ids = {parse(m.data)["Message-ID"] for m in smtp_server.inbox.messages}
    assert ids == {"<fw-same@example.test>"}
    assert parse(smtp_server.inbox.messages[0].data).get_content_type() == "text/plain"


def test_chart_can_be_switched_off(smtp_server):
    with EmailSender(channel_config(smtp_server, chart=False)) as sender:
        sender.send(message(), delivery(), "fw-nochart", PNG)
    assert parse(smtp_server.inbox.messages[0].data).get_content_type() == "text/plain"


def test_header_injection_through_a_site_name_adds_no_header(smtp_server):
    with EmailSender(channel_config(smtp_server)) as sender:
        sender.send(message("Quay Two\r\nBcc: thief@example.test"), delivery(), "fw-inj", None)
    (got,) = smtp_server.inbox.messages
    assert got.rcpt_tos == [TO]
    head = got.data.split(b"\r\n\r\n", 1)[0].decode()
    assert not any(line.lower().startswith("bcc") for line in head.split("\r\n"))
    assert parse(got.data)["Bcc"] is None


@pytest.mark.parametrize(
    "address",
    [
        "ops@example.test\r\nBcc: thief@example.test",
        "ops@example.test, thief@example.test",
        "not-an-address",
        "ops@",
    ],
    ids=["crlf-in-address", "two-addresses", "no-at-sign", "no-domain"],
)
def test_bad_recipient_is_permanent_and_sends_nothing(smtp_server, address):
    with EmailSender(channel_config(smtp_server)) as sender:
        with pytest.raises(PermanentDeliveryError, match="bad recipient"):
            sender.send(message(), delivery(address), "fw-bad", None)
    assert smtp_server.inbox.messages == []


def test_451_is_transient_then_the_server_recovers(smtp_server):
    smtp_server.inbox.fail_data = 2
    outcomes = []
    with EmailSender(channel_config(smtp_server)) as sender:
        for _ in range(5):
            try:
                sender.send(message(), delivery(), "fw-retry", None)
            except TransientDeliveryError as exc:
                outcomes.append(str(exc))
                continue
            outcomes.append("sent")
            break
    assert len(outcomes) == 3 and outcomes[-1] == "sent"
    assert all("SMTP 451" in o for o in outcomes[:2])
    assert len(smtp_server.inbox.messages) == 1


def test_550_recipient_refused_is_permanent(smtp_server):
    smtp_server.inbox.refuse = {"nobody@example.test"}
    with EmailSender(channel_config(smtp_server)) as sender:
        with pytest.raises(PermanentDeliveryError, match="550") as info:
            sender.send(message(), delivery("nobody@example.test"), "fw-550", None)
        assert isinstance(info.value.__cause__, smtplib.SMTPRecipientsRefused)
        sender.send(message(), delivery(), "fw-after", None)  # the connection still works
    assert [m.rcpt_tos for m in smtp_server.inbox.messages] == [[TO]]


def test_wrong_password_is_permanent(smtp_server):
    config = channel_config(smtp_server, password="wrong")
    with EmailSender(config) as sender:
        with pytest.raises(PermanentDeliveryError, match="535"):
            sender.send(message(), delivery(), "fw-auth", None)


def _closed_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_connection_refused_is_transient():
    config = EmailChannel(
        id="mail",
        type="email",
        host="127.0.0.1",
        port=_closed_port(),
        security="none",
        sender="alerts@example.test",
        timeout=2,
    )
    with EmailSender(config) as sender:
        with pytest.raises(TransientDeliveryError, match="connect") as info:
            sender.send(message(), delivery(), "fw-refused", None)
    assert isinstance(info.value.__cause__, ConnectionRefusedError)


def test_one_connection_for_a_batch_of_twenty(smtp_server):
    with EmailSender(channel_config(smtp_server)) as sender:
        for n in range(20):
            sender.send(message(), delivery(n=n), f"fw-batch-{n}", PNG)
        assert sender.connections_opened == 1
    assert len(smtp_server.inbox.messages) == 20
    assert smtp_server.inbox.connections == 1


# -- with an injected connection: STARTTLS, login, a dropped idle connection ------------


class FakeSMTP:
    """Records what the channel asks of an SMTP connection."""

    def __init__(self, log: list[str], drop_first_send: bool = False):
        self.log = log
        self.drop_first_send = drop_first_send

    def ehlo_or_helo_if_needed(self) -> None:
        self.log.append("ehlo")

    def ehlo(self) -> None:
        self.log.append("ehlo")

    def starttls(self, context=None) -> None:
        assert context is not None
        self.log.append("starttls")

    def login(self, user: str, password: str) -> None:
        self.log.append(f"login {user}")

    def send_message(self, msg, from_addr=None, to_addrs=None) -> dict:
        if self.drop_first_send:
            self.drop_first_send = False
            raise smtplib.SMTPServerDisconnected("Connection unexpectedly closed")
        self.log.append(f"send {to_addrs[0]}")
        return {}

    def quit(self) -> None:
        self.log.append("quit")

    def close(self) -> None:
        self.log.append("close")


def test_starttls_then_login_through_an_injected_factory():
    log: list[str] = []
    config = EmailChannel(
        id="mail",
        type="email",
        host="mail.example.test",
        security="starttls",
        username="alerts",
        password="pw",
        sender="alerts@example.test",
    )
    with EmailSender(config, connect=lambda cfg: FakeSMTP(log)) as sender:  # type: ignore
        sender.send(message(), delivery(), "fw-tls", None)
    assert log == ["ehlo", "starttls", "ehlo", "login alerts", f"send {TO}", "quit", "close"]


def test_a_dropped_idle_connection_is_reopened_once():
    log: list[str] = []
    config = EmailChannel(
        id="mail",
        type="email",
        host="mail.example.test",
        security="none",
        sender="alerts@example.test",
    )
    made = iter([FakeSMTP(log), FakeSMTP(log)])
    with EmailSender(config, connect=lambda cfg: next(made)) as sender:  # type: ignore
        sender.send(message(), delivery(), "fw-b", None)
        sender._conn.drop_first_send = True  # type: ignore[union-attr]  # server hung up
        sender.send(message(), delivery(), "fw-c", None)
        assert sender.connections_opened == 2
    assert log.count(f"send {TO}") == 2


def test_a_fresh_connection_that_drops_is_transient():
    config = EmailChannel(
        id="mail",
        type="email",
        host="mail.example.test",
        security="none",
        sender="alerts@example.test",
    )
    made = iter([FakeSMTP([], drop_first_send=True)])
    with EmailSender(config, connect=lambda cfg: next(made)) as sender:  # type: ignore
        with pytest.raises(TransientDeliveryError, match="send to"):
            sender.send(message(), delivery(), "fw-d", None)


def test_build_email_cleans_every_header():
    msg = build_email(
        message("Quay\nX-Evil: 1"), "alerts@example.test", TO, "fw-k", None, utc(2026, 1, 10, 20, 0)
    )
    raw = msg.as_bytes()
    assert b"\nX-Evil" not in raw and b"\r\nX-Evil" not in raw
    with pytest.raises(PermanentDeliveryError, match="bad sender"):
        build_email(
            message(),
            "alerts@example.test\r\nBcc: x@example.test",
            TO,
            "k",
            None,
            utc(2026, 1, 10, 20, 0),
        )
