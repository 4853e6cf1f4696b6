"""The bot on a real Matrix homeserver (Synapse on 127.0.0.1, tests/bot/matrix_server.py):
people talk to it from their own accounts, as they would from any Matrix app.

Each test registers its own bot, operator and member, so tests do not see each other's
rooms. The service is the file-backed scene of tests/service/scene.py, on its simulated
night; the bot answers at the scene's time. Every account, room and site is invented.
"""

from __future__ import annotations

import json
import logging
import os
import re
import signal
import subprocess
import sys
import time
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import datetime
from pathlib import Path
from typing import Any

import pytest
import requests

from notifier.bot.grammar import handle
from notifier.bot.matrix import ENCRYPTED_REFUSAL, MatrixLink
from notifier.service.botbackend import ServiceBackend
from notifier.service.cycle import Service
from notifier.service.matrixbot import build_matrix
from notifier.storage.matrixstate import MatrixState
from tests.bot.matrix_server import Client, Homeserver, MatrixUser
from tests.service.scene import CONFIG as SCENE_CONFIG
from tests.service.scene import Scene, utc

TOKEN_ENV = "FW_TEST_MATRIX_TOKEN"
SITES = SCENE_CONFIG[: SCENE_CONFIG.index("channels:")]  # version, the two sites, the drop


@pytest.fixture
def people(homeserver: Homeserver) -> dict[str, MatrixUser]:
    tag = uuid.uuid4().hex[:6]
    return {role: homeserver.register(f"{role}-{tag}") for role in ("fogbot", "operator", "member")}


def write_config(
    folder: Path,
    homeserver: Homeserver,
    people: dict[str, MatrixUser],
    invites: str = "accept",
    harbour_room: str | None = None,
    rooms: tuple[str, ...] = (),
    rate_per_minute: int = 20,
) -> Path:
    (folder / "drop").mkdir(exist_ok=True)
    harbour = ""
    if harbour_room:
        harbour = """\
  - id: harbour
    name: Harbour Office
    channel: harbour-room
    sites: [zz-vale]
"""
    text = f"""{SITES}channels:
  - id: duty
    type: text
    stdout: false
    file: out/duty.txt
  - id: chat
    type: matrix
  - id: harbour-room
    type: matrix
    room: "{harbour_room or "!unused:fog.test"}"
subscribers:
  - id: desk
    name: Duty Desk
    channel: duty
    operator: true
    senders: ["{people["operator"].user_id}"]
{harbour}bot:
  rate_per_minute: {rate_per_minute}
  join_codes:
    VALE-7: zz-vale
  channel: chat
matrix:
  homeserver: {homeserver.url}
  user_id: "{people["fogbot"].user_id}"
  access_token: ${{{TOKEN_ENV}}}
  invites: {invites}
  rooms: {json.dumps(list(rooms))}
"""
    path = folder / "fogwatch.yaml"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture
def make_scene(
    tmp_path: Path,
    homeserver: Homeserver,
    people: dict[str, MatrixUser],
    monkeypatch: pytest.MonkeyPatch,
) -> Iterator[Callable[..., Scene]]:
    monkeypatch.setenv(TOKEN_ENV, people["fogbot"].access_token)
    scenes: list[Scene] = []

    def make(**kwargs: Any) -> Scene:
        scene = Scene(tmp_path, write_config(tmp_path, homeserver, people, **kwargs))
        scenes.append(scene)
        return scene

    yield make
    for scene in scenes:
        for service in scene.services:
            service.close()


class Clock:
    """The scene's time, as the bot's answers see it."""

    def __init__(self, at: datetime):
        self.at = at

    def __call__(self) -> datetime:
        return self.at


def wait_until(check: Callable[[], Any], what: str, timeout_s: float = 30.0) -> Any:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        got = check()
        if got:
            return got
        time.sleep(0.1)
    raise AssertionError(f"timed out waiting for {what}")


@contextmanager
def bot_running(service: Service, clock: Clock) -> Iterator[MatrixLink]:
    link = build_matrix(service, clock=clock, sync_timeout_ms=2000)
    assert link is not None
    link.start()
    try:
        wait_until(lambda: link.state == "connected", "the bot to connect")
        yield link
    finally:
        link.stop()
    assert link.state == "stopped"


def joined(client: Client, room_id: str, user_id: str) -> bool:
    try:
        members = client.call("GET", f"/rooms/{room_id}/joined_members")["joined"]
    except requests.HTTPError:
        return False
    return user_id in members


