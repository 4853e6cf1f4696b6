"""``fogwatch check`` warns per site when a rule it uses needs a column no source gives."""

from __future__ import annotations

import json
from pathlib import Path

from notifier.cli.main import main
from notifier.engine.rule_files import load_rule_set
from notifier.ingest.coverage import METAR_COLUMNS, required_features

RULES = """version: 1
rules:
  - id: lowering
    hazard: fog
    level: watch
    when:
      - ceiling_m: {at_most: 150}
      - any:
          - precip_known: {is: false}
          - hours_since_precip: {at_least: 3}
  - id: seen
    hazard: fog
    level: warning
    when:
      - visibility_m: {below: 1000}
      - ceiling_m: {at_most: 60}
  - id: harbour-only
    hazard: fog
    level: watch
    sites: {exposure: [coast]}
    when:
      - water_temp_c: {below: 10}
"""


def write(tmp_path: Path, sources: str) -> Path:
    rules = tmp_path / "rules"
    rules.mkdir(exist_ok=True)
    (rules / "fog.yaml").write_text(RULES)
    (tmp_path / "drop").mkdir(exist_ok=True)
    cfg = tmp_path / "c.yaml"
    cfg.write_text(
        f"version: 1\nrules: [{rules}]\nsites:\n"
        "  - {id: field, name: F, lat: 1, lon: 1, timezone: UTC}\n"
        "  - {id: quay, name: Q, lat: 1, lon: 1, timezone: UTC, exposure: coast}\n"
        f"sources:\n{sources}"
    )
    return cfg


def check(capsys, cfg: Path, *extra: str) -> tuple[int, str, str]:
    code = main(["check", str(cfg), *extra])
    out, err = capsys.readouterr()
    return code, out, err


def test_a_rule_needs_only_what_it_cannot_fire_without(tmp_path):
    (tmp_path / "fog.yaml").write_text(RULES)
    rules = {r.id: r for r in load_rule_set([tmp_path / "fog.yaml"]).rules}
    # hours_since_precip sits in an `any` beside "no rain gauge": not needed
    assert required_features(rules["lowering"]) == {"ceiling_m"}
    assert required_features(rules["seen"]) == {"visibility_m", "ceiling_m"}


def test_a_feed_mapping_only_temperatures_leaves_rules_without_their_columns(tmp_path, capsys):
    cfg = write(
        tmp_path,
        "  - id: feed\n    type: http_json\n    url: http://127.0.0.1:9/obs\n"
        "    fields: {temp_f: t, rh_pct: h}\n",
    )
    code, out, err = check(capsys, cfg)
    assert code == 0 and out.startswith("ok:")
    assert err.splitlines() == [
        "warning: site field: rules lowering, seen need ceiling_m, which no source provides",
        "warning: site field: rule seen needs visibility_m, which no source provides",
        "warning: site quay: rules lowering, seen need ceiling_m, which no source provides",
        "warning: site quay: rule seen needs visibility_m, which no source provides",
        "warning: site quay: rule harbour-only needs water_temp_c, which no source provides",
    ]


def test_metar_gives_the_ceiling_and_a_mapping_adds_the_water(tmp_path, capsys):
    # a METAR report carries visibility and the sky's layers (WMO-No. 306 FM 15), not the
    # water temperature; the feed maps water_temp_f for the quay only
    cfg = write(
        tmp_path,
        "  - {id: reports, type: filedrop, path: drop, format: metar,\n"
        "     stations: {ZZQA: field, ZZQB: quay}}\n"
        "  - id: buoy\n    type: http_json\n    url: http://127.0.0.1:9/sea\n"
        "    sites: [quay]\n    fields: {water_temp_f: sst}\n",
    )
    code, out, err = check(capsys, cfg, "--json")
    assert code == 0 and err == ""
    assert json.loads(out)["warnings"] == []
    assert {"ceiling_m", "visibility_m", "precip_mm"} <= METAR_COLUMNS


def test_a_csv_drop_may_carry_any_column_and_a_forecast_only_its_four(tmp_path, capsys):
    cfg = write(tmp_path, "  - {id: loggers, type: filedrop, path: drop}\n")
    code, _, err = check(capsys, cfg)
    assert code == 0 and err == ""
    cfg = write(
        tmp_path,
        "  - {id: model, type: http_json, url: 'http://127.0.0.1:9/{site}', kind: forecast}\n",
    )
    code, _, err = check(capsys, cfg)
    assert code == 0
    assert "site field: rules lowering, seen need ceiling_m" in err
