"""``fogwatch init`` in an empty folder: ``check`` and ``once`` pass on it at once; the
JSON Schemas it points at accept what it wrote and reject what the loaders reject
(checked with jsonschema, a reference implementation of JSON Schema 2020-12)."""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pytest
import yaml

from notifier.cli.main import main


@pytest.fixture
def started(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> Path:
    folder = tmp_path / "new-site"
    assert main(["init", str(folder)]) == 0
    capsys.readouterr()
    return folder


def _validator(folder: Path, name: str) -> jsonschema.Draft202012Validator:
    schema = json.loads((folder / "schema" / name).read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def test_init_then_check_and_once_pass_at_once(started: Path, capsys: pytest.CaptureFixture[str]):
    config = started / "fogwatch.yaml"
    assert main(["check", str(config)]) == 0
    assert "1 site(s), 1 source(s)" in capsys.readouterr().out
    assert main(["once", "--json", str(config)]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["sources"] == [{"id": "logger-drop", "ok": True, "error": None}]
    assert report["sites"]["ashgrove-field"] in ("none", "watch", "warning")
    # the sample was taken (not left waiting), so the site is judged, not a data gap
    assert (started / "incoming" / "processed" / "sample.csv").exists()
    assert not any(e["hazard"] == "data_gap" for e in report["events"])


def test_init_refuses_a_folder_that_has_a_config(started: Path, capsys: pytest.CaptureFixture[str]):
    assert main(["init", str(started)]) == 2
    assert "already exists" in capsys.readouterr().err


def test_every_yaml_init_writes_names_its_schema_and_passes_it(started: Path):
    config = started / "fogwatch.yaml"
    first = config.read_text(encoding="utf-8").splitlines()[0]
    assert first == "# yaml-language-server: $schema=schema/config.schema.json"
    assert (
        list(
            _validator(started, "config.schema.json").iter_errors(
                yaml.safe_load(config.read_text(encoding="utf-8"))
            )
        )
        == []
    )
    rules = _validator(started, "rules.schema.json")
    for path in sorted((started / "rules").glob("*.yaml")):
        lines = path.read_text(encoding="utf-8").splitlines()
        assert lines[0] == "# yaml-language-server: $schema=../schema/rules.schema.json"
        assert list(rules.iter_errors(yaml.safe_load("\n".join(lines)))) == [], path.name


def test_the_schemas_reject_what_the_loaders_reject(
    started: Path, capsys: pytest.CaptureFixture[str]
):
    config = started / "fogwatch.yaml"
    bad = config.read_text(encoding="utf-8").replace("exposure: valley", "exposre: valley")
    config.write_text(bad, encoding="utf-8")
    assert list(_validator(started, "config.schema.json").iter_errors(yaml.safe_load(bad)))
    assert main(["check", str(config)]) == 2
    assert "exposre" in capsys.readouterr().err
    rule = {
        "version": 1,
        "rules": [
            {
                "id": "r",
                "hazard": "fog",
                "level": "watch",
                "when": [{"dewpoint_depresion_c": {"below": 1}}],
            }
        ],
    }
    assert list(_validator(started, "rules.schema.json").iter_errors(rule))
    durations = yaml.safe_load("version: 1\nsites: []\nschedule: {evaluate_every: 10min}\n")
    assert list(_validator(started, "config.schema.json").iter_errors(durations)) == []


def test_schema_writes_both_files(tmp_path: Path, capsys: pytest.CaptureFixture[str]):
    assert main(["schema", "--out", str(tmp_path)]) == 0
    names = sorted(p.name for p in tmp_path.glob("*.json"))
    assert names == ["config.schema.json", "rules.schema.json"]
