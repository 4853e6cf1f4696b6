"""Rule files: their schema, their validation, and their evaluation — with explanations.

A rule file is YAML::

    version: 1
    rules:
      - id: radiation-fog-warning
        hazard: fog            # fog | icing | data_gap
        level: warning         # watch | warning
        kind: radiation        # free word shown to people: radiation, advection, ...
        when:                  # a list means "all of these"
          - dewpoint_depression_c: {at_most: 1.0, margin: 0.5}
          - any:
              - depression_trend_c_per_h: {below: 0}
              - hours_to_saturation: {at_most: 2}
        hold: 20min            # conditions must hold this long before the rule fires
        sites: {exposure: [open, valley]}   # also use, tags, ids; all optional
        explain: "Air within {dewpoint_depression_c:.1f} °C of saturation"
        safety: [fog-general]  # ids of notes in a safety file

Tests on a feature: ``below`` (<), ``above`` (>), ``at_most`` (<=), ``at_least`` (>=),
``between: [lo, hi]`` (inclusive) and ``is`` (true/false). ``margin`` widens a numeric
test while the hazard is already active, so a value hovering at the threshold does not
make alerts flap (hysteresis). Groups: ``all``, ``any``, ``not``.

Evaluation is three-valued: a feature that is unknown (NaN) makes its test *unknown*,
which never counts as held — unknown is not "below threshold".

No expressions and no ``eval``: a rule can only compare named features to constants.
"""

from __future__ import annotations

import difflib
import string
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, cast

import numpy as np

from notifier.core.config import parse_duration_s
from notifier.core.errors import ConfigError, ConfigProblem
from notifier.core.timefmt import quantity_text, unit_suffix
from notifier.core.yamlio import MarkedDict, MarkedList, load_yaml
from notifier.engine.features import FEATURES

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
    "load_rule_set",
]

RULE_FILE_VERSION = 1
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

    def describe_threshold(self, relaxed: bool = False) -> str:
        unit = FEATURES[self.feature].unit
        sym = OPS[self.op]
        if self.op == "is":
            return f"is {str(self.value).lower()}"
        if self.op == "between":
            lo, hi = self._bounds(relaxed)
            return f"{sym} {_num(lo)}…{_num(hi)}{unit_suffix(unit)}"
        return f"{sym} {_num(self._bounds(relaxed))}{unit_suffix(unit)}"

    def _bounds(self, relaxed: bool) -> Any:
        m = self.margin if relaxed else 0.0
        if self.op == "between":
            return (self.value[0] - m, self.value[1] + m)
        if self.op in ("below", "at_most"):
            return self.value + m
        if self.op in ("above", "at_least"):
            return self.value - m
        return self.value

    def evaluate(self, values: np.ndarray, relaxed: bool) -> tuple[np.ndarray, np.ndarray]:
        """(held, known) arrays for feature ``values``."""
        values = np.asarray(values)
        if self.op == "is":
            known = ~_isnan(values)
            with np.errstate(invalid="ignore"):
                held = known & (values.astype(float) == float(bool(self.value)))
            return held, known
        v = values.astype(float)
        known = ~np.isnan(v)
        bound = self._bounds(relaxed)
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
        self, feats: Mapping[str, np.ndarray], relaxed: bool
    ) -> tuple[np.ndarray, np.ndarray]:
        results = [evaluate_condition(c, feats, relaxed) for c in self.children]
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
    cond: Condition, feats: Mapping[str, np.ndarray], relaxed: bool
) -> tuple[np.ndarray, np.ndarray]:
    if isinstance(cond, Comparison):
        return cond.evaluate(feats[cond.feature], relaxed)
    return cond.evaluate_group(feats, relaxed)


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
    missing: list[str] = field(default_factory=list)
    outcomes: list[Outcome] = field(default_factory=list)

    def reasons(self) -> list[str]:
        """Each test that held, value against threshold: 'dew-point depression 0.8 °C ≤ 1 °C'."""
        return [_reason(o) for o in self.outcomes if o.held]

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
            missing=sorted({o.test.feature for o in outcomes if not o.known}),
            outcomes=outcomes,
        )


