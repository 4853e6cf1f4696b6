"""A simulated night through the whole service: a file-drop feed, the rules, the
lifecycle, the outbox and real delivery to an SMTP server and a webhook receiver on
127.0.0.1 — exactly one watch, one warning and one all-clear, with no flapping."""

from __future__ import annotations

import email
import random
import shutil
from datetime import datetime, time, timedelta
from email import policy
from email.message import EmailMessage
from zoneinfo import ZoneInfo

import pandas as pd
import pytest

from notifier.cli import main as cli
from notifier.core.columns import text_columns_as_objects
from notifier.core.config import Site
from notifier.core.signing import ID_HEADER
from notifier.delivery.messages import CAUTION
from notifier.service.cycle import Service
from notifier.service.loading import observations_for
from notifier.storage.deliveries import delivery_key
from tests.delivery.outbox_kit import email_channel, secrets_env, webhook_channel, write_config
from tests.delivery.scenes import CLEAR_FIELD, clear_night, drop
from tests.engine.scenes import EVENING

ZONE = ZoneInfo("Europe/London")
SITE = CLEAR_FIELD
FARM = {"id": "farm-manager", "channel": "mail", "address": "farm-manager@example.test"}
DUTY = {"id": "duty-bridge", "channel": "hook", "address": "duty-room", "min_level": "warning"}
STEP = timedelta(minutes=10)


def parse(data: bytes) -> EmailMessage:
    return email.message_from_bytes(data, policy=policy.default)  # type: ignore[return-value]


@pytest.mark.parametrize("backend", ["sqlite", "postgresql"])
def test_a_night_gives_one_watch_one_warning_one_all_clear_delivered(
    tmp_path, monkeypatch, smtp_server, webhook_server, capsys, request, backend
):
    secrets_env(monkeypatch)
    folder = tmp_path / "drop"
    folder.mkdir()
    # the store: the SQLite file beside the config, or a database on the test PostgreSQL
    # server (tests/postgres.py), as several instances sharing state would use
    store = {}
    if backend == "postgresql":
        store = {"store": {"url": request.getfixturevalue("postgres").new_database()}}
    config = write_config(
        tmp_path,
        [email_channel(smtp_server.port), webhook_channel(webhook_server.url)],
        [FARM, DUTY],
        sites=[SITE],
        sources=[{"id": "logger", "type": "filedrop", "path": "drop", "settle": 0}],
        **store,
    )
    # the clear calm night of tests/delivery/scenes.py, fed through the file drop
    obs, start, end = clear_night(Site(**SITE))
    service = Service(config, rng=random.Random(3))
    now, fed = start, pd.Timestamp(obs["time"].min()) - pd.Timedelta(minutes=1)
    events = []
    cycles = 0
    try:
        while now <= end:
            upto = pd.Timestamp(now)
            drop(folder, obs[(obs["time"] > fed) & (obs["time"] <= upto)], now)
            fed = upto
            report, sent = service.cycle(now)
            cycles += 1
            # the window the service keeps in memory is what a fresh read would give
            held = service._window.frame(now) if service._window else None
            assert held is not None and service._window.last_read == 0
            fresh = observations_for(service.config, service.store, now)
            pd.testing.assert_frame_equal(text_columns_as_objects(held), fresh, check_dtype=False)
            assert [p.ok for p in report.polls] == [True], report.polls
            assert sent.retried == sent.failed == sent.expired == 0
            assert sent.sent == report.deliveries_added  # everything went at once
            events.extend(report.events)
            if report.events or now in (start, end):
                # the same cycle again: no new event, no new delivery, nothing sent
                again, resent = service.cycle(now)
                assert again.events == [] and again.deliveries_added == 0
                assert resent.sent == 0
            now += STEP
        final_states = service.outbox.states()
    finally:
        service.close()

    # -- the events: one watch, one warning, the fog seen forming and turning dense, one
    # all-clear; a reminder only while the warning waits for its fog, 3 h after the news
    assert cycles == int((end - start) / STEP) + 1
    news = [(e.type, e.level, e.seen) for e in events if e.type != "reminder"]
    assert news == [
        ("raised", "watch", ()),
        ("escalated", "warning", ()),
        ("observed", "warning", ("observed",)),
        ("observed", "warning", ("dense",)),
        ("cleared", "none", ()),
    ]
    assert {e.hazard for e in events} == {"fog"}
    raised, escalated, formed, dense, cleared = (e for e in events if e.type != "reminder")
    reminders = [e for e in events if e.type == "reminder"]
    # 3 h after the warning while the fog is to come; none once it is seen (its next
    # news is its change or its end)
    assert [r.time - escalated.time for r in reminders] == [timedelta(hours=3)]
    assert reminders[0].time < formed.time
    local = {e.type: e.time.astimezone(ZONE) for e in events}
    assert local["raised"].date() == EVENING
    assert local["escalated"].date() == EVENING and local["escalated"].hour >= 18
    assert local["cleared"].time() >= time(9, 30)
    assert cleared.previous_level == "warning" and cleared.changes
    assert final_states == {}  # back at none and past its cooldown by 10:30

    # -- the emails: every event to the farm manager, each once, with a chart
    zone_now = {e.id: e.time.astimezone(ZONE).strftime("%H:%M BST") for e in events}
    mails = [parse(m.data) for m in smtp_server.inbox.messages]
    assert len(mails) == len(events) == 6
    assert [m["Subject"] for m in mails] == [
        f"Fog watch · Clear Field · {zone_now[raised.id]}",
        f"Fog now a warning · Clear Field · {zone_now[escalated.id]}",
        f"Fog warning still in force · Clear Field · {zone_now[reminders[0].id]}",
        f"Fog has formed · Clear Field · {zone_now[formed.id]}",
        f"Dense fog · Clear Field · {zone_now[dense.id]}",
        f"All clear: fog · Clear Field · {zone_now[cleared.id]}",
    ]
    assert [m["Message-ID"] for m in mails] == [
        f"<{delivery_key(e.id, 'farm-manager', 'mail')}@example.test>" for e in events
    ]
    assert all(m["To"] == FARM["address"] for m in mails)
    for m in mails:
        text = m.get_body(preferencelist=("plain",)).get_content()  # type: ignore[union-attr]
        assert " ".join(CAUTION.split()) in " ".join(text.split())
    first_text = mails[0].get_body(preferencelist=("plain",)).get_content()  # type: ignore[union-attr]
    assert "Why:" in first_text and "°C" in first_text
    all_clear = mails[-1].get_body(preferencelist=("plain",)).get_content()  # type: ignore[union-attr]
    assert "What changed:" in all_clear
    charts = [a for m in mails for a in m.iter_attachments()]
    assert len(charts) == 6 and all(a.get_content_type() == "image/png" for a in charts)
    assert all(a.get_content()[:8] == b"\x89PNG\r\n\x1a\n" for a in charts)
    assert smtp_server.inbox.connections == 6  # one per dispatch run with mail to send

    # -- the webhook: warning news only (min_level warning), signed, each once
    hook = webhook_server.hook
    assert hook.rejected_signatures == 0
    posted = [a["body"] for a in hook.accepted]
    assert [b["type"] for b in posted] == [
        "escalated",
        "reminder",
        "observed",
        "observed",
        "cleared",
    ]
    assert [a["headers"][ID_HEADER] for a in hook.accepted] == [
        delivery_key(e.id, "duty-bridge", "hook") for e in events if e is not raised
    ]
    assert posted[0]["headline"] == f"Fog now a warning · Clear Field · {zone_now[escalated.id]}"
    assert posted[-1]["headline"].startswith("All clear: fog · Clear Field")
    assert all(b["caution"] == CAUTION and b["recipient"] == "duty-room" for b in posted)
    assert posted[0]["reasons"] and posted[0]["site"] == "clear-field"

    # -- what the store and `fogwatch status` say at the end
    capsys.readouterr()
    assert cli.main(["status", str(config)]) == 0
    out = capsys.readouterr().out
    assert "Outbox: 11 sent" in out  # 6 to the farm, 5 to the duty bridge
    assert "clear-field" in out and "NONE" in out
    assert sorted(p.name for p in (folder / "processed").iterdir()) == sorted(
        f"clear-field-{t:%Y%m%dT%H%M}.csv" for t in (start + STEP * i for i in range(cycles))
    )


