"""One cycle of the service, and the command handlers built on it.

``evaluate`` is the shared middle: observations in, assessments out. The live service,
``once``, ``assess`` and the demo call it with different clocks and data edges.
"""

from __future__ import annotations

import dataclasses
import logging
import random
import threading
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

from notifier.core.config import Config, Site, Subscriber
from notifier.core.errors import FogwatchError
from notifier.core.partition import share
from notifier.core.redact import redact_url
from notifier.engine.rules import RuleSet
from notifier.service.access import Access, bot_subscribers, routing_mutes
from notifier.service.access import bot_subscriber_id as bot_subscriber_id  # (re-exported)
from notifier.service.charting import event_charts
from notifier.service.loading import (
    FORECAST_HORIZON,
    Loaded,
    evaluate,
    load,
    open_store,
)
from notifier.service.snapshots import site_snapshots
from notifier.storage.botstate import BotState
from notifier.storage.leader import Leadership
from notifier.storage.outbox import Outbox

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.delivery.dispatch import DispatchReport
    from notifier.delivery.routing import Mute
    from notifier.engine.alerts import Event
    from notifier.engine.assessment import SiteAssessment
    from notifier.engine.catalog import FeatureTable
    from notifier.ingest.base import ObservationSource, PollResult
    from notifier.storage.store import Store
    from notifier.storage.window import RollingWindow

__all__ = ["CycleReport", "Service"]


log = logging.getLogger(__name__)


@dataclass
class CycleReport:
    """What one poll-and-assess cycle did."""

    at: datetime
    assessments: Sequence[SiteAssessment]
    events: list[Event]
    deliveries_added: int
    polls: list[PollResult] = field(default_factory=list)


