"""Text a person reads in a terminal: the assessment table and the full explanation."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime

from notifier.core.freshness import freshness
from notifier.core.timefmt import local_time
from notifier.engine.assessment import SiteAssessment, level_rank
from notifier.engine.catalog import FEATURES, format_value
from notifier.engine.rules import Comparison, Condition, Group, Outcome, RuleSet

__all__ = ["assessment_table", "explanation"]

_LEVEL_MARK = {"none": "·", "watch": "WATCH", "warning": "WARNING"}


def _fmt(name: str, value: float) -> str:
    if name == "data_age_min" and math.isinf(value):
        return "never reported"
    return format_value(name, value)


def assessment_table(
    assessments: Sequence[SiteAssessment], newest: Mapping[str, datetime] | None = None
) -> str:
    """A compact table: one line per site, then one indented line per hazard.

    ``newest``: each site's newest reading in the store, for a site whose readings are all
    older than the window the rules read (its data column then dates that reading)."""
    newest = newest or {}
    if not assessments:
        return "no sites"
    at = assessments[0].time.astimezone(UTC).strftime("%Y-%m-%d %H:%M UTC")
    lines = [f"fogwatch assessment at {at}", ""]
    width = max(len(a.site.id) for a in assessments)
    header = (
        f"{'site':<{width}}  {'level':<7}  {'T':>6} {'Td':>6} {'T-Td':>5} "
        f"{'trend':>6} {'min':>6} {'wind':>5} {'cloud':>5}  data"
    )
    lines.append(header)
    lines.append("-" * len(header))
    for a in sorted(assessments, key=lambda a: (-level_rank(a.level), a.site.id)):
        f = a.features

        def num(name: str, spec: str = ".1f", f: Mapping[str, float] = f) -> str:
            v = f[name]
            return "—" if math.isnan(v) else format(v, spec)

        last = a.last_time or newest.get(a.site.id)
        fresh = freshness(last, a.time, a.site.timezone, a.stale_after_min)
        data = fresh.text.removeprefix("newest reading ")
        lines.append(
            f"{a.site.id:<{width}}  {_LEVEL_MARK[a.level]:<7}  {num('temp_c'):>6} "
            f"{num('dewpoint_c'):>6} {num('dewpoint_depression_c'):>5} "
            f"{num('depression_trend_c_per_h', '+.2f'):>6} {num('projected_min_temp_c'):>6} "
            f"{num('wind_ms'):>5} {num('cloud_pct', '.0f'):>5}  {data}"
        )
        for h in sorted(a.hazards.values(), key=lambda h: -level_rank(h.level)):
            eta = f", expected {local_time(h.eta, a.site.timezone)}" if h.eta else ""
            lines.append(
                f"{'':<{width}}  └ {h.hazard} {h.level} ({h.kind}{eta}): {'; '.join(h.reasons[:3])}"
            )
    lines.append("")
    lines.append("Automated estimate from site data, not an official forecast.")
    return "\n".join(lines)


def _outcome_line(o: Outcome, indent: str, negated: bool) -> str:
    spec = FEATURES[o.test.feature]
    if not o.known:
        mark = "?"
        state = "unknown — no data, so this cannot hold"
    else:
        mark = "✓" if o.held else "✗"
        state = "held" if o.held else "not met"
    threshold = o.test.describe_threshold()
    relaxed = o.test.describe_threshold(relaxed=True, negated=negated)
    margin = f" (clears past {relaxed})" if o.test.margin else ""
    return (
        f"{indent}{mark} {spec.label} [{o.test.feature}] = {_fmt(o.test.feature, o.value)}"
        f"  {threshold}{margin}: {state}"
    )


def _tree(
    cond: Condition,
    outcomes: dict[int, Outcome],
    indent: str,
    out: list[str],
    negated: bool = False,
) -> None:
    if isinstance(cond, Comparison):
        out.append(_outcome_line(outcomes[id(cond)], indent, negated))
        return
    assert isinstance(cond, Group)
    if cond.op != "all" or indent.strip():
        out.append(f"{indent}{cond.op}:")
        indent += "  "
    for child in cond.children:
        # under a ``not`` a margin moves its threshold the other way (engine/rules.py)
        _tree(child, outcomes, indent, out, negated ^ (cond.op == "not"))


def explanation(sa: SiteAssessment, rules: RuleSet) -> str:
    """Every feature with value and unit, every rule with every test, and the verdict."""
    site = sa.site
    lines = [
        f"{site.name} ({site.id}) — {site.exposure}, {site.use}",
        f"at {local_time(sa.time, site.timezone, with_date=True)} "
        f"({sa.time.astimezone(UTC).strftime('%Y-%m-%d %H:%M UTC')})",
        f"level: {sa.level.upper()}",
        "",
        "Features",
    ]
    for name, spec in FEATURES.items():
        value = sa.features[name]
        unit_desc = f" — {spec.description}" if spec.description else ""
        lines.append(f"  {name:<30} {_fmt(name, value):>16}{unit_desc}")
    lines.append(f"  {'projection_method':<30} {sa.projection_method or 'none':>16}")
    lines.append("")
    lines.append("Rules")
    for r in sa.results:
        rule = r.rule
        head = f"  {rule.id} ({rule.hazard} {rule.level}, {rule.where})"
        if not r.applies:
            lines.append(f"{head}: not for this site (filter {_filter_text(rule)})")
            continue
        if r.fires:
            verdict = "FIRES"
        elif r.held_now and not r.hold_met:
            verdict = f"holds now, but not yet for {rule.hold_s / 60:.0f} min"
        elif r.missing:
            verdict = "cannot fire: unknown " + ", ".join(r.missing)
        else:
            verdict = "quiet"
        lines.append(f"{head}: {verdict}")
        outcomes = {id(o.test): o for o in r.outcomes}
        _tree(rule.when, outcomes, "      ", lines)
        if r.fires and rule.explain:
            lines.append(f"      → {r.explanation(sa.features)}")
    lines.append("")
    lines.append("Why this level")
    if not sa.hazards:
        lines.append("  No rule fired, so the level is none.")
    for h in sa.hazards.values():
        lines.append(f"  {h.hazard}: {h.level} because {', '.join(h.rules)} fired.")
    if sa.stale:
        lines.append("  Data is stale: silence here is not safety.")
    lines.append("")
    lines.append(
        "Automated estimate from site data, not an official forecast. Follow "
        "official warnings, the harbour authority, local codes and licensed practice."
    )
    return "\n".join(lines)


def _filter_text(rule: object) -> str:
    sites = getattr(rule, "sites", None)
    parts = []
    for key in ("exposure", "use", "tags", "ids"):
        vals = getattr(sites, key, ())
        if vals:
            parts.append(f"{key}: {', '.join(vals)}")
    return "; ".join(parts) or "none"
