"""Observation frames to SQL rows and back, a column at a time (no per-row pandas access).

Times are stored as integer seconds since the Unix epoch (UTC).
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from datetime import UTC, datetime
from typing import Any, cast

import numpy as np
import pandas as pd

from notifier.core.columns import (
    CANONICAL_COLUMNS,
    FLOAT_COLUMNS,
    TEXT_COLUMNS,
    text_columns_as_objects,
)

__all__ = [
    "by_kind_and_source",
    "epoch_s",
    "frame_rows",
    "join_columns",
    "own_columns",
    "records_frame",
    "sql_text",
]


def epoch_s(moment: datetime, *, ceil: bool = False) -> int:
    """Seconds since the epoch; a naive time is taken as UTC."""
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    seconds = moment.timestamp()
    return math.ceil(seconds) if ceil else math.floor(seconds)


def sql_text(value: Any) -> str:
    """A text literal, quotes doubled (standard SQL); NULL for a missing value."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "NULL"
    return "'" + str(value).replace("'", "''") + "'"


def by_kind_and_source(frame: pd.DataFrame) -> Iterator[tuple[tuple[Any, Any], pd.DataFrame]]:
    kinds = frame["kind"]
    sources = frame["source"]
    if kinds.nunique(dropna=False) == 1 and sources.nunique(dropna=False) == 1:
        yield (kinds.iloc[0], sources.iloc[0]), frame
        return
    yield from frame.groupby(["kind", "source"], sort=False, dropna=False)


def frame_rows(
    frame: pd.DataFrame, present: list[str], *, nan_is_null: bool
) -> list[tuple[Any, ...]]:
    """Frame → tuples for executemany, built column-wise (no per-row pandas access).

    Rows go in primary-key order: appending to the index is much cheaper than inserting
    all over it (about a quarter off a million-row batch).
    """
    times = pd.DatetimeIndex(frame["time"])
    if times.tz is None:
        times = times.tz_localize("UTC")
    seconds = times.as_unit("ns").asi8 // 1_000_000_000
    site_codes, site_names = pd.factorize(frame["site"], sort=True)
    order = np.lexsort((seconds, site_codes))
    columns: list[list[Any]] = [
        np.asarray(site_names, dtype=object)[site_codes[order]].tolist(),
        seconds[order].tolist(),
    ]
    for name in present:
        if name in FLOAT_COLUMNS:
            values = frame[name].to_numpy(dtype="float64", na_value=np.nan)[order]
            # SQLite stores a bound NaN as NULL already; other databases need None.
            columns.append(values.tolist() if nan_is_null else nan_to_none(values))
        else:
            series = frame[name]
            text = series.astype(object).where(series.notna(), None).to_numpy(dtype=object)
            columns.append(text[order].tolist())
    return list(zip(*columns, strict=True))


def nan_to_none(values: np.ndarray) -> list[Any]:
    # numpy's stubs leave None out of the scalars np.where takes; object arrays hold it
    return np.where(np.isnan(values), cast(Any, None), values.astype(object)).tolist()


def records_frame(records: Sequence[Any], *, shared_text: bool = False) -> pd.DataFrame:
    from notifier.core.columns import empty_frame

    if not records:
        empty = empty_frame()
        if shared_text:
            for column in TEXT_COLUMNS:
                empty[column] = empty[column].astype("category")
        return empty
    frame = pd.DataFrame.from_records(records, columns=CANONICAL_COLUMNS)
    frame["time"] = pd.to_datetime(frame["time"].astype("int64"), unit="s", utc=True).astype(
        "datetime64[ns, UTC]"
    )
    for column in FLOAT_COLUMNS:
        frame[column] = frame[column].astype("float64")
    if shared_text:
        for column in TEXT_COLUMNS:
            frame[column] = frame[column].astype("category")
        return frame
    return text_columns_as_objects(frame)


def own_columns(frame: pd.DataFrame) -> dict[str, Any]:
    """A chunk's columns for :func:`join_columns`, each in memory of its own.

    A float column of a frame can be a view into a 2-D block of all its float columns;
    kept as it is, a chunk's block would stay alive until its last float column was
    joined, and the chunks sit in memory beside the joined columns at the join's peak
    (about 0.7 times the window again).
    """
    out: dict[str, Any] = {}
    for column in CANONICAL_COLUMNS:
        values = frame[column].array
        out[column] = values.copy() if column in FLOAT_COLUMNS else values
    return out


def join_columns(chunks: list[dict[str, Any]]) -> pd.DataFrame:
    """One frame from per-chunk columns, a column at a time, freeing chunks as it goes.

    Text columns are categoricals (one string object per distinct value); at most one
    column is held twice at any moment. The chunks' pieces are small enough to live in
    the C heap, which keeps freed memory for reuse rather than handing it back: without
    a trim after each column, the process would hold the chunks' memory and the joined
    columns' both, twice the window at its peak (3.5 GB for 100,000 sites).
    """
    from pandas.api.types import union_categoricals

    out = pd.DataFrame(index=pd.RangeIndex(sum(len(c["site"]) for c in chunks)))
    for column in CANONICAL_COLUMNS:
        parts = [c.pop(column) for c in chunks]
        if column in TEXT_COLUMNS:
            joined: Any = union_categoricals(parts)
        elif column == "time":  # tz-aware: join the underlying nanoseconds, not objects
            ns = np.concatenate([np.asarray(p.asi8) for p in parts])
            joined = pd.to_datetime(ns, unit="ns", utc=True).astype("datetime64[ns, UTC]")
        else:
            joined = pd.array(np.concatenate([np.asarray(p) for p in parts]), dtype=parts[0].dtype)
        del parts
        out[column] = joined
        release_freed_heap()
    return out


def release_freed_heap() -> None:
    """Hand the heap memory freed so far back to the operating system.

    glibc keeps freed heap memory for reuse rather than returning it; after millions of
    short-lived row objects and chunk arrays that is hundreds of megabytes the process
    would sit on. ``malloc_trim`` (glibc) returns every whole free page; elsewhere this
    does nothing.
    """
    import ctypes

    try:
        trim = getattr(ctypes.CDLL(None), "malloc_trim", None)  # the process's own libc
    except (OSError, TypeError):  # TypeError: Windows cannot open "no library"
        trim = None
    if trim is not None:
        trim(0)
