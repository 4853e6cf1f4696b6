"""The webhook bodies against their published JSON Schemas (docs/schema/): every body a
receiver can get — captured at a signed receiver on 127.0.0.1 from a real dispatch of the
events of a simulated night — validates, and a body with a field too many or too few
does not. The schemas themselves are valid draft 2020-12, describe every field, and carry
the payload's own ``schema`` version."""

from __future__ import annotations

import copy
import json
import random
from datetime import timedelta
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import pandas as pd
import pytest
from jsonschema import Draft202012Validator

from notifier.core.config import Site, WebhookChannel
from notifier.core.signing import ID_HEADER
from notifier.delivery.channels.webhook import WebhookSender
from notifier.delivery.messages import MESSAGE_SCHEMA, render, render_summary
from notifier.engine.catalog import FEATURES
from notifier.service.cycle import Service
from notifier.storage.deliveries import Delivery
from tests.delivery.conftest import WEBHOOK_SECRET
from tests.delivery.outbox_kit import secrets_env, webhook_channel, write_config
from tests.delivery.scenes import CLEAR_FIELD, RULES, clear_night, drop, event, site, utc

SCHEMA_DIR = Path(__file__).resolve().parents[2] / "docs" / "schema"
ALERT_FILE = SCHEMA_DIR / f"webhook-alert.v{MESSAGE_SCHEMA}.schema.json"
SUMMARY_FILE = SCHEMA_DIR / f"webhook-summary.v{MESSAGE_SCHEMA}.schema.json"
WEBHOOK_ONLY = {"delivery", "recipient"}  # added by the webhook channel to message.json

ZONE = ZoneInfo("Europe/London")
SITE = CLEAR_FIELD
# every event at once, to an address
DUTY = {"id": "duty-bridge", "channel": "hook", "address": "duty-room"}
# fog news held from 16:00 to 22:00, warnings too: the outlook, the watch and the warning
# of the evening arrive as one summary at 22:00; no address, so `recipient` is null
DESK = {
    "id": "night-desk",
    "channel": "hook",
    "hazards": ["fog"],
    "quiet_hours": "16:00-22:00",
    "warnings_in_quiet_hours": False,
}
STEP = timedelta(minutes=10)


def load(path: Path) -> dict[str, Any]:
    return json.loads(path.read_text(encoding="utf-8"))


ALERT = load(ALERT_FILE)
SUMMARY = load(SUMMARY_FILE)


def schema_for(body: dict[str, Any]) -> dict[str, Any]:
    return SUMMARY if body.get("type") == "summary" else ALERT


def problems(body: dict[str, Any]) -> list[str]:
    validator = Draft202012Validator(
        schema_for(body), format_checker=Draft202012Validator.FORMAT_CHECKER
    )
    return [
        f"{'/'.join(map(str, e.absolute_path)) or '(body)'}: {e.message}"
        for e in validator.iter_errors(body)
    ]


