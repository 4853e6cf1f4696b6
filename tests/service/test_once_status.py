"""``fogwatch once`` and ``fogwatch status`` on a file-backed service."""

from __future__ import annotations

import socket
from datetime import timedelta

from notifier.cli.main import main
from tests.service.scene import CONFIG, FOG_FROM, Scene


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_once_then_status_shows_levels_sources_and_outbox(scene: Scene, capsys):
    at = FOG_FROM + timedelta(minutes=10)
    scene.feed(at)
    code, out, err = run(capsys, "once", str(scene.config_path), "--at", at.isoformat())
    assert code == 0, err
    assert out.startswith("2 site(s) assessed, 1 event(s), ")
    assert "sent 2, retrying 0, failed 0, expired 0" in out  # the fog warning, desk + crew
    later = (at + timedelta(minutes=30)).isoformat()
    code, out, err = run(capsys, "status", str(scene.config_path), "--at", later)
    assert code == 0, err
    lines = out.splitlines()
    assert lines[0] == "Sites"
    assert lines[1].split()[:2] == ["zz-vale", "WARNING"]
    assert "fog warning" in lines[1] and "assessed 23:10 GMT today" in lines[1]
    assert lines[1].endswith("newest reading 23:10 GMT today, 30 min old")
    assert lines[2].split()[:2] == ["zz-quay", "NONE"]
    assert any(line.startswith("loggers") and "filedrop" in line for line in lines)
    assert "Outbox: 2 sent" in out


def test_once_with_a_dead_source_exits_3_and_names_it(scene: Scene, capsys):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        dead = s.getsockname()[1]
    feed = (
        "  - id: far-feed\n    type: http_json\n"
        f"    url: http://127.0.0.1:{dead}/obs.json\n    retries: 0\n    connect_timeout: 0.5\n"
    )
    scene.config_path.write_text(CONFIG.replace("channels:\n", feed + "channels:\n", 1))
    at = FOG_FROM
    scene.feed(at)
    code, out, err = run(capsys, "once", str(scene.config_path), "--at", at.isoformat())
    assert code == 3, (out, err)
    assert "source far-feed:" in out and "cannot connect" in out
