"""Replay: run the rules over history with a simulated clock, and score them.

The replay calls the same code as the live service — features, rules, assessment and
the alert lifecycle — stepping a simulated clock through the history. It delivers
nothing; asked for a folder, it writes there what each configured subscriber would have
received (routed and held for quiet hours as live), one ``.eml`` per message. Each step
sees only the readings up to its own time (and forecast rows), exactly as a live cycle
would.

This module holds the replay itself, its result (``ReplayResult``) and the scoring of
each site-night (defined in ``notifier.history.verify``, with the reference forecasts
scored on the same nights); ``notifier.history.report`` turns results into text, JSON,
CSV and PNG.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from notifier.engine.assessment import results_where
from notifier.engine.features import FeatureCache
from notifier.engine.readings import epoch_seconds
from notifier.engine.verdict import failing
from notifier.history.baselines import References, references
from notifier.history.probability import chance_scores
from notifier.history.truth import fog_truth, observed_rows, rows_by_site
from notifier.history.verify import (
    Contingency,
    NightOutcome,
    alert_for_night,
    median_lead_min,
    night_fog,
    night_of,
    night_watched,
    table,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.engine.alerts import Event
    from notifier.service.loading import Loaded

__all__ = ["ReplayResult", "feature_column", "replay"]

HISTORY = timedelta(hours=26)  # what one step's features can look back on
BATCH = 144  # steps whose features and rules are worked out together (a day at 10 min)
AHEAD = timedelta(hours=37)  # forecast rows one step can use


@dataclass
class ReplayResult:
    start: datetime
    end: datetime
    step_s: float
    site_ids: list[str]
    events: list[Event]
    times: np.ndarray  # POSIX seconds of each step
    fog_level: np.ndarray  # sites × steps: 0 none, 1 watch, 2 warning
    nights: list[NightOutcome]
    label: str = "rules"
    references: References | None = None  # the reference forecasts on the same nights
    delivered: int = 0
    extra: dict[str, Any] = field(default_factory=dict)
    # with a site model: the chance of fog at each step (sites × steps, NaN unknown) and
    # its scores against what followed (``notifier.history.probability``)
    probability: np.ndarray | None = None
    probability_scores: dict[str, Any] | None = None
    # nights left out of every score: the visibility went unreported for hours
    # (``verify.night_watched``)
    unwatched: list[NightOutcome] = field(default_factory=list)

    def table(self, level: str = "warning", site: str | None = None) -> Contingency:
        return table([n for n in self.nights if site is None or n.site == site], level)

    def lead(self, which: str, site: str | None = None) -> float | None:
        return median_lead_min([n for n in self.nights if site is None or n.site == site], which)


def _covered_nights(
    sites: Sequence[Any], start: datetime, end: datetime, step_s: float
) -> Iterator[tuple[int, Any, datetime, datetime]]:
    """(site index, site, night start, night end) of each site-night the replay covers
    whole (to within one step)."""
    for i, site in enumerate(sites):
        night = night_of(start, site.timezone)
        while night < end:
            nxt = night + timedelta(days=1)
            if (
                night.timestamp() >= start.timestamp() - step_s
                and nxt.timestamp() <= end.timestamp() + step_s
            ):
                yield i, site, night, nxt
            night = datetime.combine(nxt.date(), night.timetz()).replace(tzinfo=night.tzinfo)


def _readings(obs: pd.DataFrame, sites: Sequence[Any]) -> dict[str, tuple[Any, Any, Any]]:
    """Per site, its observed (POSIX seconds, dew-point depression °C, wind m/s), in
    time order: what the one-line reference rule reads."""
    rows = observed_rows(obs)
    out: dict[str, tuple[Any, Any, Any]] = {}
    if not len(rows):
        return out

    def column(name: str) -> np.ndarray:
        if name not in rows:
            return np.full(len(rows), np.nan)
        return rows[name].to_numpy(dtype=float, na_value=np.nan)

    depression = column("temp_c") - column("dewpoint_c")
    wind = column("wind_ms")
    t_s = epoch_seconds(rows["time"])
    ids = [s.id for s in sites]
    for sid, mine in zip(ids, rows_by_site(rows["site"], ids), strict=True):
        out[sid] = (t_s[mine], depression[mine], wind[mine])
    return out


def _why_not(sa: Any) -> list[str]:
    """For a miss: each fog rule for this site and what kept it from firing."""
    lines = []
    for r in results_where(sa, lambda rule: rule.hazard == "fog"):
        if not r.applies or r.fires:
            continue
        if r.missing:
            lines.append(f"{r.rule.id}: unknown {', '.join(r.missing)}")
            continue
        failed = [
            f"{o.test.feature} {o.value:.4g} {o.test.describe_threshold()}"
            for o in failing(r.rule, r.outcomes)
        ]
        if not failed and not r.hold_met:
            failed = [f"held for less than {r.rule.hold_s / 60:.0f} min"]
        lines.append(f"{r.rule.id}: not met: {'; '.join(failed[:3])}")
    return lines


def replay(
    loaded: Loaded,
    obs: pd.DataFrame,
    start: datetime,
    end: datetime,
    step_s: float = 600.0,
    *,
    label: str = "rules",
    deliver_to: Path | None = None,
    progress: Callable[[int, int], None] | None = None,
    truth: pd.DataFrame | None = None,
    on_step: Callable[[int, Sequence[Any]], None] | None = None,
) -> ReplayResult:
    """Step from ``start`` to ``end`` and collect events, alert periods and night scores.

    ``truth`` holds the reports the nights are scored on when they are not the site's
    own (another station's, already given the site's id); ``on_step(k, assessments)``
    sees each step's site assessments (``fogwatch learn`` reads the features there).
    """
    from notifier.engine.assessment import level_rank
    from notifier.engine.lifecycle import step

    config = loaded.config
    sites = list(config.sites)
    ids = [s.id for s in sites]
    start, end = start.astimezone(UTC), end.astimezone(UTC)
    obs = _in_site_order(obs, ids)
    pos = {sid: i for i, sid in enumerate(ids)}
    n_steps = int(math.floor((end - start).total_seconds() / step_s)) + 1
    times = start.timestamp() + np.arange(n_steps) * step_s
    fog_level = np.zeros((len(sites), n_steps), dtype=np.int8)
    chance = np.full((len(sites), n_steps), np.nan) if loaded.model is not None else None
    spells, reported = fog_truth(obs if truth is None else truth, sites)
    fog_nights = {
        (site.id, night): night_fog(spells[site.id], night, nxt)
        for _, site, night, nxt in _covered_nights(sites, start, end, step_s)
    }
    onsets = {key: onset for key, (onset, _) in fog_nights.items() if onset is not None}
    onset_steps = _onset_steps(onsets, times, step_s, pos)
    why_not: dict[tuple[str, datetime], list[str]] = {}
    states: dict[Any, Any] = {}
    events: list[Event] = []
    for k, assessments in enumerate(_step_assessments(loaded, sites, obs, times)):
        now = datetime.fromtimestamp(float(times[k]), UTC)
        states, found = step(states, assessments, now, config.alerts)
        events.extend(found)
        for (site_id, hazard), st in states.items():
            if hazard == "fog":
                fog_level[pos[site_id], k] = level_rank(st.level)
        for i, key in onset_steps.get(k, []):
            why_not[key] = _why_not(assessments[i])
        if chance is not None:
            chance[:, k] = feature_column(assessments, "fog_probability")
        if on_step is not None:
            on_step(k, assessments)
        if progress is not None:
            progress(k + 1, n_steps)

    every = _nights(sites, times, fog_level, fog_nights, events, why_not, start, end, step_s)
    watched = [night_watched(reported[n.site], n.night) for n in every]
    nights = [n for n, w in zip(every, watched, strict=True) if w]
    refs = references(nights, _readings(obs, sites))
    result = ReplayResult(start, end, step_s, ids, events, times, fog_level, nights, label, refs)
    result.unwatched = [n for n, w in zip(every, watched, strict=True) if not w]
    if chance is not None and loaded.model is not None:
        result.probability = chance
        result.probability_scores = chance_scores(
            chance, times, spells, reported, sites, loaded.model.hours
        )
    if deliver_to is not None:
        result.delivered = _write_messages(loaded, events, deliver_to)
    return result


def feature_column(assessments: Sequence[Any], name: str) -> np.ndarray:
    """A feature of every site at one step: read from the step's feature table (no site's
    assessment is built for it), or from each assessment where there is no table."""
    table = getattr(assessments, "table", None)
    if table is not None:
        return np.asarray(table.values[name], dtype=float)
    return np.array([sa.features[name] for sa in assessments], dtype=float)


def _in_site_order(obs: pd.DataFrame, ids: list[str]) -> pd.DataFrame:
    """The rows in time order, with site and kind as codes in the configuration's order."""
    import pandas as pd

    obs = obs.sort_values("time", kind="stable").reset_index(drop=True) if len(obs) else obs
    if len(obs):
        # sites coded in the configuration's order: the feature pass reads the codes as
        # site indices instead of looking each row's text up (the rows are in time order)
        # (from codes: rows of sites not configured become missing without a warning)
        site_dtype = pd.CategoricalDtype(pd.Index(ids, dtype=object))
        kind_dtype = pd.CategoricalDtype(pd.Index(["forecast", "obs"], dtype=object))
        obs = obs.assign(
            site=pd.Categorical.from_codes(
                site_dtype.categories.get_indexer(obs["site"].to_numpy(dtype=object)),
                dtype=site_dtype,
            ),
            kind=pd.Categorical.from_codes(
                kind_dtype.categories.get_indexer(obs["kind"].to_numpy(dtype=object)),
                dtype=kind_dtype,
            ),
        )
    return obs


