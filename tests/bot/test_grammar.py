"""The bot's commands, from the shell (``fogwatch ask``) and through ``bot.handle`` over a
real ``ServiceBackend`` on a real file-backed service."""

from __future__ import annotations

from datetime import timedelta

import pytest

from notifier.bot.grammar import CAUTION, HELP, handle
from notifier.cli.main import main
from notifier.delivery.routing import Mute
from notifier.service.botbackend import ServiceBackend
from notifier.storage.botstate import Hush
from tests.service.scene import FOG_FROM, Scene, utc

AT = FOG_FROM + timedelta(minutes=10)  # 23:10 UTC: the valley is in fog


def ask(capsys: pytest.CaptureFixture[str], scene: Scene, sender: str, text: str) -> str:
    code = main(["ask", str(scene.config_path), text, "--as", sender, "--at", AT.isoformat()])
    out, err = capsys.readouterr()
    assert code == 0, err
    return out.strip()


@pytest.fixture
def assessed(scene: Scene, capsys: pytest.CaptureFixture[str]) -> Scene:
    """One ``fogwatch once`` cycle at 23:10 has stored each site's snapshot."""
    scene.feed(AT)
    code = main(["once", str(scene.config_path), "--at", AT.isoformat()])
    out, err = capsys.readouterr()
    assert code == 0, err
    assert "2 site(s) assessed" in out
    return scene


# -- from the shell -----------------------------------------------------------------------


def test_help_and_sites(assessed: Scene, capsys):
    assert ask(capsys, assessed, "op-ash", "help") == HELP
    assert ask(capsys, assessed, "op-ash", "HELP") == HELP
    sites = ask(capsys, assessed, "crew-bo", "sites")
    assert sites.splitlines() == [
        "Sites (* = you follow):",
        "* zz-vale: Lower Vale Orchard",
        "- zz-quay: North Quay Basin",
    ]


def test_status_of_one_site_and_of_all_ones_sites(assessed: Scene, capsys):
    one = ask(capsys, assessed, "guest-cy", "status zz-vale")
    assert one.startswith("Lower Vale Orchard: WARNING — fog warning (radiation)")
    assert "T 1.0 °C, dew point 0.9 °C" in one
    assert one.endswith("(newest reading 23:10 GMT today, 0 min old)\n" + CAUTION)
    assert one.endswith(CAUTION)
    # by name, any case, and by a unique part of the name
    assert ask(capsys, assessed, "guest-cy", "Status lower vale orchard") == one
    assert ask(capsys, assessed, "guest-cy", "status quay").startswith("North Quay Basin: NONE")

    mine = ask(capsys, assessed, "crew-bo", "status").splitlines()
    assert [line.split(":")[0] for line in mine[:-1]] == ["Lower Vale Orchard"]
    assert mine[-1] == CAUTION
    everything = ask(capsys, assessed, "op-ash", "status").splitlines()
    assert [line.split(":")[0] for line in everything[:2]] == [
        "Lower Vale Orchard",
        "North Quay Basin",
    ]
    assert ask(capsys, assessed, "guest-cy", "status") == (
        "You follow no sites. Say 'status SITE' or 'follow SITE'."
    )


def test_status_before_any_cycle_says_so(scene: Scene, capsys):
    assert ask(capsys, scene, "op-ash", "status zz-quay").splitlines()[0] == (
        "North Quay Basin: NONE — not assessed yet"
    )


def test_status_ages_the_stored_data_to_the_time_of_asking(assessed: Scene, capsys):
    code = main(
        ["ask", str(assessed.config_path), "status zz-vale", "--as", "op-ash",
         "--at", (AT + timedelta(minutes=25)).isoformat()]
    )  # fmt: skip
    out = capsys.readouterr().out
    assert code == 0
    assert "(newest reading 23:10 GMT today, 25 min old)" in out


def test_status_on_old_data_says_so_with_the_date_and_age(assessed: Scene, capsys):
    # asked 27 days after the last reading: the level is marked as judged on old data, the
    # reading dated, the age readable, and the mark past alerts.stale_after plain
    later = AT + timedelta(days=27, hours=5)
    code = main(["ask", str(assessed.config_path), "status zz-quay", "--as", "op-ash",
                 "--at", later.isoformat()])  # fmt: skip
    out = capsys.readouterr().out
    assert code == 0
    assert out.splitlines()[0] == (
        "North Quay Basin: NONE on old data — T 9.0 °C, dew point 3.0 °C "
        "(newest reading Fri 20 Nov 23:10 GMT, 27 days 5 h old: STALE)"
    )


