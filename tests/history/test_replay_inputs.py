"""What replay (and every command reading --data) does with input it cannot score: a
file that is not there, input whose every row is rejected, a range with no whole night."""

from __future__ import annotations

import pytest

from notifier.cli.main import main
from tests.history.scenes import TWO_FIELDS


@pytest.fixture
def cfg(tmp_path):
    path = tmp_path / "fogwatch.yaml"
    path.write_text(TWO_FIELDS)
    return path


def night_csv(path, hours: int = 30):
    """An invented, dull night at low-field: 10 °C falling slowly, hourly from 12:00Z."""
    lines = ["site,time,temp_c,dewpoint_c,wind_ms,cloud_pct,visibility_m"]
    for h in range(hours):
        day, hour = 1 + h // 24, h % 24
        lines.append(
            f"low-field,2026-10-{day:02d}T{hour:02d}:00:00Z,{10 - h / 10:.1f},4.0,3,80,20000"
        )
    path.write_text("\n".join(lines) + "\n")
    return path


REPLAY = ["--from", "2026-10-01T11:00Z", "--to", "2026-10-02T11:00Z"]


@pytest.mark.parametrize("command", ["replay", "assess", "explain"])
def test_a_missing_input_file_is_an_error_in_every_command(command, cfg, tmp_path, capsys):
    missing = tmp_path / "nonexistent.csv"
    argv = [command, str(cfg)]
    if command == "explain":
        argv.append("low-field")
    argv += ["--data", str(missing)]
    if command == "replay":
        argv += REPLAY
    code = main(argv)
    out, err = capsys.readouterr()
    assert code == 2
    assert f"{missing}: file not found" in err
    assert "correct quiet" not in out and "hits" not in out


def test_a_folder_given_as_input_is_an_error(cfg, tmp_path, capsys):
    code = main(["replay", str(cfg), "--data", str(tmp_path), *REPLAY])
    assert code == 2 and f"{tmp_path}: is a folder, not a file" in capsys.readouterr().err


def test_replay_fails_when_every_input_row_is_rejected(cfg, tmp_path, capsys):
    data = tmp_path / "bad.csv"
    # a site the config does not have, and a temperature out of physical range
    data.write_text(
        "site,time,temp_c,dewpoint_c\n"
        "elsewhere,2026-10-01T20:00:00Z,5,4\n"
        "low-field,2026-10-01T21:00:00Z,500,4\n"
    )
    code = main(["replay", str(cfg), "--data", str(data), *REPLAY])
    out, err = capsys.readouterr()
    assert code == 2 and out == ""
    assert f"{data}:2: site: unknown site 'elsewhere'" in err
    assert f"{data}:3: temp_c:" in err  # each rejected row named, nothing lost
    assert "every input row was rejected" in err


def test_a_range_with_no_whole_night_says_so_plainly(cfg, tmp_path, capsys):
    data = night_csv(tmp_path / "night.csv")
    # 13:00Z to 06:00Z: the site-night runs from local noon (11:00Z in BST) to local noon
    code = main(
        [
            "replay",
            str(cfg),
            "--data",
            str(data),
            "--from",
            "2026-10-01T13:00Z",
            "--to",
            "2026-10-02T06:00Z",
        ]
    )
    out, err = capsys.readouterr()
    assert code == 0, err
    assert "Nothing scored: no whole site-night lies between --from and --to" in out
    assert "correct quiet nights" not in out  # no table of zeros that reads as a result
    # the hint gives the local noons around the range: Europe/London is BST (UTC+1) on
    # 1 October 2026 (EU summer time ends on the last Sunday of October, 25 October)
    assert "--from 2026-10-01T11:00:00Z --to 2026-10-02T11:00:00Z" in err


def test_a_whole_night_is_scored(cfg, tmp_path, capsys):
    data = night_csv(tmp_path / "night.csv")
    code = main(["replay", str(cfg), "--data", str(data), *REPLAY])
    out, err = capsys.readouterr()
    assert code == 0, err
    assert "Nothing scored" not in out and "correct quiet nights" in out
