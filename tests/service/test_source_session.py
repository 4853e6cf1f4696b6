"""One HTTP session per source set for the life of the service, closed on reload and stop
(issue 16, finding g: each poll opened a requests session that was never closed, and the
service's open file descriptors crept up)."""

from __future__ import annotations

from datetime import timedelta

from tests.conftest import LoopbackJson
from tests.service.scene import CONFIG, FOG_FROM, Scene


def with_feed(scene: Scene, loopback_json: LoopbackJson) -> None:
    loopback_json.json("/obs", [])
    feed = (
        "  - id: near-feed\n    type: http_json\n"
        f"    url: {loopback_json.url('/obs')}\n    retries: 0\n    sites: [zz-quay]\n"
    )
    scene.config_path.write_text(CONFIG.replace("channels:\n", feed + "channels:\n", 1))


def connections(loopback_json: LoopbackJson) -> int:
    return len({r.client for r in loopback_json.requests})


def test_polls_reuse_one_connection_and_a_reload_starts_a_fresh_one(
    scene: Scene, loopback_json: LoopbackJson
):
    with_feed(scene, loopback_json)
    service = scene.service()
    for minutes in range(5):
        polls = service.poll(FOG_FROM + timedelta(minutes=minutes), source_ids=["near-feed"])
        assert polls[0].ok, polls[0].error
    assert len(loopback_json.requests) == 5
    # HTTP/1.1 keep-alive (docs/references.md [RFC 9112] section 9.3): one session keeps
    # one connection open; a new session per poll would open five
    assert connections(loopback_json) == 1
    assert service.reload() == (True, "reloaded")
    service.poll(FOG_FROM + timedelta(minutes=6), source_ids=["near-feed"])
    assert connections(loopback_json) == 2  # the old session was closed with the old config


def test_stop_closes_the_session(scene: Scene, loopback_json: LoopbackJson):
    with_feed(scene, loopback_json)
    service = scene.service()
    service.poll(FOG_FROM, source_ids=["near-feed"])
    (feed,) = [s for s in service._built_sources() if s.id == "near-feed"]
    adapter = feed.session.get_adapter(loopback_json.url("/obs"))
    assert adapter.poolmanager.pools  # a pool with the open connection
    service.close()
    assert not adapter.poolmanager.pools  # Session.close() cleared every pool