def evaluate_rule(
    rule: Rule,
    sites: Sequence[Any],
    feats_at: Sequence[Mapping[str, np.ndarray]],
    applies: np.ndarray | None = None,
) -> RuleEvaluation:
    """Evaluate ``rule`` for every site at once.

    ``feats_at[0]`` holds each feature as an array over ``sites`` at the evaluation
    time; further entries are the same features at earlier times inside the rule's hold
    window (oldest last). The rule fires where its conditions held at every one of them.
    ``applies`` may give the site filter's mask precomputed (e.g. tiled over times).
    """
    if applies is None:
        applies = rule.sites.mask(sites)
    held_now, _ = evaluate_condition(rule.when, feats_at[0], relaxed=False)
    sustain, _ = evaluate_condition(rule.when, feats_at[0], relaxed=True)
    hold_met = np.ones(applies.shape, dtype=bool)
    for feats in feats_at[1:]:
        held_then, _ = evaluate_condition(rule.when, feats, relaxed=False)
        hold_met &= held_then
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


def format_value(feature: str, value: float) -> str:
    spec = FEATURES[feature]
    return quantity_text(value, spec.unit, decimals=spec.decimals, kind=spec.kind)


def _reason(o: Outcome) -> str:
    spec = FEATURES[o.test.feature]
    if o.test.op == "is":
        return f"{spec.label}: {format_value(o.test.feature, o.value)}"
    if np.isinf(o.value):
        return f"{spec.label}: no readings at all"
    return f"{spec.label} {format_value(o.test.feature, o.value)} {o.test.describe_threshold()}"


class _SafeFormatter(string.Formatter):
    def get_value(self, key: Any, args: Any, kwargs: Any) -> Any:
        return kwargs.get(key, float("nan"))

    def format_field(self, value: Any, format_spec: str) -> str:
        if isinstance(value, float) and np.isnan(value):
            return "?"
        return super().format_field(value, format_spec)


def render_template(template: str, values: Mapping[str, Any]) -> str:
    """Fill ``{feature:.1f}`` placeholders; an unknown value shows as '?'."""
    return _SafeFormatter().format(template, **{k: _plain(v) for k, v in values.items()})


def _plain(v: Any) -> Any:
    if isinstance(v, np.generic):
        return v.item()
    return v


# ---------------------------------------------------------------------------------------
# loading


class _FileProblems:
    def __init__(self, path: str):
        self.path = path
        self.items: list[ConfigProblem] = []

    def add(self, line: int | None, rule_id: str | None, msg: str) -> None:
        prefix = f"rule {rule_id!r}: " if rule_id else ""
        self.items.append(ConfigProblem(self.path, line, prefix + msg))


def _suggest(name: str) -> str:
    close = difflib.get_close_matches(name, list(FEATURES), n=1, cutoff=0.6)
    return f" — did you mean {close[0]!r}?" if close else ""


def _key_line(node: Any, key: str) -> int | None:
    if isinstance(node, MarkedDict):
        return node.key_lines.get(key, node.line)
    return getattr(node, "line", None)


