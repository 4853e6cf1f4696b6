"""The per-site assessment as it was before issue 19, kept as an ORACLE: the array
version in ``notifier/engine/assess.py`` must give exactly these assessments (see
``tests/engine/test_oracle.py`` and ``tests/oracle_check.py``). Not used by fogwatch
itself. The feature tables and the rule evaluation are shared (they were arrays
already); what is kept here is the per-site Python that turned rule results into
hazards, levels, sustain levels, reasons and expected times.
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Callable, Mapping, Sequence
from datetime import UTC, datetime, timedelta
from functools import partial
from typing import TYPE_CHECKING

import numpy as np

from notifier.engine.assess import (
    HOLD_STEP_S,
    _add_feature_tables,
    _evaluate_rules,
    _hold_entries,
)
from notifier.engine.assessment import (
    STALE_AFTER_MIN,
    FeatureRow,
    HazardAssessment,
    LazyTexts,
    SiteAssessment,
    SiteResults,
    level_rank,
)
from notifier.engine.catalog import FeatureSettings, FeatureTable
from notifier.engine.features import FeatureCache
from notifier.engine.rules import LEVELS, Rule, RuleEvaluation, RuleSet

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.core.config import Site

ETA_HORIZON_H = 48.0
OBSERVED_KINDS = frozenset({"observed", "dense"})
SEA_KINDS = frozenset({"advection"})
COOLING_KINDS = frozenset({"radiation", "valley"})
SEEN_FIRST = frozenset({"observed", "dense", "freezing-fog", "frost"})


def oracle_assess_times(
    rules: RuleSet,
    sites: Sequence[Site],
    obs: pd.DataFrame,
    times: Sequence[datetime],
    settings: FeatureSettings | None = None,
    stale_after_min: float = STALE_AFTER_MIN,
    cache: dict[float, FeatureTable] | None = None,
    feature_cache: FeatureCache | None = None,  # kept by the caller between calls
) -> list[list[SiteAssessment]]:
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
    flags = _busy_flags(evals, len(sites) * len(times))
    ranked = [(ev, level_rank(ev.rule.level)) for ev in evals]
    moments: dict[float, datetime] = {}  # last readings and sunsets repeat: one object each

    def moment(seconds: float) -> datetime:
        found = moments.get(seconds)
        if found is None:
            found = moments[seconds] = datetime.fromtimestamp(seconds, UTC)
        return found

    out = []
    n = len(sites)
    for k, at in enumerate(times):
        now = tables[at.timestamp()]
        last_times = now.last_time.tolist()
        methods = now.projection_method.tolist()
        fits = (now.fit_t0_c.tolist(), now.fit_k_per_sqrt_h.tolist(), now.last_sunset.tolist())
        per_time = []
        for i, site in enumerate(sites):
            flat = k * n + i
            last = last_times[i]
            sa = SiteAssessment(
                site=site,
                time=at,
                features=FeatureRow(now, i),
                projection_method=str(methods[i] or ""),
                last_time=None if last != last else moment(last),
                results=SiteResults(evals, flat),
                stale_after_min=stale_after_min,
                projection=_projection(fits, i, moment) if methods[i] == "cooling-fit" else None,
            )
            if flat in flags:
                _aggregate(sa, at, ranked, flat, *flags[flat])
            per_time.append(sa)
        out.append(per_time)
    return out


def _busy_flags(
    evals: Sequence[RuleEvaluation], cells: int
) -> dict[int, tuple[list[bool], list[bool]]]:
    """(fires, sustains) per rule for the sites × times cells where some rule fires or
    holds with its margins: only those need a closer look. The flags come out of numpy
    once, as plain lists, for the per-site step."""
    fires = np.stack([ev.fires for ev in evals]) if evals else np.zeros((0, cells), bool)
    sustains = np.stack([ev.sustains for ev in evals]) if evals else fires
    busy_idx = np.flatnonzero((fires | sustains).any(axis=0))
    return dict(
        zip(
            busy_idx.tolist(),
            zip(fires[:, busy_idx].T.tolist(), sustains[:, busy_idx].T.tolist(), strict=True),
            strict=True,
        )
    )


def _projection(
    fits: tuple[list[float], list[float], list[float]],
    i: int,
    moment: Callable[[float], datetime],
) -> tuple[float, float, datetime] | None:
    """(T0, k, sunset) of site ``i``'s cooling fit, from the table's columns as lists."""
    t0, k, sunset = fits[0][i], fits[1][i], fits[2][i]
    if t0 != t0 or k != k or sunset != sunset:  # NaN
        return None
    return t0, k, moment(sunset)


def _aggregate(
    sa: SiteAssessment,
    at: datetime,
    ranked: Sequence[tuple[RuleEvaluation, int]],
    i: int,
    fires: Sequence[bool],
    sustains: Sequence[bool],
) -> None:
    by_hazard: dict[str, list[tuple[RuleEvaluation, int]]] = {}
    sustain_rank: dict[str, int] = {}
    for (ev, rank), fired, held in zip(ranked, fires, sustains, strict=True):
        if not (fired or held):
            continue
        hazard = ev.rule.hazard
        if fired:
            by_hazard.setdefault(hazard, []).append((ev, rank))
        if held and rank > sustain_rank.get(hazard, 0):
            sustain_rank[hazard] = rank
    for hazard, fired_evals in by_hazard.items():
        fired_evals.sort(key=lambda er: -er[1])
        top = fired_evals[0][1]
        lead = fired_evals[0][0].rule
        # the rules at the top level explain the alert; the lower ones are listed only
        top_evals = [ev for ev, rank in fired_evals if rank == top]
        # what is seen explains the alert before what was forecast
        top_evals.sort(key=lambda ev: ev.rule.kind not in SEEN_FIRST)
        refs = list(dict.fromkeys(x for ev, _ in fired_evals for x in ev.rule.safety))
        eta, method = _eta(hazard, lead, sa, at)
        sa.hazards[hazard] = HazardAssessment(
            hazard=hazard,
            level=LEVELS[top],
            kind=lead.kind,
            eta=eta,
            eta_method=method,
            kinds=tuple(dict.fromkeys(ev.rule.kind for ev in top_evals)),
            rules=[ev.rule.id for ev, _ in fired_evals],
            reasons=LazyTexts(partial(_reasons, top_evals, i)),
            explanations=LazyTexts(partial(_explanations, top_evals, i, sa.features)),
            safety_refs=refs,
        )
        sustain_rank[hazard] = max(sustain_rank.get(hazard, 0), top)
    sa.sustain.update({h: LEVELS[r] for h, r in sustain_rank.items() if r > 0})


def _reasons(evals: Sequence[RuleEvaluation], i: int) -> list[str]:
    """Each value once: two rules testing the same value against 0 °C (≤ and <) give
    one line, the first rule's."""
    out: list[str] = []
    said: set[str] = set()
    for ev in evals:
        for text in ev[i].reasons():
            value = _COMPARED.split(text, maxsplit=1)[0]
            if value not in said:
                said.add(value)
                out.append(text)
    return out


