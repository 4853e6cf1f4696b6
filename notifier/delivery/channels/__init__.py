"""Delivery channels: text, folder (.eml), email (SMTP), webhook, CAP files and Matrix.

Every channel follows :class:`~notifier.delivery.channels.base.Channel`: ``open()``, ``send(message,
delivery, idempotency_key, chart_png)`` and ``close()``, or ``with`` for a batch, and
raises only ``TransientDeliveryError`` or ``PermanentDeliveryError``.
"""

from __future__ import annotations

from typing import Any

from notifier.core.config import (
    CapChannel,
    Config,
    EmailChannel,
    FolderChannel,
    MatrixChannel,
    TextChannel,
    WebhookChannel,
)
from notifier.delivery.channels.base import BaseChannel, Channel, RetryLater
from notifier.delivery.channels.cap import CapWriter
from notifier.delivery.channels.email import EmailSender
from notifier.delivery.channels.folder import FolderWriter
from notifier.delivery.channels.matrix import MatrixSender
from notifier.delivery.channels.text import TextWriter
from notifier.delivery.channels.webhook import WebhookSender

__all__ = [
    "STDOUT",
    "BaseChannel",
    "CapWriter",
    "Channel",
    "EmailSender",
    "FolderWriter",
    "MatrixSender",
    "RetryLater",
    "TextWriter",
    "WebhookSender",
    "build_channel",
    "channel_config_for",
]

# the built-in channel a subscriber may name without configuring it
STDOUT = TextChannel(id="stdout", type="text", stdout=True)

_BUILDERS: dict[type, Any] = {
    TextChannel: TextWriter,
    FolderChannel: FolderWriter,
    EmailChannel: EmailSender,
    WebhookChannel: WebhookSender,
    CapChannel: CapWriter,
    MatrixChannel: MatrixSender,
}


def channel_config_for(config: Config, channel_id: str) -> Any:
    """The configured channel with this id; ``stdout`` is always there."""
    for channel in config.channels:
        if channel.id == channel_id:
            return channel
    if channel_id == STDOUT.id:
        return STDOUT
    raise KeyError(channel_id)


def build_channel(channel_config: Any, **injected: Any) -> Channel:
    """A channel for a validated channel config.

    ``injected`` goes to the channel's constructor: ``connect``, ``ssl_context`` and
    ``clock`` for email; ``session`` and ``clock`` for webhook; ``stream`` for text;
    ``sender`` and ``clock`` for folder; ``session`` for matrix.
    """
    builder = _BUILDERS.get(type(channel_config))
    if builder is None:
        raise TypeError(f"not a channel config: {type(channel_config).__name__}")
    channel: Channel = builder(channel_config, **injected)
    return channel
