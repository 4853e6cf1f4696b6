"""The evening outlook: one message per site for those who take watch-level news."""

from __future__ import annotations

import math
from datetime import timedelta

import pytest

from notifier.service.cycle import Service, bot_subscriber_id
from tests.service.scene import CONFIG, HEADER, Scene, utc

OUTLOOK_AT = utc(2026, 11, 20, 17, 30)  # 17:30 GMT, the default outlook time
SUNSET = utc(2026, 11, 20, 16, 10)

WARNING_ONLY = """\
  - id: harbour
    name: Harbour Office
    channel: duty
    min_level: warning
bot:
"""


@pytest.fixture
def evening(scene: Scene) -> Scene:
    """A clear, calm evening cooling fast at the valley; a mild, cloudy one at the quay."""
    scene.config_path.write_text(CONFIG.replace("bot:\n", WARNING_ONLY, 1), encoding="utf-8")
    rows = [HEADER]
    t = utc(2026, 11, 20, 12, 0)
    while t <= OUTLOOK_AT:
        if t <= SUNSET:
            temp = 9.0 - 3.0 * (t - utc(2026, 11, 20, 12, 0)) / (SUNSET - utc(2026, 11, 20, 12, 0))
        else:  # Brunt's square-root cooling after sunset
            temp = 6.0 - 2.0 * math.sqrt((t - SUNSET).total_seconds() / 3600.0)
        stamp = f"{t:%Y-%m-%dT%H:%M:%SZ}"
        rows.append(f"zz-vale,{stamp},{temp:.2f},1.2,0.8,5,20000,")
        rows.append(f"zz-quay,{stamp},9.0,3.0,4.0,90,25000,")
        t += timedelta(minutes=10)
    (scene.drop / "evening.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    return scene


def outlook_rows(service: Service) -> list[tuple[str, str, str]]:
    out = []
    for row in service.outbox.deliveries():
        event, _ = service.outbox.event(row.event_id)
        if event.type == "outlook":
            out.append((row.subscriber, event.site_id, row.channel))
    return sorted(out)


def test_the_outlook_goes_per_site_to_watch_level_subscribers(evening: Scene):
    service = evening.service()
    service.bot_state.follow("guest-cy", "zz-quay", "watch", OUTLOOK_AT)
    service.bot_state.follow("op-ash", "zz-vale", "warning", OUTLOOK_AT)
    service.poll_and_assess(OUTLOOK_AT)
    queued = service.outlook(OUTLOOK_AT, ["zz-vale", "zz-quay"])
    rows = outlook_rows(service)
    assert rows == sorted(
        [
            ("desk", "zz-vale", "duty"),
            ("desk", "zz-quay", "duty"),
            ("crew", "zz-vale", "duty"),
            (bot_subscriber_id("guest-cy", "zz-quay"), "zz-quay", "botline"),
        ]
    )
    assert queued == len(rows)
    # the warning-only subscriber and the warning-only follower get none
    assert not any(sub == "harbour" for sub, _, _ in rows)
    # queued twice for the same moment is still one outlook each (idempotent)
    assert service.outlook(OUTLOOK_AT, ["zz-vale", "zz-quay"]) == 0


def test_the_outlook_text_names_minimum_dew_point_cooling_onset_icing_and_caution(
    evening: Scene,
):
    service = evening.service()
    service.poll_and_assess(OUTLOOK_AT)
    service.outlook(OUTLOOK_AT, ["zz-vale"])
    service.deliver(OUTLOOK_AT)
    text = evening.out("duty.txt")
    blocks = [b for b in text.split("─" * 40) if "Tonight's outlook" in b]
    assert len(blocks) == 2  # desk and crew, for the valley only
    vale = blocks[0]
    assert "Tonight's outlook · Lower Vale Orchard · 17:30 GMT" in vale
    flat = " ".join(vale.split())  # the text channel wraps lines
    assert "Projected minimum -1.9 °C against a dew point of 1.2 °C (margin -3.1 °C)." in flat
    assert "Cooling potential 1.00 (strong)." in flat
    assert "Onset window: 20:56 GMT to 22:56 GMT." in flat
    assert "Icing: likely" in flat
    assert "Fog chance tonight: high." in flat
    assert "automated estimate from site data, not an official forecast" in flat
    assert "North Quay Basin" not in text


def test_a_quiet_sites_outlook_says_low_chance_without_an_onset(evening: Scene):
    service = evening.service()
    service.poll_and_assess(OUTLOOK_AT)
    service.outlook(OUTLOOK_AT, ["zz-quay"])
    service.deliver(OUTLOOK_AT)
    flat = " ".join(evening.out("duty.txt").split())
    assert "Tonight's outlook · North Quay Basin" in flat
    assert "Projected minimum 9.0 °C against a dew point of 3.0 °C (margin +6.0 °C)." in flat
    assert "Cooling potential 0.15 (weak)." in flat
    assert "Onset window" not in flat
    assert "Icing: unlikely." in flat
    assert "Fog chance tonight: low." in flat


def test_the_outlook_respects_a_hush(evening: Scene):
    service = evening.service()
    service.bot_state.mute("crew-bo", "zz-vale", OUTLOOK_AT + timedelta(hours=1), OUTLOOK_AT)
    service.poll_and_assess(OUTLOOK_AT)
    service.outlook(OUTLOOK_AT, ["zz-vale"])
    assert [sub for sub, _, _ in outlook_rows(service)] == ["desk"]


def test_an_outlook_without_data_says_so(scene: Scene):
    service = scene.service()
    service.outlook(OUTLOOK_AT, ["zz-quay"])
    service.deliver(OUTLOOK_AT)
    flat = " ".join(scene.out("duty.txt").split())
    assert "Not enough data tonight to project the minimum." in flat
    assert "Fog chance tonight: unknown." in flat
