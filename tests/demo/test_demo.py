"""The demo end to end: timeline, files written, signatures, bot answers, summary."""

from __future__ import annotations

import email
import io
import json
from collections import Counter
from datetime import UTC, datetime, time, timedelta
from email import policy
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import pytest
import yaml
from standardwebhooks import Webhook

import notifier.demo.play as demo_play
from notifier.core.signing import format_secret, verify
from notifier.demo.play import run_demo
from notifier.storage.outbox import Outbox
from notifier.storage.store import Store

# Standard Webhooks secrets for the demo's channels (invented keys)
HOOK_SECRET = format_secret(b"the demo's webhook key for tests")
BOT_SECRET = format_secret(b"the demo's bot key for the tests!")


def play(out: Path, config: Path | None = None) -> tuple[dict[str, Any], str]:
    stream = io.StringIO()
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("FOGWATCH_DEMO_WEBHOOK_SECRET", HOOK_SECRET)
        mp.setenv("FOGWATCH_DEMO_BOT_SECRET", BOT_SECRET)
        if config is not None:
            # run_demo takes no config: it copies the file DEMO_CONFIG names into `out`
            mp.setattr(demo_play, "DEMO_CONFIG", config)
        result = run_demo(out=out, stream=stream)
    return result, stream.getvalue()


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return play(tmp_path_factory.mktemp("demo") / "fogwatch-demo")


@pytest.fixture(scope="module")
def demo_with_the_berth_for_the_orchard_manager(tmp_path_factory):
    """The same night, with one change to the demo's config: the orchard manager also
    follows the estuary berth. In the shipped demo no watch-level news of the orchard
    falls inside the manager's quiet hours (the orchard is at warning all night), so
    nothing there is held; the berth's sea-fog watch is raised at 23:20, inside them."""
    folder = tmp_path_factory.mktemp("demo-variant")
    doc = yaml.safe_load(demo_play.DEMO_CONFIG.read_text(encoding="utf-8"))
    (manager,) = [s for s in doc["subscribers"] if s["id"] == "orchard-manager"]
    manager["sites"] = ["hollin-orchard", "skerrow-berth"]
    config = folder / "demo_sites.yaml"
    config.write_text(yaml.safe_dump(doc, sort_keys=False), encoding="utf-8")
    return play(folder / "fogwatch-demo", config)


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
    # the logger outage is reported: silence is not safety. It closed within the grace
    # under the fog warning, so one message tells it, gap and end (engine/data_gap.py)
    assert show[("data_gap", "data_gap")] == 0 and show[("data_gap", "data_back")] == 1
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
    assert "Fog now a warning · Marrowby Showground" in text
    assert "Fog has formed · Skerrow Estuary Berth 4" in text
    assert "data_gap data_gap" not in text and "1 × data back (sent)" in text
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
        assert sorted(headers) == ["webhook-id", "webhook-signature", "webhook-timestamp"]
        assert headers["webhook-id"] == path.stem
        raw = record["raw_body"].encode()
        sent_at = int(headers["webhook-timestamp"])
        assert verify(HOOK_SECRET, headers, raw, sent_at)
        assert not verify(BOT_SECRET, headers, raw, sent_at)
        # README, Webhooks: the Standard Webhooks signature, worked out by the
        # specification's reference library rather than fogwatch's own code
        at = datetime.fromtimestamp(sent_at, UTC)
        assert headers["webhook-signature"] == Webhook(HOOK_SECRET).sign(path.stem, at, raw)


def test_bot_answers(demo):
    result, _ = demo
    answers = {(sender, text): reply for sender, text, reply in result["bot"]}
    assert "Hollin Vale Orchard: " in answers[("duty-phone", "status")]
    assert "don't know you" in answers[("grower-17", "status hollin-orchard")]
    assert "Welcome" in answers[("grower-17", "join ORCHARD-7")]
    assert "Only an operator" in answers[("grower-17", "hush hollin-orchard for 2h for everyone")]


# -- quiet hours, from the demo's config and what the demo wrote ---------------------------


