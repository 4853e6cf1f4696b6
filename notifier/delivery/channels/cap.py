"""CAP 1.2 files: each alert message written as ``IDENTIFIER.xml`` into a folder, for a
public alerting system or an app that reads CAP (docs/references.md [OASIS CAP 1.2]).

The file is named by the CAP identifier (stable per event), written to a temporary file
and renamed into place, so a reader never sees half a message and a resend overwrites
the same file. A held morning summary writes one file per event it holds. The
dispatcher hands the channel the config, rules and outbox (:meth:`CapWriter.bind`): a
CAP message needs the site's position, its safety notes and the episode's earlier
messages, which a rendered text message does not carry.
"""

from __future__ import annotations

import errno
from pathlib import Path
from typing import TYPE_CHECKING

from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.cap import cap_identifier, msg_type
from notifier.delivery.cap_feed import cap_for_event
from notifier.delivery.channels.base import BaseChannel, safe_key
from notifier.delivery.channels.folder import write_atomic

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import CapChannel, Config
    from notifier.delivery.messages import Message
    from notifier.engine.rules import RuleSet
    from notifier.storage.deliveries import Delivery
    from notifier.storage.outbox import Outbox

__all__ = ["CapWriter"]

_PERMANENT_ERRNOS = {errno.EACCES, errno.EPERM, errno.EROFS, errno.ENOTDIR, errno.EISDIR}


class CapWriter(BaseChannel):
    def __init__(self, config: CapChannel):
        self.id = config.id
        self.path = Path(config.path)
        self.sender = config.sender
        self.radius_km = config.radius_km
        self._context: tuple[Config, RuleSet, Outbox] | None = None

    def bind(self, config: Config, rules: RuleSet, outbox: Outbox) -> None:
        """What a CAP message needs beyond the rendered text (see the module's notes)."""
        self._context = (config, rules, outbox)

    def send(
        self,
        message: Message,
        delivery: Delivery,
        idempotency_key: str,
        chart_png: bytes | None = None,
    ) -> None:
        if self._context is None:
            raise PermanentDeliveryError(f"channel {self.id}: not bound to a service")
        config, rules, outbox = self._context
        body = message.json
        ids = [e["id"] for e in body.get("events", [])] if body.get("type") == "summary" else []
        ids = ids or [body["id"]]
        for event_id in ids:
            event, _ = outbox.event(event_id)
            if msg_type(event) is None:
                continue  # the evening outlook is no alert state
            xml = cap_for_event(
                outbox, config, rules, event, sender=self.sender, radius_km=self.radius_km
            )
            target = self.path / f"{safe_key(cap_identifier(event))}.xml"
            try:
                self.path.mkdir(parents=True, exist_ok=True)
                write_atomic(target, xml.encode("utf-8"))
            except OSError as exc:
                error = (
                    PermanentDeliveryError
                    if exc.errno in _PERMANENT_ERRNOS
                    else TransientDeliveryError
                )
                raise error(f"cannot write {target}: {exc.strerror or exc}") from exc
