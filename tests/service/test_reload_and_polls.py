"""A reload keeps the rolling window; polls do their IO outside the service lock (issue 19).

The scene is tests/service/scene.py (two invented sites fed through a file drop). What
is checked: a reload that changes neither the sites nor the window's length keeps the
window (the next cycle reads only what came since); a change of sites reads a new
window whole, but before taking the lock that cycles need; and a poll that hangs on its
source holds up no delivery, while the cycle after it still assesses what it brought.
"""

from __future__ import annotations

import dataclasses
import threading
from datetime import datetime, timedelta
from typing import Any

import pandas as pd

from notifier.ingest.base import PollResult
from notifier.service.cycle import Service
from notifier.storage.window import RollingWindow
from tests.service.scene import FOG_FROM, START, Scene
from tests.storage.test_window import canonical


def test_a_rule_change_keeps_the_window(scene: Scene) -> None:
    at = FOG_FROM + timedelta(minutes=10)
    scene.feed(at)
    service = scene.service()
    service.poll_and_assess(at)
    window = service._window
    assert window is not None and len(window) > 0
    # the subscribers change (not the sites, not the window): the window stays
    text = scene.config_path.read_text(encoding="utf-8")
    scene.config_path.write_text(text.replace("Orchard Crew", "Orchard Night Crew"), "utf-8")
    ok, message = service.reload()
    assert ok, message
    assert service._window is window
    later = at + timedelta(minutes=10)
    scene.feed(later)
    report = service.poll_and_assess(later)
    assert service._window is window and window.last_read == 2, "only the new poll's rows"
    assert {a.site.id for a in report.assessments} == {"zz-vale", "zz-quay"}


def test_a_change_of_sites_reads_the_new_window_before_the_lock(
    scene: Scene, monkeypatch: Any
) -> None:
    at = FOG_FROM + timedelta(minutes=10)
    scene.feed(at)
    service = scene.service()
    service.poll_and_assess(at)
    old = service._window
    locked_during_read: list[bool] = []
    original = RollingWindow.frame

    def watched(self: RollingWindow, when: datetime) -> pd.DataFrame:
        if self is not old:
            locked_during_read.append(service._lock.locked())
        return original(self, when)

    monkeypatch.setattr(RollingWindow, "frame", watched)
    text = scene.config_path.read_text(encoding="utf-8")
    extra = (
        "  - id: zz-moor\n    name: High Moor Gate\n    lat: 54.2\n    lon: -2.1\n"
        "    timezone: Europe/London\n"
    )
    scene.config_path.write_text(text.replace("sources:\n", extra + "sources:\n", 1), "utf-8")
    ok, message = service.reload()
    assert ok, message
    assert service._window is not old and locked_during_read == [False]
    assert service._window.last_at == at and service._window.last_read == old.last_read
    later = at + timedelta(minutes=10)
    scene.feed(later)
    report = service.poll_and_assess(later)
    assert {a.site.id for a in report.assessments} == {"zz-vale", "zz-quay", "zz-moor"}
    assert service._window.last_read == 2


class HangingSource:
    """A source whose poll waits until it is let go, as a far end that does not answer."""

    id = "slow-far-end"

    def __init__(self, rows: pd.DataFrame):
        self.started, self.go = threading.Event(), threading.Event()
        self.rows = rows

    def poll(self, now: datetime) -> PollResult:
        self.started.set()
        assert self.go.wait(30), "never let go"
        return PollResult(source_id=self.id, frame=self.rows)


def test_a_hanging_poll_holds_up_no_delivery(scene: Scene) -> None:
    at = START + timedelta(minutes=30)
    rows = canonical(
        [
            {
                "site": "zz-vale",
                "time": at,
                "kind": "obs",
                "temp_c": 1.0,
                "dewpoint_c": 0.9,
                "source": "slow-far-end",
            }
        ]
    )
    source = HangingSource(rows)
    service = Service(scene.config_path, sources=[source])
    scene.services.append(service)
    cycle = threading.Thread(target=service.poll_and_assess, args=(at,))
    cycle.start()
    try:
        assert source.started.wait(10)
        delivered = threading.Thread(target=service.deliver, args=(at,))
        delivered.start()
        delivered.join(10)
        assert not delivered.is_alive(), "the delivery went on while the poll hung"
        assert not service._lock.locked()
    finally:
        source.go.set()
        cycle.join(30)
    held = service._observations(at)
    assert (held["site"] == "zz-vale").sum() == 1, "and the cycle after it saw its rows"


def test_kept_tables_hold_only_what_the_hold_windows_read(scene: Scene) -> None:
    """Earlier times' feature tables keep only the held rules' features; the cycles give
    what a service that kept nothing gives (every table worked out afresh)."""
    times = [FOG_FROM + timedelta(minutes=10 * k) for k in range(1, 5)]
    scene.feed(times[-1])
    kept = scene.service()
    for at in times:
        report = kept.poll_and_assess(at)
    held = kept.rules.held_features()
    assert held, "the shipped rules hold some tests"
    earlier = kept._remembered(times[-1] + timedelta(minutes=10))
    assert earlier and all(set(t.values) == held for t in earlier.values())
    fresh = scene.service()
    again = fresh.poll_and_assess(times[-1])

    def levels(r: Any) -> list[tuple[Any, ...]]:
        return [
            (a.site.id, a.level, [(k, h.level, h.eta, h.rules) for k, h in a.hazards.items()])
            for a in r.assessments
        ]

    assert levels(report) == levels(again)
    # a changed rule set that holds a feature no kept table has: that table is redone
    for t, table in list(earlier.items()):
        earlier[t] = dataclasses.replace(
            table, values={k: v for k, v in table.values.items() if k != sorted(held)[0]}
        )
    assert kept._remembered(times[-1] + timedelta(minutes=10)) == {}