def _onset_steps(
    onsets: dict[tuple[str, datetime], datetime],
    times: np.ndarray,
    step_s: float,
    pos: dict[str, int],
) -> dict[int, list[tuple[int, tuple[str, datetime]]]]:
    """The step at (or just after) each fog onset, with the site's index and night."""
    n_steps = len(times)
    onset_steps: dict[int, list[tuple[int, tuple[str, datetime]]]] = {}
    for key, when in onsets.items():
        k = int(math.ceil((when.timestamp() - times[0]) / step_s))
        onset_steps.setdefault(min(max(k, 0), n_steps - 1), []).append((pos[key[0]], key))
    return onset_steps


def _step_assessments(
    loaded: Loaded, sites: Sequence[Any], obs: pd.DataFrame, times: np.ndarray
) -> Iterator[Sequence[Any]]:
    """Each step's site assessments in turn, worked out a batch of steps at a time."""
    from notifier.engine.assess import HOLD_REACH_S, HOLD_STEP_S, assess_times

    t_rows = epoch_seconds(obs["time"]) if len(obs) else np.array([])
    cache: dict[float, Any] = {}
    features = FeatureCache()  # the feature code's cache, kept from batch to batch
    stale = loaded.config.alerts.stale_after / 60.0
    # the hold windows reach back from each site's newest reading (see assess_times)
    hold_s = max((r.hold_s for r in loaded.rules.rules), default=0.0) + HOLD_STEP_S + HOLD_REACH_S
    for k in range(0, len(times), BATCH):
        t_s = times[k]
        # features and rules for a batch of steps at once (sites × times)
        batch_times = times[k : k + BATCH]
        lo, hi = np.searchsorted(
            t_rows,
            [
                t_s - HISTORY.total_seconds() - hold_s,
                float(batch_times[-1]) + AHEAD.total_seconds(),
            ],
        )
        window = obs.iloc[lo:hi] if len(obs) else obs
        cache.clear()
        yield from assess_times(
            loaded.rules,
            sites,
            window,
            [datetime.fromtimestamp(float(t), UTC) for t in batch_times],
            loaded.settings,
            stale_after_min=stale,
            cache=cache,
            feature_cache=features,
        )


