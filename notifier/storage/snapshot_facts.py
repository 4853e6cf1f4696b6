"""The hazards of a cycle's status snapshots, kept as facts and put into words on read.

A site with a hazard used to have its hazards written out each cycle as ``to_json``
does (level, kind, expected time, rules, reasons in words): tens of thousands of sites
a cycle on a foggy night at 100,000 sites, each built one by one, for a page or a bot
answer that reads one site at a time. Now a cycle keeps one record of facts for all
its sites with a hazard, as arrays with a column per site:

- the **catalogue** (JSON): each rule evaluated, in order (id, hazard, level, kind and
  the tests whose values a reason shows: feature, operator, threshold, margin);
- ``fired``: which rules fire at the site; ``held``: which of those tests held there;
- ``values``: the site's features (what the expected time is read from), and
  ``tested``: the values the tests compared where they are not the features' own;
- ``fit``: tonight's cooling fit (T0, k, sunset; NaN where there is none).

:meth:`SnapshotFacts.hazards` makes a site's hazards from its column with the engine's
own :func:`~notifier.engine.assessed.aggregate` (levels, the leading rule, expected
times, the reasons' order and the one line per value) and reason words, so the words
are those the assessment itself gives (``tests/service/test_snapshots.py`` holds them
to the per-site oracle's ``to_json``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any, cast

import numpy as np

from notifier.engine.assessed import aggregate
from notifier.engine.assessment import SiteAssessment, hazards_json
from notifier.engine.rules import Comparison, Outcome, reason_text

__all__ = ["SnapshotFacts", "hazards_json"]


@dataclass(frozen=True)
class SnapshotFacts:
    """One cycle's facts for its sites with a hazard, a column per site (see the
    module's docstring)."""

    time: datetime
    catalogue: list[dict[str, Any]]
    features: list[str]
    tested_features: list[str]
    fired: np.ndarray  # bool, rules × columns
    held: np.ndarray  # bool, the catalogue's tests (rule by rule) × columns
    values: np.ndarray  # float64, features × columns
    tested: np.ndarray  # float64, tested_features × columns
    fit: np.ndarray  # float64, (T0 °C, k K/h^½, sunset POSIX s) × columns

    # -- stored (in the cycle's record: :mod:`notifier.storage.snapshot_rows`) ---------

    def head(self) -> dict[str, Any]:
        return {
            "time": self.time.timestamp(),  # exact, unlike the ISO text to the second
            "rules": self.catalogue,
            "features": self.features,
            "tested_features": self.tested_features,
        }

    def arrays(self) -> dict[str, np.ndarray]:
        return {
            "fired": np.packbits(self.fired, axis=0),
            "held": np.packbits(self.held, axis=0),
            "values": self.values,
            "tested": self.tested,
            "fit": self.fit,
        }

    @classmethod
    def from_parts(cls, head: Mapping[str, Any], data: Mapping[str, np.ndarray]) -> SnapshotFacts:
        rules = head["rules"]
        tests = sum(len(r["tests"]) for r in rules)
        values = data["values"]
        columns = values.shape[1]
        fired = np.unpackbits(data["fired"], axis=0, count=len(rules)).astype(bool)
        held = np.unpackbits(data["held"], axis=0, count=tests).astype(bool)
        return cls(
            time=datetime.fromtimestamp(head["time"], UTC),
            catalogue=rules,
            features=head["features"],
            tested_features=head["tested_features"],
            fired=fired.reshape(len(rules), columns),
            held=held.reshape(tests, columns),
            values=values,
            tested=data["tested"],
            fit=data["fit"],
        )

    # -- read --------------------------------------------------------------------------

    def hazards(self, column: int) -> list[dict[str, Any]]:
        """The hazards of the site at ``column``, as ``to_json`` writes them."""
        features = {
            k: float(v) for k, v in zip(self.features, self.values[:, column].tolist(), strict=True)
        }
        tested = dict(zip(self.tested_features, self.tested[:, column].tolist(), strict=True))
        t0, k, sunset = self.fit[:, column].tolist()
        projection = None
        if not (math.isnan(t0) or math.isnan(k) or math.isnan(sunset)):
            projection = (t0, k, datetime.fromtimestamp(sunset, UTC))
        sa = SiteAssessment(
            site=cast(Any, None),  # not read: the row carries the site
            time=self.time,
            features=features,
            projection_method="",
            last_time=None,
            results=[],
            projection=projection,
        )
        evals: list[_Fired] = []
        first = 0
        for r, rule in enumerate(self.catalogue):
            tests = rule["tests"]
            if self.fired[r, column]:
                texts = [
                    _words(test, tested.get(test[0], features.get(test[0], math.nan)))
                    for n, test in enumerate(tests)
                    if self.held[first + n, column]
                ]
                evals.append(_Fired(_RuleFacts(rule), texts))
            first += len(tests)
        every = [True] * len(evals)
        aggregate(sa, self.time, cast(Sequence[Any], evals), 0, every, every)
        return hazards_json(sa)


def _words(test: list[Any], value: float) -> str:
    """A test that held, in the words ``RuleEvaluation.reasons_at`` gives it."""
    feature, op, threshold, margin = test
    comparison = Comparison(feature, op, threshold, margin, None)
    return reason_text(Outcome(comparison, value, True, True))


class _RuleFacts:
    """What :func:`~notifier.engine.assessed.aggregate` reads of a rule."""

    __slots__ = ("id", "hazard", "level", "kind", "safety", "explain")

    def __init__(self, rule: dict[str, Any]):
        self.id: str = rule["id"]
        self.hazard: str = rule["hazard"]
        self.level: str = rule["level"]
        self.kind: str = rule["kind"]
        self.safety: tuple[str, ...] = ()  # not in a snapshot
        self.explain = ""  # not in a snapshot


class _Fired:
    """What :func:`~notifier.engine.assessed.aggregate` reads of a rule that fired:
    the rule, and its reasons at the site."""

    __slots__ = ("rule", "_texts")

    def __init__(self, rule: _RuleFacts, texts: list[str]):
        self.rule = rule
        self._texts = texts

    def reasons_at(self, i: int) -> list[str]:
        return self._texts