@pytest.fixture
def night(tmp_path, monkeypatch, webhook_server) -> list[dict[str, Any]]:
    """What the receiver accepted over one night through the whole service: the clear calm
    night of tests/delivery/scenes.py (watch, warning, reminders, all-clear), the evening
    outlook with the first watch, the quiet-hours summary at 22:00, then the logger going silent
    (data gap) and coming back (data back). Each item: ``{"headers", "body"}``."""
    secrets_env(monkeypatch)
    folder = tmp_path / "drop"
    folder.mkdir()
    config = write_config(
        tmp_path,
        [webhook_channel(webhook_server.url)],
        [DUTY, DESK],
        sites=[SITE],
        sources=[{"id": "logger", "type": "filedrop", "path": "drop", "settle": 0}],
    )
    obs, start, end = clear_night(Site(**SITE))
    service = Service(config, rng=random.Random(3))
    now, fed = start, pd.Timestamp(obs["time"].min()) - pd.Timedelta(minutes=1)
    types: list[str] = []
    try:
        while now <= end:
            upto = pd.Timestamp(now)
            drop(folder, obs[(obs["time"] > fed) & (obs["time"] <= upto)], now)
            fed = upto
            report, _ = service.cycle(now)
            if now == start:
                # the outlook with the first watch, in one message: later in the evening
                # it would only repeat that watch (delivery.outlook.outlook_repeats)
                assert service.outlook(now, [SITE["id"]]) > 0
            types += [e.type for e in report.events]
            now += STEP
        # the logger goes silent: a data gap once the newest reading is 90 min old
        for _ in range(30):
            report, _ = service.cycle(now)
            types += [e.type for e in report.events]
            if "data_gap" in types:
                break
            now += STEP
        # and comes back with a fresh reading
        now += STEP
        fresh = obs.tail(1).assign(time=pd.Timestamp(now).tz_convert("UTC"))
        drop(folder, fresh, now)
        report, _ = service.cycle(now)
        types += [e.type for e in report.events]
    finally:
        service.close()
    assert types[-2:] == ["data_gap", "data_back"], types
    assert webhook_server.hook.rejected_signatures == 0
    return list(webhook_server.hook.accepted)


def test_the_schemas_are_valid_draft_2020_12_and_versioned():
    for schema, name in ((ALERT, "webhook-alert"), (SUMMARY, "webhook-summary")):
        Draft202012Validator.check_schema(schema)
        assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
        assert schema["$id"] == f"urn:fogwatch:{name}:{MESSAGE_SCHEMA}"
        assert schema["properties"]["schema"]["const"] == MESSAGE_SCHEMA


def _objects(schema: dict[str, Any]) -> list[tuple[str, dict[str, Any]]]:
    out = [("body", schema)]
    out += [(f"$defs/{k}", v) for k, v in schema.get("$defs", {}).items()]
    return out


@pytest.mark.parametrize("schema", [ALERT, SUMMARY], ids=["alert", "summary"])
def test_every_field_is_described_required_and_nothing_else_allowed(schema):
    for where, obj in _objects(schema):
        props = obj["properties"]
        assert obj["additionalProperties"] is False, where
        assert sorted(obj["required"]) == sorted(props), where  # every field always there
        undescribed = [k for k, v in props.items() if not v.get("description", "").strip()]
        assert undescribed == [], where


def test_a_summary_event_is_a_single_event_body_without_the_webhook_fields():
    event = SUMMARY["$defs"]["event"]["properties"]
    single = {k: v for k, v in ALERT["properties"].items() if k not in WEBHOOK_ONLY}
    assert sorted(event) == sorted(single)
    # the same field, the same schema — except `text`, always empty inside a summary
    differ = [k for k in single if k != "text" and event[k] != single[k]]
    assert differ == []
    assert event["text"]["const"] == ""


def test_every_body_of_a_real_night_matches_its_schema(night):
    bodies = [item["body"] for item in night]
    seen = {b["type"] for b in bodies}
    wanted = {"raised", "escalated", "reminder", "cleared", "data_gap", "data_back"}
    assert wanted | {"outlook", "summary"} <= seen, seen
    for item in night:
        body = item["body"]
        assert problems(body) == [], (body["type"], body["headline"])
        # as both schemas say: `delivery` is the webhook-id, the event's type is in the
        # body, and no header but the three Standard Webhooks ones carries fogwatch's news
        assert body["delivery"] == item["headers"][ID_HEADER]
        assert not [h for h in item["headers"] if h.lower().startswith("x-fogwatch")]
        assert body["recipient"] in ("duty-room", None)
        # feature names are the catalog's (the README's feature list)
        for one in body.get("events", [body]):
            assert set(one["features"]) <= set(FEATURES), one["features"]
    (summary,) = [b for b in bodies if b["type"] == "summary"]
    assert [e["type"] for e in summary["events"]] == ["outlook", "raised", "escalated"]
    assert summary["recipient"] is None


