"""Every site's assessment at one time, as arrays over sites (pure: no I/O, no clock).

The levels, the sustain levels (the rules re-tested with their clearing margins), what
is seen and the stale flag come out of the rule evaluations in numpy, over sites ×
rules at once (:class:`SiteLevels`). A :class:`~notifier.engine.assessment.SiteAssessment`
— hazards with their reasons, expected times and explanations — is built only for a
site that is read: the lifecycle reads the few whose state changes; ``explain``,
``status`` and ``assess --json`` read theirs. A cycle over 10,000 sites in which
nothing changes builds none.
"""

from __future__ import annotations

import re
from collections import ChainMap
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from functools import partial
from typing import TYPE_CHECKING, Any, overload

import numpy as np

from notifier.engine.assessment import (
    FeatureRow,
    HazardAssessment,
    LazyTexts,
    SiteAssessment,
    SiteResults,
    level_rank,
)
from notifier.engine.eta import SEEN_FIRST, hazard_eta, sooner_candidates
from notifier.engine.event_parts import SIGHT_KINDS, sighted
from notifier.engine.rules import LEVELS, RuleEvaluation, render_template

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Site
    from notifier.engine.catalog import FeatureTable

__all__ = ["Assessments", "SiteLevels", "levels_of", "site_levels"]

#: one bit per kind of rule that means the hazard is seen (``SIGHT_KINDS``)
SIGHT_BITS = tuple(1 << k for k in range(len(SIGHT_KINDS)))
#: expected-time methods that mean now: never told as ``sooner``
NOW_METHODS = ("observed", "surface-now")


@dataclass(frozen=True)
class SiteLevels:
    """What the lifecycle needs of an assessment, as arrays over sites.

    ``levels[h]`` and ``sustain[h]`` are the ranks (``rules.LEVELS``) of hazard ``h``
    as assessed and with the clearing margins (never below the assessed one);
    ``seen[h]`` the kinds seen now at warning level (bits of ``SIGHT_BITS``);
    ``sooner[h]`` the expected time (POSIX s) a ``sooner`` could be told of, NaN where
    none (see :func:`~notifier.engine.eta.sooner_candidates`); ``stale`` whether the
    site's data is stale. A hazard no rule names has no entry (all none).
    """

    ids: Sequence[str]
    levels: Mapping[str, np.ndarray]
    sustain: Mapping[str, np.ndarray]
    seen: Mapping[str, np.ndarray]
    sooner: Mapping[str, np.ndarray]
    stale: np.ndarray

    def index(self) -> dict[str, int]:
        return {sid: i for i, sid in enumerate(self.ids)}


def site_levels(evals: Sequence[RuleEvaluation], cells: int) -> tuple[dict[str, np.ndarray], ...]:
    """(levels, sustain, seen, leading rule's kind) per hazard over ``cells`` (sites ×
    times), and the kinds the last one counts in; each rule one numpy pass: a hazard's
    level is the highest level among its rules that fire, its sustain level the highest
    among those that hold with their margins (or fire), its leading rule the first (in
    rule order) that fires at its level."""
    levels: dict[str, np.ndarray] = {}
    sustain: dict[str, np.ndarray] = {}
    seen: dict[str, np.ndarray] = {}
    for ev in evals:
        hazard, rank = ev.rule.hazard, np.int8(level_rank(ev.rule.level))
        level = levels.setdefault(hazard, np.zeros(cells, np.int8))
        np.maximum(level, ev.fires * rank, out=level)
        held = sustain.setdefault(hazard, np.zeros(cells, np.int8))
        np.maximum(held, ev.sustains * rank, out=held)
        bits = seen.setdefault(hazard, np.zeros(cells, np.uint8))
        # a warning rule that fires puts its hazard at warning: its kind is among the
        # kinds of the top level (``HazardAssessment.kinds``)
        if ev.rule.level == "warning" and ev.rule.kind in SIGHT_KINDS:
            bits |= ev.fires * np.uint8(SIGHT_BITS[SIGHT_KINDS.index(ev.rule.kind)])
    # the leading rule's kind, as its place in ``kinds`` (-1 where nothing fires)
    kinds = sorted({ev.rule.kind for ev in evals})
    lead: dict[str, np.ndarray] = {h: np.full(cells, -1, dtype=np.int16) for h in levels}
    for ev in reversed(evals):  # the first rule in order is written last
        hazard = ev.rule.hazard
        top = ev.fires & (levels[hazard] == level_rank(ev.rule.level))
        lead[hazard][top] = kinds.index(ev.rule.kind)
    for hazard, level in levels.items():
        np.maximum(sustain[hazard], level, out=sustain[hazard])
    return levels, sustain, seen, lead, {"kinds": np.array(kinds, dtype=object)}