def test_why_lists_the_reasons_with_the_caution(assessed: Scene, capsys):
    why = ask(capsys, assessed, "op-ash", "why vale").splitlines()
    assert why[0] == "Lower Vale Orchard: WARNING"
    assert any(line.startswith("- fog: dew-point depression 0.1 °C") for line in why)
    assert why[-1] == CAUTION
    assert 3 <= len(why) <= 10  # short: at most eight reasons
    quiet = ask(capsys, assessed, "op-ash", "why zz-quay").splitlines()
    assert quiet == ["North Quay Basin: NONE", "- no rule is firing", CAUTION]


def test_follow_from_warning_then_unfollow(assessed: Scene, capsys):
    assert ask(capsys, assessed, "guest-cy", "follow zz-quay from warning") == (
        "You will get North Quay Basin alerts from warning level up."
    )
    assert "* zz-quay" in ask(capsys, assessed, "guest-cy", "sites")
    assert ask(capsys, assessed, "guest-cy", "status").startswith("North Quay Basin: NONE")
    assert ask(capsys, assessed, "guest-cy", "unfollow quay") == (
        "You no longer get North Quay Basin alerts."
    )
    assert ask(capsys, assessed, "guest-cy", "unfollow quay") == (
        "You were not following North Quay Basin."
    )


def test_hush_and_unhush_for_oneself_in_the_sites_local_time(assessed: Scene, capsys):
    # 23:10 UTC on 20 Nov is 23:10 GMT; two hours on is 01:10 on the 21st
    assert ask(capsys, assessed, "crew-bo", "hush vale for 2h") == (
        "Lower Vale Orchard hushed for you until 01:10 GMT (21 Nov). Warnings then resume."
    )
    assert (
        ask(capsys, assessed, "crew-bo", "unhush vale") == "Lower Vale Orchard alerts are back on."
    )
    assert ask(capsys, assessed, "crew-bo", "unhush vale") == "Lower Vale Orchard was not hushed."
    assert "hushed for you" in ask(capsys, assessed, "crew-bo", "hush zz-vale for 90 min")


@pytest.mark.parametrize(
    ("text", "reply"),
    [
        ("hush vale for ever", "Say how long, e.g. 'hush SITE for 3h' or 'for 45min'."),
        ("hush vale for 15d", "A hush lasts between a minute and 14 days."),
        ("hush vale for 0min", "A hush lasts between a minute and 14 days."),
        ("hush vale", "Say how long, e.g. 'hush SITE for 3h' or 'for 45min'."),
        ("why", "Say which site, e.g. 'why zz-vale'. Say 'sites' for the list."),
        (
            "follow vale from sometimes",
            "Levels are 'watch' and 'warning', e.g. 'follow SITE from warning'.",
        ),
        ("status the moon", "I don't know a site 'the moon'. Say 'sites' for the list."),
        ("why atlantis", "I don't know a site 'atlantis'. Say 'sites' for the list."),
        ("follow atlantis", "I don't know a site 'atlantis'. Say 'sites' for the list."),
        ("hush atlantis for 1h", "I don't know a site 'atlantis'. Say 'sites' for the list."),
        ("dance", "I didn't understand that. Say 'help'."),
        ("   ", "Say 'help' to see what I understand."),
    ],
    ids=lambda v: v if len(v) < 30 else v[:30],
)  # fmt: skip
def test_unclear_requests_get_a_helpful_answer(assessed: Scene, capsys, text, reply):
    assert ask(capsys, assessed, "crew-bo", text) == reply


def test_an_ambiguous_part_of_a_name_is_not_guessed(assessed: Scene, capsys):
    # "o" is in both names: the bot must not pick one
    assert ask(capsys, assessed, "crew-bo", "status o").startswith("I don't know a site 'o'")


def test_hush_for_everyone_is_for_operators_only(assessed: Scene, capsys):
    assert ask(capsys, assessed, "crew-bo", "hush quay for 2h for everyone") == (
        "Only an operator can hush a site for everyone."
    )
    assert ask(capsys, assessed, "crew-bo", "unhush quay for everyone") == (
        "Only an operator can lift a hush for everyone."
    )
    assert "hushed for everyone until 01:10 GMT" in ask(
        capsys, assessed, "op-ash", "hush quay for 2h for everyone"
    )
    # a sender's own unhush does not lift the operator's hush for everyone
    assert ask(capsys, assessed, "crew-bo", "unhush quay") == "North Quay Basin was not hushed."
    assert ask(capsys, assessed, "op-ash", "unhush quay for everyone") == (
        "North Quay Basin alerts are back on."
    )


