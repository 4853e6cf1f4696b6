"""Email written as ``.eml`` files into a folder — the default when there is no SMTP server.

Each delivery is one file named by its idempotency key, written to a temporary file in
the same folder, flushed to disk and renamed into place (``os.replace``), so a reader
never sees half a message and a resend overwrites the same file instead of adding one.
The folder itself is then flushed too (``fsync`` of the directory): the rename lives in
the folder's entry, and without it a power cut could lose a message the store calls sent.
"""

from __future__ import annotations

import contextlib
import errno
import os
import tempfile
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels.base import BaseChannel, safe_key
from notifier.delivery.channels.email import build_email

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import FolderChannel
    from notifier.delivery.messages import Message
    from notifier.storage.deliveries import Delivery

__all__ = ["DEFAULT_SENDER", "FolderWriter", "fsync_folder", "write_atomic"]

DEFAULT_SENDER = "fogwatch <fogwatch@localhost.localdomain>"
# errors a person must fix (a retry cannot): the rest (disk full, I/O) may pass
_PERMANENT_ERRNOS = {
    errno.EACCES,
    errno.EPERM,
    errno.EROFS,
    errno.ENOTDIR,
    errno.EISDIR,
    errno.ENAMETOOLONG,
    errno.EEXIST,
}


def _utc_now() -> datetime:
    return datetime.now(UTC)


def write_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` via a temporary file in the same folder and a rename."""
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    fsync_folder(path.parent)


def fsync_folder(folder: Path) -> None:
    """Flush a folder's entries (a rename into it) to disk, where the system allows it."""
    try:
        fd = os.open(folder, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    except OSError:
        return  # a system that cannot open folders (Windows): nothing more to do
    try:
        os.fsync(fd)
    except OSError as exc:
        if exc.errno not in (errno.EINVAL, errno.ENOTSUP, errno.EBADF):
            raise
    finally:
        os.close(fd)


class FolderWriter(BaseChannel):
    def __init__(
        self,
        config: FolderChannel,
        sender: str = DEFAULT_SENDER,
        clock: Callable[[], datetime] = _utc_now,
    ):
        self.id = config.id
        self.path = Path(config.path)
        self.sender = sender
        self._clock = clock

    def file_for(self, idempotency_key: str) -> Path:
        return self.path / f"{safe_key(idempotency_key)}.eml"

    def send(
        self,
        message: Message,
        delivery: Delivery,
        idempotency_key: str,
        chart_png: bytes | None = None,
    ) -> None:
        msg = build_email(
            message, self.sender, delivery.address, idempotency_key, chart_png, self._clock()
        )
        target = self.file_for(idempotency_key)
        try:
            self.path.mkdir(parents=True, exist_ok=True)
            write_atomic(target, msg.as_bytes())
        except OSError as exc:
            error = (
                PermanentDeliveryError if exc.errno in _PERMANENT_ERRNOS else TransientDeliveryError
            )
            raise error(f"cannot write {target}: {exc.strerror or exc}") from exc
