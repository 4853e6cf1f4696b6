"""The Matrix connection wired to a running service: ``fogwatch run`` starts it beside
the scheduler when the config has a ``matrix:`` section, and stops it on the way out.

It answers as the HTTP endpoint does (:func:`notifier.service.webapp.bot_answer`: the
same grammar, the same rights, follows and hushes in the store), and keeps its sync
token, answered events and state in the service's store.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from datetime import UTC, datetime
from typing import TYPE_CHECKING

from notifier.bot.matrix import SYNC_TIMEOUT_MS, MatrixBot, MatrixLink
from notifier.service.webapp import bot_answer
from notifier.storage.matrixstate import MatrixState

if TYPE_CHECKING:  # pragma: no cover
    from notifier.service.cycle import Service

__all__ = ["build_matrix", "start_matrix"]

log = logging.getLogger(__name__)


def build_matrix(
    service: Service,
    clock: Callable[[], datetime] | None = None,
    sync_timeout_ms: int = SYNC_TIMEOUT_MS,
) -> MatrixLink | None:
    """The connection for ``service`` (not started), or None without a ``matrix:``."""
    settings = service.config.matrix
    if settings is None:
        return None
    bot = MatrixBot(
        settings,
        bot_answer(service),
        MatrixState(service.store, settings.user_id),
        clock=clock or (lambda: datetime.now(UTC)),
        sync_timeout_ms=sync_timeout_ms,
        rate_per_minute=service.config.bot.rate_per_minute,
    )
    return MatrixLink(bot)


def start_matrix(service: Service) -> MatrixLink | None:
    """For ``fogwatch run``: the connection in its thread, when the config has one."""
    link = build_matrix(service)
    if link is None:
        return None
    log.warning("matrix: connecting to %s as %s", link.bot.settings.homeserver, link.bot.me)
    return link.start()