@pytest.fixture
def real_bodies(webhook_server) -> dict[str, dict[str, Any]]:
    """One body of each shape, to break: an escalation and a summary of two held events,
    rendered and sent by the webhook channel, as the receiver got them."""
    s = site("quay-two", use="port")
    watch = event("raised", "watch", "none", at=utc(2026, 1, 10, 23, 0))
    warning = event("escalated", "warning", "watch", at=utc(2026, 1, 11, 2, 0))
    messages = [
        render(warning, s, RULES),
        render_summary([(watch, s), (warning, s)], RULES, at=utc(2026, 1, 11, 6, 30)),
    ]
    channel = WebhookChannel.model_validate(
        {"id": "hook", "type": "webhook", "url": webhook_server.url, "secret": WEBHOOK_SECRET}
    )
    address = Delivery(event_id=warning.id, subscriber_id="ops", channel_id="hook", address="ops")
    with WebhookSender(channel) as sender:
        for n, message in enumerate(messages):
            sender.send(message, address, f"fw-schema-{n}", None)
    escalated, summary = (item["body"] for item in webhook_server.hook.accepted)
    assert escalated["type"] == "escalated" and summary["type"] == "summary"
    return {"escalated": escalated, "summary": summary}


def test_the_bodies_to_break_are_valid(real_bodies):
    assert problems(real_bodies["escalated"]) == []
    assert problems(real_bodies["summary"]) == []


def _mutations() -> list[tuple[str, str, Any]]:
    """Each way a body must fail: (which body, how to change it), named."""
    cases = [
        ("escalated", "extra-event-field", lambda b: b.update(event=b["id"])),  # old README
        ("escalated", "feature-not-a-number", lambda b: b["features"].update(temp_c="cold")),
        ("escalated", "feature-name-not-snake-case", lambda b: b["features"].update(Wind=1.0)),
        ("escalated", "newer-schema", lambda b: b.update(schema=MESSAGE_SCHEMA + 1)),
        ("escalated", "unknown-type", lambda b: b.update(type="alert")),
        ("escalated", "level-unknown", lambda b: b.update(level="amber")),
        ("escalated", "time-not-utc", lambda b: b.update(time="2026-01-11T02:00:00+01:00")),
        ("escalated", "eta-not-a-time", lambda b: b.update(eta="soon")),
        ("summary", "extra-site-field", lambda b: b.update(site="quay-two")),
        ("summary", "event-extra-delivery", lambda b: b["events"][0].update(delivery="x")),
        ("summary", "event-with-text", lambda b: b["events"][0].update(text="Fog WATCH")),
        ("summary", "no-events", lambda b: b.update(events=[])),
    ]
    for field in ALERT["required"]:
        cases.append(("escalated", f"missing-{field}", lambda b, f=field: b.pop(f)))
    for field in SUMMARY["required"]:
        cases.append(("summary", f"missing-{field}", lambda b, f=field: b.pop(f)))
    for field in SUMMARY["$defs"]["event"]["required"]:
        cases.append(
            ("summary", f"event-missing-{field}", lambda b, f=field: b["events"][0].pop(f))
        )
    return cases


MUTATIONS = _mutations()


def test_a_body_with_a_field_too_many_or_too_few_fails(real_bodies):
    accepted = []
    for which, name, change in MUTATIONS:
        body = copy.deepcopy(real_bodies[which])
        change(body)
        if not problems(body):
            accepted.append(f"{which}-{name}")
    assert accepted == []  # every broken body is refused


def test_the_schemas_name_the_standard_webhooks_headers():
    # the schemas document the headers a receiver sees; the old X-Fogwatch-* pair is gone
    for schema in (ALERT, SUMMARY):
        text = json.dumps(schema)
        assert "X-Fogwatch" not in text
        assert "`webhook-id` header" in schema["properties"]["delivery"]["description"]
        assert "webhook-signature" in schema["description"]