def manager_night(result: dict[str, Any]) -> list[tuple[Any, Any, bool, datetime | None]]:
    """Each delivery to the orchard manager as (row, event, inside quiet hours, end of those
    quiet hours), read back from the demo's own store; the quiet hours come from the
    demo's config (``quiet_hours: "22:00-05:30"``, in the site's zone: Europe/London)."""
    out = result["out"]
    doc = yaml.safe_load((out / "demo_sites.yaml").read_text(encoding="utf-8"))
    (manager,) = [s for s in doc["subscribers"] if s["id"] == "orchard-manager"]
    start_text, end_text = manager["quiet_hours"].split("-")
    start, end = time.fromisoformat(start_text), time.fromisoformat(end_text)
    assert (start, end) == (time(22, 0), time(5, 30))  # the demo's, crossing midnight
    zone = ZoneInfo(manager.get("timezone", "Europe/London"))  # all demo sites' zone
    store_file = doc["store"]["url"].removeprefix("sqlite:///")
    night = []
    with Store(f"sqlite:///{out / store_file}") as store:
        outbox = Outbox(store)
        for row in outbox.deliveries():
            if row.subscriber != "orchard-manager":
                continue
            event, _ = outbox.event(row.event_id)
            local = event.time.astimezone(zone)
            inside = local.time() >= start or local.time() < end
            window_end = None
            if inside:
                day = local.date() + timedelta(days=1 if local.time() >= start else 0)
                window_end = datetime.combine(day, end, zone)
            night.append((row, event, inside, window_end))
    return night


def news_level(event: Any) -> str:
    # README, Configuration: quiet hours hold watch news, warnings go through; a
    # downgrade or all-clear is news of the level it ends (routing, news level)
    # an ending is news of the highest level its episode announced
    return event.news_level


def test_no_reminder_inside_the_orchard_managers_quiet_hours(demo):
    result, _ = demo
    night = manager_night(result)
    # the orchard's fog and freezing fog were seen and announced before 22:00; inside
    # the quiet hours nothing rose, so nothing was sent, reminders least of all
    assert [ev.type for _, ev, quiet, _ in night if quiet] == []
    assert [ev.type for _, ev, quiet, _ in night if not quiet] != []
    for row, ev, _quiet, _ in night:
        assert row.status == "sent" and row.sent_at == ev.time


def test_urgent_news_goes_through_quiet_hours_at_once(
    demo_with_the_berth_for_the_orchard_manager,
):
    result, _ = demo_with_the_berth_for_the_orchard_manager
    night = manager_night(result)
    inside = [(row, ev) for row, ev, quiet, _ in night if quiet and ev.site_id == "skerrow-berth"]
    # the berth's warning, its fog forming and turning dense, and its all-clear (05:20)
    # reach the manager as they happen, though inside the quiet hours
    urgent = [(ev.type, ev.seen) for row, ev in inside if not row.summary]
    assert urgent == [
        ("escalated", ()),
        ("observed", ("observed",)),
        ("observed", ("dense",)),
        ("cleared", ()),
    ]
    for row, ev in inside:
        if not row.summary:
            assert news_level(ev) == "warning" or ev.urgent, ev
            assert row.sent_at == ev.time


