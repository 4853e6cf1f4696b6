"""Matrix: each delivery posted to a room through the client-server API
(docs/references.md [Matrix client-server API]).

``PUT /_matrix/client/v3/rooms/{room}/send/m.room.message/{txnId}`` with the delivery's
idempotency key as the transaction id: a homeserver answers a repeated transaction id
from the same device with the first event, so a send retried after a crash (sent, but
not yet marked sent) is not posted twice. (How long a homeserver remembers a transaction
id is its own choice; Synapse keeps it well past a claim's lease, from memory.) The
content is the plain text as ``body`` and the same text, HTML-escaped, as
``formatted_body`` (``format: org.matrix.custom.html``), the caution included.

Where it goes: the subscriber's ``address`` when it is a room id (``!id:server``) or
alias (``#name:server``); a user id (``@ana:server``, a person who followed a site
through the bot) goes to that person's direct room with the bot, found in the bot's
``m.direct`` account data or created (and recorded there) on the first alert; no
address: the channel's ``room``. A crash between creating a direct room and recording it
leaves an empty room behind; the retry creates another and posts there.

Plain ``requests`` rather than matrix-nio: the dispatcher is synchronous and sends one
delivery at a time, and the channel needs only these few calls, so an event loop per
batch would buy nothing.

Responses: 2xx delivered. 429 → ``RetryLater`` with the server's ``retry_after_ms``;
5xx, a timeout, a connection error, and 401 (a refused token, which a corrected config
cures) → TransientDeliveryError; any other 4xx (not in the room, no such room) →
PermanentDeliveryError.
"""

from __future__ import annotations

import html
from typing import TYPE_CHECKING, Any
from urllib.parse import quote

import requests

from notifier.core.config_matrix import MATRIX_ROOM, MATRIX_USER
from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels.base import RetryLater, SessionChannel, safe_key

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import MatrixChannel
    from notifier.delivery.messages import Message
    from notifier.storage.deliveries import Delivery

__all__ = ["MatrixSender", "message_content"]

CONNECT_TIMEOUT_S = 5.0
API = "/_matrix/client/v3"


def message_content(message: Message) -> dict[str, str]:
    """The ``m.room.message`` content of a message: plain and (escaped) HTML.

    >>> from notifier.delivery.messages import Message
    >>> message_content(Message("s", "Fog <dense>\\nCaution"))["formatted_body"]
    'Fog &lt;dense&gt;<br>Caution'
    """
    text = message.text.rstrip()
    formatted = "<br>".join(html.escape(line) for line in text.split("\n"))
    return {
        "msgtype": "m.text",
        "body": text,
        "format": "org.matrix.custom.html",
        "formatted_body": formatted,
    }


class MatrixSender(SessionChannel):
    def __init__(self, config: MatrixChannel, session: requests.Session | None = None):
        self.id = config.id
        self.config = config
        self._use_session(session)
        self._rooms: dict[str, str] = {}  # alias or user id → room id, for this batch
        self._me: str | None = None

    def close(self) -> None:
        super().close()
        self._rooms.clear()

    def _call(self, method: str, path: str, body: Any = None) -> Any:
        """One client-server call; the answer's JSON, or the error it translates to."""
        self.open()
        assert self._session is not None
        where = f"matrix {self.config.id}"
        headers = {"Authorization": f"Bearer {self.config.access_token}"}
        timeout = (min(CONNECT_TIMEOUT_S, self.config.timeout), self.config.timeout)
        try:
            response = self._session.request(
                method,
                f"{self.config.homeserver}{API}{path}",
                json=body,
                headers=headers,
                timeout=timeout,
                allow_redirects=False,
            )
        except requests.Timeout as exc:
            raise TransientDeliveryError(f"{where}: timed out") from exc
        except requests.ConnectionError as exc:
            raise TransientDeliveryError(f"{where}: cannot connect: {exc}") from exc
        except requests.RequestException as exc:
            raise TransientDeliveryError(f"{where}: {type(exc).__name__}: {exc}") from exc
        status = response.status_code
        try:
            got = response.json()
        except ValueError:
            got = {}
        if 200 <= status < 300:
            return got
        code = got.get("errcode", "") if isinstance(got, dict) else ""
        reason = f"{where}: HTTP {status} {code} {got.get('error', '') if code else ''}".strip()
        if status == 429:
            retry_ms = got.get("retry_after_ms") if isinstance(got, dict) else None
            retry_s = float(retry_ms) / 1000 if isinstance(retry_ms, int | float) else None
            raise RetryLater(reason, retry_s)
        if status == 401:
            raise TransientDeliveryError(f"{reason}: the homeserver refused the access token")
        if status >= 500 or status == 408:
            raise RetryLater(reason)
        raise PermanentDeliveryError(reason)

    def _whoami(self) -> str:
        if self._me is None:
            self._me = str(self._call("GET", "/account/whoami")["user_id"])
        return self._me

    def _direct_room(self, user_id: str) -> str:
        """The bot's direct room with ``user_id``: the newest one in ``m.direct`` that the
        bot is still in, or a new one (recorded in ``m.direct``, as a client would)."""
        me = quote(self._whoami(), safe="")
        path = f"/user/{me}/account_data/m.direct"
        try:
            direct = self._call("GET", path)
        except PermanentDeliveryError:  # 404: no direct rooms yet
            direct = {}
        joined = set(self._call("GET", "/joined_rooms").get("joined_rooms", []))
        for room_id in reversed(direct.get(user_id, [])):
            if room_id in joined:
                return str(room_id)
        created = self._call(
            "POST",
            "/createRoom",
            {"preset": "trusted_private_chat", "is_direct": True, "invite": [user_id]},
        )
        room_id = str(created["room_id"])
        direct = {**direct, user_id: [*direct.get(user_id, []), room_id]}
        self._call("PUT", path, direct)
        return room_id

    def _room_id(self, target: str) -> str:
        if target.startswith("!"):
            return target
        if target not in self._rooms:
            if MATRIX_USER.match(target):
                self._rooms[target] = self._direct_room(target)
            else:
                got = self._call("GET", f"/directory/room/{quote(target, safe='')}")
                self._rooms[target] = str(got["room_id"])
        return self._rooms[target]

    def send(
        self,
        message: Message,
        delivery: Delivery,
        idempotency_key: str,
        chart_png: bytes | None = None,
    ) -> None:
        target = delivery.address or self.config.room
        if not target or not (MATRIX_ROOM.match(target) or MATRIX_USER.match(target)):
            raise PermanentDeliveryError(
                f"matrix {self.config.id}: {target!r} is not a Matrix room or user id"
            )
        room = quote(self._room_id(target), safe="")
        # the delivery key as the transaction id: the same on every retry of this delivery
        txn = quote(safe_key(idempotency_key), safe="")
        self._call("PUT", f"/rooms/{room}/send/m.room.message/{txn}", message_content(message))
