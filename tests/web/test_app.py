"""The web app through a real waitress server on 127.0.0.1, over a real service night."""

from __future__ import annotations

import base64
import json
import time
import xml.etree.ElementTree as ET

import pytest
import requests
from prometheus_client.parser import text_string_to_metric_families

from notifier.core.errors import UsageError
from notifier.service.webapp import build_web
from tests.service import scene as sc
from tests.web.conftest import Served, later
from tests.webhook_reference import reference_headers

ATOM = "{http://www.w3.org/2005/Atom}"


def test_the_page_shows_every_site_with_its_level_and_is_phone_ready(night: Served):
    page = night.get("/")
    assert page.status_code == 200
    html = page.text
    assert '<meta name="viewport" content="width=device-width, initial-scale=1">' in html
    snaps = night.service.outbox.snapshots()
    for site in night.service.config.sites:
        level = snaps[site.id][1]
        assert f'id="site-{site.id}"' in html
        assert (
            f'data-level="{level}"' in html.split(f'id="site-{site.id}"')[1].split("</section>")[0]
        )
    assert snaps["zz-vale"][1] == "warning"  # the scene's foggy valley
    assert "<svg" in html and "<script" not in html and "http://" not in html.split("<svg")[0]
    assert "not an official forecast" in html
    # nothing from elsewhere: the page's policy forbids it
    assert "default-src 'none'" in page.headers["Content-Security-Policy"]


def test_a_site_page_explains_its_level(night: Served):
    page = night.get("/site/zz-vale")
    assert page.status_code == 200
    (hazard,) = [
        h for h in night.service.outbox.snapshots()["zz-vale"][2]["hazards"] if h["hazard"] == "fog"
    ]
    for reason in hazard["reasons"]:
        assert reason.replace("<", "&lt;").replace(">", "&gt;") in page.text
    assert night.get("/site/no-such-site").status_code == 404


def test_subscriber_addresses_never_appear(night: Served):
    outbox = night.service.outbox
    (row,) = [r for r in outbox.deliveries() if r.subscriber == "desk"][:1]
    address = "duty.desk@vale.example"
    outbox.mark([row.key], "failed", later(0), error=f"550 mailbox {address} unknown")
    try:
        page = night.get("/").text
        assert "550 mailbox [address] unknown" in page
        assert address not in page
    finally:
        outbox.mark([row.key], "sent", later(0))


def test_health_is_ok_when_fresh_and_503_with_reasons_when_a_source_stops(at_last: Served):
    ok = at_last.get("/health")
    assert ok.status_code == 200, ok.text
    assert ok.json()["status"] == "ok"
    at_last.clock[0] = later(45)  # no poll for 45 min: the source's window is 3 × 10 min
    bad = at_last.get("/health")
    assert bad.status_code == 503
    reasons = bad.json()["reasons"]
    assert any(r.startswith("source loggers: last success 45 min ago") for r in reasons)
    assert any(r.startswith("last cycle 45 min ago") for r in reasons)


def test_health_turns_503_when_a_delivery_is_given_up(at_last: Served):
    outbox = at_last.service.outbox
    row = outbox.deliveries(["sent"])[0]
    outbox.mark([row.key], "expired", later(0), error="gave up: still undelivered after 12 h")
    try:
        bad = at_last.get("/health")
        assert bad.status_code == 503
        assert "1 delivery(ies) given up in the last 24 h" in bad.json()["reasons"]
    finally:
        outbox.mark([row.key], "sent", later(0))


def test_metrics_parse_as_prometheus_text_and_match_the_store(night: Served):
    response = night.get("/metrics")
    assert response.headers["Content-Type"].startswith("text/plain; version=")
    # the reference parser of the Prometheus text format (prometheus_client.parser)
    samples = {
        (s.name, tuple(sorted(s.labels.items()))): s.value
        for family in text_string_to_metric_families(response.text)
        for s in family.samples
    }
    (health,) = night.service.store.source_health()
    assert (
        samples[("fogwatch_source_rows_taken_total", (("source", "loggers"),))] == health["rows_ok"]
    )
    assert samples[("fogwatch_source_rows_rejected_total", (("source", "loggers"),))] == 0
    assert samples[("fogwatch_source_last_success_age_seconds", (("source", "loggers"),))] == 0
    assert samples[("fogwatch_sites", (("level", "warning"),))] == 1
    backlog = night.service.outbox.backlog()
    assert samples[("fogwatch_deliveries", (("status", "sent"),))] == backlog["sent"]
    # three cycles ran in this process since the app was built
    assert samples[("fogwatch_cycle_duration_seconds_count", ())] == 3
    assert samples[("fogwatch_last_cycle_timestamp_seconds", ())] == night.clock[0].timestamp()