def test_fogwatch_once_queues_delivers_and_says_how_it_went(
    tmp_path, monkeypatch, smtp_server, capsys
):
    secrets_env(monkeypatch)
    smtp_server.inbox.refuse = {"gone@example.test"}
    gone = {"id": "old-desk", "channel": "mail", "address": "gone@example.test"}
    folder = tmp_path / "drop"
    folder.mkdir()
    config = write_config(
        tmp_path,
        [email_channel(smtp_server.port)],
        [FARM, gone],
        sites=[SITE],
        sources=[{"id": "logger", "type": "filedrop", "path": "drop", "settle": 0}],
    )
    at = datetime.combine(EVENING, time(21, 0), ZONE)
    obs, _, _ = clear_night(Site(**SITE))
    drop(folder, obs[obs["time"] <= pd.Timestamp(at)], at)

    def once(when: datetime) -> tuple[int, str]:
        capsys.readouterr()
        code = cli.main(["once", str(config), "--at", when.isoformat()])
        return code, capsys.readouterr().out

    code, out = once(at)
    assert code == 4, out  # a delivery failed for good
    assert out.startswith("1 site(s) assessed, 1 event(s), 2 delivery(ies) queued; sent 1, ")
    assert "retrying 0, failed 1, expired 0" in out
    (mail,) = smtp_server.inbox.messages
    assert parse(mail.data)["Subject"] == "Fog warning · Clear Field · 21:00 BST"

    code, out = once(at)  # the same cycle again
    assert (code, out.splitlines()[0]) == (
        0,
        "1 site(s) assessed, 0 event(s), 0 delivery(ies) queued; "
        "sent 0, retrying 0, failed 0, expired 0",
    )
    assert len(smtp_server.inbox.messages) == 1

    shutil.rmtree(folder)  # the logger's share went away
    code, out = once(at + STEP)
    assert code == 3
    assert f"source logger: folder not found: {folder}" in out
