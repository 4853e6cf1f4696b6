"""Config loading: defaults, paths, ${ENV}, and each validator rejecting with file:line."""

from __future__ import annotations

import re
import textwrap
from pathlib import Path

import pytest

from notifier.core.config import default_rules_dir, parse_duration_s
from notifier.core.config_file import load_config
from notifier.core.errors import ConfigError

MINIMAL = """\
version: 1
sites:
  - id: low-meadow
    name: Low Meadow
    lat: 52.6
    lon: -2.5
    timezone: Europe/London
    exposure: valley
    use: farm
"""


def write(tmp_path: Path, text: str, name: str = "fogwatch.yaml") -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text))
    return path


def test_ten_line_config_works_with_defaults(tmp_path):
    config = load_config(write(tmp_path, MINIMAL))
    assert [s.id for s in config.sites] == ["low-meadow"]
    assert config.sources == ()
    assert config.rule_paths() == (default_rules_dir(),)
    assert config.store_url == f"sqlite:///{tmp_path / 'fogwatch.sqlite'}"
    assert config.alerts.clearing_time == 45 * 60


def test_relative_paths_resolve_against_the_config_folder(tmp_path):
    text = MINIMAL + textwrap.dedent("""\
        sources:
          - {id: drop, type: filedrop, path: incoming, site: low-meadow}
        channels:
          - {id: mailbox, type: folder, path: out/mail}
        store: {url: "sqlite:///state/fw.sqlite"}
        """)
    (tmp_path / "conf").mkdir()
    config = load_config(write(tmp_path / "conf", text))
    assert config.sources[0].path == tmp_path / "conf" / "incoming"
    assert config.channels[0].path == tmp_path / "conf" / "out" / "mail"
    assert config.store_url == f"sqlite:///{tmp_path / 'conf' / 'state' / 'fw.sqlite'}"


def test_env_secret_is_read_and_a_missing_one_is_located(tmp_path, monkeypatch):
    text = MINIMAL + textwrap.dedent("""\
        channels:
          - id: hook
            type: webhook
            url: http://127.0.0.1:9/hook
            secret: ${FW_TEST_SECRET}
        """)
    path = write(tmp_path, text)
    monkeypatch.setenv("FW_TEST_SECRET", "s3cret")
    assert load_config(path).channels[0].secret == "s3cret"
    monkeypatch.delenv("FW_TEST_SECRET")
    with pytest.raises(
        ConfigError,
        match=r"fogwatch\.yaml:14: channels\[0\]\.secret: "
        r"environment variable FW_TEST_SECRET is not set",
    ):
        load_config(path)


@pytest.mark.parametrize(
    ("old", "new", "pattern"),
    [
        (
            "timezone: Europe/London",
            "timezone: Mars/Olympus",
            r":7: sites\[0\]\.timezone: unknown time zone 'Mars/Olympus'",
        ),
        ("lat: 52.6", "lat: 95", r":5: sites\[0\]\.lat: Input should be less than or equal"),
        ("exposure: valley", "exposure: swamp", r":8: sites\[0\]\.exposure: Input should be"),
        ("use: farm", "use: farm\n    colour: red", r":10: sites\[0\]\.colour: unknown key"),
        ("version: 1", "version: 3", r":1: version: unsupported config version 3"),
        (
            "    use: farm\n",
            "    use: farm\n    onshore_from_deg: 200\n",
            r"onshore_from_deg and onshore_to_deg must be given together",
        ),
    ],
    ids=["timezone", "latitude", "exposure", "unknown-key", "version", "sector-pair"],
)
def test_site_validators_reject(tmp_path, old, new, pattern):
    assert old in MINIMAL
    with pytest.raises(ConfigError) as info:
        load_config(write(tmp_path, MINIMAL.replace(old, new, 1)))
    assert re.search(pattern, str(info.value)), str(info.value)


