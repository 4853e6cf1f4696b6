"""Rule results → hazards, levels and reasons per site (pure: no I/O, no clock).

For each site and hazard the level is the highest level among the rules that fired.
``sustain`` is the highest level whose rules still hold once their clearing margins are
applied; the lifecycle keeps an active alert at that level instead of dropping it the
moment a value touches its threshold.

Both are worked out for all sites at once, as arrays over sites × rules
(:mod:`notifier.engine.assessed`); a site's hazards with their reasons and expected
times are built only when its assessment is read.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterator, Mapping, Sequence
from datetime import UTC, datetime
from typing import TYPE_CHECKING

import numpy as np

from notifier.engine.assessed import Assessments, site_levels
from notifier.engine.assessment import STALE_AFTER_MIN
from notifier.engine.catalog import FeatureSettings, FeatureTable
from notifier.engine.eta import ETA_METHODS as ETA_METHODS  # (re-exported)
from notifier.engine.eta import hazard_eta as _eta  # noqa: F401  (re-exported)
from notifier.engine.features import FeatureCache
from notifier.engine.rules import RuleEvaluation, RuleSet, evaluate_rule
from notifier.engine.site_chunks import features_by_share

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.core.config import Site

__all__ = ["assess", "assess_times"]


HOLD_STEP_S = 600.0  # hold windows are checked every 10 minutes

# A hold is judged on the data: the rule must have held from ``hold`` before the newest
# reading until now, so a reading carried forward between reports cannot meet a hold by
# itself. The newest reading may be this far behind the evaluation time for that; older,
# the hold is not met (hourly reports are the sparsest routine ones: common practice).
HOLD_REACH_S = 3600.0


def assess(
    rules: RuleSet,
    sites: Sequence[Site],
    obs: pd.DataFrame,
    at: datetime,
    settings: FeatureSettings | None = None,
    stale_after_min: float = STALE_AFTER_MIN,
    cache: dict[float, FeatureTable] | None = None,
    feature_cache: FeatureCache | None = None,  # kept by the caller between calls
) -> Assessments:
    """Evaluate every rule for every site at ``at``.

    ``cache`` (keyed by POSIX seconds) lets a caller stepping through time reuse the
    feature tables of earlier evaluation times for the hold windows; it must only be
    shared between calls over the same sites and the same observations.
    """
    return assess_times(
        rules, sites, obs, [at], settings, stale_after_min, cache, feature_cache=feature_cache
    )[0]


def assess_times(
    rules: RuleSet,
    sites: Sequence[Site],
    obs: pd.DataFrame,
    times: Sequence[datetime],
    settings: FeatureSettings | None = None,
    stale_after_min: float = STALE_AFTER_MIN,
    cache: dict[float, FeatureTable] | None = None,
    feature_cache: FeatureCache | None = None,  # kept by the caller between calls
) -> list[Assessments]:
    """``assess`` at each of ``times``, with the rules evaluated once for them all.

    The feature tables of every time (and of their hold windows) are stacked, so each
    rule is one vectorised pass over sites × times; ``result[k]`` equals
    ``assess(..., times[k])``.

    A rule's hold window runs back from its site's newest reading, not from the
    evaluation time (see ``HOLD_REACH_S``): a time between two hourly reports sees the
    same hold as the report before it, so the answer does not hang on how often one
    asks.
    """
    if any(t.tzinfo is None for t in times):
        raise ValueError("evaluation time must be timezone-aware")
    times = [t.astimezone(UTC) for t in times]
    # one setting for the stale flag and the data_stale feature the data-gap rule tests
    settings = dataclasses.replace(settings or FeatureSettings(), stale_after_min=stale_after_min)
    tables: dict[float, FeatureTable] = {} if cache is None else cache
    max_hold = max((math.ceil(r.hold_s / HOLD_STEP_S) for r in rules.rules), default=0)
    _add_feature_tables(tables, obs, sites, times, [max_hold] * len(times), settings, feature_cache)
    behind_s = (
        np.concatenate([t.timestamp() - tables[t.timestamp()].last_time for t in times])
        if times
        else np.zeros(0)
    )
    entries = {r.hold_s: _hold_entries(r.hold_s, behind_s) for r in rules.rules if r.hold_s > 0}
    if entries:
        depth = np.max(np.stack(list(entries.values())), axis=0).reshape(len(times), -1)
        depths = [max(max_hold, int(d.max(initial=0))) for d in depth]
        _add_feature_tables(tables, obs, sites, times, depths, settings, feature_cache)
    evals = _evaluate_rules(rules, sites, tables, times, entries)
    cells = len(sites) * len(times)
    levels = site_levels(evals, cells)
    fires = np.stack([ev.fires for ev in evals]) if evals else np.zeros((0, cells), bool)
    sustains = np.stack([ev.sustains for ev in evals]) if evals else fires
    moments: dict[float, datetime] = {}  # last readings and sunsets repeat: one object each
    return [
        Assessments(
            sites,
            at,
            tables[at.timestamp()],
            evals,
            k * len(sites),
            stale_after_min,
            levels,
            (fires, sustains),
            moments,
        )
        for k, at in enumerate(times)
    ]


def _hold_entries(hold_s: float, behind_s: np.ndarray) -> np.ndarray:
    """Per cell, how many hold steps before the evaluation time the window of a rule
    held for ``hold_s`` reaches: back to ``hold_s`` before the newest reading
    (``behind_s`` seconds ago); -1 where that reading is older than ``HOLD_REACH_S``.
    A site that has never reported keeps the window of the clock."""
    steps = math.ceil(hold_s / HOLD_STEP_S)
    with np.errstate(invalid="ignore"):
        reach = np.ceil((np.maximum(behind_s, 0.0) + hold_s) / HOLD_STEP_S)
        out = np.where(behind_s > HOLD_REACH_S, -1, reach)
    return np.where(np.isnan(behind_s), steps, out).astype(np.intp)


def _add_feature_tables(
    tables: dict[float, FeatureTable],
    obs: pd.DataFrame,
    sites: Sequence[Site],
    times: Sequence[datetime],
    depths: Sequence[int],
    settings: FeatureSettings | None,
    feature_cache: FeatureCache | None,
) -> None:
    """Compute, in one call, the feature tables of ``times`` and of their hold windows
    (``depths[k]`` hold steps back from ``times[k]``) that ``tables`` does not hold yet."""
    wanted = sorted(
        {
            t.timestamp() - j * HOLD_STEP_S
            for t, depth in zip(times, depths, strict=True)
            for j in range(depth + 1)
        }
        - set(tables)
    )
    if wanted:
        found = features_by_share(  # a share of the sites at a time: a smaller block
            obs,
            sites,
            [datetime.fromtimestamp(w, UTC) for w in wanted],
            settings,
            cache=feature_cache,
        )
        tables.update(zip(wanted, found, strict=True))


def _evaluate_rules(
    rules: RuleSet,
    sites: Sequence[Site],
    tables: Mapping[float, FeatureTable],
    times: Sequence[datetime],
    entries: Mapping[float, np.ndarray],
) -> list[RuleEvaluation]:
    """Each rule in one vectorised pass over sites × times (the times stacked), with the
    tables of its hold window behind it (``entries``: per hold, how far back each cell's
    window reaches, see :func:`_hold_entries`)."""
    k_times = len(times)

    def stacked(j: int) -> Mapping[str, np.ndarray]:
        # a time whose windows do not reach this far back stands in with its own table
        # (left out of the hold by ``hold_entries``)
        parts = [
            tables.get(t.timestamp() - j * HOLD_STEP_S, tables[t.timestamp()]).values for t in times
        ]
        if k_times == 1:
            return parts[0]
        return _Stacked(parts)

    depth = max((int(e.max(initial=0)) for e in entries.values()), default=0)
    feats = [stacked(j) for j in range(depth + 1)]
    evals: list[RuleEvaluation] = []
    for rule in rules.rules:
        applies = np.tile(rule.sites.mask(sites), k_times)
        if rule.hold_s <= 0:
            evals.append(evaluate_rule(rule, sites, feats[:1], applies=applies))
            continue
        reach = entries[rule.hold_s]
        evals.append(
            evaluate_rule(
                rule,
                sites,
                feats[: int(reach.max(initial=0)) + 1],
                applies=applies,
                hold_entries=reach,
            )
        )
    return evals


class _Stacked(Mapping[str, np.ndarray]):
    """Each feature of several times' tables, their cells one after the other; a
    feature is put together when a rule first reads it (the rules read a few of the
    many features)."""

    def __init__(self, parts: Sequence[Mapping[str, np.ndarray]]):
        self._parts = parts
        self._joined: dict[str, np.ndarray] = {}

    def __getitem__(self, name: str) -> np.ndarray:
        found = self._joined.get(name)
        if found is None:
            found = self._joined[name] = np.concatenate([p[name] for p in self._parts])
        return found

    def __iter__(self) -> Iterator[str]:
        return iter(self._parts[0])

    def __len__(self) -> int:
        return len(self._parts[0])
