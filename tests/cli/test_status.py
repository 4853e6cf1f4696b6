"""`status`, `sources` and `assess` say how old the data is: the newest reading's date, its
age in words, and STALE past alerts.stale_after (90 min unless configured); and `status
--json` / `sources --json` give the same for scripts. A real service in a temporary folder
(tests/service/scene.py), its clock simulated."""

from __future__ import annotations

import json
from datetime import timedelta

from notifier.cli.main import main
from tests.service.scene import FOG_FROM, Scene

AT = FOG_FROM + timedelta(minutes=10)  # 23:10 UTC on Fri 20 Nov 2026 (GMT = UTC)
LATER = AT + timedelta(days=27, hours=5)  # 39,300 min after the last reading


def run(capsys, *argv: str) -> str:
    code = main(list(argv))
    out, err = capsys.readouterr()
    assert code == 0, err
    return out


def assessed(scene: Scene, capsys) -> Scene:
    scene.feed(AT)
    run(capsys, "once", str(scene.config_path), "--at", AT.isoformat())
    return scene


def test_status_dates_the_newest_reading_and_marks_it_stale(scene, capsys):
    cfg = str(assessed(scene, capsys).config_path)
    fresh = run(capsys, "status", cfg, "--at", (AT + timedelta(minutes=20)).isoformat())
    vale = next(line for line in fresh.splitlines() if "zz-vale" in line)
    assert "WARNING" in vale and "assessed 23:10 GMT today" in vale
    assert vale.endswith("newest reading 23:10 GMT today, 20 min old")

    old = run(capsys, "status", cfg, "--at", LATER.isoformat())
    vale = next(line for line in old.splitlines() if "zz-vale" in line)
    # the date, not only "(at 23:10 GMT)", 27 days on; the level marked as old news
    assert "WARNING (on old data)" in vale and "assessed Fri 20 Nov 23:10 GMT" in vale
    assert vale.endswith("newest reading Fri 20 Nov 23:10 GMT, 27 days 5 h old: STALE")


def test_status_json_for_scripts(scene, capsys):
    cfg = str(assessed(scene, capsys).config_path)
    doc = json.loads(run(capsys, "status", cfg, "--json", "--at", LATER.isoformat()))
    assert doc["time"] == "2026-12-18T04:10:00Z"
    by_site = {s["site"]: s for s in doc["sites"]}
    vale = by_site["zz-vale"]
    assert vale["level"] == "warning" and vale["assessed_at"] == "2026-11-20T23:10:00Z"
    assert vale["hazards"][0]["hazard"] == "fog"
    # 27 days 5 h = 27 × 1440 + 300 = 39,180 min
    assert vale["data"] == {"last_time": "2026-11-20T23:10:00Z", "age_min": 39180.0, "stale": True}
    assert not any(k.startswith("_") for s in doc["sites"] for k in s)
    assert doc["sources"][0]["source"] == "loggers"
    assert doc["outbox"]["backlog"]


def test_sources_show_the_newest_reading_each_brought(scene, capsys):
    cfg = str(assessed(scene, capsys).config_path)
    text = run(capsys, "sources", cfg, "--at", (AT + timedelta(minutes=30)).isoformat())
    header, row = text.splitlines()[:2]
    assert header.split()[:4] == ["source", "type", "newest", "reading"]
    assert row.startswith("loggers") and "23:10 GMT today, 30 min old" in row
    assert "STALE" not in text

    # past alerts.stale_after (90 min): marked on the row and said in words below
    text = run(capsys, "sources", cfg, "--at", (AT + timedelta(minutes=91)).isoformat())
    # 00:41 the next day: the reading is dated, as it is no longer today
    assert "Fri 20 Nov 23:10 GMT, 1 h 31 min old: STALE" in text.splitlines()[1]
    assert text.splitlines()[-1].startswith("STALE: loggers brought nothing newer")

    doc = json.loads(run(capsys, "sources", cfg, "--json", "--at", LATER.isoformat()))
    (loggers,) = doc["sources"]
    assert loggers["type"] == "filedrop" and loggers["polls"] == 1 and loggers["rows_ok"] > 0
    assert loggers["newest_reading"] == {
        "last_time": "2026-11-20T23:10:00Z",
        "age_min": 39180.0,
        "stale": True,
    }


def test_assess_dates_old_rows_in_the_store_instead_of_saying_never(scene, capsys):
    # the rules read only the last hours; rows older than that are still the newest ones
    cfg = str(assessed(scene, capsys).config_path)
    text = run(capsys, "assess", cfg, "--at", LATER.isoformat())
    vale = next(line for line in text.splitlines() if line.startswith("zz-vale"))
    assert "never" not in vale
    assert vale.endswith("Fri 20 Nov 23:10 GMT, 27 days 5 h old: STALE")

    doc = json.loads(run(capsys, "assess", cfg, "--json", "--at", LATER.isoformat()))
    data = {d["site"]: d["data"] for d in doc}
    assert data["zz-quay"] == {
        "last_time": "2026-11-20T23:10:00Z",
        "age_min": 39180.0,
        "stale": True,
    }


def test_a_site_that_never_reported_says_so(scene, capsys):
    cfg = str(scene.config_path)
    text = run(capsys, "assess", cfg, "--at", AT.isoformat())
    assert "no reading ever: STALE" in next(
        line for line in text.splitlines() if line.startswith("zz-vale")
    )
    status = run(capsys, "status", cfg, "--at", AT.isoformat())
    assert "zz-vale" in status and "not assessed yet; no reading ever" in status
