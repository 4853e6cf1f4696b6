"""The configuration of the bot on Matrix: the ``matrix:`` section (the connection
``fogwatch run`` keeps) and the ``type: matrix`` channel (alerts posted to a room).
:mod:`notifier.core.config` puts them into its models."""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, field_validator, model_validator

from notifier.core.config_types import Duration, Identifier, check_sender_id

__all__ = [
    "MATRIX_ROOM",
    "MATRIX_USER",
    "MatrixChannel",
    "MatrixSettings",
    "check_matrix_address",
    "with_matrix_defaults",
]


class _Model(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


# Matrix ids (docs/references.md [Matrix identifiers]): a user @localpart:server, a room
# !opaque:server (from room version 12, !opaque alone), a room alias #name:server; the
# server name may carry a port
MATRIX_USER = re.compile(r"^@[^:\s]+:[^\s]+$")
MATRIX_ROOM = re.compile(r"^(![^\s:]+(:\S+)?|#[^:\s]+:\S+)$")


def _homeserver_url(value: str | None) -> str | None:
    if value is not None and not re.match(r"^https?://[^\s/]+", value):
        raise ValueError(
            f"homeserver must be a URL such as https://matrix.example.org, got: {value!r}"
        )
    return value.rstrip("/") if value else value


def _room_ref(value: str) -> str:
    if not MATRIX_ROOM.match(value):
        raise ValueError(
            f"expected a room id (!id or !id:server) or alias (#name:server), got: {value!r}"
        )
    return value


class MatrixChannel(_Model):
    """Posts each delivery to a Matrix room: ``room`` here, or the subscriber's
    ``address`` (a room id or alias, or a user id: that person's direct room with the
    bot). ``homeserver`` and ``access_token`` default to the top-level ``matrix:``."""

    id: Identifier
    type: Literal["matrix"]
    room: str | None = None
    homeserver: str | None = None
    access_token: str | None = None
    timeout: Duration = 10.0

    @field_validator("homeserver")
    @classmethod
    def _url(cls, value: str | None) -> str | None:
        return _homeserver_url(value)

    @field_validator("room")
    @classmethod
    def _room(cls, value: str | None) -> str | None:
        return None if value is None else _room_ref(value)

    @model_validator(mode="after")
    def _connected(self) -> MatrixChannel:
        if not self.homeserver or not self.access_token:
            raise ValueError(
                "a matrix channel needs homeserver and access_token, here or in the "
                "top-level matrix: section"
            )
        return self


class MatrixSettings(_Model):
    """The bot on Matrix: ``fogwatch run`` syncs as ``user_id`` and answers in rooms and
    direct messages. ``rooms`` are joined at start; an invitation is accepted for a
    listed room only, or for any room with ``invites: accept``. Unencrypted rooms only."""

    homeserver: str
    user_id: str
    access_token: str
    rooms: tuple[str, ...] = ()
    invites: Literal["listed", "accept"] = "listed"

    @field_validator("homeserver")
    @classmethod
    def _url(cls, value: str) -> str:
        return _homeserver_url(value) or value

    @field_validator("user_id")
    @classmethod
    def _user(cls, value: str) -> str:
        if not MATRIX_USER.match(value):
            raise ValueError(
                f"expected a Matrix user id such as @fogbot:example.org, got: {value!r}"
            )
        return check_sender_id(value)

    @field_validator("rooms")
    @classmethod
    def _rooms(cls, value: tuple[str, ...]) -> tuple[str, ...]:
        return tuple(_room_ref(room) for room in value)


def with_matrix_defaults(data: Any) -> Any:
    """The raw config with each matrix channel's missing ``homeserver`` and
    ``access_token`` taken from the ``matrix:`` section (the bot's own account)."""
    if not isinstance(data, dict) or not isinstance(data.get("matrix"), dict):
        return data
    bot = data["matrix"]
    channels = data.get("channels")
    if not isinstance(channels, list | tuple):
        return data
    filled = []
    for channel in channels:
        if isinstance(channel, dict) and channel.get("type") == "matrix":
            channel = dict(channel)
            for key in ("homeserver", "access_token"):
                if channel.get(key) is None and bot.get(key) is not None:
                    channel[key] = bot[key]
        filled.append(channel)
    return {**data, "channels": filled}


def check_matrix_address(
    add: Callable[[Any, str], None], loc: Any, address: str | None, channel: MatrixChannel
) -> None:
    """A subscriber of a matrix channel names a room or a person, or the channel has a
    room (``add(loc, problem)`` reports what is wrong)."""
    if address is None:
        if channel.room is None:
            add(loc, f"channel {channel.id} has no room: give a room id (!id:server) or user id")
        return
    if not (MATRIX_ROOM.match(address) or MATRIX_USER.match(address)):
        add(loc, f"not a Matrix room id, alias or user id: {address!r} (e.g. @ana:example.org)")
