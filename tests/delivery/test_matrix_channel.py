"""The Matrix channel: what it posts, where, and how the homeserver's answers are
translated. The content and the transaction id are checked on a real Synapse
(tests/bot/matrix_server.py); the error answers with ``responses``, in the shape the
client-server API gives them (docs/references.md [Matrix client-server API]). Every
account, room and site is invented."""

from __future__ import annotations

import uuid
from html.parser import HTMLParser

import pytest
import responses

from notifier.core.config import MatrixChannel
from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels import build_channel
from notifier.delivery.channels.base import RetryLater
from notifier.delivery.messages import Message
from notifier.storage.deliveries import Delivery
from tests.bot.matrix_server import Homeserver

FAKE = "http://matrix.example.test"
TEXT = 'Fog warning · Quay <North> & "Basin"\n\nNot an official forecast.'


def channel(homeserver: str = FAKE, token: str = "invented-token", **kw) -> MatrixChannel:
    return MatrixChannel(
        id="quay-room", type="matrix", homeserver=homeserver, access_token=token, **kw
    )


def delivery(address: str | None) -> Delivery:
    return Delivery("ev-1", "harbour", "quay-room", address)


class _Text(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.parts: list[str] = []

    def handle_starttag(self, tag: str, attrs: object) -> None:
        self.parts.append("\n" if tag == "br" else f"<{tag}>")

    def handle_data(self, data: str) -> None:
        self.parts.append(data)


def test_the_post_is_plain_and_escaped_html_once_per_key(homeserver: Homeserver):
    tag = uuid.uuid4().hex[:6]
    bot, reader = homeserver.register(f"fogbot-{tag}"), homeserver.register(f"reader-{tag}")
    room = homeserver.client(reader).create_room(invite=[bot.user_id])
    homeserver.client(bot).join(room)
    sender = build_channel(channel(homeserver.url, bot.access_token, room=room))
    with sender:
        for _ in range(2):  # a retry of the same delivery
            sender.send(Message("s", TEXT), delivery(None), "fw-0123456789abcdef")
        sender.send(Message("s", "another"), delivery(room), "fw-fedcba9876543210")
    posted = homeserver.client(reader).messages(room)
    assert [e["content"]["body"] for e in posted] == [TEXT, "another"]
    content = posted[0]["content"]
    assert content["format"] == "org.matrix.custom.html"
    # the standard library's HTML parser reads the formatted body back to the text: every
    # <, > and & was escaped, and only <br> is markup
    parser = _Text()
    parser.feed(content["formatted_body"])
    assert "".join(parser.parts) == TEXT


@responses.activate
@pytest.mark.parametrize(
    "status, body, error, retry_after_s",
    [
        (429, {"errcode": "M_LIMIT_EXCEEDED", "retry_after_ms": 2500}, RetryLater, 2.5),
        (502, {}, RetryLater, None),
        (
            401,
            {"errcode": "M_UNKNOWN_TOKEN", "error": "Unknown token"},
            TransientDeliveryError,
            None,
        ),
        (403, {"errcode": "M_FORBIDDEN", "error": "not in room"}, PermanentDeliveryError, None),
    ],
    ids=["rate-limited", "bad-gateway", "token-refused", "not-in-room"],
)
def test_answers_of_the_homeserver_are_translated(status, body, error, retry_after_s):
    responses.put(
        f"{FAKE}/_matrix/client/v3/rooms/%21quay%3Aexample.test/send/m.room.message/fw-0a1b",
        status=status,
        json=body,
    )
    with pytest.raises(error) as info:
        build_channel(channel()).send(Message("s", TEXT), delivery("!quay:example.test"), "fw-0a1b")
    assert type(info.value) is error
    if retry_after_s is not None:
        assert info.value.retry_after_s == retry_after_s
    if body.get("errcode"):
        assert body["errcode"] in str(info.value)
    assert "invented-token" not in str(info.value)


def test_an_address_that_is_no_matrix_id_is_refused_without_a_call():
    with pytest.raises(PermanentDeliveryError, match="not a Matrix room or user id"):
        build_channel(channel()).send(Message("s", TEXT), delivery("guest-cy"), "fw-0a1b")


@responses.activate
def test_a_connection_error_is_transient():
    with pytest.raises(TransientDeliveryError, match="cannot connect"):
        build_channel(channel()).send(Message("s", TEXT), delivery("!quay:example.test"), "fw-0a1b")
