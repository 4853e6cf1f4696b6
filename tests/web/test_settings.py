"""The ``web:`` section and the CAP channel in a config file, the JSON log lines, and the
server-drawn chart."""

from __future__ import annotations

import io
import json
import logging
import re
import textwrap
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from notifier.core.config import CapChannel, is_loopback_host
from notifier.core.config_file import load_config, read_config
from notifier.core.errors import ConfigError
from notifier.core.logs import JSONFormatter, setup_logging
from notifier.web.svgchart import chart_svg

SITE = """\
version: 1
sites:
  - id: low-meadow
    name: Low Meadow
    lat: 52.6
    lon: -2.5
    timezone: Europe/London
"""


def write(tmp_path: Path, extra: str) -> Path:
    path = tmp_path / "fogwatch.yaml"
    path.write_text(SITE + textwrap.dedent(extra), encoding="utf-8")
    return path


def test_a_web_section_beyond_loopback_needs_a_token(tmp_path: Path):
    with pytest.raises(ConfigError) as info:
        load_config(write(tmp_path, "web:\n  host: 0.0.0.0\n"))
    assert re.search(r"fogwatch\.yaml:\d+: .*not loopback: a token is needed", str(info.value))
    config = load_config(write(tmp_path, "web:\n  host: 127.0.0.1\n  port: 8751\n"))
    assert config.web is not None and config.web.port == 8751


def test_a_token_written_in_the_file_is_a_warning(tmp_path: Path):
    _, warnings = read_config(write(tmp_path, "web:\n  host: 0.0.0.0\n  token: abc123\n"))
    assert any("FOGWATCH_WEB_TOKEN" in str(w) and "abc123" not in str(w) for w in warnings)


def test_a_cap_channel_path_resolves_against_the_config(tmp_path: Path):
    config = load_config(
        write(tmp_path, "channels:\n  - id: feed\n    type: cap\n    path: cap-out\n")
    )
    (channel,) = config.channels
    assert isinstance(channel, CapChannel) and channel.path == (tmp_path / "cap-out").resolve()


@pytest.mark.parametrize(
    "host,loopback",
    [
        ("127.0.0.1", True),
        ("127.8.0.2", True),
        ("::1", True),
        ("[::1]", True),
        ("localhost", True),
        ("0.0.0.0", False),
        ("192.0.2.7", False),
        ("fog.example", False),
    ],
)
def test_loopback_hosts(host: str, loopback: bool):
    # docs/references.md [RFC 1122] (127.0.0.0/8), [RFC 4291] (::1): the loopback addresses
    assert is_loopback_host(host) is loopback


def test_json_log_lines_are_one_object_each():
    stream = io.StringIO()
    root = logging.getLogger()
    saved = root.handlers[:], root.level
    root.handlers.clear()
    try:
        setup_logging(1, stream, json_lines=True)
        logging.getLogger("notifier.web").info("web app on %s", "http://127.0.0.1:8750/")
        try:
            raise RuntimeError("boom\nsecond line")
        except RuntimeError:
            logging.getLogger("notifier.web").exception("failed")
    finally:
        root.handlers[:], level = saved
        root.setLevel(level)
    lines = stream.getvalue().splitlines()
    assert len(lines) == 2
    first, second = (json.loads(line) for line in lines)
    assert first["message"] == "web app on http://127.0.0.1:8750/"
    assert (first["level"], first["logger"]) == ("INFO", "notifier.web")
    assert re.fullmatch(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}Z", first["time"])
    assert "RuntimeError: boom" in second["exc"]
    assert isinstance(JSONFormatter().format(logging.makeLogRecord({"msg": "x"})), str)


def test_the_chart_breaks_its_line_where_readings_stop():
    end = datetime(2026, 11, 20, 23, 0, tzinfo=UTC)
    times = np.array([(end - timedelta(hours=h)).timestamp() for h in (20, 19, 18, 2, 1, 0)])
    temps = np.array([8.0, 7.0, 6.0, 3.0, np.nan, 2.0])
    svg = chart_svg(times, {"temp_c": temps}, end, "Europe/London", "Low <Meadow>")
    # a 16 h silence and a NaN each end a run: three runs of air temperature
    assert svg.count('stroke="#c0392b" points=') == 3
    assert "<title>Low &lt;Meadow&gt;</title>" in svg
    assert "no visibility in the last 24 h" in svg
    assert "<script" not in svg and "href" not in svg
