"""``fogwatch check``: every problem in one report, hints for misspelt keys, defaults for
``${NAME:-default}``, and the shipped demo config passing with no variable set."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from notifier.cli.main import main
from notifier.core.config_hints import did_you_mean, keys_at
from notifier.core.yamlio import expand_env_all

ROOT = Path(__file__).resolve().parents[2]
SITE = "  - {id: x, name: X, lat: 1, lon: 1, timezone: UTC}\n"


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_a_missing_drop_folder_misspelt_keys_and_rule_errors_come_in_one_report(tmp_path, capsys):
    rules = tmp_path / "rules"
    rules.mkdir()
    (rules / "fog.yaml").write_text(
        "version: 1\nrules:\n  - id: r1\n    hazard: fog\n    level: watch\n    when:\n"
        "      - dew_point: {below: 1}\n"
    )
    cfg = tmp_path / "c.yaml"
    cfg.write_text(
        f"version: 1\nrules: [{rules}]\nsites:\n"
        "  - {id: x, name: X, lat: 1, lon: 1, timezone: UTC, elevaton_m: 4}\n"
        + SITE.replace("id: x", "id: y")
        + "sources:\n  - {id: d, type: filedrop, path: no-such-folder}\n"
        + "schedul: {}\n"
    )
    code, out, err = run(capsys, "check", str(cfg))
    assert code == 2 and out == ""
    assert err.splitlines() == [
        f"{cfg}:4: sites[0].elevaton_m: unknown key (did you mean 'elevation_m'?)",
        f"{cfg}:7: sources[0].path: drop folder {tmp_path / 'no-such-folder'} does not exist "
        "(create it, or fix the path)",
        f"{cfg}:8: schedul: unknown key (did you mean 'schedule'?)",
        f"{rules / 'fog.yaml'}:7: rule 'r1': unknown feature 'dew_point' — did you mean "
        "'dewpoint_c'?",
    ]


def test_an_existing_drop_folder_passes(tmp_path, capsys):
    (tmp_path / "drop").mkdir()
    cfg = tmp_path / "c.yaml"
    cfg.write_text(
        "version: 1\nsites:\n" + SITE + "sources:\n  - {id: d, type: filedrop, path: drop}\n"
    )
    code, out, _ = run(capsys, "check", str(cfg))
    assert code == 0 and out.startswith(f"ok: {cfg}: 1 site(s), 1 source(s)")


@pytest.mark.parametrize(
    ("loc", "hint"),
    [
        (("sites", 0, "elevaton_m"), "did you mean 'elevation_m'?"),
        (("schedul",), "did you mean 'schedule'?"),
        (("sources", 0, "filedrop", "glb"), "did you mean 'glob'?"),
        (("channels", 0, "webhook", "secrte"), "did you mean 'secret'?"),
        (("alerts", "stale_afer"), "did you mean 'stale_after'?"),
        (("sites", 0, "qqqqq"), ""),
    ],
    ids=["site", "top", "union-member", "channel", "nested", "nothing-close"],
)
def test_did_you_mean_names_the_close_key_of_that_place(loc, hint):
    assert did_you_mean(loc) == hint


def test_keys_at_a_union_member_are_that_members_own():
    # a file drop has a glob, an HTTP source has none
    assert "glob" in keys_at(("sources", 0, "filedrop", "x"))
    assert "glob" not in keys_at(("sources", 0, "http_json", "x"))


@pytest.mark.parametrize(
    ("text", "env", "expected"),
    [
        # POSIX shell, IEEE Std 1003.1 section 2.6.2: ${parameter:-word} uses word when
        # parameter is unset or null, else parameter's value
        ("${A:-x}", {}, ("x", [])),
        ("${A:-x}", {"A": ""}, ("x", [])),
        ("${A:-x}", {"A": "1"}, ("1", [])),
        ("${A:-}", {}, ("", [])),
        (
            "http://${H:-127.0.0.1}:${P:-80}/${Q}",
            {"P": "8080"},
            ("http://127.0.0.1:8080/${Q}", ["Q"]),
        ),
    ],
    ids=["unset", "empty", "set", "empty-default", "mixed"],
)
def test_a_default_stands_in_when_the_variable_is_unset_or_empty(text, env, expected):
    assert expand_env_all(text, env) == expected


def test_a_value_with_a_default_is_not_a_missing_variable(tmp_path, capsys, monkeypatch):
    monkeypatch.delenv("FW_CHECK_SECRET", raising=False)
    cfg = tmp_path / "c.yaml"
    cfg.write_text(
        "version: 1\nsites:\n" + SITE + "channels:\n"
        "  - {id: hook, type: webhook, url: 'https://${FW_CHECK_HOST:-hooks.invalid}/x',\n"
        "     secret: '${FW_CHECK_SECRET}'}\n"
    )
    code, _, err = run(capsys, "check", str(cfg))
    assert code == 2
    assert err.splitlines() == [
        f"fogwatch: {cfg}:6: channels[0].secret: environment variable FW_CHECK_SECRET is not set"
    ]


def test_the_demo_config_passes_check_with_no_variable_set(tmp_path):
    # a real process with an environment holding none of the demo's variables: a fresh clone
    env = {k: v for k, v in __import__("os").environ.items() if not k.startswith("FOGWATCH")}
    done = subprocess.run(
        [sys.executable, "-m", "notifier", "check", str(ROOT / "demo_sites.yaml")],
        capture_output=True,
        text=True,
        check=False,
        env=env,
        cwd=tmp_path,
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith(f"ok: {ROOT / 'demo_sites.yaml'}: 3 site(s), 1 source(s)")
    assert done.stderr == ""
