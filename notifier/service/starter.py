"""``fogwatch init [DIR]``: a starter that works at once, and ``fogwatch schema``.

Writes a commented config (one invented site, a file-drop folder, a folder mail
channel), a sample CSV of the last six hours in the drop folder, a copy of the shipped
rules, and the JSON Schemas of both kinds of file. Each YAML file starts with a
``# yaml-language-server: $schema=...`` line, so an editor that reads it completes keys
and flags mistakes as the operator types. ``check`` and ``once`` pass on it straight
away. Nothing that exists is overwritten.
"""

from __future__ import annotations

import json
import os
import shutil
from datetime import UTC, datetime, timedelta
from pathlib import Path

from notifier.core.config import default_rules_dir
from notifier.core.errors import UsageError

__all__ = ["CONFIG_NAME", "STARTER_CONFIG", "write_schemas", "write_starter"]

CONFIG_NAME = "fogwatch.yaml"
SCHEMA_LINE = "# yaml-language-server: $schema={path}\n"

STARTER_CONFIG = """\
# fogwatch starter config: one site, readings from a folder, alerts as .eml files.
# Check it with `fogwatch check fogwatch.yaml`; run one cycle with `fogwatch once`.
# Every key is described in the README; paths are relative to this file.
version: 1

sites:
  - id: ashgrove-field          # letters, digits, - _ . (used in commands)
    name: Ashgrove Field        # what people read
    lat: 52.3141                # invented place: put your site's position here
    lon: -1.9127
    timezone: Europe/London
    exposure: valley            # open | valley | forest | waterside | coast | urban
    use: farm                   # farm | port | venue | other (picks safety notes)

sources:
  - id: logger-drop
    type: filedrop              # a folder your logger writes CSV / JSON / METAR into
    path: incoming
    site: ashgrove-field        # rows without a site column belong to this site
    interval: 10min

rules: [rules]                  # your own copy of the shipped rules: edit freely

channels:
  - id: mailbox
    type: folder                # each message as an .eml file; swap for type: email
    path: outbox

subscribers:
  - id: duty
    name: Duty manager
    channel: mailbox
    address: duty.manager@ashgrove.example

# web:                          # uncomment for the status page with `fogwatch run`
#   host: 127.0.0.1             # any other address needs token: ${FOGWATCH_WEB_TOKEN}
#   port: 8750
"""

SAMPLE_HEADER = "time,temp_c,dewpoint_c,wind_ms,cloud_pct,visibility_m"


def sample_rows(now: datetime, hours: int = 6) -> list[str]:
    """An invented clear evening cooling towards its dew point, every 10 min to ``now``."""
    end = now.astimezone(UTC).replace(second=0, microsecond=0)
    end -= timedelta(minutes=end.minute % 10)
    steps = hours * 6
    rows = []
    for k in range(steps + 1):
        t = end - timedelta(minutes=10 * (steps - k))
        temp = 9.0 - 5.0 * k / steps
        rows.append(f"{t:%Y-%m-%dT%H:%M:%SZ},{temp:.1f},3.0,1.5,10,20000")
    return rows


def write_schemas(folder: Path) -> list[Path]:
    """``config.schema.json`` and ``rules.schema.json`` into ``folder``."""
    from notifier.core.config_schema import config_schema
    from notifier.engine.rule_schema import rule_file_schema

    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for name, schema in (
        ("config.schema.json", config_schema()),
        ("rules.schema.json", rule_file_schema()),
    ):
        path = folder / name
        path.write_text(json.dumps(schema, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
        out.append(path)
    return out


def write_starter(folder: Path, now: datetime) -> list[Path]:
    """Write the starter into ``folder``; UsageError if its config is already there."""
    config = folder / CONFIG_NAME
    if config.exists():
        raise UsageError(f"{config} already exists; init writes only into a fresh folder")
    if (folder / "rules").exists():
        raise UsageError(f"{folder / 'rules'} already exists; init would overwrite it")
    folder.mkdir(parents=True, exist_ok=True)
    written = write_schemas(folder / "schema")
    config.write_text(
        SCHEMA_LINE.format(path="schema/config.schema.json") + STARTER_CONFIG, encoding="utf-8"
    )
    written.append(config)
    rules = folder / "rules"
    rules.mkdir()
    for source in sorted(default_rules_dir().glob("*.yaml")):
        target = rules / source.name
        target.write_text(
            SCHEMA_LINE.format(path="../schema/rules.schema.json")
            + source.read_text(encoding="utf-8"),
            encoding="utf-8",
        )
        shutil.copystat(source, target)
        written.append(target)
    drop = folder / "incoming"
    drop.mkdir(exist_ok=True)
    sample = drop / "sample.csv"
    sample.write_text("\n".join([SAMPLE_HEADER, *sample_rows(now)]) + "\n", encoding="utf-8")
    # written a minute ago as far as the drop's settle time can tell: taken at once
    settled = now.timestamp() - 60
    os.utime(sample, (settled, settled))
    written.append(sample)
    (folder / "outbox").mkdir(exist_ok=True)
    return written
