"""What an assessment hands out: per site, its level, its hazards with their reasons and
expected time, its features and every rule's result — most of it worked out only when
read, since most assessments are never shown to anyone — and the JSON of ``assess
--json`` (DESIGN.md's shape).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import TYPE_CHECKING, Any

import numpy as np

from notifier.core.timefmt import iso_z
from notifier.engine.catalog import FEATURES, FeatureTable
from notifier.engine.rules import (
    LEVELS,
    Outcome,
    Rule,
    RuleEvaluation,
    RuleResult,
    _as_float,
    reason_text,
)

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Site

__all__ = ["HazardAssessment", "SiteAssessment", "hazards_json", "level_rank", "to_json"]


STALE_AFTER_MIN = 90.0  # a site whose newest reading is older is stale

_LEVEL_RANK = {level: rank for rank, level in enumerate(LEVELS)}


def level_rank(level: str) -> int:
    """0 for none, then watch, warning (the order of ``rules.LEVELS``)."""
    rank = _LEVEL_RANK.get(level)
    if rank is None:
        raise ValueError(f"unknown level {level!r} (known: {', '.join(LEVELS)})")
    return rank


class LazyTexts(Sequence[str]):
    """Text worked out only when read: most assessments are never shown to anyone."""

    __slots__ = ("_make", "_items")

    def __init__(self, make: Callable[[], list[str]]):
        self._make = make
        self._items: list[str] | None = None

    def _all(self) -> list[str]:
        if self._items is None:
            self._items = self._make()
        return self._items

    def __getitem__(self, k):  # type: ignore[no-untyped-def, override]
        return self._all()[k]

    def __len__(self) -> int:
        return len(self._all())

    def __eq__(self, other: object) -> bool:
        return list(self) == list(other) if isinstance(other, Sequence) else NotImplemented

    def __repr__(self) -> str:
        return repr(self._all())


@dataclass
class HazardAssessment:
    hazard: str
    level: str  # watch | warning
    kind: str
    eta: datetime | None
    rules: list[str]
    reasons: Sequence[str]
    explanations: Sequence[str]
    safety_refs: list[str]
    # how ``eta`` was worked out (``ETA_METHODS`` in assess); "" when there is none
    eta_method: str = ""
    # the kinds of the rules that fired at the hazard's level (e.g. observed, dense)
    kinds: tuple[str, ...] = ()


class FeatureRow(Mapping[str, float]):
    """One site's features, read from the table's arrays on demand."""

    __slots__ = ("_table", "_i")

    def __init__(self, table: FeatureTable, i: int):
        self._table = table
        self._i = i

    def __getitem__(self, name: str) -> float:
        return float(self._table.values[name][self._i])

    def get(self, name: str, default: Any = None) -> Any:  # type: ignore[override]
        # Mapping.get goes through __getitem__ and a caught KeyError: an event reads
        # some thirty features this way
        column = self._table.values.get(name)
        return default if column is None else float(column[self._i])

    def __iter__(self) -> Iterator[str]:
        return iter(self._table.values)

    def __len__(self) -> int:
        return len(self._table.values)

    @property
    def drivers(self) -> str:
        """What moved the site model's chance most, in words ("" without a model)."""
        d = self._table.drivers
        return "" if d is None else str(d[self._i])


class SiteResults(Sequence[RuleResult]):
    """One site's result for every rule, built from the rule evaluations on demand."""

    __slots__ = ("_evals", "_i", "_cache")

    def __init__(self, evals: Sequence[RuleEvaluation], i: int):
        self._evals = evals
        self._i = i
        self._cache: list[RuleResult] | None = None

    def _all(self) -> list[RuleResult]:
        if self._cache is None:
            self._cache = [ev[self._i] for ev in self._evals]
        return self._cache

    def __getitem__(self, k: int) -> RuleResult:  # type: ignore[override]
        return self._all()[k]

    def __len__(self) -> int:
        return len(self._evals)

    def where(self, keep: Callable[[Rule], bool]) -> list[RuleResult]:
        """The results of the rules ``keep`` accepts; the others are not built."""
        if self._cache is not None:
            return [r for r in self._cache if keep(r.rule)]
        return [ev[self._i] for ev in self._evals if keep(ev.rule)]


def rules_where(sa: SiteAssessment, keep: Callable[[Rule], bool]) -> list[Rule]:
    """The rules ``keep`` accepts among ``sa``'s results, in order, none built."""
    if isinstance(sa.results, SiteResults):
        return [ev.rule for ev in sa.results._evals if keep(ev.rule)]
    return [r.rule for r in sa.results if keep(r.rule)]