def _parse_condition(node: Any, line: int | None, rid: str, probs: _FileProblems) -> Condition:
    if isinstance(node, list):
        lines = node.item_lines if isinstance(node, MarkedList) else [line] * len(node)
        if not node:
            probs.add(line, rid, "empty condition list (expected at least one condition)")
        children = tuple(
            _parse_condition(c, ln, rid, probs) for c, ln in zip(node, lines, strict=False)
        )
        return Group("all", children, line)
    if not isinstance(node, dict) or len(node) != 1:
        probs.add(
            getattr(node, "line", line),
            rid,
            "a condition is a mapping with one key: a feature name, or all / any / not "
            f"(got {_short(node)})",
        )
        return Group("all", (), line)
    ((key, value),) = node.items()
    kline = _key_line(node, key)
    if key in ("all", "any"):
        if not isinstance(value, list) or not value:
            probs.add(kline, rid, f"'{key}' needs a non-empty list of conditions")
            return Group(key, (), kline)
        inner = _parse_condition(value, kline, rid, probs)
        return Group(key, inner.children if isinstance(inner, Group) else (inner,), kline)
    if key == "not":
        return Group("not", (_parse_condition(value, kline, rid, probs),), kline)
    if key not in FEATURES:
        probs.add(kline, rid, f"unknown feature {key!r}{_suggest(str(key))}")
        return Group("all", (), kline)
    return _parse_comparison(str(key), value, kline, rid, probs)


def _parse_comparison(
    feature: str, spec: Any, line: int | None, rid: str, probs: _FileProblems
) -> Comparison:
    kind = FEATURES[feature].kind
    bad = Comparison(feature, "is", True, 0.0, line)
    if not isinstance(spec, dict):
        probs.add(
            line, rid, f"{feature}: expected a test such as {{below: 1.5}} (got {_short(spec)})"
        )
        return bad
    margin = spec.get("margin", 0.0)
    ops = [k for k in spec if k != "margin"]
    unknown = [k for k in ops if k not in OPS]
    if unknown:
        probs.add(
            _key_line(spec, unknown[0]),
            rid,
            f"{feature}: unknown test {unknown[0]!r} (expected one of {', '.join(OPS)})",
        )
        return bad
    if len(ops) != 1:
        probs.add(line, rid, f"{feature}: expected exactly one test (got {len(ops)})")
        return bad
    op = ops[0]
    value = spec[op]
    vline = _key_line(spec, op)
    if not isinstance(margin, int | float) or isinstance(margin, bool) or margin < 0:
        probs.add(
            _key_line(spec, "margin"),
            rid,
            f"{feature}: margin must be a number ≥ 0 (got {margin!r})",
        )
        margin = 0.0
    if op == "is":
        if kind != "bool":
            probs.add(
                vline,
                rid,
                f"{feature}: 'is' applies to yes/no features; use below/above/between for a number",
            )
        elif not isinstance(value, bool):
            probs.add(vline, rid, f"{feature}: 'is' expects true or false (got {value!r})")
        return Comparison(feature, op, bool(value), 0.0, line)
    if kind == "bool":
        probs.add(vline, rid, f"{feature}: is a yes/no feature (expected 'is: true')")
        return bad
    if op == "between":
        ok = (
            isinstance(value, list)
            and len(value) == 2
            and all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
        )
        if not ok or value[0] > value[1]:
            probs.add(
                vline,
                rid,
                f"{feature}: between expects [low, high] with low ≤ high (got {value!r})",
            )
            return bad
        return Comparison(feature, op, (float(value[0]), float(value[1])), float(margin), line)
    if not isinstance(value, int | float) or isinstance(value, bool):
        probs.add(vline, rid, f"{feature}: {op} expects a number (got {value!r})")
        return bad
    return Comparison(feature, op, float(value), float(margin), line)


def _short(node: Any) -> str:
    text = repr(node)
    return text if len(text) < 60 else text[:57] + "..."


_RULE_KEYS = {
    "id",
    "hazard",
    "level",
    "kind",
    "when",
    "hold",
    "sites",
    "explain",
    "safety",
    "description",
}


