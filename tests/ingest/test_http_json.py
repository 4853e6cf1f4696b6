"""HTTP JSON feeds against a real loopback server: the happy paths, retries, and what a
real server does wrong (stalls, a body cut off short of its Content-Length, too big a
body, not JSON); `responses` only for faults a local server cannot easily make (a connect
timeout, a reset, TLS)."""

from __future__ import annotations

import json
import socket
import time
from collections.abc import Callable, Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest
import requests
import responses

from notifier.core.config import Config, HttpJsonSource
from notifier.core.errors import SourceUnavailable
from notifier.ingest.http_json import HttpJsonFeed, fetch_json, records_at, safe_url
from tests.conftest import LoopbackJson

DATA = Path(__file__).resolve().parent.parent / "data" / "ingest"
NOW = datetime(2024, 1, 12, 7, 0, tzinfo=UTC)
FEED = json.loads((DATA / "quay_feed.json").read_text())
FIELDS: dict[str, Any] = {
    "time": "at",
    "temp_c": {"key": "air.t_f", "unit": "degF"},
    "dewpoint_f": "air.td_f",
    "wind_ms": {"key": "wind.kt", "unit": "knot"},
}


@pytest.fixture
def session() -> Iterator[requests.Session]:
    with requests.Session() as s:
        yield s


@pytest.fixture
def feed(make_config: Callable[..., Config], session: requests.Session):
    def build(**source: Any) -> HttpJsonFeed:
        spec = {"id": "feed", "type": "http_json", "retries": 0, "backoff": 0, **source}
        config = make_config(sources=[spec])
        http = config.sources[0]
        assert isinstance(http, HttpJsonSource)
        return HttpJsonFeed(http, sites={s.id: s for s in config.sites}, session=session)

    return build


@pytest.fixture
def mocked() -> Iterator[responses.RequestsMock]:
    with responses.RequestsMock(assert_all_requests_are_fired=False) as rsps:
        yield rsps


# -- a real server on 127.0.0.1 ------------------------------------------------------------


def test_per_site_template_nested_records_and_feed_units(feed, loopback_json: LoopbackJson):
    loopback_json.json("/obs/zz-quay", FEED)
    loopback_json.json("/obs/zz-vale", {"data": {"readings": FEED["data"]["readings"][:1]}})
    source = feed(url=loopback_json.url("/obs/{site}?lat={lat}&lon={lon}"),
                  records="data.readings", fields=FIELDS)  # fmt: skip
    result = source.poll(NOW)
    assert result.ok, result.error
    assert result.rejections == []
    quay = result.frame[result.frame["site"] == "zz-quay"].reset_index(drop=True)
    assert len(quay) == 3 and (result.frame["site"] == "zz-vale").sum() == 1
    assert quay.loc[0, "temp_c"] == pytest.approx((35.6 - 32) * 5 / 9)
    assert quay.loc[0, "dewpoint_c"] == pytest.approx((35.1 - 32) * 5 / 9)
    assert quay.loc[0, "wind_ms"] == pytest.approx(2 * 1852 / 3600)
    assert set(result.frame["kind"]) == {"obs"}
    paths = sorted(r.path for r in loopback_json.requests)
    assert paths == ["/obs/zz-quay?lat=53.02&lon=-3.11", "/obs/zz-vale?lat=52.41&lon=-2.37"]


def test_one_url_for_many_sites_with_a_site_key_and_forecast_rows(
    feed, loopback_json: LoopbackJson
):
    doc = {
        "points": [
            {"where": {"id": "zz-vale"}, "valid": "2024-01-12T18:00:00Z", "t": 1.0, "rh": 96},
            {"where": {"id": "zz-quay"}, "valid": "2024-01-12T18:00:00Z", "t": 3.0, "rh": 88},
            {"where": {"id": "zz-elsewhere"}, "valid": "2024-01-12T18:00:00Z", "t": 3, "rh": 8},
        ]
    }
    loopback_json.json("/forecast", doc)
    fields = {"time": "valid", "temp_c": "t", "rh_pct": "rh"}
    source = feed(url=loopback_json.url("/forecast"), kind="forecast", records="points",
                  site_key="where.id", fields=fields)  # fmt: skip
    result = source.poll(NOW)
    assert result.ok
    assert sorted(result.frame["site"]) == ["zz-quay", "zz-vale"]
    assert set(result.frame["kind"]) == {"forecast"}, "forecast rows may lie ahead of now"
    assert [(r.line, r.column) for r in result.rejections] == [(3, "site")]


