"""What each sender may do through the bot (issue 16, defects 1, 6 and 7), from the shell
(``fogwatch ask``) and through ``handle`` on a real file-backed service."""

from __future__ import annotations

from datetime import timedelta

import pytest

from notifier.bot.grammar import BAD_SENDER, HUSH_BOUNDS, handle
from notifier.cli.main import main
from notifier.service.botbackend import ServiceBackend
from notifier.storage.botstate import Hush
from tests.service.scene import FOG_FROM, Scene

AT = FOG_FROM + timedelta(minutes=10)
UNKNOWN_QUAY = "I don't know a site 'zz-quay'. Say 'sites' for the list."


def ask(capsys: pytest.CaptureFixture[str], scene: Scene, sender: str, text: str) -> str:
    code = main(["ask", str(scene.config_path), text, "--as", sender, "--at", AT.isoformat()])
    out, err = capsys.readouterr()
    assert code == 0, err
    return out.strip()


def with_codes(scene: Scene) -> Scene:
    """The scene with the quay tagged "harbour" and a code for the tag and one for all."""
    text = scene.config_path.read_text(encoding="utf-8")
    text = text.replace("    use: port\n", "    use: port\n    tags: [harbour]\n")
    text = text.replace(
        "    VALE-7: zz-vale\n", "    VALE-7: zz-vale\n    HARBOUR-2: tag:harbour\n    ALL-9: all\n"
    )
    scene.config_path.write_text(text, encoding="utf-8")
    return scene


# -- defect 1: sender ids are plain identifiers; "everyone" is not one of them -------------


@pytest.mark.parametrize(
    "sender",
    ["walk-in-dee", "@ana:example.org", "+440000001", "ana.b_c=d/e", "A" * 255],
    ids=["plain", "matrix", "phone", "matrix-punctuation", "255-chars"],
)
def test_plain_sender_ids_are_accepted(scene: Scene, capsys, sender):
    # Matrix user ids such as @ana:example.org stay valid for a later Matrix bridge
    # (docs/references.md [Matrix identifiers]: localpart a-z 0-9 . _ = - /, 255 at most)
    assert ask(capsys, scene, sender, "join VALE-7").startswith("Welcome.")


@pytest.mark.parametrize(
    "sender",
    ["*", "ana*", "ana smith", "ana\tsmith", "ana\nhush", "ana\x00", "ané", "", "A" * 256],
    ids=["star", "star-inside", "space", "tab", "newline", "nul", "non-ascii", "empty", "256"],
)
def test_other_sender_ids_are_refused_before_anything_else(scene: Scene, sender):
    service = scene.service()
    backend = ServiceBackend(service, AT)
    assert BAD_SENDER == (
        "I can't take messages from that sender id: it may use letters, digits and "
        "@ : . _ = - / + only, 1 to 255 characters."
    )
    for text in ("join VALE-7", "hush zz-vale for 2h", "help"):
        assert handle(backend, sender, text, AT) == BAD_SENDER
    assert not service.bot_state.is_member(sender)
    assert service.bot_state.mutes(AT) == [] and service.bot_state.follows() == []


def test_a_star_sender_once_hushed_everyone(scene: Scene, capsys):
    """Regression: a sender "*" joined with a code; its plain hush was stored as the hush
    for everyone, and its plain unhush lifted an operator's hush for everyone."""
    assert ask(capsys, scene, "*", "join VALE-7") == BAD_SENDER
    assert ask(capsys, scene, "*", "hush zz-vale for 2h") == BAD_SENDER
    assert scene.service().mutes(AT) == []
    assert "hushed for everyone" in ask(capsys, scene, "op-ash", "hush vale for 2h for everyone")
    assert ask(capsys, scene, "*", "unhush vale") == BAD_SENDER
    assert len(scene.service().bot_state.mutes(AT)) == 1


def test_a_members_unhush_does_not_lift_an_operators_hush_for_everyone(scene: Scene, capsys):
    assert ask(capsys, scene, "walk-in-dee", "join VALE-7").startswith("Welcome.")
    assert "hushed for everyone" in ask(capsys, scene, "op-ash", "hush vale for 2h for everyone")
    assert "hushed for you" in ask(capsys, scene, "walk-in-dee", "hush vale for 1h")
    assert ask(capsys, scene, "walk-in-dee", "unhush vale") == (
        "Lower Vale Orchard alerts are back on."
    )  # their own
    assert ask(capsys, scene, "walk-in-dee", "unhush vale") == "Lower Vale Orchard was not hushed."
    (left,) = scene.service().bot_state.mutes(AT)
    assert (left.who, left.everyone) == ("op-ash", True)


def test_sender_ids_in_the_config_are_checked_with_file_and_line(scene: Scene, capsys):
    text = scene.config_path.read_text().replace("senders: [crew-bo]", "senders: ['*']")
    scene.config_path.write_text(text, encoding="utf-8")
    assert main(["check", str(scene.config_path)]) == 2
    err = capsys.readouterr().err
    line = text.splitlines().index("    senders: ['*']") + 1
    assert f"{scene.config_path}:{line}" in err
    assert "a sender id may use letters, digits and @ : . _ = - / + only" in err


# -- defect 6: a duration too long for a timedelta ------------------------------------------


@pytest.mark.parametrize(
    "text",
    [
        "hush vale for 99999999999999999999h",  # raised OverflowError: a 500 over HTTP
        "hush vale for " + "9" * 400 + "d",  # more than a float holds
        "hush vale for 15d",
        "hush vale for 337h",  # 14 days and an hour
        "hush vale for 59s",
    ],
    ids=["overflow", "beyond-float", "15d", "337h", "59s"],
)
def test_a_hush_beyond_the_bounds_gets_a_clear_reply(scene: Scene, capsys, text):
    assert HUSH_BOUNDS == "A hush lasts between a minute and 14 days."
    assert ask(capsys, scene, "crew-bo", text) == HUSH_BOUNDS
    assert scene.service().bot_state.mutes(AT) == []


