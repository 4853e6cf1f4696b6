"""``GET /metrics`` in the Prometheus text format, through ``prometheus-client``.

Most numbers are read from the store at scrape time (a custom collector), so they are
right even when the web app runs apart from the scheduler:

- ``fogwatch_source_rows_taken_total`` / ``fogwatch_source_rows_rejected_total``,
  ``fogwatch_source_polls_total``, ``fogwatch_source_failures_total`` per source;
- ``fogwatch_source_last_success_age_seconds`` per source (+Inf: never);
- ``fogwatch_deliveries`` by status (pending, sent, failed, expired, cancelled);
- ``fogwatch_sites`` by level (none, watch, warning, and unassessed);
- ``fogwatch_last_cycle_timestamp_seconds``.

The cycle duration is a histogram of this process's own cycles
(``fogwatch_cycle_duration_seconds``): it fills when ``fogwatch run`` serves the app.
Each app has its own registry, never the library's global one.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from datetime import datetime
from typing import TYPE_CHECKING

from prometheus_client import CollectorRegistry, Histogram
from prometheus_client.core import CounterMetricFamily, GaugeMetricFamily, Metric

from notifier.web.status import last_cycle

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Config
    from notifier.storage.outbox import Outbox
    from notifier.storage.store import Store

__all__ = ["CycleMeter", "StoreCollector", "build_registry"]

DELIVERY_STATUSES = ("pending", "sent", "failed", "expired", "cancelled")
LEVELS = ("none", "watch", "warning", "unassessed")
# seconds: a cycle over a few sites takes well under a second; hundreds of sites, more
CYCLE_BUCKETS = (0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0)


class CycleMeter:
    """The durations of this process's cycles (the service calls :meth:`observe`)."""

    def __init__(self, registry: CollectorRegistry):
        self.histogram = Histogram(
            "fogwatch_cycle_duration_seconds",
            "Duration of one poll-assess-lifecycle cycle in this process",
            buckets=CYCLE_BUCKETS,
            registry=registry,
        )

    def observe(self, seconds: float) -> None:
        self.histogram.observe(seconds)


class StoreCollector:
    """Reads the store at every scrape."""

    def __init__(
        self,
        store: Store,
        outbox: Outbox,
        config: Callable[[], Config],
        clock: Callable[[], datetime],
    ):
        self.store, self.outbox, self.config, self.clock = store, outbox, config, clock

    def describe(self) -> list[Metric]:
        return []  # names are fixed and unique: no need to collect at registration

    def collect(self) -> Iterator[Metric]:
        config, now = self.config(), self.clock()
        health = {row["source_id"]: row for row in self.store.source_health()}
        ids = [s.id for s in config.sources] + sorted(set(health) - {s.id for s in config.sources})
        families = {
            "rows_ok": CounterMetricFamily(
                "fogwatch_source_rows_taken", "Rows taken from a source", labels=["source"]
            ),
            "rows_rejected": CounterMetricFamily(
                "fogwatch_source_rows_rejected",
                "Rows a source sent that were rejected",
                labels=["source"],
            ),
            "polls": CounterMetricFamily(
                "fogwatch_source_polls", "Polls of a source", labels=["source"]
            ),
            "failures": CounterMetricFamily(
                "fogwatch_source_failures", "Failed polls of a source", labels=["source"]
            ),
        }
        age = GaugeMetricFamily(
            "fogwatch_source_last_success_age_seconds",
            "Seconds since a source's last successful poll (+Inf: never)",
            labels=["source"],
        )
        for source_id in ids:
            row = health.get(source_id, {})
            for key, family in families.items():
                family.add_metric([source_id], float(row.get(key) or 0))
            last = row.get("last_success")
            age.add_metric([source_id], (now - last).total_seconds() if last else math.inf)
        yield from families.values()
        yield age
        backlog = self.outbox.backlog()
        deliveries = GaugeMetricFamily(
            "fogwatch_deliveries", "Deliveries in the outbox by status", labels=["status"]
        )
        for status in sorted(set(DELIVERY_STATUSES) | set(backlog)):
            deliveries.add_metric([status], float(backlog.get(status, 0)))
        yield deliveries
        levels = self.outbox.snapshot_levels()  # no hazards put into words
        counts = dict.fromkeys(LEVELS, 0)
        for site in config.sites:
            level = levels.get(site.id, "unassessed")
            counts[level] = counts.get(level, 0) + 1
        sites = GaugeMetricFamily("fogwatch_sites", "Configured sites by level", labels=["level"])
        for level, n in counts.items():
            sites.add_metric([level], float(n))
        yield sites
        cycle = last_cycle(self.store)
        last = GaugeMetricFamily(
            "fogwatch_last_cycle_timestamp_seconds", "POSIX time of the newest cycle (0: none)"
        )
        last.add_metric([], cycle.timestamp() if cycle else 0.0)
        yield last


def build_registry(
    store: Store, outbox: Outbox, config: Callable[[], Config], clock: Callable[[], datetime]
) -> tuple[CollectorRegistry, CycleMeter]:
    registry = CollectorRegistry()
    registry.register(StoreCollector(store, outbox, config, clock))
    return registry, CycleMeter(registry)
