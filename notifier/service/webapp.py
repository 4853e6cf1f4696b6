"""The web app wired to a running service: ``fogwatch serve`` on its own, and beside the
scheduler in ``fogwatch run`` when the config has a ``web:`` section.

The bot endpoint answers as ``bot serve`` does (new allow-lists and sites apply without
a restart); the app reads the service's config and rules as they are after a reload.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from datetime import UTC, datetime
from typing import TYPE_CHECKING

from notifier.core.config import is_loopback_host
from notifier.core.errors import UsageError

if TYPE_CHECKING:  # pragma: no cover
    from notifier.service.cycle import Service
    from notifier.web.server import WebServer

__all__ = ["bot_answer", "build_web", "start_web"]

log = logging.getLogger(__name__)


def bot_answer(service: Service) -> Callable[[str, str, datetime], str]:
    """The bot's reply to one message, as ``bot serve`` makes it."""
    from notifier.bot.grammar import handle
    from notifier.service.botbackend import ServiceBackend

    def answer(sender: str, text: str, now: datetime) -> str:
        if service.files_changed():
            ok, message = service.reload()
            if not ok:
                log.error("reload failed, keeping the running config: %s", message)
        return handle(ServiceBackend(service, now), sender, text, now)

    return answer


def build_web(
    service: Service,
    host: str,
    port: int,
    clock: Callable[[], datetime] | None = None,
) -> WebServer:
    """The app for ``service``, listening on ``host:port`` (not started yet).

    UsageError when ``host`` is not a loopback address and no ``web.token`` is set."""
    from notifier.web.app import WebContext, create_app
    from notifier.web.botmount import BotBridge
    from notifier.web.server import WebServer

    web = service.config.web
    token = web.token if web else None
    if not is_loopback_host(host) and not token:
        raise UsageError(
            f"serving on {host} needs web.token in the config (e.g. ${{FOGWATCH_WEB_TOKEN}}): "
            "the page is open to anyone who can reach it"
        )
    bot = None
    if service.config.bot.secret:
        from notifier.storage.seen import SeenMessages

        bot = BotBridge(
            service.config.bot.secret,
            bot_answer(service),
            SeenMessages(service.store),
            rate_per_minute=service.config.bot.rate_per_minute,
        )
    ctx = WebContext(
        config=lambda: service.config,
        rules=lambda: service.rules,
        store=service.store,
        clock=clock or (lambda: datetime.now(UTC)),
        bot=bot,
        token=token,
    )
    app = create_app(ctx)
    if ctx.meter is not None:
        service.cycle_listeners.append(ctx.meter.observe)
    return WebServer(app, host, port)


def start_web(service: Service) -> WebServer | None:
    """For ``fogwatch run``: the app in a thread when the config has a ``web:`` section."""
    web = service.config.web
    if web is None:
        return None
    server = build_web(service, web.host, web.port).start()
    log.warning("web app on %s", server.url)
    return server