def test_a_hush_of_exactly_14_days_is_taken(scene: Scene, capsys):
    assert "hushed for you" in ask(capsys, scene, "crew-bo", "hush vale for 336h")
    (hush,) = scene.service().bot_state.mutes(AT)
    assert hush == Hush("crew-bo", "zz-vale", AT + timedelta(days=14))


# -- defect 7: a join code grants what it names -------------------------------------------


def test_a_sites_code_grants_that_site_only(scene: Scene, capsys):
    """Regression: a member who joined with the valley's code could follow, ask about and
    hush every site."""
    assert ask(capsys, scene, "walk-in-dee", "join VALE-7") == (
        "Welcome. You now follow Lower Vale Orchard. Say 'help' to see what else I do."
    )
    for text in ("status zz-quay", "why zz-quay", "follow zz-quay", "hush zz-quay for 1h"):
        assert ask(capsys, scene, "walk-in-dee", text) == UNKNOWN_QUAY
    # by name or part of it, too; "o" now means the one site they may name
    assert ask(capsys, scene, "walk-in-dee", "status north quay").startswith("I don't know")
    assert ask(capsys, scene, "walk-in-dee", "status o").startswith("Lower Vale Orchard:")
    assert ask(capsys, scene, "walk-in-dee", "sites").splitlines() == [
        "Sites (* = you follow):",
        "* zz-vale: Lower Vale Orchard",
    ]
    assert ask(capsys, scene, "walk-in-dee", "why").startswith("Say which site, e.g. 'why zz-vale'")
    assert scene.service().bot_state.follows("walk-in-dee") == [("walk-in-dee", "zz-vale", "watch")]


def test_a_tag_code_and_an_all_code(scene: Scene, capsys):
    with_codes(scene)
    assert main(["check", str(scene.config_path)]) == 0
    capsys.readouterr()
    assert ask(capsys, scene, "@ana:example.org", "join HARBOUR-2") == (
        "Welcome. You may ask about North Quay Basin. Say 'follow SITE' to get a site's alerts."
    )
    assert ask(capsys, scene, "@ana:example.org", "follow quay").startswith("You will get North")
    assert ask(capsys, scene, "@ana:example.org", "status zz-vale") == (
        "I don't know a site 'zz-vale'. Say 'sites' for the list."
    )
    # a second code adds to the first
    assert ask(capsys, scene, "@ana:example.org", "join VALE-7").startswith("Welcome. You now")
    assert ask(capsys, scene, "@ana:example.org", "status zz-vale").startswith("Lower Vale")
    assert ask(capsys, scene, "+440000001", "join ALL-9") == (
        "Welcome. You may ask about Lower Vale Orchard, North Quay Basin. "
        "Say 'follow SITE' to get a site's alerts."
    )
    assert scene.service().bot_state.follows("+440000001") == []  # nothing followed unasked


def test_a_tag_grant_follows_the_tag_as_the_config_has_it_now(scene: Scene, capsys):
    with_codes(scene)
    assert ask(capsys, scene, "@ana:example.org", "join HARBOUR-2").startswith("Welcome.")
    assert ask(capsys, scene, "@ana:example.org", "follow quay").startswith("You will get")
    service = scene.service()
    assert any(s.name == "@ana:example.org" for s in service.subscribers())
    text = scene.config_path.read_text().replace("    tags: [harbour]\n", "")
    text = text.replace("    HARBOUR-2: tag:harbour\n", "")
    scene.config_path.write_text(text, encoding="utf-8")
    assert ask(capsys, scene, "@ana:example.org", "status quay") == (
        "I don't know a site 'quay'. Say 'sites' for the list."
    )
    # the stored follow stays, but is no longer routed
    later = scene.service()
    assert later.bot_state.follows("@ana:example.org") != []
    assert not any(s.name == "@ana:example.org" for s in later.subscribers())


def test_a_follow_outside_the_grant_made_by_older_versions_is_not_routed(scene: Scene, capsys):
    assert ask(capsys, scene, "walk-in-dee", "join VALE-7").startswith("Welcome.")
    service = scene.service()
    service.bot_state.follow("walk-in-dee", "zz-quay", "watch", AT)  # as older versions let
    routed = {s.sites for s in service.subscribers() if s.name == "walk-in-dee"}
    assert routed == {("zz-vale",)}
    assert "zz-quay" not in ask(capsys, scene, "walk-in-dee", "sites")


def test_operators_and_configured_senders_keep_every_site(scene: Scene, capsys):
    for sender in ("op-ash", "crew-bo", "guest-cy"):  # operator, subscriber's, allow-list
        assert ask(capsys, scene, sender, "status zz-quay").startswith("North Quay Basin")
    assert "hushed for everyone" in ask(capsys, scene, "op-ash", "hush quay for 1h for everyone")


def test_join_codes_must_name_a_known_site_tag_or_all(scene: Scene, capsys):
    text = scene.config_path.read_text().replace(
        "    VALE-7: zz-vale\n", "    VALE-7: zz-vale\n    BAD-1: tag:nowhere\n    BAD-2: zz-gone\n"
    )
    scene.config_path.write_text(text, encoding="utf-8")
    assert main(["check", str(scene.config_path)]) == 2
    err = capsys.readouterr().err
    assert "bot.join_codes.BAD-1: no site has tag 'nowhere'" in err
    assert "bot.join_codes.BAD-2: unknown site 'zz-gone'" in err
