"""The one web application behind ``fogwatch serve`` (and ``fogwatch run`` with a
``web:`` section): Flask, served by waitress (:mod:`notifier.web.server`).

- ``GET /`` the status page: each site's level, hazards, arrival time, data age and a
  24 h chart; the outbox and each source's health. ``GET /site/ID`` one site and why.
- ``GET /health``: 200 with JSON when all is well, 503 with the reasons otherwise.
- ``GET /metrics``: the Prometheus text format.
- ``GET /cap.xml``: an Atom index of the current CAP 1.2 messages, each at
  ``/cap/ID.xml``.
- ``POST /message``: the bot endpoint (signed; see :mod:`notifier.web.botmount`).

Read-only apart from the bot. When ``token`` is set every page asks for it, as
``Authorization: Bearer TOKEN`` (monitoring) or as the password of HTTP Basic
authentication (a browser asks for it); the bot endpoint has its own signature instead.
"""

from __future__ import annotations

import base64
import hmac
import json
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Any

from flask import Flask, Response, abort, render_template, request

from notifier.core.timefmt import local_time
from notifier.delivery.cap_feed import cap_for_event, current_alert_events
from notifier.delivery.messages import CAUTION, HAZARD_NAMES
from notifier.storage.outbox import Outbox
from notifier.web import status as st
from notifier.web.metrics import CycleMeter, build_registry
from notifier.web.svgchart import SERIES, chart_svg

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Config
    from notifier.engine.rules import RuleSet
    from notifier.storage.store import Store
    from notifier.web.botmount import BotBridge

__all__ = ["WebContext", "create_app"]

CHART_HOURS = 24


def _utc_now() -> datetime:
    return datetime.now(UTC)


@dataclass
class WebContext:
    """What the app reads: the running config and rules (callables: a reload swaps them),
    the store, the clock, and the bot bridge when the bot has a secret."""

    config: Callable[[], Config]
    rules: Callable[[], RuleSet]
    store: Store
    clock: Callable[[], datetime] = _utc_now
    bot: BotBridge | None = None
    token: str | None = None
    meter: CycleMeter | None = field(default=None, init=False)


def _authorised(token: str) -> bool:
    header = request.headers.get("Authorization", "")
    scheme, _, value = header.partition(" ")
    given = ""
    if scheme.lower() == "bearer":
        given = value.strip()
    elif scheme.lower() == "basic":
        try:
            given = base64.b64decode(value.strip()).decode("utf-8").partition(":")[2]
        except (ValueError, UnicodeDecodeError):
            given = ""
    return hmac.compare_digest(given.encode(), token.encode())


def _chart(ctx: WebContext, site_id: str, tz_name: str, title: str, now: datetime) -> str:
    import numpy as np

    frame = ctx.store.window([site_id], now - timedelta(hours=CHART_HOURS), now)
    if len(frame):
        frame = frame[frame["kind"] == "obs"]
    times = frame["time"].astype("int64").to_numpy() / 1e9 if len(frame) else np.array([], float)
    columns = {
        name: frame[name].to_numpy(dtype=float)
        for name, *_ in SERIES
        if len(frame) and name in frame
    }
    return chart_svg(times, columns, now, tz_name, title, CHART_HOURS)


def _filters(app: Flask) -> None:
    @app.template_filter("local")
    def _local(t: datetime | str | None, zone: str) -> str:
        from notifier.core.timefmt import parse_iso

        moment = parse_iso(t) if isinstance(t, str) else t
        return local_time(moment, zone, with_date=True) if moment else "—"

    @app.template_filter("age")
    def _age(minutes: float | None) -> str:
        if minutes is None:
            return "no data"
        return f"{minutes:.0f} min" if minutes < 120 else f"{minutes / 60:.1f} h"

    @app.template_filter("hazard")
    def _hazard(name: str) -> str:
        return HAZARD_NAMES.get(name, name)


def create_app(ctx: WebContext) -> Flask:
    app = Flask(__name__)
    _filters(app)
    outbox = Outbox(ctx.store)
    registry, ctx.meter = build_registry(ctx.store, outbox, ctx.config, ctx.clock)
    _guards(app, ctx)
    _pages(app, ctx, outbox)
    _machine_views(app, ctx, outbox, registry)
    _bot_endpoint(app, ctx)
    return app