class Service:
    """The service's state between cycles: config, rules, store and injected edges.

    ``clock`` is only used by callers that do not pass ``now``; every method takes the
    time explicitly so that the demo and replay can drive it with a simulated clock.

    With ``instance: {index, count}`` it evaluates (and polls) only its share of the
    sites and sources (``notifier.core.partition``); :meth:`leads` says whether it
    also runs the store-wide work (outlooks, housekeeping).
    """

    def __init__(
        self,
        config_path: str | Path,
        *,
        store: Store | None = None,
        session: Any = None,
        channel_kwargs: Mapping[str, Mapping[str, Any]] | None = None,
        sources: Sequence[ObservationSource] | None = None,
        rng: random.Random | None = None,
    ):
        self.config_path = Path(config_path)
        self.loaded = load(self.config_path)
        self.store = store or open_store(self.loaded.config)
        # the store in use for the life of the service (a reload does not move it)
        self._store_url = self.loaded.config.store_url
        self.outbox = Outbox(
            self.store, lease=timedelta(seconds=self.loaded.config.alerts.claim_lease)
        )
        self.bot_state = BotState(self.store)
        self.leadership = Leadership(self.store)
        self.session = session
        self.channel_kwargs = dict(channel_kwargs or {})
        self._fixed_sources = sources
        # built once and kept until a reload or stop: one HTTP session (one connection
        # pool) per service, not a new one on every poll
        self._sources: list[ObservationSource] | None = None
        self._own_session: Any = None
        self.rng = rng or random.Random()
        self._share: tuple[Loaded, tuple[Site, ...]] | None = None
        self.reload_held_s = 0.0  # how long the last reload held the service lock
        self._mtimes = self._file_mtimes()
        # The hold windows look 10, 20 … minutes back: times the previous cycles already
        # evaluated. Their feature tables are kept, so a cycle computes only its own time
        # (they say what was known then, as a person on watch would have seen it).
        self._features: dict[float, FeatureTable] = {}
        from notifier.engine.features import FeatureCache

        # the sites as arrays and the sun of recent cycles (the feature code's cache)
        self._feature_cache = FeatureCache()
        # the rolling window, kept in memory: each cycle reads only the rows written since
        self._window: RollingWindow | None = None
        self._stop = threading.Event()
        self._lock = threading.Lock()  # one cycle or delivery at a time
        # polls do their IO outside that lock (a slow source holds up no cycle or
        # delivery), one poll at a time; this lock also guards the built sources
        self._poll_lock = threading.Lock()
        # called with each poll-and-assess cycle's duration in seconds (the web metrics)
        self.cycle_listeners: list[Callable[[float], None]] = []

    @property
    def config(self) -> Config:
        return self.loaded.config

    @property
    def rules(self) -> RuleSet:
        return self.loaded.rules

    @property
    def sites(self) -> tuple[Site, ...]:
        """The sites this instance evaluates: all, or its share (``instance:``)."""
        instance = self.config.instance
        if self._share is None or self._share[0] is not self.loaded:
            self._share = (self.loaded, share(self.config.sites, instance.index, instance.count))
        return self._share[1]

    def leads(self) -> bool:
        """Whether this instance runs the store-wide jobs (always, on a SQLite store)."""
        return self.leadership.leads()

    # -- files and reload --------------------------------------------------------------

    def _watched_files(self) -> list[Path]:
        from notifier.engine.rule_files import rule_files

        config = self.loaded.config
        table = [] if config.sites_file is None else [config.sites_file]
        return [self.config_path, *table, *rule_files(config.rule_paths())]

    def _file_mtimes(self) -> dict[Path, float]:
        out = {}
        for path in self._watched_files():
            try:
                out[path] = path.stat().st_mtime
            except OSError:
                out[path] = -1.0
        return out

    def files_changed(self) -> bool:
        return self._file_mtimes() != self._mtimes

    def reload(self) -> tuple[bool, str]:
        """Load config and rules again; on any error keep the running ones.

        The store is the one exception to "any change reloads": the open store stays in
        use (the outbox, its claims and the rolling window live in it), so a changed
        ``store.url`` is logged at WARNING as needing a restart, and the running config
        keeps naming the store actually in use.
        """
        try:
            loaded = load(self.config_path)
        except FogwatchError as exc:
            self._mtimes = self._file_mtimes()  # do not retry the same broken files
            return False, str(exc)
        if loaded.config.store_url != self._store_url:
            log.warning(
                "store.url changed in %s (%s → %s); the running store stays in use: "
                "restart fogwatch to use the new one",
                self.config_path,
                redact_url(self._store_url),
                redact_url(loaded.config.store_url),
            )
            running = loaded.config.store.model_copy(update={"url": self._store_url})
            loaded = Loaded(
                loaded.config.model_copy(update={"store": running}), loaded.rules, loaded.model
            )
        # The window stays unless the sites or its length changed; a new one is read
        # here, before the lock, while cycles go on with the old one.
        window, share_now = self._window, self._share
        if window is not None:
            instance = loaded.config.instance
            mine = share(loaded.config.sites, instance.index, instance.count)
            window = window.renewed(
                [s.id for s in mine],
                back=timedelta(seconds=loaded.config.store.window),
                ahead=FORECAST_HORIZON,
            )
            share_now = (loaded, mine)
        same_sites = loaded.config.sites == self.config.sites and loaded.model == self.loaded.model
        with self._lock:
            held_from = time.monotonic()
            self.loaded, self._share = loaded, share_now
            if not same_sites:  # the remembered feature tables were the old sites'
                self._features.clear()
            self._window = window
            self.outbox.lease = timedelta(seconds=loaded.config.alerts.claim_lease)
            self._mtimes = self._file_mtimes()
            self.reload_held_s = time.monotonic() - held_from  # cycles waited this long
        with self._poll_lock:
            self._drop_sources()  # built again from the new config, with a fresh session
        return True, "reloaded"

    # -- the cycle ---------------------------------------------------------------------

    def poll(self, now: datetime, source_ids: Sequence[str] | None = None) -> list[PollResult]:
        """Poll (all sources of this instance, or the given ones) and record what came."""
        from notifier.ingest.poll import poll_sources

        with self._poll_lock:  # not the service lock: cycles and deliveries go on
            sources = self._built_sources()
            if source_ids is not None:
                sources = [s for s in sources if s.id in source_ids]
            return poll_sources(sources, self.store, now)

    def _built_sources(self) -> Sequence[ObservationSource]:
        if self._fixed_sources is not None:
            return self._fixed_sources
        if self._sources is None:
            from notifier.ingest.poll import build_sources

            session = self.session
            if session is None and any(s.type == "http_json" for s in self.config.sources):
                import requests

                session = self._own_session = requests.Session()
            instance = self.config.instance
            config = self.config.model_copy(
                update={"sources": share(self.config.sources, instance.index, instance.count)}
            )
            self._sources = build_sources(config, self.store, session=session)
        return self._sources

    def _drop_sources(self) -> None:
        """Forget the built sources and close the session made for them (reload, stop)."""
        self._sources = None
        if self._own_session is not None:
            self._own_session.close()
            self._own_session = None

    def poll_and_assess(
        self, now: datetime, source_ids: Sequence[str] | None = None
    ) -> CycleReport:
        """Poll (all sources, or the given ones), assess, run the lifecycle, queue."""
        started = time.monotonic()
        polls = self.poll(now, source_ids)  # network and file IO, outside the lock
        with self._lock:
            obs = self._observations(now)
            assessments = evaluate(
                self.loaded, obs, now, self._remembered(now), self._feature_cache, self.sites
            )
            report = self._advance(now, assessments, obs, polls)
        for listener in self.cycle_listeners:
            listener(time.monotonic() - started)
        return report

    def _observations(self, now: datetime) -> pd.DataFrame:
        """The rolling window at ``now`` (as :func:`observations_for` reads it)."""
        if self._window is None:
            from notifier.storage.window import RollingWindow

            self._window = RollingWindow(
                self.store,
                [s.id for s in self.sites],
                back=timedelta(seconds=self.config.store.window),
                ahead=FORECAST_HORIZON,
                only_these=self.config.instance.count > 1,  # the others' rows not read
            )
        return self._window.frame(now)

    def _remembered(self, now: datetime) -> dict[float, FeatureTable]:
        """The feature cache, without what no hold window can reach from ``now``.

        The table for ``now`` itself is always worked out afresh, from the newest data.
        """
        reach = max((r.hold_s for r in self.rules.rules), default=0.0) + 3600.0
        for t in [t for t in self._features if t < now.timestamp() - reach or t >= now.timestamp()]:
            del self._features[t]
        # An earlier time's table is read only for the hold windows: the features the
        # held rules test. The rest go (at 100,000 sites some fifteen tables are kept,
        # about 35 MB each whole); a table without one of them (the rules changed) is
        # worked out again.
        held = self.rules.held_features()
        for t, table in list(self._features.items()):
            if not held <= table.values.keys():
                del self._features[t]
            elif len(table.values) > len(held):
                values = {name: table.values[name] for name in held}
                self._features[t] = dataclasses.replace(table, values=values)
        return self._features

    def _advance(
        self,
        now: datetime,
        assessments: Sequence[SiteAssessment],
        obs: pd.DataFrame,
        polls: list[PollResult],
    ) -> CycleReport:
        from notifier.delivery.routing import route
        from notifier.engine.lifecycle import step

        mine = {s.id for s in self.sites}  # another instance's states are its own
        previous = {k: v for k, v in self.outbox.states().items() if k[0] in mine}
        states, events = step(previous, assessments, now, self.config.alerts)
        deliveries = route(events, self.subscribers(), self.config, self.mutes(now))
        charts = event_charts(self.config, events, deliveries, assessments, obs, now)
        snapshots = site_snapshots(assessments)
        added = self.outbox.commit_cycle(
            previous, states, events, deliveries, now, charts=charts, snapshots=snapshots
        )
        for ev in events:  # at INFO: shown by `fogwatch run` without -v
            log.info("alert %s: %s %s %s", ev.site_id, ev.hazard, ev.type, ev.level)
        return CycleReport(now, assessments, events, added, polls)

    def deliver(self, now: datetime) -> DispatchReport:
        from notifier.delivery.dispatch import dispatch

        with self._lock:
            return dispatch(
                self.outbox,
                self.config,
                self.rules,
                now,
                channel_kwargs=self.channel_kwargs,
                rng=self.rng,
                should_stop=self._stop.is_set,
                mutes=self.mutes(now),
                subscribers={s.id for s in self.subscribers()},
            )

    def cycle(self, now: datetime) -> tuple[CycleReport, DispatchReport]:
        """One full cycle: poll → assess → lifecycle → outbox → dispatch (``once``)."""
        report = self.poll_and_assess(now)
        return report, self.deliver(now)

    # -- subscribers and mutes -----------------------------------------------------------

    def subscribers(self) -> tuple[Subscriber, ...]:
        """Configured subscribers plus every bot follow of a site its sender may name."""
        from notifier.delivery.routing import default_subscribers

        access = Access.of(self.config, self.bot_state)
        follows = self.bot_state.follows()
        return (
            *default_subscribers(self.config),
            *bot_subscribers(self.config, follows, access),
        )

    def mutes(self, now: datetime) -> list[Mute]:
        """Stored hushes as routing's mutes: a sender's own covers only the subscribers
        they speak for and their own follows; an operator's for everyone covers all."""
        return routing_mutes(self.config, self.bot_state.mutes(now), self.bot_state.follows())

    # -- outlook, health, housekeeping -----------------------------------------------------

    def outlook(self, now: datetime, site_ids: Sequence[str]) -> int:
        """The evening outlook for these sites, queued like any other message.

        Run by the leader only when instances share the store: the sites of its own
        share come from its window, the others' from one read of the store."""
        from notifier.delivery.outlook import outlook_event, without_repeats
        from notifier.delivery.routing import route

        wanted = set(site_ids)
        mine = {s.id for s in self.sites}
        others = [s for s in self.config.sites if s.id in wanted and s.id not in mine]
        if others:  # read before the lock: a read of other instances' sites
            from notifier.service.loading import observations_for

            partial = self.config.model_copy(update={"sites": tuple(others)})
            other_obs = observations_for(partial, self.store, now)
        with self._lock:
            obs = self._observations(now)
            found = evaluate(
                self.loaded, obs, now, feature_cache=self._feature_cache, sites=self.sites
            )
            # only the wanted sites' assessments are built (``Assessments`` is lazy)
            sites = [found[i] for i, s in enumerate(self.sites) if s.id in wanted]
            if others:
                sites.extend(evaluate(self.loaded, other_obs, now, sites=others))
            events = [outlook_event(sa, now) for sa in sites]
            deliveries = route(events, self.subscribers(), self.config, self.mutes(now))
            # none where it would only repeat an alert the recipient was just told of
            every = self.config.alerts.reminder_every
            deliveries = without_repeats(deliveries, events, self.outbox, now, every)
            states = self.outbox.states()
            return self.outbox.commit_cycle(states, states, events, deliveries, now)

    def health(self, now: datetime) -> list[str]:
        """Problems worth a log line: failing sources and an outbox that does not drain."""
        problems = []
        for h in self.store.source_health():
            if h["last_error_at"] and (
                not h["last_success"] or h["last_error_at"] > h["last_success"]
            ):
                problems.append(f"source {h['source_id']} failing: {h['last_error']}")
        backlog = self.outbox.backlog()
        if backlog.get("expired"):
            problems.append(f"{backlog['expired']} delivery(ies) expired undelivered")
        for p in problems:
            log.warning("health: %s", p)
        return problems

    def housekeeping(self, now: datetime) -> tuple[int, int]:
        """Trim the rolling window and old finished deliveries."""
        trimmed = self.store.trim_observations(now - timedelta(seconds=self.config.store.window))
        forgotten = self.outbox.trim(now - timedelta(seconds=self.config.store.keep_deliveries))
        return trimmed, forgotten

    def stop(self) -> None:
        self._stop.set()

    def close(self) -> None:
        self._stop.set()
        with self._lock, self._poll_lock:
            self._drop_sources()
            self.leadership.release()
            self.store.close()
