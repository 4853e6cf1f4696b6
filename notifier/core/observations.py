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
    # The order of the checks below is the order of a row's rejections and of the warnings.
    warnings = _unknown_columns(raw, origin)
    site, known_site = _read_sites(raw, sites, default_site, checks)
    kind = _read_kinds(raw, default_kind, checks)
    time = _parse_times(raw, site, known_site, sites, checks, warnings)
    _reject_ahead_of_now(time, kind, now, checks)
    numbers = read_numbers(raw, dict(units or {}), checks)
    range_checks(numbers, checks)
    moisture_checks(numbers, checks, warnings)
    good = ~checks.bad
    frame = _canonical_table(raw, good, site, time, kind, numbers.values, source_id)
    frame = _drop_repeats(frame, good, checks, warnings)
    return frame.reset_index(drop=True), checks.rejections(), warnings


def _unknown_columns(raw: pd.DataFrame, origin: str) -> list[str]:
    """The batch's warnings so far: one naming the input columns that are not read."""
    ignored = sorted(str(c) for c in raw.columns if c not in INPUT_COLUMNS)
    if ignored:
        return [f"{origin}: ignored unknown columns: {', '.join(ignored)}"]
    return []


def _read_sites(
    raw: pd.DataFrame, sites: Mapping[str, Site], default_site: str | None, checks: Checks
) -> tuple[np.ndarray, np.ndarray]:
    """Each row's site id (the default where none is given) and whether it is a known site;
    rejects rows without a site or with an unknown one."""
    n = len(raw)
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
    return site, known_site


def _read_kinds(raw: pd.DataFrame, default_kind: str, checks: Checks) -> np.ndarray:
    """Each row's kind in lower case (the default where none is given); rejects any kind
    but obs and forecast."""
    n = len(raw)
    kind = labels(raw["kind"]) if "kind" in raw else np.full(n, None, dtype=object)
    kind[kind == None] = default_kind  # noqa: E711
    if "kind" in raw:
        kind = pd.Series(kind, dtype=object).str.lower().to_numpy(dtype=object)
    checks.reject(
        ~member(kind, KINDS),
        "kind",
        lambda r: f"kind must be obs or forecast, got {kind[r]!r}",
    )
    return kind


def _reject_ahead_of_now(
    time: pd.DatetimeIndex, kind: np.ndarray, now: datetime, checks: Checks
) -> None:
    """Rejects observations (not forecasts) more than 10 minutes ahead of ``now``."""
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


def _canonical_table(
    raw: pd.DataFrame,
    good: np.ndarray,
    site: np.ndarray,
    time: pd.DatetimeIndex,
    kind: np.ndarray,
    values: dict[str, np.ndarray],
    source_id: str,
) -> pd.DataFrame:
    """The rows that passed every check, as a table with exactly the canonical columns."""
    out: dict[str, Any] = {
        "site": site[good],
        "time": time[good],
        "kind": kind[good],
    }
    for column in FLOAT_COLUMNS:
        out[column] = values[column][good]
    n = len(raw)
    weather = labels(raw["weather"]) if "weather" in raw else np.full(n, None, dtype=object)
    out["weather"] = weather[good]
    out["source"] = np.full(int(good.sum()), source_id, dtype=object)
    frame = text_columns_as_objects(pd.DataFrame(out, columns=CANONICAL_COLUMNS))
    frame["time"] = pd.DatetimeIndex(frame["time"]).as_unit("ns")
    return frame


def _drop_repeats(
    frame: pd.DataFrame, good: np.ndarray, checks: Checks, warnings: list[str]
) -> pd.DataFrame:
    """The table without rows whose (site, time, kind) comes again later in the input (the
    later row wins); says which input lines were dropped."""
    duplicated = frame.duplicated(subset=["site", "time", "kind"], keep="last").to_numpy()
    if not duplicated.any():
        return frame
    rows = np.flatnonzero(good)[duplicated]
    mask = np.zeros(len(good), dtype=bool)
    mask[rows] = True
    message = (
        f"{checks.origin}: {int(duplicated.sum())} rows repeat a (site, time, kind) given again "
        f"later in the same input; the later row wins (dropped lines {checks.lines_of(mask)})"
    )
    log.info(message)
    warnings.append(message)
    return frame[~duplicated]


