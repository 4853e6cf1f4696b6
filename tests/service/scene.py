"""A file-backed service scene for the service, scheduler and bot tests.

Two invented sites; readings arrive through a real file-drop folder, one small CSV per
cycle, so the service runs exactly as it does live, only with a simulated clock. The
valley site turns foggy (and near freezing) at 23:00 UTC; the quay stays clear.
Every site, person and sender id here is invented.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from notifier.service.cycle import Service

# Standard Webhooks secrets (whsec_ + base64 of invented bytes)
BOT_SECRET = "whsec_dGVzdCBib3Qga2V5IG9uIHRoZSBsb29wYmFjayBvbmx5"
HOOK_SECRET = "whsec_bG9vcGJhY2sgaG9vayBrZXksIGludmVudGVkIDdmM2E="

START = datetime(2026, 11, 20, 18, 0, tzinfo=UTC)  # first reading (UTC, winter: = local)
FOG_FROM = datetime(2026, 11, 20, 23, 0, tzinfo=UTC)  # the valley saturates from here

CONFIG = """\
version: 1
sites:
  - id: zz-vale
    name: Lower Vale Orchard
    lat: 52.41
    lon: -2.37
    timezone: Europe/London
    exposure: valley
    use: farm
  - id: zz-quay
    name: North Quay Basin
    lat: 53.02
    lon: -3.11
    timezone: Europe/London
    exposure: waterside
    use: port
sources:
  - id: loggers
    type: filedrop
    path: drop
    settle: 0
channels:
  - id: duty
    type: text
    stdout: false
    file: out/duty.txt
  - id: botline
    type: text
    stdout: false
    file: out/bot.txt
subscribers:
  - id: desk
    name: Duty Desk
    channel: duty
    operator: true
    senders: [op-ash]
  - id: crew
    name: Orchard Crew
    channel: duty
    sites: [zz-vale]
    senders: [crew-bo]
bot:
  secret: ${FW_TEST_BOT_SECRET}
  allow: [guest-cy]
  join_codes:
    VALE-7: zz-vale
  channel: botline
"""

HEADER = "site,time,temp_c,dewpoint_c,wind_ms,cloud_pct,visibility_m,weather"


def utc(*args: int) -> datetime:
    return datetime(*args, tzinfo=UTC)  # type: ignore[misc]


def reading_rows(after: datetime, upto: datetime) -> list[str]:
    """CSV rows every 10 min in (after, upto] for both sites."""
    rows = []
    t = START
    while t <= upto:
        if t > after:
            stamp = f"{t:%Y-%m-%dT%H:%M:%SZ}"
            if t < FOG_FROM:
                rows.append(f"zz-vale,{stamp},7.0,2.0,0.8,5,20000,")
            else:
                rows.append(f"zz-vale,{stamp},1.0,0.9,0.8,5,300,FG")
            rows.append(f"zz-quay,{stamp},9.0,3.0,4.0,90,25000,")
        t += timedelta(minutes=10)
    return rows


@dataclass
class Scene:
    """The scene's folder, config file and a service driven by a simulated clock."""

    root: Path
    config_path: Path
    fed_until: datetime = START - timedelta(minutes=1)
    services: list[Service] = field(default_factory=list)

    @property
    def drop(self) -> Path:
        return self.root / "drop"

    def feed(self, upto: datetime) -> None:
        """Drop the readings since the last feed, as a logger would."""
        rows = reading_rows(self.fed_until, upto)
        if rows:
            name = f"loggers-{upto:%m%d-%H%M}.csv"
            part = self.drop / (name + ".part")
            part.write_text("\n".join([HEADER, *rows]) + "\n", encoding="utf-8")
            part.rename(self.drop / name)
        self.fed_until = upto

    def service(self) -> Service:
        service = Service(self.config_path)
        self.services.append(service)
        return service

    def out(self, name: str) -> str:
        path = self.root / "out" / name
        return path.read_text(encoding="utf-8") if path.exists() else ""


@pytest.fixture
def bot_env(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("FW_TEST_BOT_SECRET", BOT_SECRET)
    monkeypatch.setenv("FW_TEST_HOOK_SECRET", HOOK_SECRET)


@pytest.fixture
def scene(tmp_path: Path, bot_env: None) -> Iterator[Scene]:
    (tmp_path / "drop").mkdir()
    config_path = tmp_path / "fogwatch.yaml"
    config_path.write_text(CONFIG, encoding="utf-8")
    s = Scene(tmp_path, config_path)
    try:
        yield s
    finally:
        for service in s.services:
            service.close()