def room_with_bot(client: Client, bot: MatrixUser, **extra: Any) -> str:
    room = client.create_room(invite=[bot.user_id], **extra)
    wait_until(lambda: joined(client, room, bot.user_id), "the bot to join the room")
    return room


def ask(client: Client, room: str, bot: MatrixUser, text: str) -> str:
    """Say ``text`` in the room and wait for the bot's answer to it."""
    before = len(client.replies_from(room, bot.user_id))
    client.say(room, text)
    got = client.wait_for_reply(room, bot.user_id, count=before + 1)
    assert len(got) == before + 1, f"no answer to {text!r}"
    return got[-1]


def invited_rooms(client: Client) -> list[str]:
    return list(client.call("GET", "/sync", timeout=0)["rooms"].get("invite", {}))


def test_a_member_joins_with_a_code_follows_asks_and_receives_the_alert(make_scene, people):
    scene = make_scene()
    service = scene.service()
    clock = Clock(utc(2026, 11, 20, 22, 40))
    scene.feed(utc(2026, 11, 20, 22, 30))
    service.cycle(utc(2026, 11, 20, 22, 30))
    bot, member = people["fogbot"], people["member"]
    phone = Client(service.config.matrix.homeserver, member)  # type: ignore[union-attr]
    with bot_running(service, clock):
        room = room_with_bot(phone, bot, is_direct=True)
        assert ask(phone, room, bot, "status").startswith("I don't know you yet")
        # the answer to a join code, as the HTTP endpoint gives it (bot/grammar.py)
        assert ask(phone, room, bot, "join VALE-7").startswith(
            "Welcome. You now follow Lower Vale Orchard"
        )
        follows = service.bot_state.follows(member.user_id)
        assert [(who, site) for who, site, _ in follows] == [(member.user_id, "zz-vale")]

        clock.at = utc(2026, 11, 20, 23, 0)
        scene.feed(clock.at)
        service.cycle(clock.at)  # the valley's fog warning is raised and delivered
        status = ask(phone, room, bot, "status vale")
        assert "Lower Vale Orchard" in status and "warning" in status.lower()
        why = ask(phone, room, bot, "why vale")
        # the same answer the HTTP endpoint gives (one grammar, one backend)
        assert why == handle(
            ServiceBackend(service, clock.at), member.user_id, "why vale", clock.at
        )
        assert "fog observed" in why  # the scene's FG report (tests/service/scene.py)

    # the alert reached the member in a direct room of their own with the bot
    dm = wait_until(lambda: invited_rooms(phone), "an invitation to a direct room")[0]
    phone.join(dm)
    alerts = phone.messages(dm)
    assert len(alerts) == 1
    content = alerts[0]["content"]
    assert "Fog warning · Lower Vale Orchard" in content["body"]
    assert "not an official forecast" in " ".join(content["body"].split())  # the caution
    assert content["format"] == "org.matrix.custom.html"
    assert "not an official" in content["formatted_body"]
    row = [r for r in service.outbox.deliveries() if r.channel == "chat"]
    assert [r.status for r in row] == ["sent"]


def test_an_operators_hush_for_everyone_silences_deliveries(make_scene, people):
    scene = make_scene()
    service = scene.service()
    clock = Clock(utc(2026, 11, 20, 22, 40))
    scene.feed(utc(2026, 11, 20, 22, 30))
    service.cycle(utc(2026, 11, 20, 22, 30))
    bot = people["fogbot"]
    url = service.config.matrix.homeserver  # type: ignore[union-attr]
    desk, phone = Client(url, people["operator"]), Client(url, people["member"])
    with bot_running(service, clock):
        room = room_with_bot(desk, bot)
        desk.call("POST", f"/rooms/{room}/invite", {"user_id": people["member"].user_id})
        phone.join(room)
        # a shared room: the member's chat is not for the bot, a command is
        assert ask(phone, room, bot, "join VALE-7").startswith("Welcome.")
        phone.say(room, "is anyone at the gate tonight?")
        refused = ask(phone, room, bot, "hush vale for 3h for everyone")
        assert refused == "Only an operator can hush a site for everyone."
        reply = ask(desk, room, bot, "hush vale for 3h for everyone")
        assert "for everyone" in reply
        for at in (utc(2026, 11, 20, 23, 0), utc(2026, 11, 20, 23, 30)):
            clock.at = at
            scene.feed(at)
            service.cycle(at)  # fog warning and icing watch raised, and hushed
        texts = desk.replies_from(room, bot.user_id)
    assert len(texts) == 3  # the member's two commands and the operator's; not the chat
    assert service.outbox.snapshots()["zz-vale"][1] == "warning"  # assessed, not sent
    assert not [r for r in service.outbox.deliveries() if r.status == "sent"]
    assert "Fog warning" not in scene.out("duty.txt")
    assert invited_rooms(phone) == []  # no direct room opened for an alert