def _parse_times(
    raw: pd.DataFrame,
    site: np.ndarray,
    known_site: np.ndarray,
    sites: Mapping[str, Site],
    checks: Checks,
    warnings: list[str],
) -> pd.DatetimeIndex:
    """Each row's time in UTC, NaT where it is rejected: a time with an offset is converted,
    a naive one is read in its site's zone."""
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
    text, missing = _time_text(column, checks)
    aware, naive = _with_and_without_offset(text, missing)
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
        _read_in_site_zone(rows, zone, local, text, values, checks)
        warnings.append(
            f"{checks.origin}: {int(rows.sum())} times for site {site_id} had no UTC offset; "
            f"read as local time in {zone}"
        )
    return pd.DatetimeIndex(values).tz_localize("UTC")


def _time_text(column: pd.Series, checks: Checks) -> tuple[np.ndarray, np.ndarray]:
    """(each time as stripped text, mask of missing or blank times); rejects the missing."""
    missing = column.isna().to_numpy().copy()
    text = np.char.strip(
        np.asarray(np.where(missing, "", column.to_numpy(dtype=object)), dtype=str)
    )
    missing |= text == ""
    checks.reject(missing, "time", lambda r: "time missing")
    return text, missing


def _with_and_without_offset(
    text: np.ndarray, missing: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(mask of times that carry a UTC offset, mask of naive ones); a lower-case ``z`` in
    ``text`` is made ``Z`` in place."""
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
    return aware, naive


def _read_in_site_zone(
    rows: np.ndarray,
    zone: str,
    local: pd.DatetimeIndex,
    text: np.ndarray,
    values: np.ndarray,
    checks: Checks,
) -> None:
    """Fills ``values`` (UTC) for one site's naive ``rows`` read as wall-clock time in
    ``zone``; rejects a time the clocks skip or pass twice."""
    n = len(rows)
    wall = local[rows]
    strict = wall.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
    as_summer = wall.tz_localize(zone, ambiguous=np.ones(len(wall), dtype=bool), nonexistent="NaT")
    ambiguous = np.zeros(n, dtype=bool)
    nonexistent = np.zeros(n, dtype=bool)
    ambiguous[rows] = strict.isna() & ~as_summer.isna()
    nonexistent[rows] = as_summer.isna()
    values[rows] = _utc_naive(strict)

    def is_ambiguous(r: int) -> str:
        return (
            f"local time {text[r]} is ambiguous in {zone} (it happens twice as the clocks "
            "go back); give a UTC offset"
        )

    def does_not_exist(r: int) -> str:
        return (
            f"local time {text[r]} does not exist in {zone} (the clocks skip it); give a UTC offset"
        )

    checks.reject(ambiguous, "time", is_ambiguous)
    checks.reject(nonexistent, "time", does_not_exist)


def _in_ns_range(index: pd.DatetimeIndex) -> pd.DatetimeIndex:
    """NaT for times the table's nanosecond clock cannot hold (about 1677–2262): the
    parser reads such text (``.8`` as year 0) at a coarser unit without complaint."""
    lo, hi = pd.Timestamp.min, pd.Timestamp.max
    if index.tz is not None:
        lo, hi = lo.tz_localize("UTC"), hi.tz_localize("UTC")
    return index.where((index >= lo) & (index <= hi))


def _utc_naive(index: pd.DatetimeIndex) -> np.ndarray:
    return index.tz_convert("UTC").tz_localize(None).as_unit("ns").to_numpy()