def test_headers_carry_secrets_from_the_environment(feed, loopback_json, monkeypatch):
    monkeypatch.setenv("ZZ_FEED_TOKEN", "not-a-real-token")
    loopback_json.json("/obs", [])
    source = feed(
        url=loopback_json.url("/obs"), headers={"Authorization": "Bearer ${ZZ_FEED_TOKEN}"}
    )
    source.poll(NOW)
    assert loopback_json.requests[0].headers["authorization"] == "Bearer not-a-real-token"
    assert loopback_json.requests[0].headers["user-agent"].startswith("fogwatch/")


def test_server_errors_are_retried_then_succeed(feed, loopback_json: LoopbackJson):
    ok = [{"site": "zz-vale", "time": "2024-01-12T06:00:00Z", "temp_c": 1.0, "rh_pct": 97}]
    loopback_json.sequence("/obs", [(500, {}), (503, {}), (200, ok)])
    result = feed(url=loopback_json.url("/obs"), retries=3).poll(NOW)
    assert result.ok, result.error
    assert len(result.frame) == 1
    assert len(loopback_json.requests) == 3


def test_persistent_server_errors_fail_the_poll_with_the_status(feed, loopback_json):
    loopback_json.json("/obs", {"error": "down"}, status=500)
    result = feed(url=loopback_json.url("/obs"), retries=2).poll(NOW)
    assert not result.ok
    assert (
        result.error
        == f"{loopback_json.url('/obs')}: HTTP 500 Internal Server Error after 2 retries"
    )
    assert len(loopback_json.requests) == 3


def test_a_client_error_is_not_retried(feed, loopback_json: LoopbackJson):
    result = feed(url=loopback_json.url("/missing"), retries=3).poll(NOW)
    assert result.error == f"{loopback_json.url('/missing')}: HTTP 404 Not Found"
    assert len(loopback_json.requests) == 1


def test_a_refused_connection_is_a_clear_reason(feed):
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]  # closed again when the block ends: nothing listens
    result = feed(url=f"http://127.0.0.1:{port}/obs", connect_timeout=2).poll(NOW)
    assert not result.ok
    assert (
        result.error
        == f"http://127.0.0.1:{port}/obs: cannot connect: [Errno 111] Connection refused"
    )


# -- what a real server does wrong: a stall, a body cut off, too much, not JSON ---------------

OK_ROWS = [{"site": "zz-vale", "time": "2024-01-12T06:00:00Z", "temp_c": 1.0, "rh_pct": 97}]


def never_answering(loopback_json: LoopbackJson):
    """The first request gets no status line at all; later ones get rows."""
    answers = iter(["hang"])

    def responder(_req):
        if next(answers, "ok") == "hang":
            loopback_json.stall()  # until the test is over: only a read timeout ends it
        return 200, {"Content-Type": "application/json"}, json.dumps(OK_ROWS).encode()

    return responder


def stalling_body(loopback_json: LoopbackJson):
    """A status line, headers and half the body, then nothing."""

    def responder(_req):
        def body():
            yield b'[{"site": "zz-vale", '
            loopback_json.stall()

        return 200, {"Content-Type": "application/json", "Content-Length": "200"}, body()

    return responder


STALLS = {"no-answer": never_answering, "body-stalls": stalling_body}


def test_fetch_json_reports_an_answer_that_never_comes_as_the_read_timeout(
    session, loopback_json: LoopbackJson
):
    loopback_json.respond("/obs", never_answering(loopback_json))
    started = time.monotonic()
    with pytest.raises(SourceUnavailable, match=r"^no answer within the 0\.5 s read timeout$"):
        fetch_json(session, loopback_json.url("/obs"), headers={}, timeout=(5, 0.5), max_bytes=1000)
    assert time.monotonic() - started < 30  # the timeout ended it, not the stall's limit