class Killed(BaseException):
    """The dispatcher's process dies here (not an Exception: nothing may catch it)."""


class DiesAfterSend(requests.Session):
    """The homeserver has the message; the process dies before the outbox hears of it."""

    def request(self, method: str, url: str, *args: Any, **kwargs: Any) -> Any:  # type: ignore[override]
        response = super().request(method, url, *args, **kwargs)
        if method == "PUT" and "/send/m.room.message/" in url and response.ok:
            raise Killed
        return response


def test_an_alert_reaches_the_room_once_across_a_dispatcher_killed_mid_send(
    make_scene, people, homeserver
):
    bot = people["fogbot"]
    desk = homeserver.client(people["operator"])
    room = desk.create_room(invite=[bot.user_id])
    homeserver.client(bot).join(room)
    scene = make_scene(harbour_room=room)
    scene.feed(utc(2026, 11, 20, 23, 0))
    dying = Service(
        scene.config_path, channel_kwargs={"harbour-room": {"session": DiesAfterSend()}}
    )
    scene.services.append(dying)
    with pytest.raises(Killed):
        dying.cycle(utc(2026, 11, 20, 23, 0))
    dying.close()
    [row] = [r for r in scene.service().outbox.deliveries() if r.channel == "harbour-room"]
    assert row.status == "pending"  # sent, but the outbox never heard
    assert len(desk.replies_from(room, bot.user_id)) == 1

    restarted = scene.service()
    restarted.deliver(utc(2026, 11, 20, 23, 1))  # the retry: same key, same transaction id
    [row] = [r for r in restarted.outbox.deliveries() if r.channel == "harbour-room"]
    assert row.status == "sent"
    # the room's timeline: the homeserver took the retried transaction as the first one
    # (PUT /send/{txnId} is idempotent per access token: docs/references.md
    # [Matrix client-server API])
    posted = desk.replies_from(room, bot.user_id)
    assert len(posted) == 1 and "Fog warning · Lower Vale Orchard" in posted[0]


def test_a_command_sent_while_the_bot_was_down_is_answered_once(make_scene, people):
    scene = make_scene()
    service = scene.service()
    clock = Clock(utc(2026, 11, 20, 22, 40))
    bot, member = people["fogbot"], people["member"]
    phone = Client(service.config.matrix.homeserver, member)  # type: ignore[union-attr]
    with bot_running(service, clock):
        room = room_with_bot(phone, bot, is_direct=True)
    phone.say(room, "join VALE-7")  # while fogwatch is down
    with bot_running(service, clock):
        got = phone.wait_for_reply(room, bot.user_id)
        assert len(got) == 1 and got[0].startswith("Welcome.")
        time.sleep(0.5)  # more syncs: still one answer
    with bot_running(service, clock):  # and after another restart
        phone.say(room, "sites")
        got = phone.wait_for_reply(room, bot.user_id, count=2)
    assert len(got) == 2 and got[0].startswith("Welcome.") and "Lower Vale" in got[1]


def test_an_encrypted_room_is_refused_with_a_message(make_scene, people):
    service = make_scene().service()
    bot = people["fogbot"]
    phone = Client(service.config.matrix.homeserver, people["member"])  # type: ignore[union-attr]
    with bot_running(service, Clock(utc(2026, 11, 20, 22, 40))):
        room = phone.create_room(invite=[bot.user_id], encrypted=True)
        got = phone.wait_for_reply(room, bot.user_id)
        assert got == [ENCRYPTED_REFUSAL]
        wait_until(lambda: not joined(phone, room, bot.user_id), "the bot to leave")


