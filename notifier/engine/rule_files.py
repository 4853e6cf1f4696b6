"""Rule files: YAML to a validated :class:`~notifier.engine.rules.RuleSet`, with every
problem reported at once as ``file:line``.

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
``between: [lo, hi]`` (inclusive) and ``is`` (true/false). ``margin`` is hysteresis: while
the hazard is already active a numeric test keeps holding up to ``margin`` past its
threshold (under a ``not``, the inner test is narrowed instead, so the ``not`` keeps
holding), and a value hovering at the threshold does not make alerts flap. Groups:
``all``, ``any``, ``not``.

Each file has ``version: 1``; safety files (``safety:``) hold the notes rules refer to.
"""

from __future__ import annotations

import difflib
import string
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from notifier.core.config import parse_duration_s
from notifier.core.errors import ConfigError, ConfigProblem
from notifier.core.yamlio import MarkedDict, MarkedList, load_yaml
from notifier.engine.catalog import FEATURES
from notifier.engine.rules import (
    EXPOSURES,
    HAZARDS,
    OPS,
    USES,
    Comparison,
    Condition,
    Group,
    Rule,
    RuleSet,
    SafetyNote,
    SiteFilter,
)

__all__ = ["RULE_FILE_VERSION", "load_rule_set", "rule_files"]

RULE_FILE_VERSION = 1


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
                if name is not None and name not in FEATURES and name not in TEXT_FIELDS:
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


# words an explanation may show besides the features: what moved the site model's chance
TEXT_FIELDS = ("model_drivers",)


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
