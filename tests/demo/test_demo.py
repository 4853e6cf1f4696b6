"""The demo end to end: timeline, files written, signatures, bot answers, summary."""

from __future__ import annotations

import email
import io
import json
from collections import Counter

import pytest

from notifier.delivery.channels.webhook import verify_signature
from notifier.demo.play import run_demo


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "fogwatch-demo"
    stream = io.StringIO()
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("FOGWATCH_DEMO_WEBHOOK_SECRET", "demo-webhook-secret")
        mp.setenv("FOGWATCH_DEMO_BOT_SECRET", "demo-bot-secret")
        result = run_demo(out=out, stream=stream)
    return result, stream.getvalue()


def kinds(result, site):
    return Counter((e.hazard, e.type) for e in result["events"] if e.site_id == site)


def test_each_site_has_a_believable_night(demo):
    result, _ = demo
    orchard = kinds(result, "hollin-orchard")
    assert orchard[("fog", "raised")] == 1 and orchard[("fog", "cleared")] == 1
    assert orchard[("icing", "raised")] == 1 and orchard[("icing", "escalated")] == 1
    berth = kinds(result, "skerrow-berth")
    assert berth[("fog", "raised")] == 1 and berth[("fog", "escalated")] == 1
    assert berth[("fog", "cleared")] == 1
    show = kinds(result, "marrowby-showground")
    assert show[("fog", "escalated")] == 1 and show[("fog", "cleared")] == 1
    # the logger outage is reported, then its end: silence is not safety
    assert show[("data_gap", "data_gap")] == 1 and show[("data_gap", "data_back")] == 1
    # no flapping: a hazard is raised at most once per site in the night
    for site in ("hollin-orchard", "skerrow-berth", "marrowby-showground"):
        for hazard in ("fog", "icing"):
            assert kinds(result, site)[(hazard, "raised")] <= 1


def test_sea_fog_comes_after_the_wind_turns_onshore(demo):
    result, _ = demo
    first = next(e for e in result["events"] if e.site_id == "skerrow-berth")
    local = first.time.astimezone(__import__("zoneinfo").ZoneInfo("Europe/London"))
    assert local.hour == 23  # the wind backs onshore at 23:00 in the invented night
    assert first.kind == "advection"


def test_timeline_and_summary_are_printed(demo):
    _, text = demo
    assert "Fog WARNING · Marrowby Showground" in text
    assert "All clear: fog · Skerrow Estuary Berth 4" in text
    assert "evening outlook sent" in text
    assert "What was sent to whom:" in text
    assert "not an official forecast" in text


def test_emails_are_real_mime_with_charts(demo):
    result, _ = demo
    mail = result["out"] / "mail"
    files = sorted(mail.glob("*.eml"))
    assert files and len(files) == len(result["files"]["emails"])
    charts = 0
    for path in files:
        msg = email.message_from_bytes(path.read_bytes())
        assert msg["Message-ID"] and msg["Date"] and msg["To"]
        body = next(p for p in msg.walk() if p.get_content_type() == "text/plain")
        assert "not an official forecast" in " ".join(
            body.get_payload(decode=True).decode().split()
        )
        charts += any(p.get_content_type() == "image/png" for p in msg.walk())
    assert charts >= 5


def test_webhook_bodies_verify_with_the_shared_secret(demo):
    result, _ = demo
    bodies = sorted((result["out"] / "webhook").glob("*.json"))
    assert bodies
    for path in bodies:
        record = json.loads(path.read_text())
        assert record["body"]["site"] == "skerrow-berth"
        assert "caution" in record["body"]
        headers = record["headers"]
        assert headers["X-Fogwatch-Delivery"] == path.stem
        raw = record["raw_body"].encode()
        sent_at = int(headers["X-Fogwatch-Timestamp"])
        assert verify_signature("demo-webhook-secret", headers, raw, sent_at)
        assert not verify_signature("another-secret", headers, raw, sent_at)


def test_bot_answers(demo):
    result, _ = demo
    answers = {(sender, text): reply for sender, text, reply in result["bot"]}
    assert "Hollin Vale Orchard: " in answers[("duty-phone", "status")]
    assert "don't know you" in answers[("grower-17", "status hollin-orchard")]
    assert "Welcome" in answers[("grower-17", "join ORCHARD-7")]
    assert "Only an operator" in answers[("grower-17", "hush hollin-orchard for 2h for everyone")]


def test_quiet_hours_hold_watch_news_for_the_orchard_manager(demo):
    result, _ = demo
    sent = result["sent_by"]["orchard-manager"]
    assert sum(sent.values()) >= 4
    assert all("(sent)" in label for label in sent)