def test_the_cap_index_is_atom_and_each_message_validates(night: Served, cap_schema):
    feed = ET.fromstring(night.get("/cap.xml").content)
    assert feed.tag == f"{ATOM}feed"
    # docs/references.md [RFC 4287] 4.1.1: one id, title and updated, and an author
    for tag in ("id", "title", "updated", "author"):
        assert len(feed.findall(f"{ATOM}{tag}")) == 1, tag
    entries = feed.findall(f"{ATOM}entry")
    assert entries
    for entry in entries:
        for tag in ("id", "title", "updated"):  # RFC 4287 4.1.2
            assert len(entry.findall(f"{ATOM}{tag}")) == 1, tag
        link = entry.find(f"{ATOM}link").attrib
        assert link["type"] == "application/cap+xml"
        message = requests.get(link["href"], timeout=10)
        assert message.status_code == 200
        cap_schema.validate(message.text)  # the OASIS CAP 1.2 schema
    assert night.get("/cap/no-such-event.xml").status_code == 404


def test_the_cap_channel_wrote_a_valid_file_per_alert(night: Served, cap_schema):
    files = sorted((night.root / "out" / "cap").glob("*.xml"))
    kinds = set()
    for path in files:
        cap_schema.validate(str(path))  # the OASIS CAP 1.2 schema
        root = ET.parse(path).getroot()
        kinds.add(root.find("{urn:oasis:names:tc:emergency:cap:1.2}msgType").text)
    assert files and kinds == {"Alert"}  # the valley's fog warning and icing watch


def test_the_bot_answers_through_the_web_app_with_its_own_signature(night: Served):
    body = json.dumps({"sender": "op-ash", "text": "status", "id": "w1"}).encode()
    # signed by the Standard Webhooks reference library, as any client would
    headers = reference_headers(sc.BOT_SECRET, "web-msg-1", body, int(time.time()))
    headers["Content-Type"] = "application/json"
    ok = requests.post(night.url + "message", data=body, headers=headers, timeout=10)
    assert ok.status_code == 200
    assert "Lower Vale Orchard" in ok.json()["reply"]
    again = requests.post(night.url + "message", data=body, headers=headers, timeout=10)
    assert again.status_code == 409  # the bot's own replay memory
    unsigned = requests.post(night.url + "message", data=body, timeout=10)
    assert unsigned.status_code == 401


def test_a_token_guards_every_page_but_the_bot(night: Served, monkeypatch: pytest.MonkeyPatch):
    web = night.service.config.web
    assert web is None
    from notifier.core.config import WebSettings

    config = night.service.config.model_copy(update={"web": WebSettings(token="tok-41x")})
    monkeypatch.setattr(night.service.loaded, "config", config)
    server = build_web(night.service, "127.0.0.1", 0).start()
    try:
        assert requests.get(server.url + "health", timeout=10).status_code == 401
        bearer = {"Authorization": "Bearer tok-41x"}
        assert requests.get(server.url, headers=bearer, timeout=10).status_code == 200
        basic = base64.b64encode(b"anyone:tok-41x").decode()
        assert (
            requests.get(
                server.url + "metrics", headers={"Authorization": f"Basic {basic}"}, timeout=10
            ).status_code
            == 200
        )
        wrong = {"Authorization": "Bearer tok-41"}
        assert requests.get(server.url, headers=wrong, timeout=10).status_code == 401
    finally:
        server.close()


def test_serving_beyond_loopback_needs_a_token(night: Served):
    with pytest.raises(UsageError, match="needs web.token"):
        build_web(night.service, "0.0.0.0", 0)


def test_closing_does_not_wait_for_a_kept_alive_connection(night: Served):
    # regression: waitress's own close left open keep-alive connections serving until
    # their 30 s timeout, so `serve` and `run` hung on SIGTERM after a browser's visit
    server = build_web(night.service, "127.0.0.1", 0).start()
    with requests.Session() as browser:
        assert browser.get(server.url, timeout=10).status_code == 200
        started = time.monotonic()
        server.close()
        assert time.monotonic() - started < 3
        assert server._thread is not None and not server._thread.is_alive()
