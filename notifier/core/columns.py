"""The canonical observation table's columns: names, units, accepted alternatives, and an
empty table with the right dtypes.

Column names carry their unit (``temp_c``, ``wind_ms``); a source may give any listed
alternative (``temp_f``, ``wind_kt``, ``cloud_okta`` …), converted once on the way in.

``ceiling_m`` is the cloud base of the lowest broken or overcast layer, or the vertical
visibility, above ground (:data:`NO_CEILING_M` when there is none); ``precip_mm`` is the
precipitation of the last hour (liquid equivalent).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import pandas as pd

if TYPE_CHECKING:
    import pint


__all__ = [
    "ALTERNATIVES",
    "CANONICAL_COLUMNS",
    "FLOAT_COLUMNS",
    "INPUT_COLUMNS",
    "KINDS",
    "NO_CEILING_M",
    "Rejection",
    "TEXT_COLUMNS",
    "UNITS",
    "empty_frame",
    "missing_columns",
    "text_columns_as_objects",
    "unit_registry",
]

CANONICAL_COLUMNS: list[str] = [
    "site",
    "time",
    "kind",
    "temp_c",
    "dewpoint_c",
    "rh_pct",
    "wind_ms",
    "wind_dir_deg",
    "cloud_pct",
    "surface_temp_c",
    "water_temp_c",
    "visibility_m",
    "pressure_hpa",
    "ceiling_m",
    "precip_mm",
    "weather",
    "source",
]

#: pint unit of each canonical numeric column.
UNITS: dict[str, str] = {
    "temp_c": "degC",
    "dewpoint_c": "degC",
    "rh_pct": "percent",
    "wind_ms": "m/s",
    "wind_dir_deg": "degree",
    "cloud_pct": "percent",
    "surface_temp_c": "degC",
    "water_temp_c": "degC",
    "visibility_m": "m",
    "pressure_hpa": "hPa",
    "ceiling_m": "m",
    "precip_mm": "mm",
}

FLOAT_COLUMNS: list[str] = list(UNITS)

#: alternative input column → (canonical column, pint unit of the input).
ALTERNATIVES: dict[str, tuple[str, str]] = {
    "temp_f": ("temp_c", "degF"),
    "temp_k": ("temp_c", "kelvin"),
    "dewpoint_f": ("dewpoint_c", "degF"),
    "wind_kt": ("wind_ms", "knot"),
    "wind_kmh": ("wind_ms", "km/h"),
    "wind_mph": ("wind_ms", "mph"),
    "cloud_okta": ("cloud_pct", "okta"),
    "surface_temp_f": ("surface_temp_c", "degF"),
    "water_temp_f": ("water_temp_c", "degF"),
    "visibility_km": ("visibility_m", "km"),
    "visibility_mi": ("visibility_m", "mile"),
    "pressure_inhg": ("pressure_hpa", "inHg"),
    "ceiling_ft": ("ceiling_m", "foot"),
    "precip_in": ("precip_mm", "inch"),
}

INPUT_COLUMNS: frozenset[str] = frozenset(CANONICAL_COLUMNS) | frozenset(ALTERNATIVES)

KINDS = ("obs", "forecast")

#: ``ceiling_m`` when the sky has no ceiling: no broken or overcast layer and no vertical
#: visibility (CLR, SKC, NSC, NCD, FEW, SCT or CAVOK). A ceiling is the height of the
#: lowest layer covering 5/8 or more of the sky (BKN, OVC) or the vertical visibility
#: into an obscured sky (VV); FMH-1 ch. 9 (docs/references.md [FMH-1]) and WMO-No. 306
#: FM 15 (docs/references.md [WMO-No. 306]). 30 000 m is above any cloud base a surface
#: station reports (the METAR height groups end at 999 hundred feet, ~30 450 m), so a
#: rule asking "ceiling below 300 m" reads "no ceiling" as a high one, never as unknown.
NO_CEILING_M = 30000.0


@dataclass(frozen=True)
class Rejection:
    """Why one input row (or a whole input) was not taken."""

    origin: str
    line: int | None
    column: str | None
    reason: str

    def __str__(self) -> str:
        where = self.origin if self.line is None else f"{self.origin}:{self.line}"
        return (
            f"{where}: {self.column}: {self.reason}" if self.column else f"{where}: {self.reason}"
        )


@functools.cache
def unit_registry() -> pint.UnitRegistry:
    """The one pint registry (building one takes a noticeable fraction of a second)."""
    import pint

    registry: pint.UnitRegistry = pint.UnitRegistry()
    # An okta is an eighth of the sky (WMO-No. 306, code table 2700).
    registry.define("okta = 0.125")
    return registry


TEXT_COLUMNS: list[str] = ["site", "kind", "weather", "source"]


def text_columns_as_objects(frame: pd.DataFrame) -> pd.DataFrame:
    """Text columns as Python ``str`` objects with ``None`` for missing, whatever string
    dtype this pandas version would infer, so tables compare equal across versions."""
    for column in TEXT_COLUMNS:
        values = frame[column].astype(object)
        frame[column] = values.where(values.notna(), None)
    return frame


def empty_frame() -> pd.DataFrame:
    """A canonical table with no rows and the right dtypes."""
    data: dict[str, Any] = {}
    for column in CANONICAL_COLUMNS:
        if column == "time":
            data[column] = pd.Series([], dtype="datetime64[ns, UTC]")
        elif column in UNITS:
            data[column] = pd.Series([], dtype="float64")
        else:
            data[column] = pd.Series([], dtype=object)
    return pd.DataFrame(data)


def missing_columns(columns: Any, *, default_site: str | None = None) -> list[str]:
    """Problems with a set of input columns that would reject every row.

    Sources call this first so that a file or feed with the wrong shape is refused once,
    with one reason, rather than row by row.
    """
    have = set(columns)
    problems = []
    if "site" not in have and default_site is None:
        problems.append("no site column (and the source names no site)")
    if "time" not in have:
        problems.append("no time column")
    if not have & {"temp_c", "temp_f", "temp_k"}:
        problems.append("no temperature column (expected temp_c, temp_f or temp_k)")
    if not have & {"dewpoint_c", "dewpoint_f", "rh_pct"}:
        problems.append("no humidity column (expected dewpoint_c, dewpoint_f or rh_pct)")
    return problems
