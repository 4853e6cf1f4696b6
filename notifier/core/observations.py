"""The canonical observation table: columns, unit conversion at the edge, range checks.

Every source turns what it read into plain records (dicts, or a raw frame for bulk
CSV), and :func:`normalize` / :func:`normalize_frame` turn those into the one table the
rest of fogwatch reads, with exactly :data:`CANONICAL_COLUMNS`:

- ``time`` is ``datetime64[ns, UTC]``; floats are ``float64`` with NaN for missing;
  ``site``, ``kind``, ``weather`` and ``source`` are ``object`` columns of Python ``str``
  (``weather`` is ``None`` when not reported).
- Alternative input columns (``temp_f``, ``wind_kt``, ``cloud_okta`` …) are converted with
  pint, one call per column, and never appear in the output.
- ``rh_pct`` and ``dewpoint_c`` are both filled: a given dew point wins and the relative
  humidity is derived from it; otherwise the dew point is derived from the humidity
  (Magnus form, :mod:`notifier.physics`; NaN outside its -45…60 °C range).

A row that fails a check is left out and explained by a :class:`Rejection`; it never
stops the good rows. Fixes that keep a row (RH overshoot clipped, naive local time read
in the site's zone, a later duplicate replacing an earlier one) are reported as
warnings, one per kind of fix and batch.
"""

from __future__ import annotations

import functools
import logging
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import TYPE_CHECKING, Any, cast

import numpy as np
import pandas as pd

from notifier import physics

if TYPE_CHECKING:
    import pint

    from notifier.core.config import Site

__all__ = [
    "ALTERNATIVES",
    "CANONICAL_COLUMNS",
    "FLOAT_COLUMNS",
    "INPUT_COLUMNS",
    "TEXT_COLUMNS",
    "UNITS",
    "Rejection",
    "empty_frame",
    "missing_columns",
    "normalize",
    "normalize_frame",
    "text_columns_as_objects",
    "unit_registry",
]

log = logging.getLogger(__name__)

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
}
INPUT_COLUMNS: frozenset[str] = frozenset(CANONICAL_COLUMNS) | frozenset(ALTERNATIVES)

_TEMPERATURES = ("temp_c", "dewpoint_c", "surface_temp_c", "water_temp_c")
# (low, high, shown unit) per canonical column; the limits are issue 3's, wind direction
# is bounded by its definition (degrees clockwise from north).
_RANGES: dict[str, tuple[float, float, str]] = {
    **{column: (-80.0, 60.0, "°C") for column in _TEMPERATURES},
    "wind_ms": (0.0, 75.0, "m/s"),
    "wind_dir_deg": (0.0, 360.0, "°"),
    "cloud_pct": (0.0, 100.0, "%"),
    "visibility_m": (0.0, 100_000.0, "m"),
}
_SHOWN_UNIT = {
    "degC": "°C",
    "degF": "°F",
    "kelvin": "K",
    "percent": "%",
    "degree": "°",
    "knot": "kt",
    "mile": "mi",
}
# Sensors overshoot saturation by a few percent (WMO-No. 8, Vol. I, ch. 4 notes the
# drift of capacitive sensors near 100 %); up to this is clipped rather than rejected.
RH_OVERSHOOT_PCT = 103.0
# A dew point a little above the air temperature is within the two sensors' combined
# error; beyond this it is a fault (issue 3).
DEWPOINT_ABOVE_TEMP_TOLERANCE_C = 0.5
FUTURE_TOLERANCE = timedelta(minutes=10)
KINDS = ("obs", "forecast")


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