def test_only_listed_rooms_are_joined_unless_invites_accept(make_scene, people, homeserver):
    bot = people["fogbot"]
    desk = homeserver.client(people["operator"])
    alias = f"crew-{uuid.uuid4().hex[:6]}"
    listed = desk.create_room(room_alias_name=alias)  # private: the bot must be invited
    service = make_scene(invites="listed", rooms=(f"#{alias}:fog.test",)).service()
    phone = Client(service.config.matrix.homeserver, people["member"])  # type: ignore[union-attr]
    with bot_running(service, Clock(utc(2026, 11, 20, 22, 40))):
        desk.call("POST", f"/rooms/{listed}/invite", {"user_id": bot.user_id})
        wait_until(lambda: joined(desk, listed, bot.user_id), "the bot to join the listed room")
        room = phone.create_room(invite=[bot.user_id])

        def declined() -> bool:
            state = phone.call("GET", f"/rooms/{room}/state/m.room.member/{bot.user_id}")
            return state["membership"] == "leave"

        wait_until(declined, "the bot to decline the invitation")


def test_a_refused_token_is_logged_and_shown_by_status(make_scene, monkeypatch, caplog, capsys):
    monkeypatch.setenv(TOKEN_ENV, "syt_not_a_token_of_this_server_0000")
    scene = make_scene()
    service = scene.service()
    link = build_matrix(service, sync_timeout_ms=1000)
    assert link is not None
    with caplog.at_level(logging.ERROR, logger="notifier.bot.matrix"):
        link.start()
        try:
            wait_until(lambda: link.state == "token refused", "the token to be refused")
        finally:
            link.stop()
    assert "refused the access token" in caplog.text and "M_UNKNOWN_TOKEN" in caplog.text
    assert "syt_not_a_token" not in caplog.text  # secrets stay out of the log
    from notifier.cli.main import main

    assert main(["status", "--json", str(scene.config_path)]) == 0
    shown = json.loads(capsys.readouterr().out)["matrix"]
    assert shown["state"] == "stopped"
    assert "M_UNKNOWN_TOKEN" in shown["last_error"]
    assert main(["status", str(scene.config_path)]) == 0
    text = capsys.readouterr().out
    bot = service.config.matrix.user_id  # type: ignore[union-attr]
    assert f"Matrix {bot}: stopped; last sync never" in text
    assert re.search(r"\n  last error .+: homeserver error: M_UNKNOWN_TOKEN", text), text


def test_fogwatch_run_answers_on_matrix_beside_the_scheduler_and_stops_on_sigterm(
    make_scene, people, capsys
):
    from notifier.cli.main import main

    scene = make_scene()
    bot = people["fogbot"]
    url = scene.service().config.matrix.homeserver  # type: ignore[union-attr]
    phone = Client(url, people["member"])
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    err_path = scene.root / "stderr.txt"
    with open(err_path, "w", encoding="utf-8") as err_file:
        proc = subprocess.Popen(
            [sys.executable, "-m", "notifier", "run", str(scene.config_path)],
            stdout=subprocess.DEVNULL,
            stderr=err_file,
            env=env,
            cwd=scene.root,
        )
        try:
            room = room_with_bot(phone, bot, is_direct=True)
            assert ask(phone, room, bot, "help").startswith("I don't know you yet")

            def shown() -> dict[str, Any]:  # what `fogwatch status --json` says
                assert main(["status", "--json", str(scene.config_path)]) == 0
                return dict(json.loads(capsys.readouterr().out)["matrix"])

            assert shown()["state"] == "connected"
            proc.send_signal(signal.SIGTERM)
            assert proc.wait(timeout=60) == 0
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
    assert shown()["state"] == "stopped"
    log = err_path.read_text(encoding="utf-8")
    assert "matrix: connected" in log
    assert people["fogbot"].access_token not in log  # the token never reaches the log


def test_past_the_senders_rate_the_bot_stays_quiet(make_scene, people):
    service = make_scene(rate_per_minute=2).service()
    bot = people["fogbot"]
    phone = Client(service.config.matrix.homeserver, people["member"])  # type: ignore[union-attr]
    memory = MatrixState(service.store, bot.user_id)
    with bot_running(service, Clock(utc(2026, 11, 20, 22, 40))):
        room = room_with_bot(phone, bot, is_direct=True)
        said = [phone.say(room, "help") for _ in range(3)]
        wait_until(lambda: memory.handled(said[-1]), "the third message to be taken")
    assert len(phone.replies_from(room, bot.user_id)) == 2  # bot.rate_per_minute