def _guards(app: Flask, ctx: WebContext) -> None:
    @app.before_request
    def _guard() -> Any:
        if ctx.token and request.path != "/message" and not _authorised(ctx.token):
            return Response(
                "a token is needed\n",
                401,
                {"WWW-Authenticate": 'Basic realm="fogwatch", charset="UTF-8"'},
                mimetype="text/plain",
            )
        return None

    @app.after_request
    def _headers(response: Response) -> Response:
        # nothing on the page comes from elsewhere; nothing may be framed or sniffed
        response.headers.setdefault(
            "Content-Security-Policy",
            "default-src 'none'; style-src 'unsafe-inline'; img-src 'self'",
        )
        response.headers.setdefault("X-Content-Type-Options", "nosniff")
        response.headers.setdefault("Referrer-Policy", "no-referrer")
        return response


def _pages(app: Flask, ctx: WebContext, outbox: Outbox) -> None:
    @app.get("/")
    def index() -> str:
        config, now = ctx.config(), ctx.clock()
        views = st.site_views(outbox, config, now)
        charts = {
            v.site.id: _chart(ctx, v.site.id, v.site.timezone, v.site.name, now) for v in views
        }
        return render_template(
            "index.html",
            sites=views,
            charts=charts,
            sources=st.source_views(ctx.store, config, now),
            outbox=st.outbox_view(outbox, config),
            health=st.health(ctx.store, outbox, config, now),
            now=now,
            caution=CAUTION,
        )

    @app.get("/site/<site_id>")
    def site_page(site_id: str) -> str:
        config, now = ctx.config(), ctx.clock()
        views = st.site_views(outbox, config, now, [site_id])
        if not views:
            abort(404)
        (view,) = views
        notes = []
        for hazard in view.hazards:
            for note in ctx.rules().notes_for(hazard["hazard"], view.site.use):
                if note.text not in notes:
                    notes.append(note.text)
        chart = _chart(ctx, site_id, view.site.timezone, view.site.name, now)
        return render_template(
            "site.html", view=view, chart=chart, notes=notes, now=now, caution=CAUTION
        )


def _machine_views(app: Flask, ctx: WebContext, outbox: Outbox, registry: Any) -> None:
    """/health, /metrics and the CAP feed: what other programs read."""

    @app.get("/health")
    def health() -> Response:
        result = st.health(ctx.store, outbox, ctx.config(), ctx.clock())
        return Response(
            json.dumps(result.to_json(), ensure_ascii=False),
            200 if result.ok else 503,
            mimetype="application/json",
        )

    @app.get("/metrics")
    def metrics() -> Response:
        from prometheus_client import CONTENT_TYPE_LATEST, generate_latest

        return Response(generate_latest(registry), headers={"Content-Type": CONTENT_TYPE_LATEST})

    @app.get("/cap.xml")
    def cap_index() -> Response:
        from notifier.delivery.cap import atom_index

        config = ctx.config()
        web = config.web
        entries = current_alert_events(outbox, config, ctx.clock())
        xml = atom_index(
            entries,
            base_url=request.host_url,
            sender=web.cap_sender if web else "fogwatch@localhost.localdomain",
            now=ctx.clock(),
        )
        return Response(xml, mimetype="application/atom+xml")

    @app.get("/cap/<event_id>.xml")
    def cap_one(event_id: str) -> Response:
        from notifier.delivery.cap import msg_type

        config = ctx.config()
        try:
            event, _ = outbox.event(event_id)
        except KeyError:
            abort(404)
        if msg_type(event) is None or event.site_id not in {s.id for s in config.sites}:
            abort(404)
        web = config.web
        xml = cap_for_event(
            outbox,
            config,
            ctx.rules(),
            event,
            sender=web.cap_sender if web else "fogwatch@localhost.localdomain",
            radius_km=web.cap_radius_km if web else 2.0,
        )
        return Response(xml, mimetype="application/cap+xml")


def _bot_endpoint(app: Flask, ctx: WebContext) -> None:
    @app.post("/message")
    def message() -> Response:
        if ctx.bot is None:
            return Response(
                '{"error": "the bot has no secret configured"}', 404, mimetype="application/json"
            )
        length = request.content_length or 0
        body = request.stream.read(min(length, 256 * 1024))
        headers = [(k, v) for k, v in request.headers.items() if k.lower() != "transfer-encoding"]
        code, out_headers, data = ctx.bot.handle(
            "POST", "/message", headers, body, request.remote_addr or "-"
        )
        return Response(data, code, out_headers)
