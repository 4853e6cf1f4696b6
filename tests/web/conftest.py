"""A real service night on a real store, and the web app serving it on 127.0.0.1.

The scene is tests/service/scene.py's (invented sites; the valley turns foggy at 23:00
UTC), with a CAP channel and a subscriber on it added. The app's clock is fixed at the
last cycle, so ages and health are judged as at that moment.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path

import pytest
import requests

from notifier.service.cycle import Service
from notifier.service.webapp import build_web
from notifier.web.server import WebServer
from tests.service import scene as sc

CONFIG = sc.CONFIG.replace(
    "channels:\n",
    "channels:\n  - id: capfiles\n    type: cap\n    path: out/cap\n"
    "    sender: fogwatch@vale.example\n",
).replace("subscribers:\n", "subscribers:\n  - id: public-feed\n    channel: capfiles\n")
NIGHT = [sc.utc(2026, 11, 20, 22, 30), sc.utc(2026, 11, 20, 23, 0), sc.utc(2026, 11, 20, 23, 30)]
LAST = NIGHT[-1]


@dataclass
class Served:
    root: Path
    service: Service
    server: WebServer
    clock: list[datetime]

    @property
    def url(self) -> str:
        return self.server.url

    def get(self, path: str, **kw: object) -> requests.Response:
        return requests.get(self.url + path.lstrip("/"), timeout=10, **kw)  # type: ignore[arg-type]


@pytest.fixture(scope="module")
def night(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Served]:
    """The scene's night to 23:30 through the service, served by the web app."""
    root = tmp_path_factory.mktemp("web-night")
    (root / "drop").mkdir()
    config_path = root / "fogwatch.yaml"
    config_path.write_text(CONFIG, encoding="utf-8")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("FW_TEST_BOT_SECRET", sc.BOT_SECRET)
        scene = sc.Scene(root, config_path)
        service = Service(config_path)
        clock = [LAST]
        server = build_web(service, "127.0.0.1", 0, clock=lambda: clock[0]).start()
        try:
            for at in NIGHT:
                scene.feed(at)
                service.cycle(at)
            yield Served(root, service, server, clock)
        finally:
            server.close()
            service.close()


@pytest.fixture
def at_last(night: Served) -> Iterator[Served]:
    """The served night with its clock put back at the last cycle after the test."""
    yield night
    night.clock[0] = LAST


def later(minutes: float) -> datetime:
    return LAST + timedelta(minutes=minutes)


@pytest.fixture(scope="session")
def cap_schema():  # type: ignore[no-untyped-def]
    from tests.cap_schema import cap_schema as schema

    return schema()