@pytest.mark.parametrize(
    ("extra", "pattern"),
    [
        (
            "subscribers:\n  - {id: ann, channel: pager}\n",
            r"subscribers\[0\]\.channel: unknown channel 'pager'",
        ),
        (
            "subscribers:\n  - {id: ann, channel: stdout, sites: [nowhere]}\n",
            r"subscribers\[0\]\.sites: unknown site 'nowhere'",
        ),
        (
            "subscribers:\n  - {id: ann, channel: stdout, sites: ['tag:none']}\n",
            r"no site has tag 'none'",
        ),
        (
            "subscribers:\n  - {id: ann, channel: stdout, quiet_hours: '25:00-06:00'}\n",
            r"quiet_hours must look like '22:00-06:30'",
        ),
        (
            "channels:\n  - {id: m, type: folder, path: out}\n"
            "subscribers:\n  - {id: ann, channel: m, address: not-an-address}\n",
            r"not an email address: 'not-an-address'",
        ),
        (
            "sources:\n  - {id: d, type: filedrop, path: x, stations: {ZZQA: elsewhere}}\n",
            r"sources\[0\]\.stations\.ZZQA: unknown site 'elsewhere'",
        ),
        (
            "sources:\n  - {id: d, type: filedrop, path: x, interval: 0}\n",
            r"interval must be positive, got: 0",
        ),
        (
            "subscribers:\n  - {id: bot-0123abcd4567, channel: stdout}\n",
            r"subscribers\[0\]\.id: ids starting 'bot-' are kept for the bot's followers",
        ),
        (
            "alerts:\n  claim_lease: 0s\n",
            r"claim_lease must be positive, got: 0",
        ),
        (
            "sources:\n  - {id: d, type: http_json, url: 'ftp://x'}\n",
            r"url must start with http:// or https://",
        ),
        ("sources:\n  - {id: d, type: carrier_pigeon}\n", r"sources\[0\]: Input tag"),
        ("schedule: {evaluate_every: soon}\n", r"expected a duration such as '10min'"),
        ("rules: [missing-folder]\n", r"rule path not found"),
        ("sites:\n  - {id: b, name: B, lat: 1, lon: 1, timezone: UTC}\n", r"duplicate key 'sites'"),
    ],
    ids=[
        "channel",
        "site-ref",
        "tag-ref",
        "quiet-hours",
        "address",
        "station",
        "interval",
        "bot-id",
        "claim-lease",
        "url",
        "source-type",
        "duration",
        "rule-path",
        "duplicate-key",
    ],
)
def test_cross_checks_reject(tmp_path, extra, pattern):
    with pytest.raises(ConfigError) as info:
        load_config(write(tmp_path, MINIMAL + extra))
    assert re.search(pattern, str(info.value)), str(info.value)
    assert all(p.line for p in info.value.problems), "every problem has a line"


def test_every_problem_reported_at_once(tmp_path):
    bad = MINIMAL.replace("lat: 52.6", "lat: 95").replace("exposure: valley", "exposure: x")
    with pytest.raises(ConfigError) as info:
        load_config(write(tmp_path, bad))
    assert len(info.value.problems) == 2


def test_duplicate_site_ids(tmp_path):
    text = MINIMAL + MINIMAL.split("sites:\n")[1]
    with pytest.raises(ConfigError, match=r"duplicate site id 'low-meadow'"):
        load_config(write(tmp_path, text))


@pytest.mark.parametrize(
    ("text", "seconds"),
    [("45min", 2700.0), ("2h", 7200.0), ("30 s", 30.0), (90, 90.0), ("1.5h", 5400.0)],
)
def test_durations(text, seconds):
    assert parse_duration_s(text) == seconds


@pytest.mark.parametrize("text", ["soon", "-5min", True, "10 parsecs"])
def test_bad_durations(text):
    with pytest.raises(ValueError, match="duration"):
        parse_duration_s(text)


def test_no_sites(tmp_path):
    with pytest.raises(ConfigError, match=r"fogwatch\.yaml:2: sites: at least one site"):
        load_config(write(tmp_path, "version: 1\nsites: []\n"))
    with pytest.raises(ConfigError, match=r"sites: Field required"):
        load_config(write(tmp_path, "version: 1\n"))


def test_a_bad_value_from_the_environment_is_not_echoed(tmp_path, monkeypatch):
    # the value may be a secret: the error names the place, not the value
    monkeypatch.setenv("FW_TEST_PORT", "hunter2-not-a-port")
    text = MINIMAL + textwrap.dedent("""\
        channels:
          - {id: m, type: email, host: 127.0.0.1, port: "${FW_TEST_PORT}", sender: a@b.test}
        """)
    with pytest.raises(ConfigError) as info:
        load_config(write(tmp_path, text))
    message = str(info.value)
    assert "channels[0].port" in message and "not shown" in message
    assert "hunter2" not in message