def _nights(
    sites: Sequence[Any],
    times: np.ndarray,
    fog_level: np.ndarray,
    fog_nights: dict[tuple[str, datetime], tuple[datetime | None, datetime | None]],
    events: Sequence[Event],
    why_not: dict[tuple[str, datetime], list[str]],
    start: datetime,
    end: datetime,
    step_s: float,
) -> list[NightOutcome]:
    """The outcome of each site-night the replay covers whole: the fog onset in it, and
    the first watch and warning that count for it (``verify.alert_for_night``)."""
    out = []
    fog_events: dict[str, list[Event]] = {}
    for e in events:
        if e.hazard == "fog":
            fog_events.setdefault(e.site_id, []).append(e)

    def moment(seconds: float | None) -> datetime | None:
        return None if seconds is None else datetime.fromtimestamp(seconds, UTC)

    for i, site, night, nxt in _covered_nights(sites, start, end, step_s):
        n_start, n_end = night.timestamp(), nxt.timestamp()
        onset, carried = fog_nights[(site.id, night)]
        onset_s = None if onset is None else onset.timestamp()
        carried_s = None if carried is None else carried.timestamp()
        o = NightOutcome(site.id, night, fog_onset=onset, carried_fog_until=carried)
        for rank, name in ((1, "first_watch"), (2, "first_warning")):
            when = alert_for_night(times, fog_level[i], rank, n_start, n_end, onset_s, carried_s)
            setattr(o, name, moment(when))
        o.rules = sorted(
            {
                r
                for e in fog_events.get(site.id, ())
                if n_start <= e.time.timestamp() < n_end
                for r in e.rules
            }
        )
        o.why_not = why_not.get((site.id, night), [])
        out.append(o)
    return out


