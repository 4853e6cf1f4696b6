"""The command line: exit codes and messages of each path, and the README's coverage."""

from __future__ import annotations

import base64
import json
import re
import subprocess
import sys
from datetime import UTC, datetime
from pathlib import Path

import pytest

from notifier.cli.main import build_parser, main
from notifier.core.signing import sign_headers
from notifier.demo.play import demo_observations
from notifier.service.loading import load
from tests.webhook_reference import reference_accepts

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo_sites.yaml"


# a Standard Webhooks secret: whsec_ + base64 of 28 invented bytes
TEST_SECRET = "whsec_dGVzdCBrZXkgZm9yIHRoZSBjb21tYW5kIGxpbmU="


@pytest.fixture(autouse=True)
def demo_secrets(monkeypatch):
    # the demo config reads its (demo-only) secrets from the environment, as real ones do
    monkeypatch.setenv("FOGWATCH_DEMO_WEBHOOK_SECRET", TEST_SECRET)
    monkeypatch.setenv("FOGWATCH_DEMO_BOT_SECRET", TEST_SECRET)


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_help_is_fast_because_heavy_libraries_load_lazily():
    # measured as "which modules were imported", not as a timing
    code = (
        "import sys, notifier.cli.main as c; c.build_parser().format_help(); "
        "print(sorted(m for m in ('pandas', 'matplotlib', 'pint', 'sqlalchemy', "
        "'requests', 'scipy') if m in sys.modules))"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout
    assert out.strip() == "[]"


def test_python_dash_m_works():
    out = subprocess.run(
        [sys.executable, "-m", "notifier", "--help"], capture_output=True, text=True, check=True
    ).stdout
    assert "exit codes:" in out and "not an official forecast" in out


def test_no_command_is_usage_error(capsys):
    assert main([]) == 2


def test_bad_usage_exits_2_with_hint(capsys):
    with pytest.raises(SystemExit) as info:
        main(["assess"])
    assert info.value.code == 2
    assert "try 'fogwatch" in capsys.readouterr().err


def test_check_ok_on_demo(capsys):
    code, out, _ = run(capsys, "check", str(DEMO))
    assert code == 0
    assert re.match(r"ok: .*demo_sites\.yaml: 3 site\(s\), \d+ source\(s\), \d+ rule\(s\)", out)


def test_check_bad_config_exit_2_with_location(tmp_path, capsys):
    bad = tmp_path / "bad.yaml"
    bad.write_text(
        "version: 1\nsites:\n  - id: x\n    name: X\n    lat: 200\n    lon: 0\n    timezone: UTC\n"
    )
    code, _, err = run(capsys, "check", str(bad))
    assert code == 2
    assert re.search(r"bad\.yaml:5: sites\[0\]\.lat: Input should be less than", err)


SITE = "version: 1\nsites:\n  - {id: x, name: X, lat: 1, lon: 1, timezone: UTC}\n"


def test_check_reports_every_missing_variable_and_the_other_problems(tmp_path, capsys, monkeypatch):
    for name in ("FW_CLI_A", "FW_CLI_B", "FW_CLI_C"):
        monkeypatch.delenv(name, raising=False)
    cfg = tmp_path / "c.yaml"
    cfg.write_text(
        SITE
        + "channels:\n"
        + '  - {id: hook, type: webhook, url: "https://${FW_CLI_A}/${FW_CLI_B}",\n'
        + '     secret: "${FW_CLI_C}"}\n'
        + "subscribers:\n  - {id: ann, channel: pager}\n"
    )
    code, out, err = run(capsys, "check", str(cfg))
    assert code == 2 and out == ""
    lines = err.splitlines()
    assert lines == [
        f"{cfg}:5: channels[0].url: environment variable FW_CLI_A is not set",
        f"{cfg}:5: channels[0].url: environment variable FW_CLI_B is not set",
        f"{cfg}:6: channels[0].secret: environment variable FW_CLI_C is not set",
        f"{cfg}:8: subscribers[0].channel: unknown channel 'pager' (known: hook, stdout)",
    ]


def test_check_warns_of_a_secret_in_the_file_and_still_exits_0(tmp_path):
    # a real process, so the warning reaches standard error as it does for a person
    cfg = tmp_path / "c.yaml"
    cfg.write_text(
        SITE
        + f"bot: {{secret: {TEST_SECRET}}}\n"
        + 'schedule: {morning_summary_local_time: "07:00"}\n'
    )
    done = subprocess.run(
        [sys.executable, "-m", "notifier", "check", str(cfg)],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith(f"ok: {cfg}: 1 site(s)")
    warnings = done.stderr.splitlines()
    assert len(warnings) == 2, done.stderr
    assert warnings[0].startswith(f"warning: {cfg}:4: bot.secret: a secret is written in the file")
    assert f"{cfg}:4: bot.secret: a secret is written in the file" in warnings[0]
    assert 'write secret: "${FOGWATCH_BOT_SECRET}"' in warnings[0]
    assert f"{cfg}:5: schedule.morning_summary_local_time: no longer used" in warnings[1]
    assert TEST_SECRET.removeprefix("whsec_") not in done.stderr


def test_check_refuses_a_secret_of_another_form_with_a_hint(tmp_path, capsys, monkeypatch):
    # Standard Webhooks secrets are whsec_ + base64; the value itself is never shown
    monkeypatch.setenv("FW_CLI_OLD", "an-old-style-shared-secret")
    cfg = tmp_path / "c.yaml"
    cfg.write_text(SITE + 'bot: {secret: "${FW_CLI_OLD}"}\n')
    code, out, err = run(capsys, "check", str(cfg))
    assert code == 2 and out == ""
    assert err.startswith(
        f"fogwatch: {cfg}:4: bot.secret: not a Standard Webhooks secret (no whsec_ prefix)"
    )
    assert "`fogwatch secret` prints a fresh one" in err
    assert "an-old-style-shared-secret" not in err


def test_secret_prints_a_fresh_secret_the_reference_library_can_use(capsys):
    code, first, _ = run(capsys, "secret")
    code_again, second, _ = run(capsys, "secret")
    assert code == code_again == 0
    first, second = first.strip(), second.strip()
    assert first != second  # fresh each time
    assert first.startswith("whsec_") and len(base64.b64decode(first[6:], validate=True)) == 32
    # the Standard Webhooks reference library takes it and verifies fogwatch's signature
    body = b'{"type":"raised"}'
    now = int(datetime.now(UTC).timestamp())
    assert reference_accepts(first, sign_headers(first, "msg-1", now, body), body)


def test_check_bad_rule_file_exit_2(tmp_path, capsys):
    rules = tmp_path / "rules"
    rules.mkdir()
    (rules / "fog.yaml").write_text(
        "version: 1\nrules:\n  - id: r1\n    hazard: fog\n    level: watch\n    when:\n"
        "      - dew_point: {below: 1}\n"
    )
    cfg = tmp_path / "c.yaml"
    cfg.write_text(
        f"version: 1\nrules: [{rules}]\nsites:\n  - {{id: x, name: X, lat: 1, "
        "lon: 1, timezone: UTC}\n"
    )
    code, _, err = run(capsys, "check", str(cfg))
    assert code == 2
    assert re.search(
        r"fog\.yaml:7: rule 'r1': unknown feature 'dew_point' — did you mean "
        r"'dewpoint_c'\?",
        err,
    )


def test_missing_config_file(capsys):
    code, _, err = run(capsys, "check", "/nonexistent/fogwatch.yaml")
    assert code == 2 and "file not found" in err


@pytest.fixture
def night_csv(tmp_path):
    frame = demo_observations(load(DEMO).config)
    path = tmp_path / "night.csv"
    frame.assign(time=frame["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")).to_csv(path, index=False)
    return path


def test_assess_json_shape(capsys, night_csv):
    code, out, _ = run(
        capsys, "assess", str(DEMO), "--data", str(night_csv), "--at", "2026-11-07T02:00Z", "--json"
    )
    assert code == 0
    data = json.loads(out)
    assert {d["site"] for d in data} == {"hollin-orchard", "skerrow-berth", "marrowby-showground"}
    for d in data:
        assert set(d) == {"site", "time", "level", "hazards", "features", "data"}
        assert d["time"] == "2026-11-07T02:00:00Z"
        assert d["level"] in ("none", "watch", "warning")
        for h in d["hazards"]:
            assert set(h) == {"hazard", "level", "kind", "eta", "eta_method", "rules", "reasons"}
            assert h["reasons"] and h["rules"]
        assert set(d["data"]) == {"last_time", "age_min", "stale"}
    by_site = {d["site"]: d for d in data}
    assert by_site["marrowby-showground"]["level"] == "warning"
    assert "sea-fog-warning" in by_site["skerrow-berth"]["hazards"][0]["rules"]
    assert {"fog", "icing"} <= {h["hazard"] for h in by_site["hollin-orchard"]["hazards"]}


def test_assess_table_and_default_time_from_data(capsys, night_csv):
    code, out, _ = run(capsys, "assess", str(DEMO), "--data", str(night_csv))
    assert code == 0
    assert "fogwatch assessment at 2026-11-07 09:00 UTC" in out
    assert "not an official forecast" in out


def test_explain_lists_every_feature_and_rule(capsys, night_csv):
    code, out, err = run(
        capsys,
        "explain",
        str(DEMO),
        "skerrow-berth",
        "--data",
        str(night_csv),
        "--at",
        "2026-11-07T02:00Z",
    )
    assert code == 0
    from notifier.engine.catalog import FEATURES

    for name in FEATURES:
        assert name in out
    for rule in load(DEMO).rules.rules:
        assert rule.id in out
    assert "sea-fog-warning (fog warning, fog.yaml:" in out
    assert "FIRES" in out and "Why this level" in out
    # the night's readings after 02:00 are what came next, set aside in one line, not
    # rejected row by row as if a live reading were ahead of the clock
    assert "ahead of now" not in err and "rejected" not in err
    assert re.search(
        r"^warning: \d+ observation row\(s\) after --at 2026-11-07T02:00:00Z", err, re.M
    )


def test_explain_unknown_site_exit_2(capsys, night_csv):
    code, _, err = run(capsys, "explain", str(DEMO), "atlantis", "--data", str(night_csv))
    assert code == 2 and "unknown site 'atlantis'" in err


def test_bad_time_exit_2(capsys, night_csv):
    code, _, err = run(capsys, "assess", str(DEMO), "--data", str(night_csv), "--at", "soon")
    assert code == 2 and "--at: expected an ISO 8601 time" in err


def test_readme_documents_every_command():
    readme = (ROOT / "README.md").read_text()
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    for name in sub.choices:
        assert f"fogwatch {name}" in readme or f"make {name}" in readme, name