def levels_of(assessments: Sequence[SiteAssessment]) -> SiteLevels:
    """The arrays of :class:`Assessments`; worked out site by site for any other
    sequence of assessments (hand-made ones in tests, or a subset)."""
    if isinstance(assessments, Assessments):
        return assessments.site_levels
    n = len(assessments)
    levels: dict[str, np.ndarray] = {}
    sustain: dict[str, np.ndarray] = {}
    seen: dict[str, np.ndarray] = {}
    sooner: dict[str, np.ndarray] = {}
    for i, sa in enumerate(assessments):
        for hazard, ha in sa.hazards.items():
            levels.setdefault(hazard, np.zeros(n, np.int8))[i] = level_rank(ha.level)
            if ha.eta is not None and ha.eta_method not in NOW_METHODS:
                sooner.setdefault(hazard, np.full(n, np.nan))[i] = ha.eta.timestamp()
            kinds = sighted(ha)
            bits = sum(SIGHT_BITS[SIGHT_KINDS.index(k)] for k in dict.fromkeys(kinds))
            seen.setdefault(hazard, np.zeros(n, np.uint8))[i] = bits
        for hazard, level in sa.sustain.items():
            sustain.setdefault(hazard, np.zeros(n, np.int8))[i] = level_rank(level)
    for hazard, ranks in levels.items():
        held = sustain.setdefault(hazard, np.zeros(n, np.int8))
        np.maximum(held, ranks, out=held)
    stale = np.fromiter((sa.stale for sa in assessments), dtype=bool, count=n)
    for hazard in levels:
        sooner.setdefault(hazard, np.full(n, np.nan))
    return SiteLevels([sa.site.id for sa in assessments], levels, sustain, seen, sooner, stale)