@pytest.mark.parametrize("stall", STALLS)
def test_a_stalled_server_fails_the_poll_and_the_next_poll_goes_on(
    feed, loopback_json: LoopbackJson, stall
):
    loopback_json.respond("/obs", STALLS[stall](loopback_json))
    source = feed(url=loopback_json.url("/obs"), read_timeout=0.5)
    started = time.monotonic()
    first = source.poll(NOW)
    assert time.monotonic() - started < 30
    assert not first.ok and first.frame.empty
    assert first.error.endswith("no answer within the 0.5 s read timeout")
    if stall == "no-answer":
        assert source.poll(NOW).ok  # the next poll goes on


@pytest.mark.parametrize("stall", STALLS)
def test_a_stalled_server_is_reported_as_the_read_timeout(feed, loopback_json: LoopbackJson, stall):
    # regression (issue 16): through the feed's retry adapter a read timeout (and, with any
    # session, a body stalling mid-way) reached fetch_json as requests.ConnectionError, so
    # the poll said "cannot connect: HTTPConnectionPool(host=..., port=...): Read timed out."
    loopback_json.respond("/obs", STALLS[stall](loopback_json))
    result = feed(url=loopback_json.url("/obs"), read_timeout=0.5).poll(NOW)
    assert result.error == f"{loopback_json.url('/obs')}: no answer within the 0.5 s read timeout"
    assert "Pool" not in result.error


def test_a_body_cut_off_short_of_its_content_length_is_reported(
    session, loopback_json: LoopbackJson
):
    # the server promises 900 bytes, sends 19 and hangs up
    cut = b'[{"site": "zz-vale"'
    loopback_json.respond("/obs", lambda _req: (200, {"Content-Length": "900"}, cut))
    with pytest.raises(SourceUnavailable, match=r"response cut off or garbled: Connection broken: "
                       r"IncompleteRead\(19 bytes read, 881 more expected\)"):  # fmt: skip
        fetch_json(
            session, loopback_json.url("/obs"), headers={}, timeout=(5, 15), max_bytes=10_000
        )


def test_a_declared_oversize_body_is_refused_before_reading(session, loopback_json):
    # the headers say 5000001 bytes; the server sends a little and hangs up
    loopback_json.respond("/obs", lambda _req: (200, {"Content-Length": "5000001"}, b"[]"))
    with pytest.raises(SourceUnavailable, match="response of 5000001 bytes is over the "
                       "5000000-byte limit"):  # fmt: skip
        fetch_json(
            session, loopback_json.url("/obs"), headers={}, timeout=(5, 15), max_bytes=5_000_000
        )


def test_an_undeclared_oversize_body_is_cut_while_streaming(feed, loopback_json: LoopbackJson):
    written = []

    def responder(_req):
        def body():  # no Content-Length: the body runs until the server hangs up
            yield b"["
            for _ in range(1000):  # 64 MB, far past any socket buffer, if all were read
                written.append(1)
                yield b" " * 65536
            yield b"]"

        return 200, {"Content-Type": "application/json"}, body()

    loopback_json.respond("/obs", responder)
    result = feed(url=loopback_json.url("/obs"), max_bytes=100_000).poll(NOW)
    assert result.error == f"{loopback_json.url('/obs')}: response is over the 100000-byte limit"
    assert len(written) < 1000  # the client stopped reading; the server could not finish


def test_a_redirect_loop_is_a_clear_reason(feed, loopback_json: LoopbackJson):
    loopback_json.respond("/obs", lambda _req: (302, {"Location": "/obs"}, b""))
    result = feed(url=loopback_json.url("/obs")).poll(NOW)
    assert result.error == (
        f"{loopback_json.url('/obs')}: request failed: TooManyRedirects: Exceeded 30 redirects."
    )


@pytest.mark.parametrize(
    ("body", "expected"),
    [
        (b"<html>maintenance</html>", "not valid JSON: Expecting value (line 1, column 1)"),
        (b'{"data": [1, 2', "not valid JSON: Expecting ',' delimiter (line 1, column 15)"),
        (b"", "empty response (expected JSON)"),
        (b"\xff\xfe\x00{", "not valid JSON: Expecting value (line 1, column 1)"),
    ],
    ids=["html", "truncated-json", "empty", "bad-encoding"],
)
def test_bad_json_fails_the_poll_with_the_parsers_reason(feed, loopback_json, body, expected):
    loopback_json.respond("/obs", lambda _req: (200, {"Content-Type": "application/json"}, body))
    result = feed(url=loopback_json.url("/obs")).poll(NOW)
    assert not result.ok
    assert result.error == f"{loopback_json.url('/obs')}: {expected}"