def normalize(
    records: list[dict[str, Any]],
    *,
    sites: Mapping[str, Site],
    now: datetime,
    origin: str,
    source_id: str,
    default_kind: str = "obs",
    default_site: str | None = None,
    lines: list[int] | None = None,
    units: Mapping[str, str] | None = None,
) -> tuple[pd.DataFrame, list[Rejection], list[str]]:
    """Records (one dict per row) → (canonical table, rejections, warnings).

    ``lines`` gives each record's line in its input, for the rejections; ``units`` says
    that an input column is in another unit than its name implies (a feed's ``temp_c``
    in ``degF``). See :func:`normalize_frame` for the checks.
    """
    rejections: list[Rejection] = []
    kept: list[dict[str, Any]] = []
    kept_lines: list[int] = []
    for i, record in enumerate(records):
        line = lines[i] if lines is not None else None
        if isinstance(record, dict):
            kept.append(record)
            kept_lines.append(line if line is not None else i + 1)
        else:
            got = type(record).__name__
            rejections.append(Rejection(origin, line, None, f"expected an object, got {got}"))
    if not kept:
        return empty_frame(), rejections, []
    frame, more, warnings = normalize_frame(
        pd.DataFrame.from_records(kept),
        sites=sites,
        now=now,
        origin=origin,
        source_id=source_id,
        default_kind=default_kind,
        default_site=default_site,
        lines=kept_lines if lines is not None else None,
        units=units,
    )
    return frame, sorted(rejections + more, key=_rejection_order), warnings


def _rejection_order(rejection: Rejection) -> tuple[int, int]:
    return (0, rejection.line) if rejection.line is not None else (1, 0)


class _Checks:
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


def _labels(series: pd.Series) -> np.ndarray:
    """Like :func:`_text` for columns with few distinct values (site, kind, weather)."""
    try:
        codes, uniques = pd.factorize(series, use_na_sentinel=True)
    except TypeError:  # unhashable cells (a JSON object where a name belongs)
        return _text(series)
    cleaned = [str(u).strip() or None for u in uniques]
    return np.array([*cleaned, None], dtype=object)[codes]


def _member(values: np.ndarray, allowed: Any) -> np.ndarray:
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