def _parse_rule(node: Any, line: int | None, path: str, probs: _FileProblems) -> Rule | None:
    if not isinstance(node, dict):
        probs.add(line, None, f"a rule is a mapping (got {_short(node)})")
        return None
    rid = node.get("id")
    if not isinstance(rid, str) or not rid:
        probs.add(line, None, "rule without an 'id' (expected a short name)")
        rid = f"<rule at line {line}>"
    start = len(probs.items)
    for key in node:
        if key not in _RULE_KEYS:
            close = difflib.get_close_matches(str(key), sorted(_RULE_KEYS), n=1)
            hint = f" — did you mean {close[0]!r}?" if close else ""
            probs.add(_key_line(node, key), rid, f"unknown key {key!r}{hint}")
    hazard = node.get("hazard")
    if hazard not in HAZARDS:
        probs.add(
            _key_line(node, "hazard"),
            rid,
            f"hazard must be one of {', '.join(HAZARDS)} (got {hazard!r})",
        )
    level = node.get("level")
    if level not in ("watch", "warning"):
        probs.add(_key_line(node, "level"), rid, f"level must be watch or warning (got {level!r})")
    kind = node.get("kind", "general")
    if not isinstance(kind, str):
        probs.add(_key_line(node, "kind"), rid, f"kind must be a word (got {kind!r})")
    if "when" not in node:
        probs.add(line, rid, "missing 'when' (expected a list of conditions)")
        when = Group("all", (), line)
    else:
        parsed = _parse_condition(node["when"], _key_line(node, "when"), rid, probs)
        when = parsed if isinstance(parsed, Group) else Group("all", (parsed,), parsed.line)
    hold_s = 0.0
    if "hold" in node:
        try:
            hold_s = parse_duration_s(node["hold"])
        except ValueError as exc:
            probs.add(_key_line(node, "hold"), rid, f"hold: {exc}")
    sites = _parse_sites(node.get("sites"), _key_line(node, "sites"), rid, probs)
    explain = node.get("explain", "")
    if not isinstance(explain, str):
        probs.add(_key_line(node, "explain"), rid, "explain must be text")
        explain = ""
    else:
        try:
            for _, name, _, _ in string.Formatter().parse(explain):
                if name is not None and name not in FEATURES:
                    probs.add(
                        _key_line(node, "explain"),
                        rid,
                        f"explain: unknown feature {{{name}}}{_suggest(name)}",
                    )
        except ValueError as exc:
            probs.add(_key_line(node, "explain"), rid, f"explain: bad template ({exc})")
    safety = node.get("safety", [])
    if isinstance(safety, str):
        safety = [safety]
    if not isinstance(safety, list) or not all(isinstance(s, str) for s in safety):
        probs.add(_key_line(node, "safety"), rid, "safety must be a list of note ids")
        safety = []
    if len(probs.items) > start:
        return None
    return Rule(
        id=rid,
        hazard=str(hazard),
        level=str(level),
        kind=str(kind),
        when=when,
        hold_s=hold_s,
        sites=sites,
        explain=explain,
        safety=tuple(safety),
        path=path,
        line=line,
    )


def _parse_sites(node: Any, line: int | None, rid: str, probs: _FileProblems) -> SiteFilter:
    if node is None:
        return SiteFilter()
    if not isinstance(node, dict):
        probs.add(line, rid, "sites must be a mapping of exposure / use / tags / ids")
        return SiteFilter()
    allowed = {"exposure": EXPOSURES, "use": USES, "tags": None, "ids": None}
    values: dict[str, tuple[str, ...]] = {}
    for key, value in node.items():
        kline = _key_line(node, key)
        if key not in allowed:
            probs.add(
                kline, rid, f"sites: unknown key {key!r} (expected exposure, use, tags or ids)"
            )
            continue
        items = [value] if isinstance(value, str) else value
        if not isinstance(items, list) or not all(isinstance(v, str) for v in items):
            probs.add(kline, rid, f"sites.{key}: expected a list of names")
            continue
        choices = allowed[key]
        for v in items:
            if choices and v not in choices:
                probs.add(kline, rid, f"sites.{key}: {v!r} is not one of {', '.join(choices)}")
        values[key] = tuple(items)
    return SiteFilter(**values)