@pytest.mark.parametrize(
    ("doc", "options", "expected"),
    [
        ({"meta": {}, "rows": []}, {"records": "data.readings"},
         "schema mismatch: no records at 'data.readings' in the response ('data' is not among the "
         "keys there: meta, rows)"),
        ({"data": {"readings": {"at": 1}}}, {"records": "data.readings"},
         "schema mismatch: expected a list of records at 'data.readings', got dict"),
        (FEED, {"records": "data.readings", "fields": {**FIELDS, "temp_c": "air.t"}},
         "schema mismatch: no record has temp_c (key 'air.t') (3 records)"),
        ([{"site": "zz-vale", "temp_c": 1, "rh_pct": 90}], {},
         "schema mismatch: no time column"),
    ],
    ids=["records-path", "records-not-a-list", "field-key", "required-column"],
)  # fmt: skip
def test_a_schema_mismatch_fails_the_poll_with_what_was_expected(
    feed, loopback_json, doc, options, expected
):
    loopback_json.json("/obs", doc)
    result = feed(url=loopback_json.url("/obs"), **options).poll(NOW)
    assert not result.ok
    assert result.error == f"{loopback_json.url('/obs')}: {expected}"
    assert result.frame.empty


def test_secrets_in_the_query_string_stay_out_of_messages(feed, loopback_json: LoopbackJson):
    loopback_json.json("/obs", {"error": "upstream"}, status=502)
    result = feed(url=loopback_json.url("/obs?key=not-a-real-key")).poll(NOW)
    assert result.error == f"{loopback_json.url('/obs')}?key=***: HTTP 502 Bad Gateway"
    assert loopback_json.requests[0].path == "/obs?key=not-a-real-key"
    assert safe_url("https://u:pw@feed.invalid:8443/a/b?x=1") == "https://feed.invalid:8443/a/b?x=1"


def test_an_error_says_which_site_the_request_was_for_but_not_the_key(
    feed, loopback_json: LoopbackJson
):
    # regression (issue 16): with points?site={site} every error read ".../points?…"
    loopback_json.json("/points", {"error": "upstream"}, status=502)
    url = loopback_json.url("/points?site={site}&api_key=not-a-real-key-0123456789")
    result = feed(url=url, sites=["zz-quay"]).poll(NOW)
    assert result.error == (
        f"{loopback_json.url('/points')}?site=zz-quay&api_key=***: HTTP 502 Bad Gateway"
    )
    assert "not-a-real-key" not in result.error


# -- faults a local server cannot easily make: injected with `responses` ------------------------

URL = "http://feed.invalid/obs"


@pytest.mark.parametrize(
    ("body", "expected"),
    [
        (requests.exceptions.ConnectTimeout("slow"), "no connection within 5 s to http://feed.invalid/obs"),
        (requests.exceptions.ConnectionError("reset"), "cannot connect: reset"),
        (requests.exceptions.SSLError("bad cert"), "TLS failed: bad cert"),
    ],
    ids=["connect-timeout", "connection-reset", "tls"],
)  # fmt: skip
def test_request_errors_become_source_unavailable(mocked, session, body, expected):
    mocked.add(responses.GET, URL, body=body)
    with pytest.raises(SourceUnavailable) as caught:
        fetch_json(session, URL, headers={}, timeout=(5, 15), max_bytes=1000)
    assert str(caught.value) == expected
    assert isinstance(caught.value.__cause__, requests.exceptions.RequestException)
    assert caught.value.exit_code == 3


def test_field_map_problems_are_reported_on_every_poll(feed):
    bad_unit = feed(url=URL, fields={"temp_c": {"key": "t", "unit": "furlong"}})
    assert bad_unit.poll(NOW).error.startswith(
        "fields.temp_c: unit 'furlong' does not convert to degC"
    )
    unknown = feed(url=URL, fields={"temperature": "t"})
    assert unknown.poll(NOW).error == (
        "fields: unknown column 'temperature' (expected a canonical column name)"
    )


def test_records_path_indexes_lists():
    assert records_at({"a": [{"b": [1, 2]}]}, "a.0.b") == [1, 2]
    assert records_at([3], "") == [3]
