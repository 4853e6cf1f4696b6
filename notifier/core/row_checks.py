"""Row checks of input data: numbers where numbers belong, physical ranges, moisture.

Each check rejects the failing rows with a reason built only for those rows; the good
rows go on. The ranges and tolerances are cited beside them.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, cast

import numpy as np
import pandas as pd

from notifier import physics
from notifier.core.columns import (
    ALTERNATIVES,
    FLOAT_COLUMNS,
    NO_CEILING_M,
    UNITS,
    Rejection,
    unit_registry,
)

__all__ = [
    "Checks",
    "DEWPOINT_ABOVE_TEMP_TOLERANCE_C",
    "RH_OVERSHOOT_PCT",
    "labels",
    "member",
    "moisture_checks",
    "range_checks",
    "read_numbers",
]

_TEMPERATURES = ("temp_c", "dewpoint_c", "surface_temp_c", "water_temp_c")

# (low, high, shown unit) per canonical column; the limits are issue 3's, wind direction
# is bounded by its definition (degrees clockwise from north).
_RANGES: dict[str, tuple[float, float, str]] = {
    **{column: (-80.0, 60.0, "°C") for column in _TEMPERATURES},
    "wind_ms": (0.0, 75.0, "m/s"),
    "wind_dir_deg": (0.0, 360.0, "°"),
    "cloud_pct": (0.0, 100.0, "%"),
    "visibility_m": (0.0, 100_000.0, "m"),
    # a ceiling is a height above ground; "no ceiling" is NO_CEILING_M itself
    "ceiling_m": (0.0, NO_CEILING_M, "m"),
    # the heaviest hour of rain on record is about 305 mm (WMO archive of weather and
    # climate extremes, from memory); a gauge reporting more is faulty
    "precip_mm": (0.0, 400.0, "mm"),
}

_SHOWN_UNIT = {
    "degC": "°C",
    "degF": "°F",
    "kelvin": "K",
    "percent": "%",
    "degree": "°",
    "knot": "kt",
    "mile": "mi",
    "foot": "ft",
    "inch": "in",
}

# Sensors overshoot saturation by a few percent (WMO-No. 8, Vol. I, ch. 4 notes the
# drift of capacitive sensors near 100 %); up to this is clipped rather than rejected.
RH_OVERSHOOT_PCT = 103.0

# A dew point a little above the air temperature is within the two sensors' combined
# error; beyond this it is a fault (issue 3).
DEWPOINT_ABOVE_TEMP_TOLERANCE_C = 0.5


class Checks:
    """Collects rejections by row; messages are built only for the rows that fail."""

    def __init__(self, n: int, origin: str, lines: np.ndarray | None):
        self.bad = np.zeros(n, dtype=bool)
        self.found: list[tuple[int, int, Rejection]] = []
        self.origin = origin
        self.lines = lines

    def line(self, row: int) -> int | None:
        return int(self.lines[row]) if self.lines is not None else None

    def reject(
        self,
        mask: np.ndarray,
        column: str | Callable[[int], str] | None,
        reason: Callable[[int], str],
    ) -> None:
        for row in np.flatnonzero(mask):
            name = column(int(row)) if callable(column) else column
            rejection = Rejection(self.origin, self.line(int(row)), name, reason(int(row)))
            self.found.append((int(row), len(self.found), rejection))
        self.bad |= mask

    def rejections(self) -> list[Rejection]:
        return [r for _, _, r in sorted(self.found, key=lambda item: item[:2])]

    def lines_of(self, mask: np.ndarray, limit: int = 5) -> str:
        rows = np.flatnonzero(mask)
        shown = [str(self.line(r) if self.lines is not None else r + 1) for r in rows[:limit]]
        more = f" and {len(rows) - limit} more" if len(rows) > limit else ""
        return ", ".join(shown) + more


def labels(series: pd.Series) -> np.ndarray:
    """Like :func:`_text` for columns with few distinct values (site, kind, weather)."""
    try:
        codes, uniques = pd.factorize(series, use_na_sentinel=True)
    except TypeError:  # unhashable cells (a JSON object where a name belongs)
        return _text(series)
    cleaned = [str(u).strip() or None for u in uniques]
    return np.array([*cleaned, None], dtype=object)[codes]


def member(values: np.ndarray, allowed: Any) -> np.ndarray:
    """Elementwise ``value in allowed``, looked up once per distinct value."""
    codes, uniques = pd.factorize(pd.Series(values, dtype=object), use_na_sentinel=True)
    hit = np.array([u in allowed for u in uniques] + [False], dtype=bool)
    return hit[codes]


def _text(series: pd.Series) -> np.ndarray:
    """Stripped strings as an object array, None where missing or blank."""
    missing = series.isna().to_numpy()
    text = series.astype(object).where(~missing, "").astype(str).str.strip()
    values = text.to_numpy(dtype=object)
    values[missing | (values == "")] = None
    return values


def _numeric(series: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """(float values, mask of cells that hold something that is not a number)."""
    if pd.api.types.is_bool_dtype(series):
        return np.full(len(series), np.nan), series.notna().to_numpy()
    if pd.api.types.is_numeric_dtype(series):
        return series.to_numpy(dtype="float64", na_value=np.nan), np.zeros(len(series), bool)
    present = _text(series)
    has_value = present != None  # noqa: E711 - elementwise over an object array
    if series.dtype == object:
        # JSON can put true/false or nested objects where a number belongs.
        odd = series.map(lambda v: isinstance(v, bool | dict | list)).to_numpy(dtype=bool)
    else:
        odd = np.zeros(len(series), dtype=bool)
    # numpy's stubs leave None out of the scalars np.where takes; object arrays hold it
    cleaned = pd.Series(np.where(odd, cast(Any, None), present), dtype=object)
    values = pd.to_numeric(cleaned, errors="coerce").to_numpy(dtype="float64", na_value=np.nan)
    return values, has_value & (np.isnan(values) | odd)


def _convert(values: np.ndarray, unit_in: str, unit_out: str) -> np.ndarray:
    if unit_in == unit_out:
        return values
    registry = unit_registry()
    return np.asarray(registry.Quantity(values, unit_in).to(unit_out).magnitude, dtype="float64")


def _fmt(value: float) -> str:
    return f"{value:.4g}" if math.isfinite(value) else str(value)


@dataclass
class _Numbers:
    """Canonical numeric columns after conversion, with what the input said."""

    values: dict[str, np.ndarray]
    supplied_by: dict[str, np.ndarray]  # input column name per cell, None where empty
    given: dict[str, np.ndarray]  # each input column's numbers in its own unit
    unreadable: dict[str, np.ndarray]  # canonical column → cells already rejected

    def column(self, target: str) -> Callable[[int], str]:
        return lambda row: self.supplied_by[target][row] or target

    def as_given(self, target: str, row: int) -> str:
        """A cell as the input gave it: ``-139 °F (-95 °C)``; its column is named apart."""
        name = self.supplied_by[target][row] or target
        value = self.values[target][row]
        shown = _SHOWN_UNIT.get(UNITS[target], UNITS[target])
        if name == target:
            return f"{_fmt(value)} {shown}"
        unit = ALTERNATIVES[name][1]
        given = self.given[name][row]
        return f"{_fmt(given)} {_SHOWN_UNIT.get(unit, unit)} ({_fmt(value)} {shown})"


def read_numbers(raw: pd.DataFrame, units: Mapping[str, str], checks: Checks) -> _Numbers:
    n = len(raw)
    numbers = _Numbers(
        values={column: np.full(n, np.nan) for column in FLOAT_COLUMNS},
        supplied_by={column: np.full(n, None, dtype=object) for column in FLOAT_COLUMNS},
        given={},
        unreadable={column: np.zeros(n, dtype=bool) for column in FLOAT_COLUMNS},
    )
    for name in [*FLOAT_COLUMNS, *ALTERNATIVES]:
        if name not in raw:
            continue
        target, default_unit = (name, UNITS[name]) if name in UNITS else ALTERNATIVES[name]
        given, not_number = _numeric(raw[name])
        cells = raw[name]

        def not_a_number(r: int, cells: pd.Series = cells) -> str:
            return f"not a number: {cells.iloc[r]!r}"

        def not_finite(r: int, v: np.ndarray = given) -> str:
            return f"not a finite number: {v[r]}"

        checks.reject(not_number, name, not_a_number)
        infinite = np.isinf(given)
        checks.reject(infinite, name, not_finite)
        given = np.where(infinite, np.nan, given)
        numbers.unreadable[target] |= not_number | infinite
        unit_in = units.get(name, default_unit)
        try:
            converted = _convert(given, unit_in, UNITS[target])
        except Exception as exc:  # pint raises several unrelated types for a bad unit
            present = ~np.isnan(given)

            def not_convertible(
                r: int, u: str = unit_in, e: Exception = exc, t: str = target
            ) -> str:
                return f"cannot convert {u!r} to {UNITS[t]}: {e}"

            checks.reject(present, name, not_convertible)
            numbers.unreadable[target] |= present
            continue
        values = numbers.values[target]
        fill = np.isnan(values) & ~np.isnan(converted)
        numbers.values[target] = np.where(fill, converted, values)
        numbers.supplied_by[target][fill] = name
        numbers.given[name] = given
    return numbers


def range_checks(numbers: _Numbers, checks: Checks) -> None:
    for target, (low, high, shown) in _RANGES.items():
        data = numbers.values[target]
        with np.errstate(invalid="ignore"):
            outside = (data < low) | (data > high)
        limits = f"{_fmt(low)} to {_fmt(high)} {shown}"
        if target == "cloud_pct":
            limits = "0 to 100 % (0 to 8 okta)"

        def is_outside(r: int, t: str = target, lim: str = limits) -> str:
            return f"{numbers.as_given(t, r)} is outside {lim}"

        checks.reject(outside, numbers.column(target), is_outside)


def moisture_checks(numbers: _Numbers, checks: Checks, warnings: list[str]) -> None:
    values = numbers.values
    temp = values["temp_c"]
    dew = values["dewpoint_c"]
    rh = values["rh_pct"]
    checks.reject(
        np.isnan(temp) & ~numbers.unreadable["temp_c"],
        "temp_c",
        lambda r: "temperature missing (temp_c, temp_f or temp_k is required)",
    )
    unreadable_humidity = numbers.unreadable["dewpoint_c"] | numbers.unreadable["rh_pct"]
    checks.reject(
        np.isnan(dew) & np.isnan(rh) & ~unreadable_humidity,
        "dewpoint_c",
        lambda r: "humidity missing (dewpoint_c, dewpoint_f or rh_pct is required)",
    )
    with np.errstate(invalid="ignore"):
        rh_bad = (rh < 0) | (rh > RH_OVERSHOOT_PCT)
        overshoot = (rh > 100) & ~rh_bad
    checks.reject(
        rh_bad,
        "rh_pct",
        lambda r: f"{_fmt(rh[r])} % is outside 0 to 100 % (up to 103 % is read as 100)",
    )
    with np.errstate(invalid="ignore"):
        excess = dew - temp
        too_wet = excess > DEWPOINT_ABOVE_TEMP_TOLERANCE_C
        slightly = (excess > 0) & ~too_wet
    checks.reject(
        too_wet,
        numbers.column("dewpoint_c"),
        lambda r: (
            f"dew point {_fmt(dew[r])} °C is above the air temperature {_fmt(temp[r])} °C "
            "by more than 0.5 °C"
        ),
    )
    good = ~checks.bad
    has_dew = ~np.isnan(dew)
    if (overshoot & good & ~has_dew).any():
        warnings.append(
            f"{checks.origin}: rh_pct above 100 % (sensor overshoot, at most 103 %) clipped to "
            f"100 % on lines {checks.lines_of(overshoot & good & ~has_dew)}"
        )
    if (slightly & good).any():
        warnings.append(
            f"{checks.origin}: dew point up to 0.5 °C above the air temperature set equal to it "
            f"on lines {checks.lines_of(slightly & good)}"
        )
    rh = np.where(overshoot, 100.0, rh)
    dew = np.where(slightly, temp, dew)

    derived_rh = np.full(len(temp), np.nan)
    derived_dew = np.full(len(temp), np.nan)
    from_dew = good & has_dew
    from_rh = good & ~has_dew & ~np.isnan(rh)
    if from_dew.any():
        derived_rh[from_dew] = np.minimum(
            physics.relative_humidity_pct(temp[from_dew], dew[from_dew]), 100.0
        )
    if from_rh.any():
        derived_dew[from_rh] = physics.dewpoint_c(temp[from_rh], rh[from_rh])
    values["rh_pct"] = np.where(has_dew, derived_rh, rh)
    values["dewpoint_c"] = np.where(has_dew, dew, derived_dew)
