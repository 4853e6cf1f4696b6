"""The running service's rolling window of observations, held in memory between cycles.

Reading 48 hours of 10,000 stations back out of the store takes seconds (1.4 M rows
turned into Python objects and back); a running service needs the same rows every
cycle, and only a poll's worth of them are new. :class:`RollingWindow` therefore reads
the window whole once, then on each cycle only the rows written since (the store numbers
its write batches, see ``Store.last_batch``), merges them in — a row with the same
(site, time, kind) replaces the one held, as in the store — and drops what fell out of
the back of the window.

The merge never sorts the whole window again: the held rows are kept in key order, the
few new rows are sorted among themselves, and each finds its place by binary search
(``np.searchsorted``). A new row whose key is held replaces that row; the others are
inserted at their places (for a running service: at the end of each site's rows). Rows
that fell out of the back are dropped by index (each site's oldest rows). The new
columns are then one gather each from the held ones, in order, with the new rows
written into their places: the cost of a cycle is a copy of the window plus
``n_new · log(window)``, where sorting the whole window again cost a sort and a scattered
gather that grew faster than the number of sites.

It holds every row of the configured sites from ``at - back`` on, however far ahead a
forecast reaches, so that forecasts come into view as time moves on without another
read, and hands out the rows ``Store.window(sites, at - back, at + ahead)`` would
return, as a canonical table with categorical text columns. The rows are grouped by
site in the order of ``site_ids`` (the ``site`` categories are that list, so a site's
code is its index in the configuration, which ``notifier.engine.readings`` reads directly),
each site's rows by time, then kind. A test holds it to that after random writes.

An evaluation time earlier than the last one (a simulated clock going back, or a
``--at`` in the past) reads the window whole again: the rows it needs may already have
been dropped.

A reload of the configuration keeps the window (:meth:`RollingWindow.renewed`): only a
change of the sites or of the window's length needs a new one, and that one is read
whole at once by the caller, outside the lock its cycles need, so that the cycles go on
meanwhile with the old one.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime, timedelta
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from notifier.core.columns import CANONICAL_COLUMNS, FLOAT_COLUMNS
from notifier.storage.rows import join_columns, records_frame, release_freed_heap
from notifier.storage.window_parts import whole_window_chunks

if TYPE_CHECKING:
    from notifier.storage.store import Store

__all__ = ["RollingWindow"]

_NS = 1_000_000_000
_KINDS = ("forecast", "obs")  # sorted, as the store's ORDER BY kind puts them
_TIME_BITS = 36  # seconds after the window's first start: over 2,000 years
_KIND_BITS = 2


class RollingWindow:
    """Observations of ``site_ids`` from ``at - back`` to ``at + ahead``, kept up to date
    from ``store`` with one small read per call of :meth:`frame`."""

    def __init__(
        self,
        store: Store,
        site_ids: Sequence[str],
        *,
        back: timedelta,
        ahead: timedelta,
        only_these: bool = False,
    ):
        """``only_these``: the store also holds other sites (another instance's share),
        so reads ask for these sites alone rather than reading all and dropping the rest."""
        self.store = store
        self.only_these = only_these
        self.sites = pd.Index(list(dict.fromkeys(site_ids)), dtype=object)
        self.back = back
        self.ahead = ahead
        self._site_dtype = pd.CategoricalDtype(self.sites)
        self._kind_dtype = pd.CategoricalDtype(pd.Index(_KINDS, dtype=object))
        self._columns: dict[str, Any] | None = None
        self._keys = np.zeros(0, dtype=np.int64)
        self._batch = 0
        self._start_s = 0
        self._base_s = 0
        #: rows read from the store by the last call (the whole window, or what changed)
        self.last_read = 0
        #: the evaluation time of the last call of :meth:`frame` (None: not called yet)
        self.last_at: datetime | None = None

    def frame(self, at: datetime) -> pd.DataFrame:
        """The window for an evaluation at ``at`` (tz-aware).

        The table shares its memory with the window (a copy each cycle would cost as
        much as the merge), so its values are read-only: setting a cell raises, and a
        caller that wants to change it works on ``.copy()``. New columns are fine."""
        start_s = _ceil_s(at - self.back)
        if self._columns is None or start_s < self._start_s:
            self._load(start_s)
        else:
            self._update(start_s)
        self.last_at = at
        return self._view(_floor_s(at + self.ahead))

    def renewed(
        self, site_ids: Sequence[str], *, back: timedelta, ahead: timedelta
    ) -> RollingWindow:
        """The window for a reloaded configuration: this one, brought along, when the
        sites (ids and order) and the window's length are the same; else a new one, read
        whole at this one's last evaluation time (that read takes a while: the caller
        makes it outside the lock its cycles need)."""
        same_sites = list(self.sites) == list(dict.fromkeys(site_ids))
        if same_sites and back == self.back and ahead == self.ahead:
            return self
        fresh = RollingWindow(
            self.store, site_ids, back=back, ahead=ahead, only_these=self.only_these
        )
        if self.last_at is not None:
            fresh.frame(self.last_at)
        return fresh

    def __len__(self) -> int:
        return int(self._keys.size)

    # -- reading ---------------------------------------------------------------------------

    def _read(self, start_s: int, after: int | None) -> pd.DataFrame:
        from datetime import UTC

        start = datetime.fromtimestamp(start_s, tz=UTC)
        sites = list(self.sites) if self.only_these and _listable(self.store, self.sites) else None
        if after is None and sites is None:  # a whole read: in two parts where it is large
            chunks = whole_window_chunks(self.store, start, list(self.sites))
            return join_columns(chunks) if chunks else records_frame([], shared_text=True)
        return self.store.window(sites, start, None, after=after, categorical=True)

    def _load(self, start_s: int) -> None:
        batch = self.store.last_batch()  # first: a batch committed meanwhile is read again
        self._columns, self._keys = None, np.zeros(0, dtype=np.int64)  # release the old
        table = self._read(start_s, None)
        self.last_read = len(table)
        prepared = self._prepared(table)
        del table
        self._base_s = start_s
        self._columns, self._keys = self._merged(prepared, start_s)
        _compact_columns(self._columns)
        self._batch, self._start_s = batch, start_s
        del prepared
        release_freed_heap()  # the read's row objects and chunks

    def _update(self, start_s: int) -> None:
        batch = self.store.last_batch()
        new = self._read(start_s, self._batch) if batch != self._batch else None
        self.last_read = 0 if new is None else len(new)
        if new is not None and len(new):
            self._columns, self._keys = self._merged_in(self._prepared(new), start_s)
            _compact_columns(self._columns)
        elif start_s > self._start_s:
            self._trim(start_s)
        self._batch, self._start_s = batch, start_s

    # -- the columns -----------------------------------------------------------------------

    def _prepared(self, table: pd.DataFrame) -> dict[str, Any]:
        """A store table as plain arrays: floats, nanoseconds, and text as (codes,
        categories); rows of sites not in the window are left out."""
        site = _codes(table["site"], self._site_dtype)
        known = site >= 0
        every = bool(known.all())

        def rows(values: np.ndarray) -> np.ndarray:  # no copy when every row is kept
            return values if every else values[known]

        out: dict[str, Any] = {"site": rows(site)}
        out["time"] = rows(_nanoseconds(table["time"]))
        out["kind"] = rows(_codes(table["kind"], self._kind_dtype).astype(np.int8))
        for name in FLOAT_COLUMNS:
            column = table[name]
            # the store's float64 columns are taken as they are (a view, not a copy)
            values = column.to_numpy() if column.dtype == np.float64 else None
            if values is None:
                values = column.to_numpy(dtype=np.float64, na_value=np.nan)
            out[name] = rows(values)
        for name in ("weather", "source"):
            text = table[name].astype("category")
            out[name] = (rows(text.cat.codes.to_numpy().astype(np.int32)), text.cat.categories)
        return out

    def _key(self, columns: dict[str, Any]) -> np.ndarray:
        """One sortable integer per row: site, then time, then kind."""
        seconds = columns["time"] // _NS - self._base_s
        return (
            (columns["site"].astype(np.int64) << (_TIME_BITS + _KIND_BITS))
            | (seconds.astype(np.int64) << _KIND_BITS)
            | columns["kind"].astype(np.int64)
        )

    def _merged(self, new: dict[str, Any], start_s: int) -> tuple[dict[str, Any], np.ndarray]:
        """The held rows and ``new`` in key order; of equal keys the new row stays; rows
        before ``start_s`` go. Each column is taken once from the held one (the few new
        rows are then written into their places), and the held one released."""
        old = self._columns or {}
        n_old = self._keys.size
        keys = np.concatenate([self._keys, self._key(new)]) if n_old else self._key(new)
        order = np.argsort(keys, kind="stable")  # two sorted runs: a merge, not a sort
        sorted_keys = keys[order]
        last = np.ones(sorted_keys.size, dtype=bool)
        last[:-1] = sorted_keys[1:] != sorted_keys[:-1]
        times = np.concatenate([old["time"], new["time"]]) if old else new["time"]
        keep = order[last & (times[order] >= start_s * _NS)]
        is_new = keep >= n_old
        new_at = np.flatnonzero(is_new)
        new_rows = keep[new_at] - n_old
        from_old = np.where(is_new, 0, keep) if n_old else None
        out: dict[str, Any] = {}
        if not n_old and np.array_equal(keep, np.arange(len(new["site"]))):
            return new, keys  # a first read already in order: nothing to move
        for name in CANONICAL_COLUMNS:  # a column at a time, each input one released
            mine, theirs = old.pop(name, None), new.pop(name)
            if name in ("weather", "source"):
                codes, categories = _with_categories(mine, theirs)
                out[name] = (_placed(codes[0], codes[1], from_old, new_at, new_rows), categories)
            else:
                out[name] = _placed(mine, theirs, from_old, new_at, new_rows)
            del mine, theirs
        return out, keys[keep]

    def _merged_in(self, new: dict[str, Any], start_s: int) -> tuple[dict[str, Any], np.ndarray]:
        """The held rows with ``new`` merged in, without sorting the held rows again.

        Only the new rows are sorted (they are few); each takes its place in the held
        keys by binary search. Equal keys: the new row replaces the held one in its
        place. Held rows before ``start_s`` are dropped (they lead each site's rows)."""
        assert self._columns is not None
        if not self._keys.size:  # nothing held: the new rows are the window
            return self._merged(new, start_s)
        old, held = self._columns, self._keys
        new_keys = self._key(new)
        order = np.argsort(new_keys, kind="stable")
        new_keys = new_keys[order]
        unique = np.ones(new_keys.size, dtype=bool)  # of repeated keys the last one stays
        unique[:-1] = new_keys[1:] != new_keys[:-1]
        order, new_keys = order[unique], new_keys[unique]
        at = np.searchsorted(held, new_keys)
        found = at < held.size
        found[found] = held[at[found]] == new_keys[found]
        # the held rows kept, by index: those at or after the start (a site's oldest rows
        # go first, so these are each site's last rows; the comparison is one pass)
        kept = np.flatnonzero(old["time"] >= start_s * _NS)
        if kept.size == held.size:
            kept_at = at
        else:  # where each new row lands among the kept rows
            kept_at = np.searchsorted(kept, at)
        inserted = ~found
        n_out = kept.size + int(inserted.sum())
        # output positions: a new row goes after the kept rows before it and after the
        # new rows inserted before it; a replacing row lands on the row it replaces
        before: np.ndarray = np.cumsum(inserted) - inserted  # inserted rows ahead of each
        new_at = kept_at + before
        from_new = np.zeros(n_out, dtype=bool)
        from_new[new_at[inserted]] = True
        source = np.empty(n_out, dtype=np.int64)  # which held row each output row copies
        source[~from_new] = kept
        source[from_new] = 0
        rows = order  # the new table's rows, in key order
        out: dict[str, Any] = {}
        for name in CANONICAL_COLUMNS:  # a column at a time, each input one released
            mine, theirs = old.pop(name), new.pop(name)
            if name in ("weather", "source"):
                (codes, new_codes), categories = _with_categories(mine, theirs)
                assert codes is not None
                out[name] = (_gathered(codes, new_codes, source, new_at, rows), categories)
            else:
                out[name] = _gathered(mine, theirs, source, new_at, rows)
            del mine, theirs
        keys = held.take(source)
        keys[new_at] = new_keys
        return out, keys

    def _trim(self, start_s: int) -> None:
        assert self._columns is not None
        keep = self._columns["time"] >= start_s * _NS
        if keep.all():
            return
        self._keys = self._keys[keep]
        for name, values in self._columns.items():
            if isinstance(values, tuple):
                self._columns[name] = (values[0][keep], values[1])
            else:
                self._columns[name] = _rows_of(values, keep)

    def _view(self, end_s: int) -> pd.DataFrame:
        """The held rows up to ``end_s`` as a canonical table (no copy if all are)."""
        assert self._columns is not None
        columns = self._columns
        times = columns["time"]
        rows = None if not times.size or times.max() <= end_s * _NS else times <= end_s * _NS

        def cut(values: np.ndarray) -> np.ndarray:
            out = values if rows is None else _rows_of(values, rows)
            out.flags.writeable = False  # shared with the window: see frame()
            return out

        data: dict[str, Any] = {}
        for name in CANONICAL_COLUMNS:
            values = columns[name]
            if name == "site":
                data[name] = pd.Categorical.from_codes(
                    cut(values), dtype=self._site_dtype, validate=False
                )
            elif name == "kind":
                data[name] = pd.Categorical.from_codes(
                    cut(values), dtype=self._kind_dtype, validate=False
                )
            elif name == "time":
                data[name] = pd.Series(cut(values).view("M8[ns]"), copy=False).dt.tz_localize("UTC")
            elif isinstance(values, tuple):
                codes, categories = values
                data[name] = pd.Categorical.from_codes(
                    cut(codes), dtype=pd.CategoricalDtype(categories), validate=False
                )
            else:
                data[name] = cut(values)
        return pd.DataFrame(data, copy=False)


#: SQLite takes at most 32,766 parameters in a statement (its default limit since 3.32)
_SQLITE_SITES = 30_000


def _listable(store: Store, sites: pd.Index) -> bool:
    """Whether a read can name these sites (PostgreSQL: any number, as one array)."""
    return store.engine.dialect.name == "postgresql" or len(sites) <= _SQLITE_SITES


def _ceil_s(moment: datetime) -> int:
    return int(np.ceil(moment.timestamp()))


def _floor_s(moment: datetime) -> int:
    return int(np.floor(moment.timestamp()))


def _codes(values: pd.Series, dtype: pd.CategoricalDtype) -> np.ndarray:
    """Codes of ``values`` in the fixed categories of ``dtype`` (-1: not among them)."""
    if isinstance(values.dtype, pd.CategoricalDtype):
        lookup = np.array(
            [*dtype.categories.get_indexer(values.cat.categories), -1], dtype=np.int32
        )
        return lookup[values.cat.codes.to_numpy()]
    return dtype.categories.get_indexer(values.to_numpy(dtype=object)).astype(np.int32)


def _nanoseconds(times: pd.Series) -> np.ndarray:
    index = pd.DatetimeIndex(times)
    if index.tz is None:
        index = index.tz_localize("UTC")
    return index.tz_convert("UTC").as_unit("ns").asi8


def _placed(
    held: np.ndarray | None,
    new: np.ndarray,
    from_held: np.ndarray | None,
    new_at: np.ndarray,
    new_rows: np.ndarray,
) -> np.ndarray:
    """A merged column: held rows taken by ``from_held``, new rows written at ``new_at``."""
    if held is None or from_held is None:
        return new[new_rows]
    out = _taken(held, from_held)
    out[new_at] = new[new_rows]
    return out


def _gathered(
    held: np.ndarray, new: np.ndarray, source: np.ndarray, new_at: np.ndarray, rows: np.ndarray
) -> np.ndarray:
    """A merged column: held rows gathered in order by ``source``, then the new rows
    written at ``new_at`` (over the held row they replace, or into their inserted place)."""
    out = _taken(held, source)
    out[new_at] = new[rows]
    return out


def _is_missing(values: np.ndarray) -> bool:
    """Whether ``values`` is a column no row has a value in, held as one NaN."""
    return values.ndim == 1 and values.size > 1 and values.strides[0] == 0


def _compact_columns(columns: dict[str, Any]) -> None:
    """Hold each float column without a value in any row as one NaN seen at every row
    (a zero-stride view, read-only like every column handed out): feeds without a
    ceiling or precipitation leave those columns empty, 16 bytes a row, 225 MB at
    100,000 sites."""
    for name in FLOAT_COLUMNS:
        values = columns[name]
        if values.size <= 1 or _is_missing(values):
            continue
        # every cycle, every column: a value among the first rows (most columns) settles
        # it without a pass over the whole window
        if np.isnan(values[:_FIRST_ROWS]).all() and np.isnan(values).all():
            columns[name] = np.broadcast_to(np.float64(np.nan), values.shape)


_FIRST_ROWS = 4096  # rows looked at before a whole column is


def _rows_of(values: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """``values[rows]`` (a boolean mask), an empty column staying empty."""
    if _is_missing(values):
        return np.broadcast_to(np.float64(np.nan), (int(np.count_nonzero(rows)),))
    return values[rows]


def _taken(values: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """``values.take(rows)``, writable (an empty column is made whole again)."""
    if _is_missing(values):
        return np.full(rows.size, np.nan)
    return values.take(rows)


def _with_categories(
    mine: tuple[np.ndarray, pd.Index] | None, new: tuple[np.ndarray, pd.Index]
) -> tuple[tuple[np.ndarray | None, np.ndarray], pd.Index]:
    """(held codes, new codes recoded into the held categories), and those categories,
    extended by any new values."""
    new_codes, new_categories = new
    if mine is None:
        return (None, new_codes.astype(np.int32)), new_categories
    codes, categories = mine
    added = new_categories.difference(categories, sort=False)
    if len(added):
        categories = categories.append(added)
    lookup = np.array([*categories.get_indexer(new_categories), -1], dtype=np.int32)
    return (codes, lookup[new_codes]), categories