def normalize_frame(
    raw: pd.DataFrame,
    *,
    sites: Mapping[str, Site],
    now: datetime,
    origin: str,
    source_id: str,
    default_kind: str = "obs",
    default_site: str | None = None,
    lines: Any = None,
    units: Mapping[str, str] | None = None,
) -> tuple[pd.DataFrame, list[Rejection], list[str]]:
    """A raw frame (input column names) → (canonical table, rejections, warnings).

    Checks, each rejecting the row with a reason (issue 3): a known site; a time with a
    UTC offset, or a naive local time that exists exactly once in the site's zone; an
    observation (not a forecast) at most 10 minutes ahead of ``now``; kind obs or
    forecast; numbers where numbers belong; temperatures -80…60 °C; RH 0…100 % (up to
    103 % clipped to 100 with a warning); dew point no more than 0.5 °C above the air
    temperature (less is set equal to it); wind 0…75 m/s; wind direction 0…360°; cloud
    0…100 % (0…8 okta); visibility 0…100 km. Duplicate (site, time, kind): the later row
    wins, with a warning.
    """
    if now.tzinfo is None:
        raise ValueError("now must be timezone-aware")
    raw = raw.reset_index(drop=True)
    n = len(raw)
    if n == 0:
        return empty_frame(), [], []
    line_numbers = np.asarray(lines, dtype="int64") if lines is not None else None
    checks = _Checks(n, origin, line_numbers)
    warnings: list[str] = []
    units = dict(units or {})

    ignored = sorted(str(c) for c in raw.columns if c not in INPUT_COLUMNS)
    if ignored:
        warnings.append(f"{origin}: ignored unknown columns: {', '.join(ignored)}")

    site = _labels(raw["site"]) if "site" in raw else np.full(n, None, dtype=object)
    if default_site is not None:
        site[site == None] = default_site  # noqa: E711
    missing_site = site == None  # noqa: E711
    known_site = _member(site, sites) & ~missing_site
    checks.reject(missing_site, "site", lambda r: "site missing")
    known = ", ".join(sorted(sites)[:10]) + (" …" if len(sites) > 10 else "")
    checks.reject(
        ~known_site & ~missing_site, "site", lambda r: f"unknown site {site[r]!r} (known: {known})"
    )

    kind = _labels(raw["kind"]) if "kind" in raw else np.full(n, None, dtype=object)
    kind[kind == None] = default_kind  # noqa: E711
    if "kind" in raw:
        kind = pd.Series(kind, dtype=object).str.lower().to_numpy(dtype=object)
    checks.reject(
        ~_member(kind, KINDS),
        "kind",
        lambda r: f"kind must be obs or forecast, got {kind[r]!r}",
    )

    time = _parse_times(raw, site, known_site, sites, checks, warnings)
    ahead = (kind == "obs") & np.asarray(time > pd.Timestamp(now) + FUTURE_TOLERANCE)
    checks.reject(
        ahead,
        "time",
        lambda r: (
            f"{time[r]:%Y-%m-%dT%H:%M}Z is {(time[r] - pd.Timestamp(now)).total_seconds() / 60:.0f}"
            f" min ahead of now ({pd.Timestamp(now).tz_convert('UTC'):%Y-%m-%dT%H:%M}Z);"
            " observations may be at most 10 min ahead"
        ),
    )

    numbers = _numbers(raw, units, checks)
    _range_checks(numbers, checks)
    _moisture(numbers, checks, warnings)
    values = numbers.values

    good = ~checks.bad
    out: dict[str, Any] = {
        "site": site[good],
        "time": time[good],
        "kind": kind[good],
    }
    for column in FLOAT_COLUMNS:
        out[column] = values[column][good]
    weather = _labels(raw["weather"]) if "weather" in raw else np.full(n, None, dtype=object)
    out["weather"] = weather[good]
    out["source"] = np.full(int(good.sum()), source_id, dtype=object)
    frame = text_columns_as_objects(pd.DataFrame(out, columns=CANONICAL_COLUMNS))
    frame["time"] = pd.DatetimeIndex(frame["time"]).as_unit("ns")

    duplicated = frame.duplicated(subset=["site", "time", "kind"], keep="last").to_numpy()
    if duplicated.any():
        rows = np.flatnonzero(good)[duplicated]
        mask = np.zeros(n, dtype=bool)
        mask[rows] = True
        message = (
            f"{origin}: {int(duplicated.sum())} rows repeat a (site, time, kind) given again "
            f"later in the same input; the later row wins (dropped lines {checks.lines_of(mask)})"
        )
        log.info(message)
        warnings.append(message)
        frame = frame[~duplicated]
    return frame.reset_index(drop=True), checks.rejections(), warnings