def results_where(sa: SiteAssessment, keep: Callable[[Rule], bool]) -> list[RuleResult]:
    """``sa``'s results for the rules ``keep`` accepts (built lazily where they can be)."""
    if isinstance(sa.results, SiteResults):
        return sa.results.where(keep)
    return [r for r in sa.results if keep(r.rule)]


def tested_where(sa: SiteAssessment, keep: Callable[[Rule], bool]) -> list[set[str]]:
    """The features each rule ``keep`` accepts tests (``Rule.features()``), in rule
    order; from the evaluations' lists of tests where they can be, not by walking each
    rule's tree again (for every event, that was a tenth of building it)."""
    if isinstance(sa.results, SiteResults):
        return [{t.feature for t in ev.tests} for ev in sa.results._evals if keep(ev.rule)]
    return [r.rule.features() for r in sa.results if keep(r.rule)]


def firing_reasons(
    sa: SiteAssessment, keep: Callable[[Rule], bool]
) -> list[tuple[Rule, list[str]]]:
    """The rules ``keep`` accepts that apply and fire at ``sa``'s site, in order, each
    with its ``RuleResult.reasons()``; from the rule evaluations where they can be, no
    result built (building one also works out which tests leave it undecided)."""
    results = sa.results
    if not isinstance(results, SiteResults) or results._cache is not None:
        return [(r.rule, r.reasons()) for r in results_where(sa, keep) if r.applies and r.fires]
    i = results._i
    out = []
    for ev in results._evals:
        if not (keep(ev.rule) and ev.applies[i] and ev.fires[i]):
            continue
        reasons = [
            reason_text(Outcome(test, _as_float(values[i]), True, True))
            for test, values, held in zip(ev.tests, ev.values, ev.held, strict=True)
            if held[i] and FEATURES[test.feature].in_reasons
        ]
        out.append((ev.rule, reasons))
    return out


@dataclass
class SiteAssessment:
    site: Site
    time: datetime
    features: Mapping[str, float]
    projection_method: str
    last_time: datetime | None
    results: Sequence[RuleResult]
    hazards: dict[str, HazardAssessment] = field(default_factory=dict)
    sustain: dict[str, str] = field(default_factory=dict)  # hazard → level with margins
    stale_after_min: float = STALE_AFTER_MIN
    # tonight's cooling curve (T0 °C, k K/h^½, sunset) when fitted, for charts
    projection: tuple[float, float, datetime] | None = None

    @property
    def level(self) -> str:
        ranks = [level_rank(h.level) for h in self.hazards.values()]
        return LEVELS[max(ranks)] if ranks else "none"

    @property
    def age_min(self) -> float:
        return self.features["data_age_min"]

    @property
    def stale(self) -> bool:
        return not (self.age_min <= self.stale_after_min)


def _json_number(v: float) -> Any:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return None
    if isinstance(v, float) and math.isinf(v):
        return None
    return round(float(v), 3)


def hazards_json(sa: SiteAssessment) -> list[dict[str, Any]]:
    """A site's hazards as ``to_json`` writes them, the highest level first."""
    return [
        {
            "hazard": h.hazard,
            "level": h.level,
            "kind": h.kind,
            "eta": iso_z(h.eta),
            "eta_method": h.eta_method or None,
            "rules": h.rules,
            "reasons": list(h.reasons),
        }
        for h in sorted(sa.hazards.values(), key=lambda h: -level_rank(h.level))
    ]


def to_json(assessments: Sequence[SiteAssessment]) -> list[dict[str, Any]]:
    """DESIGN.md's ``assess --json`` shape."""
    out = []
    for sa in assessments:
        feats: dict[str, Any] = {}
        for name, value in sa.features.items():
            if FEATURES[name].kind == "bool":
                feats[name] = None if math.isnan(value) else bool(value)
            else:
                feats[name] = _json_number(value)
        feats["projection_method"] = sa.projection_method or None
        hazards = hazards_json(sa)
        age = sa.age_min
        out.append(
            {
                "site": sa.site.id,
                "time": iso_z(sa.time),
                "level": sa.level,
                "hazards": hazards,
                "features": feats,
                "data": {
                    "last_time": iso_z(sa.last_time),
                    "age_min": None if not np.isfinite(age) else round(age, 1),
                    "stale": sa.stale,
                },
            }
        )
    return out
