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

import logging
from collections.abc import Mapping
from datetime import datetime, timedelta
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from notifier.core.columns import (
    CANONICAL_COLUMNS,
    FLOAT_COLUMNS,
    INPUT_COLUMNS,
    KINDS,
    Rejection,
    empty_frame,
    text_columns_as_objects,
)
from notifier.core.row_checks import (
    Checks,
    labels,
    member,
    moisture_checks,
    range_checks,
    read_numbers,
)

if TYPE_CHECKING:
    from notifier.core.config import Site

__all__ = ["normalize", "normalize_frame"]


log = logging.getLogger(__name__)


FUTURE_TOLERANCE = timedelta(minutes=10)


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
    checks = Checks(n, origin, line_numbers)
    warnings: list[str] = []
    units = dict(units or {})

    ignored = sorted(str(c) for c in raw.columns if c not in INPUT_COLUMNS)
    if ignored:
        warnings.append(f"{origin}: ignored unknown columns: {', '.join(ignored)}")

    site = labels(raw["site"]) if "site" in raw else np.full(n, None, dtype=object)
    if default_site is not None:
        site[site == None] = default_site  # noqa: E711
    missing_site = site == None  # noqa: E711
    known_site = member(site, sites) & ~missing_site
    checks.reject(missing_site, "site", lambda r: "site missing")
    known = ", ".join(sorted(sites)[:10]) + (" …" if len(sites) > 10 else "")
    checks.reject(
        ~known_site & ~missing_site, "site", lambda r: f"unknown site {site[r]!r} (known: {known})"
    )

    kind = labels(raw["kind"]) if "kind" in raw else np.full(n, None, dtype=object)
    kind[kind == None] = default_kind  # noqa: E711
    if "kind" in raw:
        kind = pd.Series(kind, dtype=object).str.lower().to_numpy(dtype=object)
    checks.reject(
        ~member(kind, KINDS),
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

    numbers = read_numbers(raw, units, checks)
    range_checks(numbers, checks)
    moisture_checks(numbers, checks, warnings)
    values = numbers.values

    good = ~checks.bad
    out: dict[str, Any] = {
        "site": site[good],
        "time": time[good],
        "kind": kind[good],
    }
    for column in FLOAT_COLUMNS:
        out[column] = values[column][good]
    weather = labels(raw["weather"]) if "weather" in raw else np.full(n, None, dtype=object)
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
    checks: Checks,
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


def _in_ns_range(index: pd.DatetimeIndex) -> pd.DatetimeIndex:
    """NaT for times the table's nanosecond clock cannot hold (about 1677–2262): the
    parser reads such text (``.8`` as year 0) at a coarser unit without complaint."""
    lo, hi = pd.Timestamp.min, pd.Timestamp.max
    if index.tz is not None:
        lo, hi = lo.tz_localize("UTC"), hi.tz_localize("UTC")
    return index.where((index >= lo) & (index <= hi))


def _utc_naive(index: pd.DatetimeIndex) -> np.ndarray:
    return index.tz_convert("UTC").tz_localize(None).as_unit("ns").to_numpy()