def test_unknown_senders_are_refused_until_they_join(assessed: Scene, capsys):
    refusal = "I don't know you yet. Ask an operator for a join code, then say 'join CODE'."
    for text in ("help", "sites", "status zz-vale", "follow zz-vale", "hush zz-vale for 1h"):
        assert ask(capsys, assessed, "walk-in-dee", text) == refusal
    assert ask(capsys, assessed, "walk-in-dee", "join NOPE-1") == (
        "That code is not valid. Ask your site operator for a current one."
    )
    assert ask(capsys, assessed, "walk-in-dee", "join vale-7") == (
        "That code is not valid. Ask your site operator for a current one."
    )  # codes are exact
    assert ask(capsys, assessed, "walk-in-dee", "help") == refusal
    assert ask(capsys, assessed, "walk-in-dee", "JOIN VALE-7") == (
        "Welcome. You now follow Lower Vale Orchard. Say 'help' to see what else I do."
    )
    assert ask(capsys, assessed, "walk-in-dee", "status").startswith("Lower Vale Orchard: WARNING")
    # joined is not operator
    assert ask(capsys, assessed, "walk-in-dee", "hush vale for 1h for everyone") == (
        "Only an operator can hush a site for everyone."
    )


def test_ask_needs_a_sender(scene: Scene, capsys):
    with pytest.raises(SystemExit) as info:
        main(["ask", str(scene.config_path), "help"])
    assert info.value.code == 2
    assert "--as" in capsys.readouterr().err


# -- through bot.handle on one service -----------------------------------------------------


def test_handle_over_a_service_backend_stores_follows_and_mutes(assessed: Scene):
    service = assessed.service()
    backend = ServiceBackend(service, AT)
    assert handle(backend, "guest-cy", "follow zz-vale", AT) == (
        "You will get Lower Vale Orchard alerts from watch level up."
    )
    assert handle(backend, "guest-cy", "follow zz-vale from warning", AT).endswith(
        "from warning level up."
    )
    assert service.bot_state.follows("guest-cy") == [("guest-cy", "zz-vale", "warning")]
    handle(backend, "op-ash", "hush zz-quay for 2h for everyone", AT)
    handle(backend, "crew-bo", "hush zz-vale for 30min", AT)
    assert service.bot_state.mutes(AT) == [
        Hush("crew-bo", "zz-vale", utc(2026, 11, 20, 23, 40), everyone=False),
        Hush("op-ash", "zz-quay", utc(2026, 11, 21, 1, 10), everyone=True),
    ]
    # the sender's mute covers the subscriber they speak for, the operator's covers all
    expanded = set(service.mutes(AT))
    assert Mute("crew", "zz-vale", utc(2026, 11, 20, 23, 40)) in expanded
    assert Mute(None, "zz-quay", utc(2026, 11, 21, 1, 10)) in expanded
    # and it lapses on its own
    assert service.bot_state.mutes(utc(2026, 11, 20, 23, 40)) == [
        Hush("op-ash", "zz-quay", utc(2026, 11, 21, 1, 10), everyone=True)
    ]


def test_a_follow_of_a_site_since_removed_from_the_config_is_skipped(assessed: Scene):
    service = assessed.service()
    service.bot_state.follow("guest-cy", "zz-gone", "watch", AT)
    service.bot_state.follow("guest-cy", "zz-quay", "watch", AT)
    reply = handle(ServiceBackend(service, AT), "guest-cy", "status", AT)
    assert reply.splitlines()[0].startswith("North Quay Basin: NONE")
    assert "zz-gone" not in handle(ServiceBackend(service, AT), "guest-cy", "sites", AT)


def test_an_unknown_bot_channel_is_a_located_config_error(scene: Scene, capsys):
    text = scene.config_path.read_text().replace("channel: botline", "channel: bot-line")
    scene.config_path.write_text(text, encoding="utf-8")
    assert main(["check", str(scene.config_path)]) == 2
    err = capsys.readouterr().err
    assert f"{scene.config_path}:" in err
    assert "bot.channel: unknown channel 'bot-line' (known: botline, duty, stdout)" in err