def _write_messages(loaded: Loaded, events: Sequence[Event], folder: Path) -> int:
    """Each message the configured subscribers would have received, as ``.eml`` files.

    The events are routed as the live service routes them (each subscriber's sites,
    hazards and ``min_level``; the console default when none are configured), and what
    quiet hours held goes as one summary per subscriber when those hours end, as the
    dispatcher sends it. Bot follows and hushes live in the store, not in the history,
    so they play no part. Each subscriber gets a folder, ``folder/<subscriber id>/``,
    whatever their channel; each file is named by the time it would have gone (UTC) and
    the delivery's key, and its ``Date`` is that time. Nothing is sent.
    """
    import dataclasses
    import hashlib

    from notifier.core.config import EmailChannel, FolderChannel
    from notifier.delivery.channels import build_channel
    from notifier.delivery.messages import Message, render, render_summary
    from notifier.delivery.routing import default_subscribers, route
    from notifier.storage.deliveries import Delivery

    config = loaded.config
    subscribers = {s.id: s for s in default_subscribers(config)}
    by_id = {e.id: e for e in events}
    # (when it goes, subscriber, key, message, delivery)
    out: list[tuple[datetime, str, str, Message, Delivery]] = []
    held: dict[tuple[str, datetime], list[Delivery]] = {}
    for d in route(events, list(subscribers.values()), config):
        if d.summary and d.not_before is not None:
            held.setdefault((d.subscriber_id, d.not_before), []).append(d)
            continue
        ev = by_id[d.event_id]
        zone = subscribers[d.subscriber_id].timezone
        message = render(ev, config.site(ev.site_id), loaded.rules, zone)
        out.append((ev.time, d.subscriber_id, d.key, message, d))
    for (sub_id, released), batch in held.items():
        items = [(by_id[d.event_id], config.site(by_id[d.event_id].site_id)) for d in batch]
        zone = subscribers[sub_id].timezone
        # the dispatcher's key for the same set of held deliveries
        digest = hashlib.sha256("|".join(sorted(d.key for d in batch)).encode()).hexdigest()
        message = render_summary(items, loaded.rules, zone, at=released)
        out.append((released, sub_id, f"fw-sum-{digest[:32]}", message, batch[0]))
    clock = [datetime.now(UTC)]
    mail = {c.id for c in config.channels if isinstance(c, EmailChannel | FolderChannel)}
    for when, sub_id, key, message, delivery in sorted(out, key=lambda m: m[:3]):
        clock[0] = when
        if delivery.channel_id not in mail:
            # a webhook's or text channel's address is not an email address: no To
            delivery = dataclasses.replace(delivery, address=None)
        channel = build_channel(
            FolderChannel(id="replay", type="folder", path=folder / sub_id),
            clock=lambda: clock[0],
        )
        channel.send(message, delivery, f"{when:%Y%m%dT%H%M%SZ}-{key}")
    return len(out)