class Assessments(Sequence[SiteAssessment]):
    """Every site's assessment at one time: arrays over sites (:attr:`site_levels`),
    and ``assessments[i]`` the :class:`SiteAssessment` of site ``i``, built when first
    read and kept."""

    def __init__(
        self,
        sites: Sequence[Site],
        at: datetime,
        table: FeatureTable,
        evals: Sequence[RuleEvaluation],
        offset: int,
        stale_after_min: float,
        cells: tuple[Mapping[str, np.ndarray], ...],
        flags: tuple[np.ndarray, np.ndarray],
        moments: dict[float, datetime],
    ):
        n = len(sites)
        self.sites = sites
        self.time = at
        self.table = table
        self._evals = evals
        self._offset = offset  # this time's first cell among the evaluations' sites × times
        self._stale_after_min = stale_after_min
        self._flags = flags  # (fires, sustains): rules × cells
        busy = flags[0][:, offset : offset + n] | flags[1][:, offset : offset + n]
        self._busy = busy.any(axis=0) if len(evals) else np.zeros(n, dtype=bool)
        self._moments = moments
        self._built: dict[int, SiteAssessment] = {}
        with np.errstate(invalid="ignore"):
            stale = ~(table.values["data_age_min"] <= stale_after_min)
        levels, sustain, seen, lead = (
            {h: a[offset : offset + n] for h, a in part.items()} for part in cells[:4]
        )
        kinds = list(cells[4]["kinds"])

        def lead_in(wanted: frozenset[str], codes: np.ndarray) -> np.ndarray:
            return np.isin(codes, [k for k, kind in enumerate(kinds) if kind in wanted])

        fitted = table.projection_method == "cooling-fit"
        fits = (
            np.where(fitted, table.fit_t0_c, np.nan),
            np.where(fitted, table.fit_k_per_sqrt_h, np.nan),
            np.where(fitted, table.last_sunset, np.nan),
        )
        sooner = {
            h: sooner_candidates(
                h, partial(lead_in, codes=codes), table.values, fits, at.timestamp()
            )
            for h, codes in lead.items()
        }
        self.site_levels = SiteLevels([s.id for s in sites], levels, sustain, seen, sooner, stale)

    @property
    def evaluations(self) -> Sequence[RuleEvaluation]:
        """The rule evaluations these assessments were made from (sites × times cells)."""
        return self._evals

    def cells_of(self, rows: np.ndarray) -> np.ndarray:
        """The evaluations' cells of this time's sites at ``rows``."""
        return self._offset + np.asarray(rows)

    def fires_at(self, cells: np.ndarray) -> np.ndarray:
        """Whether each rule fires (rules × the given cells)."""
        return np.asarray(self._flags[0])[:, cells]

    def __len__(self) -> int:
        return len(self.sites)

    @overload
    def __getitem__(self, i: int) -> SiteAssessment: ...

    @overload
    def __getitem__(self, i: slice) -> list[SiteAssessment]: ...

    def __getitem__(self, i: int | slice) -> SiteAssessment | list[SiteAssessment]:
        n = len(self.sites)
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(n))]
        if i < 0:
            i += n
        if not 0 <= i < n:
            raise IndexError(i)
        found = self._built.get(i)
        if found is None:
            found = self._built[i] = self._build(i)
        return found

    def __iter__(self) -> Iterator[SiteAssessment]:
        return (self[i] for i in range(len(self.sites)))

    def __repr__(self) -> str:
        return f"<Assessments of {len(self.sites)} sites at {self.time.isoformat()}>"

    def levels(self) -> np.ndarray:
        """Each site's level rank (the highest of its hazards'), without building any
        assessment."""
        ranks = list(self.site_levels.levels.values())
        return np.max(ranks, axis=0) if ranks else np.zeros(len(self.sites), np.int8)

    def quiet(self) -> np.ndarray:
        """Whether no rule fires at each site (so it has no hazards), without building
        any assessment."""
        n, offset = len(self.sites), self._offset
        if not len(self._evals):
            return np.ones(n, dtype=bool)
        fires = np.asarray(self._flags[0][:, offset : offset + n].any(axis=0))
        return ~fires

    def unkept(self, i: int) -> SiteAssessment:
        """Site ``i``'s assessment, built (or taken if built already) without keeping
        it: for a reader that needs it once (the status snapshot of every site)."""
        found = self._built.get(i)
        return found if found is not None else self._build(i)

    def _moment(self, seconds: float) -> datetime:
        # newest readings and sunsets repeat from site to site: one object each
        found = self._moments.get(seconds)
        if found is None:
            found = self._moments[seconds] = datetime.fromtimestamp(seconds, UTC)
        return found

    def _build(self, i: int) -> SiteAssessment:
        table, flat, at = self.table, self._offset + i, self.time
        last = float(table.last_time[i])
        method = table.projection_method[i]
        sa = SiteAssessment(
            site=self.sites[i],
            time=at,
            features=FeatureRow(table, i),
            projection_method=str(method or ""),
            last_time=None if last != last else self._moment(last),
            results=SiteResults(self._evals, flat),
            stale_after_min=self._stale_after_min,
            projection=_projection(table, i, self._moment) if method == "cooling-fit" else None,
        )
        if self._busy[i]:
            fires, sustains = (f[:, flat].tolist() for f in self._flags)
            aggregate(sa, at, self._evals, flat, fires, sustains)
        return sa


def _projection(
    table: FeatureTable, i: int, moment: Callable[[float], datetime]
) -> tuple[float, float, datetime] | None:
    """(T0, k, sunset) of site ``i``'s cooling fit."""
    t0, k = float(table.fit_t0_c[i]), float(table.fit_k_per_sqrt_h[i])
    sunset = float(table.last_sunset[i])
    if t0 != t0 or k != k or sunset != sunset:  # NaN
        return None
    return t0, k, moment(sunset)


def aggregate(
    sa: SiteAssessment,
    at: datetime,
    evals: Sequence[RuleEvaluation],
    i: int,
    fires: Sequence[bool],
    sustains: Sequence[bool],
) -> None:
    """One site's hazards (level, kind, expected time, rules, reasons) and sustain
    levels, from whether each rule fires and holds with its margins at cell ``i``."""
    by_hazard: dict[str, list[tuple[RuleEvaluation, int]]] = {}
    sustain_rank: dict[str, int] = {}
    for ev, fired, held in zip(evals, fires, sustains, strict=True):
        if not (fired or held):
            continue
        hazard, rank = ev.rule.hazard, level_rank(ev.rule.level)
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
        eta, method = hazard_eta(hazard, lead, sa, at)
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
        for text in ev.reasons_at(i):
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
    values: Mapping[str, Any] = (
        ChainMap({"model_drivers": drivers}, dict(features)) if drivers else features
    )
    # ``RuleResult.explanation``, without building the result
    return [render_template(ev.rule.explain, values) for ev in evals if ev.rule.explain]
