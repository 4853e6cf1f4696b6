"""Text (stdout / appended file) and folder (.eml written atomically) channels."""

from __future__ import annotations

import email
import io
import os
from email import policy

import pytest

from notifier.core.config import FolderChannel, TextChannel
from notifier.core.errors import PermanentDeliveryError, TransientDeliveryError
from notifier.delivery.channels import (
    STDOUT,
    FolderWriter,
    TextWriter,
    build_channel,
    channel_config_for,
)
from notifier.delivery.messages import render
from notifier.storage.deliveries import Delivery
from tests.delivery.conftest import WEBHOOK_SECRET
from tests.delivery.scenes import RULES, config_with, event, site, utc

PNG = b"\x89PNG\r\n\x1a\n" + b"\x01" * 32
CLOCK = lambda: utc(2026, 1, 10, 20, 2)  # noqa: E731


def delivery(address: str | None = "field-lead@example.test") -> Delivery:
    return Delivery(event_id="ev1", subscriber_id="field-lead", channel_id="box", address=address)


def message(level: str = "watch"):
    return render(event("raised", level), site("north-field", use="farm"), RULES)


def test_text_to_stdout_and_file(tmp_path):
    out = io.StringIO()
    path = tmp_path / "log" / "alerts.txt"
    channel = build_channel(TextChannel(id="log", type="text", stdout=True, file=path), stream=out)
    with channel:
        channel.send(message(), delivery(), "fw-text-1", None)
        channel.send(message("warning"), delivery(), "fw-text-2", None)
    written = path.read_text(encoding="utf-8")
    assert written == out.getvalue()
    assert written.count("Fog watch · North Field") == 1
    assert written.count("Fog warning · North Field") == 1
    assert "[fw-text-1]" in written and "[fw-text-2]" in written


def test_text_file_only(tmp_path, capsys):
    path = tmp_path / "alerts.txt"
    TextWriter(TextChannel(id="log", type="text", stdout=False, file=path)).send(
        message(), delivery(), "fw-quiet", None
    )
    assert capsys.readouterr().out == ""
    assert "not an official" in path.read_text(encoding="utf-8")


def test_text_to_a_closed_stream_is_transient():
    out = io.StringIO()
    out.close()
    with pytest.raises(TransientDeliveryError, match="stdout"):
        TextWriter(STDOUT, stream=out).send(message(), delivery(), "fw-x", None)


def test_text_into_a_directory_is_permanent(tmp_path):
    channel = TextWriter(TextChannel(id="log", type="text", stdout=False, file=tmp_path))
    with pytest.raises(PermanentDeliveryError, match="cannot append"):
        channel.send(message(), delivery(), "fw-x", None)


def test_stdout_channel_needs_no_config():
    config = config_with([])
    assert channel_config_for(config, "stdout") == STDOUT
    with pytest.raises(KeyError):
        channel_config_for(config, "nowhere")


def test_folder_writes_eml_atomically_and_a_resend_overwrites(tmp_path):
    box = tmp_path / "outbox"
    writer = build_channel(FolderChannel(id="box", type="folder", path=box), clock=CLOCK)
    assert isinstance(writer, FolderWriter)
    with writer:
        writer.send(message(), delivery(), "fw-eml-1", PNG)
        writer.send(message("warning"), delivery(), "fw-eml-1", PNG)  # a resend
        writer.send(message(), delivery(), "fw-eml-2", None)
    assert sorted(os.listdir(box)) == ["fw-eml-1.eml", "fw-eml-2.eml"]  # no temp files
    msg = email.message_from_bytes((box / "fw-eml-1.eml").read_bytes(), policy=policy.default)
    assert msg["Subject"].startswith("Fog warning")  # the resend replaced the first
    assert msg["Message-ID"] == "<fw-eml-1@localhost.localdomain>"
    assert msg["To"] == "field-lead@example.test"
    assert msg["Date"] == "Sat, 10 Jan 2026 20:02:00 +0000"
    assert msg.get_content_type() == "multipart/mixed"
    (chart,) = list(msg.iter_attachments())
    assert chart.get_content() == PNG


def test_folder_failed_write_leaves_nothing_behind(tmp_path, monkeypatch):
    box = tmp_path / "outbox"
    writer = FolderWriter(FolderChannel(id="box", type="folder", path=box))

    def no_space(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", no_space)
    with pytest.raises(TransientDeliveryError, match="No space left"):
        writer.send(message(), delivery(), "fw-full", None)
    assert os.listdir(box) == []


def test_folder_path_that_is_a_file_is_permanent(tmp_path):
    blocker = tmp_path / "outbox"
    blocker.write_text("not a folder")
    writer = FolderWriter(FolderChannel(id="box", type="folder", path=blocker))
    with pytest.raises(PermanentDeliveryError, match="cannot write"):
        writer.send(message(), delivery(), "fw-blocked", None)


def test_build_channel_refuses_unknown_config():
    with pytest.raises(TypeError, match="not a channel config"):
        build_channel(object())


def test_public_api_of_channels():
    import notifier.delivery.channels as channels
    from notifier.core.config import EmailChannel, MatrixChannel, WebhookChannel
    from notifier.delivery.channels.base import Channel

    assert sorted(channels.__all__) == sorted(
        [
            "STDOUT",
            "BaseChannel",
            "CapWriter",
            "Channel",
            "EmailSender",
            "FolderWriter",
            "MatrixSender",
            "RetryLater",
            "TextWriter",
            "WebhookSender",
            "build_channel",
            "channel_config_for",
        ]
    )
    for name in channels.__all__:
        assert hasattr(channels, name), name
    configs = [
        STDOUT,
        FolderChannel(id="box", type="folder", path="/tmp/none"),
        EmailChannel(
            id="mail", type="email", host="mail.example.test", sender="alerts@example.test"
        ),
        WebhookChannel(
            id="hook", type="webhook", url="http://hooks.example.test/x", secret=WEBHOOK_SECRET
        ),
        MatrixChannel(
            id="room",
            type="matrix",
            homeserver="http://matrix.example.test",
            access_token="invented-token",
            room="!quay:example.test",
        ),
    ]
    for cfg in configs:
        channel = build_channel(cfg)
        assert isinstance(channel, Channel) and channel.id == cfg.id
        channel.close()


def test_folder_flushes_the_file_and_then_its_folder(tmp_path, monkeypatch):
    # regression (issue 16, defect 8): the .eml was renamed into place without an fsync
    # of the folder. Flushing a file does not flush the directory entry naming it; an
    # fsync of the directory is needed too (POSIX fsync(2), from memory; common practice).
    import stat

    box = tmp_path / "outbox"
    writer = FolderWriter(FolderChannel(id="box", type="folder", path=box))
    synced: list[tuple[str, bool]] = []
    real_fsync = os.fsync

    def spy(fd: int) -> None:
        mode = os.fstat(fd).st_mode
        synced.append(("dir" if stat.S_ISDIR(mode) else "file", (box / "fw-sync.eml").exists()))
        real_fsync(fd)

    monkeypatch.setattr(os, "fsync", spy)
    writer.send(message(), delivery(), "fw-sync", None)
    # the file is flushed before the rename, the folder after it
    assert synced == [("file", False), ("dir", True)]