def _parse_times(
    raw: pd.DataFrame,
    site: np.ndarray,
    known_site: np.ndarray,
    sites: Mapping[str, Site],
    checks: _Checks,
    warnings: list[str],
) -> pd.DatetimeIndex:
    n = len(raw)
    # Naive datetime64 holding UTC, localized once at the end.
    values = np.full(n, np.datetime64("NaT"), dtype="M8[ns]")
    if "time" not in raw:
        checks.reject(np.ones(n, dtype=bool), "time", lambda r: "time missing")
        return pd.DatetimeIndex(values).tz_localize("UTC")
    column = raw["time"]
    if isinstance(column.dtype, pd.DatetimeTZDtype):
        times = pd.DatetimeIndex(column).tz_convert("UTC").as_unit("ns")
        checks.reject(np.asarray(times.isna()), "time", lambda r: "time missing")
        return times
    missing = column.isna().to_numpy().copy()
    text = np.char.strip(
        np.asarray(np.where(missing, "", column.to_numpy(dtype=object)), dtype=str)
    )
    missing |= text == ""
    checks.reject(missing, "time", lambda r: "time missing")
    # An offset (Z, +hh:mm, -hhmm) follows the clock time; a '-' before the first ':' is
    # part of the date. Numpy's string functions keep this off the per-row Python path.
    first_colon = np.char.find(text, ":")
    sign = np.maximum(np.char.rfind(text, "+"), np.char.rfind(text, "-"))
    lower_zulu = np.char.endswith(text, "z")
    if lower_zulu.any():  # pandas' ISO 8601 parser accepts only "Z"
        text[lower_zulu] = np.char.add(np.char.rstrip(text[lower_zulu], "z"), "Z")
    zulu = np.char.endswith(text, "Z")
    aware = ~missing & (zulu | ((first_colon > 0) & (sign > first_colon)))
    naive = ~aware & ~missing
    strings = pd.Series(text, dtype=object)
    if aware.any():
        parsed = pd.to_datetime(strings[aware], utc=True, format="ISO8601", errors="coerce")
        values[aware] = _utc_naive(_in_ns_range(pd.DatetimeIndex(parsed)))
    local = pd.DatetimeIndex(values)
    if naive.any():
        local = pd.to_datetime(strings.where(naive, None), format="ISO8601", errors="coerce")
        local = _in_ns_range(pd.DatetimeIndex(local)).as_unit("ns")
    unparsed = (aware & np.isnat(values)) | (naive & np.isnat(local.to_numpy()))
    checks.reject(
        unparsed,
        "time",
        lambda r: f"not an ISO 8601 time: {str(text[r])!r} (expected e.g. 2024-01-05T03:00:00Z)",
    )
    for site_id in np.unique(site[naive & ~unparsed & known_site]):
        rows = naive & ~unparsed & (site == site_id)
        zone = sites[site_id].timezone
        wall = local[rows]
        strict = wall.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
        as_summer = wall.tz_localize(
            zone, ambiguous=np.ones(len(wall), dtype=bool), nonexistent="NaT"
        )
        ambiguous = np.zeros(n, dtype=bool)
        nonexistent = np.zeros(n, dtype=bool)
        ambiguous[rows] = strict.isna() & ~as_summer.isna()
        nonexistent[rows] = as_summer.isna()
        values[rows] = _utc_naive(strict)

        def is_ambiguous(r: int, zone: str = zone) -> str:
            return (
                f"local time {text[r]} is ambiguous in {zone} (it happens twice as the clocks "
                "go back); give a UTC offset"
            )

        def does_not_exist(r: int, zone: str = zone) -> str:
            return (
                f"local time {text[r]} does not exist in {zone} (the clocks skip it); "
                "give a UTC offset"
            )

        checks.reject(ambiguous, "time", is_ambiguous)
        checks.reject(nonexistent, "time", does_not_exist)
        warnings.append(
            f"{checks.origin}: {int(rows.sum())} times for site {site_id} had no UTC offset; "
            f"read as local time in {zone}"
        )
    return pd.DatetimeIndex(values).tz_localize("UTC")


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


def _in_ns_range(index: pd.DatetimeIndex) -> pd.DatetimeIndex:
    """NaT for times the table's nanosecond clock cannot hold (about 1677–2262): the
    parser reads such text (``.8`` as year 0) at a coarser unit without complaint."""
    lo, hi = pd.Timestamp.min, pd.Timestamp.max
    if index.tz is not None:
        lo, hi = lo.tz_localize("UTC"), hi.tz_localize("UTC")
    return index.where((index >= lo) & (index <= hi))


def _utc_naive(index: pd.DatetimeIndex) -> np.ndarray:
    return index.tz_convert("UTC").tz_localize(None).as_unit("ns").to_numpy()


def _numbers(raw: pd.DataFrame, units: Mapping[str, str], checks: _Checks) -> _Numbers:
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


def _range_checks(numbers: _Numbers, checks: _Checks) -> None:
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


def _moisture(numbers: _Numbers, checks: _Checks, warnings: list[str]) -> None:
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
