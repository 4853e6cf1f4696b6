"""Which columns the configured sources give each site, and the rules that then cannot fire.

``fogwatch check`` warns, per site, when a rule the site uses needs a column that no
source feeding the site provides: "site quay: rules coast-fog-warning, dense-fog need
visibility_m, which no source provides". A rule *needs* a column when one of the tests
it cannot do without (its top-level ``all``, not a branch of an ``any`` or a ``not``)
reads a feature computed from that column. A rule that only asks about a column in an
``any`` (for instance "no rain in 3 h, or no rain gauge") still fires without it.

What a source provides:

- a METAR file drop: what a METAR report can carry (:data:`METAR_COLUMNS`; the ceiling
  from its sky groups, precipitation from the US ``Prrrr`` remark);
- an HTTP JSON source with a ``fields`` mapping: the mapped columns (alternatives count
  as their canonical column);
- a CSV, JSON or NDJSON file drop, or an HTTP JSON source without ``fields``: whatever its
  files or records carry, which the config does not say, so it may provide any column;
- a forecast source (``kind: forecast``): only what the features read from forecasts
  (temperature, dew point, cloud, wind).

A config with no sources is fed some other way (``replay --data``, files dropped by
hand) and gets no such warning.

>>> sorted(FEATURE_COLUMNS["ceiling_trend_m_per_h"])
['ceiling_m']
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from notifier.core.columns import ALTERNATIVES, CANONICAL_COLUMNS
from notifier.engine.rules import Comparison, Group, Rule

__all__ = [
    "FEATURE_COLUMNS",
    "FORECAST_COLUMNS",
    "METAR_COLUMNS",
    "coverage_warnings",
    "required_features",
    "source_columns",
]

#: what a METAR report can give (notifier/ingest/metar.py)
METAR_COLUMNS = frozenset(
    {
        "temp_c",
        "dewpoint_c",
        "wind_ms",
        "wind_dir_deg",
        "visibility_m",
        "cloud_pct",
        "pressure_hpa",
        "ceiling_m",
        "precip_mm",
        "weather",
    }
)
#: what the features read from forecast rows (notifier/engine/block.py)
FORECAST_COLUMNS = frozenset({"temp_c", "dewpoint_c", "cloud_pct", "wind_ms"})
_ANY = frozenset(CANONICAL_COLUMNS)

#: The optional columns each feature cannot be computed without; each entry is a set of
#: alternatives (any one of them will do). Features of temperature and dew point alone,
#: which every row has, are not listed.
FEATURE_COLUMNS: Mapping[str, frozenset[str]] = {
    "ceiling_m": frozenset({"ceiling_m"}),
    "ceiling_trend_m_per_h": frozenset({"ceiling_m"}),
    "precip_last_3h_mm": frozenset({"precip_mm"}),
    "hours_since_precip": frozenset({"precip_mm"}),
    "water_temp_c": frozenset({"water_temp_c"}),
    "dewpoint_minus_water_c": frozenset({"water_temp_c"}),
    "water_minus_air_c": frozenset({"water_temp_c"}),
    "visibility_m": frozenset({"visibility_m"}),
    "visibility_trend_m_per_h": frozenset({"visibility_m"}),
    "surface_temp_c": frozenset({"surface_temp_c"}),
    "surface_minus_frost_point_c": frozenset({"surface_temp_c"}),
    "cloud_pct": frozenset({"cloud_pct"}),
    "wind_ms": frozenset({"wind_ms"}),
    "onshore": frozenset({"wind_dir_deg"}),
    "observed_fog": frozenset({"visibility_m", "weather"}),
    "observed_mist": frozenset({"visibility_m", "weather"}),
    "observed_freezing_fog": frozenset({"visibility_m", "weather"}),
}

_STATION_ID = re.compile(r"^[A-Z][A-Z0-9]{3}$")  # a METAR station id (ICAO location)


def required_features(rule: Rule) -> set[str]:
    """The features of the tests ``rule`` cannot fire without: those reached from its
    ``when`` through ``all`` groups only."""
    out: set[str] = set()
    stack: list[Any] = [rule.when]
    while stack:
        node = stack.pop()
        if isinstance(node, Comparison):
            out.add(node.feature)
        elif isinstance(node, Group) and node.op == "all":
            stack.extend(node.children)
    return out


def source_columns(source: Any) -> frozenset[str]:
    """The canonical columns a configured source can give (see the module docstring)."""
    if source.kind == "forecast":
        return FORECAST_COLUMNS
    if source.type == "filedrop":
        return METAR_COLUMNS if source.format == "metar" else _ANY
    if source.type == "http_json" and source.fields:
        return frozenset(ALTERNATIVES[c][0] if c in ALTERNATIVES else c for c in source.fields)
    return _ANY


def _sites_fed(source: Any, site_ids: Sequence[str]) -> set[str]:
    if source.type == "filedrop":
        if source.site:
            return {source.site}
        if source.format == "metar":
            # a station maps to a site, or a site id that is a station id is its own
            return set(source.stations.values()) | {s for s in site_ids if _STATION_ID.match(s)}
        return set(site_ids)
    if source.type == "http_json" and source.sites != "all":
        return set(source.sites)
    return set(site_ids)


def coverage_warnings(
    sites: Sequence[Any], sources: Sequence[Any], rules: Iterable[Rule]
) -> list[str]:
    """One line per site and missing column: the rules it uses that need that column."""
    if not sources:
        return []
    rules = list(rules)
    site_ids = [s.id for s in sites]
    given: dict[str, set[str]] = {s: set() for s in site_ids}
    for source in sources:
        columns = source_columns(source)
        for site in _sites_fed(source, site_ids) & set(site_ids):
            given[site] |= columns
    needs = [(rule, required_features(rule)) for rule in rules]
    out = []
    for site in sites:
        have = given[site.id]
        missing: dict[str, list[str]] = {}
        for rule, features in needs:
            if not rule.sites.matches(site):
                continue
            for feature in sorted(features):
                options = FEATURE_COLUMNS.get(feature)
                if options and not options & have:
                    name = " or ".join(sorted(options))
                    if rule.id not in missing.setdefault(name, []):
                        missing[name].append(rule.id)
        for column, rule_ids in sorted(missing.items()):
            noun = "rule" if len(rule_ids) == 1 else "rules"
            verb = "needs" if len(rule_ids) == 1 else "need"
            out.append(
                f"site {site.id}: {noun} {', '.join(rule_ids)} {verb} {column}, "
                "which no source provides"
            )
    return out