_COMPARED = re.compile(r" (?:[<>≤≥]|in|is) ")


def _explanations(
    evals: Sequence[RuleEvaluation], i: int, features: Mapping[str, float]
) -> list[str]:
    drivers = getattr(features, "drivers", "")
    values = {**features, "model_drivers": drivers} if drivers else features
    return [ev[i].explanation(values) for ev in evals if ev.rule.explain]


def _eta(hazard: str, lead: Rule, sa: SiteAssessment, at: datetime) -> tuple[datetime | None, str]:
    """When the hazard is expected, and how that was worked out (``ETA_METHODS``).

    Each kind of hazard has its own clock; where it cannot be read, there is no time
    rather than a wrong one (None, "").
    """
    features = sa.features
    if hazard == "data_gap":
        return None, ""
    if lead.kind in OBSERVED_KINDS or features.get("observed_fog") == 1.0:
        if hazard == "fog" or features.get("observed_fog") == 1.0:
            return at, "observed"
    if hazard == "icing":
        return _icing_eta(sa, at)
    if lead.kind in SEA_KINDS:
        return _sea_fog_eta(features, at)
    if lead.kind in COOLING_KINDS:
        return _cooling_eta(sa, at)
    return None, ""


def _cooling_eta(sa: SiteAssessment, at: datetime) -> tuple[datetime | None, str]:
    """Radiation (and valley) fog: when tonight's fitted cooling curve meets the dew
    point, before sunrise. Before the curve can be fitted (the evening's first hours) a
    straight trend would give times far out, so there is no time yet."""
    hours = sa.features.get("hours_to_fog", math.nan)
    if hours == 0.0:
        return at, "cooling-curve"
    sunrise_h = sa.features.get("hours_to_sunrise", math.nan)
    if sa.projection is None or not (hours <= sunrise_h):
        return None, ""
    return _hours_ahead(at, hours, "cooling-curve")


def _hours_ahead(at: datetime, hours: float | None, method: str) -> tuple[datetime | None, str]:
    if hours is None or not np.isfinite(hours) or hours < 0 or hours > ETA_HORIZON_H:
        return None, ""
    return at + timedelta(hours=float(hours)), method


def _sea_fog_eta(features: Mapping[str, float], at: datetime) -> tuple[datetime | None, str]:
    """Sea or advection fog: onshore air with its dew point above the water temperature
    is chilled from below towards saturation, so the fog comes when the dew-point
    depression, at its present rate of closing, reaches zero (Taylor 1917's picture of
    advection fog over cold water: docs/references.md [Taylor 1917]). Offshore wind, water
    warmer than the dew point, or a depression that is not closing: no time."""
    if features.get("onshore") != 1.0 or not features.get("dewpoint_minus_water_c", -1.0) > 0.0:
        return None, ""
    return _hours_ahead(at, features.get("hours_to_saturation", math.nan), "sea-fog")


def _icing_eta(sa: SiteAssessment, at: datetime) -> tuple[datetime | None, str]:
    """Ice: when the surface (or, with no surface sensor, the air) falls to 0 °C and to
    the frost point, whichever is lower: frost deposits only on a surface at or below
    both (docs/references.md [Karlsson 2001]). Now if it is there already; else the
    surface carried down tonight's fitted cooling curve at its present offset from the
    air, before sunrise; else no time."""
    features = sa.features
    air = features.get("temp_c", math.nan)
    surface = features.get("surface_temp_c", math.nan)
    if not np.isfinite(surface):
        surface = air
    frost = features.get("frost_point_c", math.nan)
    if not np.isfinite(surface):
        return None, ""
    target = min(0.0, frost) if np.isfinite(frost) else 0.0
    if surface <= target:
        return at, "surface-now"
    if sa.projection is None or not np.isfinite(air):
        return None, ""
    t0, k, sunset = sa.projection
    if k <= 0:
        return None, ""
    # T(h) = T0 − k·√h (the fitted square-root law), shifted by the surface's offset
    needed = (t0 + (surface - air) - target) / k
    if needed <= 0 or needed * needed > ETA_HORIZON_H + (at - sunset).total_seconds() / 3600:
        return None, ""
    eta = sunset + timedelta(hours=needed * needed)
    sunrise_h = features.get("hours_to_sunrise", math.nan)
    if eta <= at or not np.isfinite(sunrise_h) or eta > at + timedelta(hours=sunrise_h):
        return None, ""
    return eta, "surface-cooling"
