"""The ``matrix:`` section and the ``type: matrix`` channel: loaded, checked with
file:line, secrets kept out of the file and out of messages. Every id is invented; the
id shapes are the Matrix specification's (docs/references.md [Matrix identifiers])."""

from __future__ import annotations

import re

import pytest

from notifier.core.config_file import load_config, read_config
from notifier.core.errors import ConfigError
from tests.core.test_config import MINIMAL, write

TOKEN = "syt_aW52ZW50ZWQ_tokenvalue0123456789"
SECTION = """\
matrix:
  homeserver: https://matrix.example.test/
  user_id: "@fogbot:example.test"
  access_token: ${FW_TEST_MATRIX_TOKEN}
  rooms: ["#orchard-crew:example.test", "!Q7aHpD3kL9:example.test"]
"""


@pytest.fixture(autouse=True)
def token(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("FW_TEST_MATRIX_TOKEN", TOKEN)


def test_the_section_loads_and_a_matrix_channel_takes_the_bots_account(tmp_path):
    config = load_config(
        write(
            tmp_path,
            MINIMAL
            + SECTION
            + "channels:\n  - {id: crew-room, type: matrix, room: '!Q7aHpD3kL9'}\n"
            + "subscribers:\n  - {id: crew, channel: crew-room}\n"
            + "  - {id: ana, channel: crew-room, address: '@ana:example.test'}\n",
        )
    )
    assert config.matrix is not None
    assert config.matrix.homeserver == "https://matrix.example.test"  # no trailing slash
    assert config.matrix.invites == "listed"  # invitations to listed rooms only, by default
    channel = config.channel("crew-room")
    assert (channel.homeserver, channel.access_token) == ("https://matrix.example.test", TOKEN)
    assert channel.room == "!Q7aHpD3kL9"  # a room id of room version 12 has no server part


@pytest.mark.parametrize(
    "extra, pattern",
    [
        (
            SECTION.replace('"@fogbot:example.test"', "fogbot"),
            r":\d+: matrix\.user_id: .*expected a Matrix user id such as @fogbot:example\.org",
        ),
        (
            SECTION.replace("https://matrix.example.test/", "matrix.example.test"),
            r":\d+: matrix\.homeserver: homeserver must be a URL",
        ),
        (
            SECTION.replace('"#orchard-crew:example.test"', "orchard-crew"),
            r":\d+: matrix\.rooms.*expected a room id \(!id or !id:server\) or alias",
        ),
        (
            SECTION + "  invites: everyone\n",
            r":\d+: matrix\.invites: .*'listed' or 'accept'",
        ),
        (
            "channels:\n  - {id: crew-room, type: matrix, room: '!Q7aHpD3kL9:example.test'}\n",
            r":\d+: channels\[0\].*needs homeserver and access_token, here or in the top-level",
        ),
        (
            SECTION + "channels:\n  - {id: crew-room, type: matrix}\n"
            "subscribers:\n  - {id: crew, channel: crew-room}\n",
            r":\d+: subscribers\[0\]\.address: channel crew-room has no room",
        ),
        (
            SECTION + "channels:\n  - {id: crew-room, type: matrix}\n"
            "subscribers:\n  - {id: crew, channel: crew-room, address: crew@example.test}\n",
            r":\d+: subscribers\[0\]\.address: not a Matrix room id, alias or user id",
        ),
        (
            SECTION.replace("user_id:", "user:"),
            r":\d+: matrix\.user: unknown key \(did you mean 'user_id'\?\)",
        ),
    ],
    ids=["user-id", "homeserver", "room", "invites", "no-account", "no-room", "address", "typo"],
)
def test_bad_matrix_settings_are_located(tmp_path, extra, pattern):
    with pytest.raises(ConfigError) as info:
        load_config(write(tmp_path, MINIMAL + extra))
    assert re.search(pattern, str(info.value)), str(info.value)
    assert all(p.line for p in info.value.problems), "every problem has a line"
    assert TOKEN not in str(info.value)


def test_a_token_written_in_the_file_is_a_warning_and_never_echoed(tmp_path):
    path = write(tmp_path, MINIMAL + SECTION.replace("${FW_TEST_MATRIX_TOKEN}", TOKEN))
    config, warnings = read_config(path)
    assert config.matrix is not None
    assert len(warnings) == 1
    assert re.search(
        r":\d+: matrix\.access_token: an access_token is written in the file; .*"
        r'write access_token: "\$\{FOGWATCH_MATRIX_ACCESS_TOKEN\}"',
        str(warnings[0]),
    ), str(warnings[0])
    assert TOKEN not in str(warnings[0])


def test_the_schema_describes_the_section_and_the_channel():
    from notifier.core.config_schema import config_schema

    schema = config_schema()
    assert "matrix" in schema["properties"]
    text = str(schema)
    assert "MatrixSettings" in text and "MatrixChannel" in text and "'accept'" in text
