"""The evening outlook's fields agree with its text: the level a script reads is the level
the text names, the kind is not a sentence, and the arrival time is the onset window's."""

from __future__ import annotations

import math
import re
from datetime import UTC, datetime, timedelta

import pytest

from notifier.delivery.messages import render, render_summary
from tests.delivery.test_outlook import SUNSET, WARNING_ONLY, outlook_rows
from tests.service.scene import CONFIG, HEADER, Scene, utc


def _evening(scene: Scene, until: datetime) -> Scene:
    """The outlook scene's evening (test_outlook.evening), its readings up to ``until``."""
    scene.config_path.write_text(CONFIG.replace("bot:\n", WARNING_ONLY, 1), encoding="utf-8")
    rows = [HEADER]
    t = utc(2026, 11, 20, 12, 0)
    while t <= until:
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


def _outlooks(scene: Scene, at: datetime) -> dict[str, dict]:
    service = scene.service()
    service.poll_and_assess(at)
    service.outlook(at, ["zz-vale", "zz-quay"])
    assert outlook_rows(service)
    levels = {sid: snap[1] for sid, snap in service.outbox.snapshots().items()}
    out = {}
    for event in service.outbox.events_between(at, at):
        site = service.config.site(event.site_id)
        body = render(event, site, service.loaded.rules).json
        out[event.site_id] = {**body, "site_level": levels[event.site_id]}
    return out


@pytest.mark.parametrize("hour", [17.5, 19.5], ids=["17:30", "19:30"])
def test_the_outlook_payload_level_is_the_level_its_text_names(scene, hour):
    at = utc(2026, 11, 20, 0, 0) + timedelta(hours=hour)
    for sid, body in _outlooks(_evening(scene, at), at).items():
        # the level a script reads, the site's stored level and the level the text names
        assert body["level"] == body["site_level"], sid
        said = "no alert in force now" if body["level"] == "none" else f"at {body['level']} now"
        assert said in body["text"], sid
        assert body["previous_level"] == body["level"]
        # the kind is not "chance …": the chance is a sentence, carried in reasons
        assert body["kind"] is None
        assert any(r.startswith("Fog chance tonight: ") for r in body["reasons"])
        assert body["reasons"][-1] in " ".join(body["text"].split())


def test_the_outlook_eta_is_the_middle_of_its_onset_window(scene):
    # at 19:30 the valley has cooled 3 h 20 min past sunset: the cooling curve is trusted
    # (engine/projection.py: 4 readings over 2 h past the evening transition) and the text
    # gives an onset window one hour either side of the projected onset
    at = utc(2026, 11, 20, 19, 30)
    vale = _outlooks(_evening(scene, at), at)["zz-vale"]
    flat = " ".join(vale["text"].split())
    window = re.search(r"Onset window: (\d\d):(\d\d) GMT to (\d\d):(\d\d) GMT", flat)
    assert window is not None, flat
    eta = datetime.fromisoformat(vale["eta"]).astimezone(UTC)
    start = eta.replace(hour=int(window[1]), minute=int(window[2]), second=0, microsecond=0)
    end = eta.replace(hour=int(window[3]), minute=int(window[4]), second=0, microsecond=0)
    # the window's ends are shown to the minute: the eta lies one hour after its start
    # and one hour before its end, to within that rounding
    assert abs((eta - start) - timedelta(hours=1)) < timedelta(minutes=1)
    assert abs((end - eta) - timedelta(hours=1)) < timedelta(minutes=1)


def test_the_outlook_at_17_30_without_a_projected_hour_has_no_eta(scene):
    # 1 h 20 min after sunset the cooling curve is not yet trusted: the text gives the
    # hours around dawn, not a projected onset, so the payload's eta is null
    at = utc(2026, 11, 20, 17, 30)
    vale = _outlooks(_evening(scene, at), at)["zz-vale"]
    assert "Onset window: most likely" in " ".join(vale["text"].split())
    assert vale["eta"] is None


@pytest.mark.parametrize(
    ("released", "word"),
    [((6, 30), "Overnight"), ((22, 0), "While quiet"), ((14, 0), "While quiet")],
    ids=["morning", "evening", "afternoon"],
)
def test_the_summary_headline_says_overnight_only_in_the_morning(released, word):
    from tests.delivery.scenes import RULES, event, site

    quay = site("quay-two", use="port")
    held = [(event(at=utc(2026, 1, 10, 10, 10), site_id="quay-two"), quay)]
    at = utc(2026, 1, 10 if released[0] >= 12 else 11, *released)
    msg = render_summary(held, RULES, at=at)
    assert msg.subject == f"{word}: 1 update for 1 site · {released[0]:02d}:{released[1]:02d} GMT"
