"""Plain text to stdout and/or appended to a file (one block per message).

Appending cannot be made idempotent the way a rename can, so each block names its
delivery key: a duplicate after a crash is visible as the same key twice.
"""

from __future__ import annotations

import errno
import os
import sys
from pathlib import Path
from typing import TYPE_CHECKING, TextIO

from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels.base import BaseChannel, safe_key

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import TextChannel
    from notifier.delivery.messages import Message
    from notifier.storage.deliveries import Delivery

__all__ = ["TextWriter", "format_block"]

_PERMANENT_ERRNOS = {errno.EACCES, errno.EPERM, errno.EROFS, errno.ENOTDIR, errno.EISDIR}
RULE = "─" * 40


def format_block(message: Message, idempotency_key: str) -> str:
    return f"{RULE}\n{message.text.rstrip()}\n[{safe_key(idempotency_key)}]\n"


class TextWriter(BaseChannel):
    def __init__(self, config: TextChannel, stream: TextIO | None = None):
        self.id = config.id
        self.to_stdout = config.stdout
        self.file = Path(config.file) if config.file is not None else None
        self._stream = stream

    def send(
        self,
        message: Message,
        delivery: Delivery,
        idempotency_key: str,
        chart_png: bytes | None = None,
    ) -> None:
        block = format_block(message, idempotency_key)
        if self.file is not None:
            try:
                self.file.parent.mkdir(parents=True, exist_ok=True)
                with open(self.file, "a", encoding="utf-8") as handle:
                    handle.write(block)
                    handle.flush()
                    os.fsync(handle.fileno())
            except OSError as exc:
                error = (
                    PermanentDeliveryError
                    if exc.errno in _PERMANENT_ERRNOS
                    else TransientDeliveryError
                )
                raise error(f"cannot append to {self.file}: {exc.strerror or exc}") from exc
        if self.to_stdout:
            stream = self._stream or sys.stdout
            try:
                stream.write(block)
                stream.flush()
            except (OSError, ValueError) as exc:  # a closed or broken stdout
                raise TransientDeliveryError(f"cannot write to stdout: {exc}") from exc
