"""Rules: their model (comparisons, groups, site filters, safety notes) and their
three-valued evaluation over all sites at once — with explanations.

Rule files are read by :mod:`notifier.engine.rule_files`.

Evaluation is three-valued: a feature that is unknown (NaN) makes its test *unknown*,
which never counts as held — unknown is not "below threshold".

No expressions and no ``eval``: a rule can only compare named features to constants.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, cast

import numpy as np

from notifier.core.timefmt import unit_suffix
from notifier.engine.catalog import FEATURES, format_value
from notifier.engine.templates import render_template as render_template  # (re-exported)
from notifier.engine.verdict import undecided_by

__all__ = [
    "HAZARDS",
    "LEVELS",
    "Condition",
    "Group",
    "Rule",
    "RuleEvaluation",
    "RuleResult",
    "RuleSet",
    "SafetyNote",
    "Comparison",
    "evaluate_rule",
    "reason_text",
]

HAZARDS = ("fog", "icing", "data_gap")
LEVELS = ("none", "watch", "warning")
EXPOSURES = ("open", "valley", "forest", "waterside", "coast", "urban")
USES = ("farm", "port", "venue", "other")
OPS = {"below": "<", "above": ">", "at_most": "≤", "at_least": "≥", "between": "in", "is": "is"}


@dataclass(frozen=True)
class Comparison:
    """One comparison of a feature against a constant."""

    feature: str
    op: str
    value: Any
    margin: float
    line: int | None

    def describe_threshold(self, relaxed: bool = False, negated: bool = False) -> str:
        """``≤ 3.5 m/s``; with ``relaxed``, the threshold its margin moves it to (see
        :meth:`_bounds` for ``negated``)."""
        unit = FEATURES[self.feature].unit
        sym = OPS[self.op]
        if self.op == "is":
            return f"is {str(self.value).lower()}"
        if self.op == "between":
            lo, hi = self._bounds(relaxed, negated)
            return f"{sym} {_num(lo)}…{_num(hi)}{unit_suffix(unit)}"
        return f"{sym} {_num(self._bounds(relaxed, negated))}{unit_suffix(unit)}"

    def _bounds(self, relaxed: bool, negated: bool = False) -> Any:
        """The threshold(s); ``relaxed`` applies the margin in the direction that keeps
        the rule true: it widens the test, or narrows it when ``negated`` (the test sits
        under an odd number of ``not``s, so a narrower test is an easier ``not``)."""
        m = (-self.margin if negated else self.margin) if relaxed else 0.0
        if self.op == "between":
            return (self.value[0] - m, self.value[1] + m)
        if self.op in ("below", "at_most"):
            return self.value + m
        if self.op in ("above", "at_least"):
            return self.value - m
        return self.value

    def evaluate(
        self, values: np.ndarray, relaxed: bool, negated: bool = False
    ) -> tuple[np.ndarray, np.ndarray]:
        """(held, known) arrays for feature ``values``."""
        values = np.asarray(values)
        if self.op == "is":
            known = ~_isnan(values)
            with np.errstate(invalid="ignore"):
                held = known & (values.astype(float) == float(bool(self.value)))
            return held, known
        v = values.astype(float)
        known = ~np.isnan(v)
        bound = self._bounds(relaxed, negated)
        with np.errstate(invalid="ignore"):
            if self.op == "below":
                held = v < bound
            elif self.op == "above":
                held = v > bound
            elif self.op == "at_most":
                held = v <= bound
            elif self.op == "at_least":
                held = v >= bound
            else:
                held = (v >= bound[0]) & (v <= bound[1])
        return held & known, known


@dataclass(frozen=True)
class Group:
    """``all``, ``any`` or ``not`` over child conditions."""

    op: str
    children: tuple[Condition, ...]
    line: int | None

    def evaluate_group(
        self, feats: Mapping[str, np.ndarray], relaxed: bool, negated: bool = False
    ) -> tuple[np.ndarray, np.ndarray]:
        # a ``not`` flips the margins below it: they still make its own result easier to hold
        inner = negated != (self.op == "not")
        results = [evaluate_condition(c, feats, relaxed, inner) for c in self.children]
        helds = np.array([r[0] for r in results])
        knowns = np.array([r[1] for r in results])
        # each child gives an array per site, so reducing axis 0 gives an array (the stubs
        # also allow numpy's bool scalar)
        if self.op == "all":
            false = (knowns & ~helds).any(axis=0)
            held = cast(np.ndarray, helds.all(axis=0))
            return held, held | false
        if self.op == "any":
            held = cast(np.ndarray, helds.any(axis=0))
            return held, held | knowns.all(axis=0)
        # not: Kleene negation, unknown stays unknown
        return knowns[0] & ~helds[0], knowns[0]


Condition = Comparison | Group


def evaluate_condition(
    cond: Condition, feats: Mapping[str, np.ndarray], relaxed: bool, negated: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """(held, known) of ``cond``; ``relaxed`` applies the clearing margins, each in the
    direction that keeps the whole condition true (``negated``: under an odd number of
    ``not``s)."""
    if isinstance(cond, Comparison):
        return cond.evaluate(feats[cond.feature], relaxed, negated)
    return cond.evaluate_group(feats, relaxed, negated)


def iter_comparisons(cond: Condition) -> Iterable[Comparison]:
    if isinstance(cond, Comparison):
        yield cond
    else:
        for child in cond.children:
            yield from iter_comparisons(child)


@dataclass(frozen=True)
class SiteFilter:
    exposure: tuple[str, ...] = ()
    use: tuple[str, ...] = ()
    tags: tuple[str, ...] = ()
    ids: tuple[str, ...] = ()

    def mask(self, sites: Sequence[Any]) -> np.ndarray:
        """``matches`` for every site at once."""
        n = len(sites)
        if not (self.exposure or self.use or self.tags or self.ids):
            return np.ones(n, dtype=bool)
        if self.tags or self.ids:
            return np.fromiter((self.matches(s) for s in sites), dtype=bool, count=n)
        out = np.ones(n, dtype=bool)
        if self.exposure:
            out &= np.isin(np.array([s.exposure for s in sites]), self.exposure)
        if self.use:
            out &= np.isin(np.array([s.use for s in sites]), self.use)
        return out

    def matches(self, site: Any) -> bool:
        return (
            (not self.exposure or site.exposure in self.exposure)
            and (not self.use or site.use in self.use)
            and (not self.tags or bool(set(self.tags) & set(site.tags)))
            and (not self.ids or site.id in self.ids)
        )


@dataclass(frozen=True)
class Rule:
    id: str
    hazard: str
    level: str
    kind: str
    when: Group
    hold_s: float
    sites: SiteFilter
    explain: str
    safety: tuple[str, ...]
    path: str
    line: int | None

    @property
    def where(self) -> str:
        return f"{Path(self.path).name}:{self.line}"

    def features(self) -> set[str]:
        return {t.feature for t in iter_comparisons(self.when)}


@dataclass(frozen=True)
class SafetyNote:
    id: str
    hazards: tuple[str, ...]
    uses: tuple[str, ...]
    text: str


@dataclass(frozen=True)
class RuleSet:
    rules: tuple[Rule, ...]
    safety: Mapping[str, SafetyNote]
    files: tuple[str, ...]

    def held_features(self) -> set[str]:
        """The features the rules with a hold test: all that is read of an earlier
        time's feature table (``assess._evaluate_rules`` reads it for the hold windows
        alone), so a caller keeping such tables needs keep only these."""
        return {name for r in self.rules if r.hold_s > 0 for name in r.features()}

    def rule(self, rule_id: str) -> Rule:
        for r in self.rules:
            if r.id == rule_id:
                return r
        raise KeyError(rule_id)

    def notes_for(self, hazard: str, use: str, refs: Iterable[str] = ()) -> list[SafetyNote]:
        """Notes a rule names, then every note for this hazard and site use, no repeats."""
        out: dict[str, SafetyNote] = {}
        for ref in refs:
            if ref in self.safety:
                out[ref] = self.safety[ref]
        for note in self.safety.values():
            if hazard in note.hazards and (not note.uses or use in note.uses):
                out.setdefault(note.id, note)
        return list(out.values())


# ---------------------------------------------------------------------------------------
# evaluation


@dataclass
class Outcome:
    test: Comparison
    value: float
    held: bool
    known: bool


@dataclass
class RuleResult:
    """One rule at one site: whether it fired, and the evidence."""

    rule: Rule
    applies: bool
    fires: bool = False
    sustains: bool = False  # held with clearing margins, at the evaluation time
    held_now: bool = False
    hold_met: bool = True
    missing: list[str] = field(default_factory=list)  # only those that leave it undecided
    outcomes: list[Outcome] = field(default_factory=list)

    def reasons(self) -> list[str]:
        """Each test that held, value against threshold: 'dew-point depression 0.8 °C ≤ 1 °C'."""
        return [
            reason_text(o) for o in self.outcomes if o.held and FEATURES[o.test.feature].in_reasons
        ]

    def explanation(self, values: Mapping[str, float]) -> str:
        return render_template(self.rule.explain, values)


class RuleEvaluation(Sequence[RuleResult]):
    """One rule over many sites, as arrays; ``evaluation[i]`` is site i's RuleResult.

    The per-site results are built only when asked for, so assessing thousands of
    sites creates Python objects just for the few that something is happening at.
    """

    def __init__(
        self,
        rule: Rule,
        applies: np.ndarray,
        fires: np.ndarray,
        sustains: np.ndarray,
        held_now: np.ndarray,
        hold_met: np.ndarray,
        tests: list[Comparison],
        held: list[np.ndarray],
        known: list[np.ndarray],
        values: list[np.ndarray],
    ):
        self.rule = rule
        self.applies = applies
        self.fires = fires
        self.sustains = sustains
        self.held_now = held_now
        self.hold_met = hold_met
        self.tests = tests
        self.held = held
        self.known = known
        self.values = values
        # per test that reasons show: its values, where it held, and its texts by value
        self._said: list[tuple[np.ndarray, np.ndarray, Comparison, dict[float, str]]] | None
        self._said = None

    def __len__(self) -> int:
        return int(self.applies.size)

    def __getitem__(self, i: int) -> RuleResult:  # type: ignore[override]
        if not -len(self) <= i < len(self):
            raise IndexError(i)
        outcomes = [
            Outcome(t, _as_float(v[i]), bool(h[i]), bool(k[i]))
            for t, v, h, k in zip(self.tests, self.values, self.held, self.known, strict=True)
        ]
        return RuleResult(
            rule=self.rule,
            applies=bool(self.applies[i]),
            fires=bool(self.fires[i]),
            sustains=bool(self.sustains[i]),
            held_now=bool(self.held_now[i]),
            hold_met=bool(self.hold_met[i]),
            missing=undecided_by(self.rule, outcomes),
            outcomes=outcomes,
        )

    def reasons_at(self, i: int) -> list[str]:
        """``self[i].reasons()``, without building the result: only the tests that
        held are read. A test's words are the same for the same value, so each value's
        text is made once per evaluation (sites share values: tens of thousands of
        sites, a few hundred distinct readings)."""
        if self._said is None:
            self._said = [
                (self.values[n], self.held[n], t, {})
                for n, t in enumerate(self.tests)
                if FEATURES[t.feature].in_reasons
            ]
        out = []
        for values, held, test, texts in self._said:
            if not held[i]:
                continue
            value = _as_float(values[i])
            text = texts.get(value)
            if text is None:
                text = reason_text(Outcome(test, value, True, True))
                if value == value:  # NaN is never found again: not kept
                    texts[value] = text
            out.append(text)
        return out


def evaluate_rule(
    rule: Rule,
    sites: Sequence[Any],
    feats_at: Sequence[Mapping[str, np.ndarray]],
    applies: np.ndarray | None = None,
    hold_entries: np.ndarray | None = None,
) -> RuleEvaluation:
    """Evaluate ``rule`` for every site at once.

    ``feats_at[0]`` holds each feature as an array over ``sites`` at the evaluation
    time; further entries are the same features at earlier times inside the rule's hold
    window (oldest last). The rule fires where its conditions held at every one of them.
    ``applies`` may give the site filter's mask precomputed (e.g. tiled over times).
    ``hold_entries``, per site, is how many of the earlier entries fall in that site's
    hold window (the rest are left out); a negative count means the hold cannot be
    judged, and is not met. Without it every entry counts.
    """
    if applies is None:
        applies = rule.sites.mask(sites)
    held_now, _ = evaluate_condition(rule.when, feats_at[0], relaxed=False)
    sustain, _ = evaluate_condition(rule.when, feats_at[0], relaxed=True)
    hold_met = np.ones(applies.shape, dtype=bool)
    if hold_entries is not None:
        hold_met &= hold_entries >= 0
    for j, feats in enumerate(feats_at[1:], start=1):
        held_then, _ = evaluate_condition(rule.when, feats, relaxed=False)
        hold_met &= held_then if hold_entries is None else held_then | (hold_entries < j)
    fires = applies & held_now & hold_met
    tests = list(iter_comparisons(rule.when))
    held, known, values = [], [], []
    for t in tests:
        v = np.asarray(feats_at[0][t.feature])
        h, k = t.evaluate(v, relaxed=False)
        held.append(h)
        known.append(k)
        values.append(v)
    return RuleEvaluation(
        rule, applies, fires, applies & sustain, held_now, hold_met, tests, held, known, values
    )


def _as_float(v: Any) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return float("nan")


def _isnan(values: np.ndarray) -> np.ndarray:
    if values.dtype.kind == "f":
        return np.isnan(values)
    if values.dtype.kind == "O":
        return np.array([v is None or (isinstance(v, float) and np.isnan(v)) for v in values])
    return np.zeros(values.shape, dtype=bool)


def _num(v: float) -> str:
    return f"{v:g}"


def reason_text(o: Outcome) -> str:
    """One test's outcome as an alert's reason: "wind 2.1 m/s ≤ 3.5 m/s"."""
    spec = FEATURES[o.test.feature]
    if o.test.op == "is":
        return f"{spec.label}: {format_value(o.test.feature, o.value)}"
    if np.isinf(o.value):
        return f"{spec.label}: no readings at all"
    return f"{spec.label} {format_value(o.test.feature, o.value)} {o.test.describe_threshold()}"
