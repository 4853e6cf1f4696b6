"""Alias bombs and huge files are refused in well under a second, with file:line
(issue 16, defect 5). The bomb is the well-known "billion laughs" shape: each anchor a
list of nine aliases to the one before (common practice in parser hardening tests)."""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from notifier.cli.main import main
from notifier.core.errors import ConfigError
from notifier.core.yamlio import MAX_FILE_BYTES, load_yaml
from notifier.engine.rule_files import load_rule_set

SITE = (
    "sites:\n  - {id: zz-vale, name: Lower Vale Orchard, lat: 52.41, lon: -2.37, timezone: UTC}\n"
)


def bomb(levels: int = 9, key: str = "sites") -> str:
    lines = ["version: 1", 'a0: &a0 ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]']
    for n in range(1, levels):
        lines.append(f"a{n}: &a{n} [" + ", ".join([f"*a{n - 1}"] * 9) + "]")
    lines.append(f"{key}: *a{levels - 1}")
    return "\n".join(lines) + "\n"


def test_a_nine_level_alias_bomb_in_the_config_is_refused_at_once(tmp_path: Path, capsys):
    config = tmp_path / "fogwatch.yaml"
    config.write_text(bomb())
    started = time.monotonic()
    code = main(["check", str(config)])
    elapsed = time.monotonic() - started
    _, err = capsys.readouterr()
    assert code == 2
    assert elapsed < 1.0
    # the last line holds the alias that would expand the whole bomb
    assert f"{config}:11: aliases expand the document by " in err
    assert "alias bomb" in err


def test_an_alias_bomb_in_a_rule_file_is_refused_with_its_line(tmp_path: Path):
    rules = tmp_path / "rules"
    rules.mkdir()
    (rules / "bomb.yaml").write_text(bomb(key="rules"))
    started = time.monotonic()
    with pytest.raises(ConfigError, match=r"bomb\.yaml:11: aliases expand the document by"):
        load_rule_set([rules])
    assert time.monotonic() - started < 1.0


def test_an_alias_loop_is_refused(tmp_path: Path):
    path = tmp_path / "loop.yaml"
    path.write_text("version: 1\nsites: &s\n  - *s\n")
    with pytest.raises(ConfigError, match=r"loop\.yaml:3: an alias refers to the node"):
        load_yaml(path)


def test_a_shared_block_reused_a_few_times_still_loads(tmp_path: Path):
    path = tmp_path / "ok.yaml"
    path.write_text(
        "defaults: &d {timezone: UTC, exposure: open, use: farm}\n"
        "sites:\n  - {<<: *d, id: zz-a}\n  - {<<: *d, id: zz-b}\n  - {<<: *d, id: zz-c}\n"
    )
    data = load_yaml(path)
    assert [s["id"] for s in data["sites"]] == ["zz-a", "zz-b", "zz-c"]
    assert data["sites"][2]["timezone"] == "UTC"
    assert data["sites"][1].key_lines["id"] == 4


def test_a_very_large_file_is_refused_unread(tmp_path: Path):
    path = tmp_path / "huge.yaml"
    with path.open("w") as handle:
        handle.write(SITE)
        handle.write("# padding\n" * (MAX_FILE_BYTES // 10 + 1))
    started = time.monotonic()
    with pytest.raises(ConfigError, match=r"huge\.yaml: file of [\d,]+ bytes is over the"):
        load_yaml(path)
    assert time.monotonic() - started < 1.0