def _parse_safety(node: Any, line: int | None, probs: _FileProblems) -> dict[str, SafetyNote]:
    out: dict[str, SafetyNote] = {}
    if not isinstance(node, dict):
        probs.add(line, None, "safety_notes must be a mapping of note id → note")
        return out
    for nid, note in node.items():
        nline = _key_line(node, nid)
        if not isinstance(note, dict) or not isinstance(note.get("text"), str):
            probs.add(nline, None, f"safety note {nid!r}: expected a mapping with 'text'")
            continue
        hazards = tuple(note.get("hazards", ()))
        uses = tuple(note.get("uses", ()))
        for h in hazards:
            if h not in HAZARDS:
                probs.add(nline, None, f"safety note {nid!r}: unknown hazard {h!r}")
        for u in uses:
            if u not in USES:
                probs.add(nline, None, f"safety note {nid!r}: unknown use {u!r}")
        out[str(nid)] = SafetyNote(str(nid), hazards, uses, " ".join(note["text"].split()))
    return out


def rule_files(paths: Iterable[Path]) -> list[Path]:
    files: list[Path] = []
    for p in paths:
        p = Path(p)
        if p.is_dir():
            files.extend(sorted(q for q in p.iterdir() if q.suffix in (".yaml", ".yml")))
        else:
            files.append(p)
    return files


def load_rule_set(paths: Iterable[Path]) -> RuleSet:
    """Load every rule and safety file; raise ``ConfigError`` with all problems at once.

    Nothing half-loads: one bad file fails the whole set, so the running set (if any)
    stays in force.
    """
    problems: list[ConfigProblem] = []
    rules: list[Rule] = []
    safety: dict[str, SafetyNote] = {}
    files = rule_files(paths)
    if not files:
        raise ConfigError(ConfigProblem(", ".join(map(str, paths)), None, "no rule files found"))
    for path in files:
        try:
            raw = load_yaml(path)
        except ConfigError as exc:
            problems.extend(exc.problems)
            continue
        probs = _FileProblems(str(path))
        if not isinstance(raw, dict):
            probs.add(1, None, "expected a mapping with 'version' and 'rules' or 'safety_notes'")
        else:
            if raw.get("version") != RULE_FILE_VERSION:
                probs.add(
                    _key_line(raw, "version"),
                    None,
                    f"version must be {RULE_FILE_VERSION} (got {raw.get('version')!r})",
                )
            for key in raw:
                if key not in ("version", "rules", "safety_notes", "description"):
                    probs.add(
                        _key_line(raw, key),
                        None,
                        f"unknown top-level key {key!r} (expected rules or safety_notes)",
                    )
            if "rules" in raw:
                items = raw["rules"]
                if not isinstance(items, list):
                    probs.add(_key_line(raw, "rules"), None, "rules must be a list")
                else:
                    lines = getattr(items, "item_lines", [None] * len(items))
                    for item, ln in zip(items, lines, strict=False):
                        rule = _parse_rule(item, ln, str(path), probs)
                        if rule is not None:
                            rules.append(rule)
            if "safety_notes" in raw:
                safety.update(
                    _parse_safety(raw["safety_notes"], _key_line(raw, "safety_notes"), probs)
                )
        problems.extend(probs.items)
    seen: dict[str, Rule] = {}
    for rule in rules:
        if rule.id in seen:
            problems.append(
                ConfigProblem(
                    rule.path,
                    rule.line,
                    f"rule {rule.id!r}: duplicate id (first at {seen[rule.id].where})",
                )
            )
        seen[rule.id] = rule
        for ref in rule.safety:
            if ref not in safety:
                problems.append(
                    ConfigProblem(
                        rule.path, rule.line, f"rule {rule.id!r}: unknown safety note {ref!r}"
                    )
                )
    if problems:
        raise ConfigError(problems)
    return RuleSet(tuple(rules), safety, tuple(str(f) for f in files))