def test_quiet_hours_hold_watch_news_for_the_orchard_manager(
    demo_with_the_berth_for_the_orchard_manager,
):
    result, _ = demo_with_the_berth_for_the_orchard_manager
    night = manager_night(result)
    held = [
        (row, ev, end) for row, ev, quiet, end in night if quiet and news_level(ev) != "warning"
    ]
    # the berth's sea-fog watch at 23:20 GMT is the watch news inside the quiet hours
    assert [(ev.site_id, ev.type, ev.level) for _, ev, _ in held] == [
        ("skerrow-berth", "raised", "watch")
    ]
    ((row, ev, end),) = held
    assert ev.time.astimezone(ZoneInfo("Europe/London")).strftime("%H:%M") == "23:20"
    # held, not sent during the quiet hours: released when they end (05:30), as a summary
    assert end is not None and end.strftime("%H:%M") == "05:30"
    assert row.summary and row.not_before == end
    assert row.status == "sent" and row.sent_at == end
    # warnings inside the same quiet hours still went at once
    for other, other_ev, quiet, _ in night:
        if quiet and news_level(other_ev) == "warning":
            assert other.sent_at == other_ev.time
    # the mail the manager got for it: one morning summary, no message of its own
    mail = result["out"] / "mail"
    assert not (mail / f"{row.key}.eml").exists()
    summaries = []
    for path in sorted(mail.glob("*.eml")):
        msg = email.message_from_bytes(path.read_bytes(), policy=policy.default)
        if msg["To"] == "manager@hollin-vale.example" and msg["Subject"].startswith("Overnight"):
            summaries.append(msg)
    (summary,) = summaries
    assert summary["Subject"] == "Overnight: 1 update for 1 site · 05:30 GMT"
    text = " ".join(summary.get_body(preferencelist=("plain",)).get_content().split())
    assert "held for quiet hours" in text
    assert "Skerrow Estuary Berth 4 • 23:20 GMT Fog watch raised" in text


# -- one message per site and moment: the night as its three readers had it --------------

READERS = {  # subscriber: (site, where their messages land, address)
    "orchard-manager": ("hollin-orchard", "mail", "manager@hollin-vale.example"),
    "harbour-ops": ("skerrow-berth", "webhook", None),
    "show-safety": ("marrowby-showground", "mail", "safety@marrowby-show.example"),
}
NEWS = ("raised", "escalated", "observed", "cleared")


@pytest.mark.parametrize("reader", sorted(READERS))
def test_each_reader_gets_at_most_six_messages_and_every_piece_of_news(demo, reader):
    result, _ = demo
    site, kind, address = READERS[reader]
    out = result["out"]
    if kind == "mail":
        messages = [
            p
            for p in (out / "mail").glob("*.eml")
            if email.message_from_bytes(p.read_bytes())["To"] == address
        ]
    else:
        messages = list((out / "webhook").glob("*.json"))
    assert 1 <= len(messages) <= 6, [p.name for p in messages]
    store_file = yaml.safe_load((out / "demo_sites.yaml").read_text())["store"]["url"]
    with Store(f"sqlite:///{out / store_file.removeprefix('sqlite:///')}") as store:
        outbox = Outbox(store)
        sent = {r.event_id for r in outbox.deliveries() if r.subscriber == reader}
        assert all(r.status == "sent" for r in outbox.deliveries() if r.subscriber == reader)
    # every rise, sighting and all-clear of the reader's site that concerns them arrived
    # (the safety officer follows warnings only: their first news is the warning itself)
    warned = {e.episode_start for e in result["events"] if e.level == "warning"}
    expected = [
        e
        for e in result["events"]
        if e.site_id == site
        and e.hazard != "data_gap"
        and e.type in NEWS
        and (
            reader != "show-safety"
            or e.level == "warning"
            or (e.type == "cleared" and e.episode_start in warned)
        )
    ]
    assert {e.type for e in expected} >= {"escalated", "observed", "cleared"}
    assert [e.type for e in expected if e.id not in sent] == []


def test_the_words_a_reader_gets(demo):
    result, _ = demo
    out = result["out"]
    texts = [
        " ".join(
            email.message_from_bytes(p.read_bytes(), policy=policy.default)
            .get_body(preferencelist=("plain",))
            .get_content()
            .split()
        )
        for p in (out / "mail").glob("*.eml")
    ]
    texts += [json.loads(p.read_text())["body"]["text"] for p in (out / "webhook").glob("*.json")]
    assert len(texts) >= 12
    for text in texts:
        assert "?" not in text  # an unknown number leaves its clause out
        assert "Type: radiation" not in text and "above dew point -" not in text
        assert "time to sunrise now" not in text  # an all-clear says the night is over
        assert "not an official forecast" in " ".join(text.split())
    flat = " ".join(texts)
    # kinds in plain words, and how each arrival time was worked out or that it is now
    assert "clear-sky cooling fog" in flat and "sea fog" in flat
    assert "here now, since" in flat
