"""Columns of the canonical observation table read as numpy arrays.

The table (see ``notifier.core.columns``) comes either plain, with text in object
columns, or from the service's rolling window and the replay, with ``site``, ``kind``
and ``weather`` as categoricals. Each reader here takes either and gives the same
arrays; the coded form is only faster. ``notifier.engine.block`` lays the rows out
with them.

>>> import pandas as pd
>>> epoch_seconds(pd.Series(pd.to_datetime(["1970-01-01T00:01:30Z"])))
array([90.])
>>> site_index(pd.Series(["b", "b", "x", "a"]), {"a": 0, "b": 1})
array([ 1,  1, -1,  0])
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["epoch_seconds", "float_column", "row_kinds", "site_index", "weather_codes"]


def epoch_seconds(times: pd.Series) -> np.ndarray:
    """Tz-aware timestamps → float POSIX seconds."""
    import pandas as pd

    if isinstance(times.dtype, pd.DatetimeTZDtype):
        # already parsed: read the UTC instants straight out, in one pass; whole seconds
        # come out exact (both operands are exact doubles)
        utc = times.to_numpy(dtype=f"datetime64[{times.dtype.unit}]").view(np.int64)
        return utc / float({"s": 1, "ms": 10**3, "us": 10**6, "ns": 10**9}[times.dtype.unit])
    t = pd.to_datetime(times, utc=True)
    return t.dt.tz_localize(None).to_numpy().astype("datetime64[ms]").astype(np.int64) / 1000.0


def site_index(
    column: pd.Series,
    pos: Mapping[str, int],
    rows: np.ndarray | None = None,
    index: pd.Index | None = None,
) -> np.ndarray:
    """Row → index into the site list (-1 for an unknown site).

    Rows usually come grouped by site (the store returns them sorted), so equal
    neighbours are found with one vectorised comparison and only the first row of each
    run is looked up; any order gives the same answer, just more slowly. With ``rows``,
    only those rows need be read: the others get -1, or their index where that costs
    nothing (categories that are the site list itself).
    """
    import pandas as pd

    if isinstance(column.dtype, pd.CategoricalDtype):  # one lookup per category
        categories = column.cat.categories
        codes = column.cat.codes.to_numpy()
        if len(categories) == len(pos) and categories.equals(
            pd.Index(pos) if index is None else index
        ):
            # the categories are the sites in order (the service's rolling window): the
            # codes are the indices already, for every row (-1, a missing site, stays)
            return codes.astype(np.intp)
        lookup = [pos.get(c, -1) if isinstance(c, str) else -1 for c in categories]
        table = np.array([*lookup, -1], dtype=np.intp)
        if rows is None:
            return table[codes]
        out = np.full(len(column), -1, dtype=np.intp)
        out[rows] = table[codes[rows]]
        return out
    if rows is not None:
        out = np.full(len(column), -1, dtype=np.intp)
        out[rows] = site_index(column.iloc[rows], pos)
        return out
    values = column.to_numpy(dtype=object)
    if values.size == 0:
        return np.zeros(0, dtype=np.intp)
    with np.errstate(invalid="ignore"):
        change = np.asarray(values[1:] != values[:-1], dtype=bool)
    starts = np.concatenate(([0], np.flatnonzero(change) + 1))
    heads = np.fromiter(
        (pos.get(v, -1) if isinstance(v, str) else -1 for v in values[starts]),
        dtype=np.intp,
        count=starts.size,
    )
    return np.repeat(heads, np.diff(np.append(starts, values.size)))


def row_kinds(
    column: pd.Series, known: np.ndarray, rows: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """(kind is obs, kind is forecast) per row; forecast only for known sites. With
    ``rows``, only those rows are read (the others are neither)."""
    import pandas as pd

    if rows is not None:
        is_obs = np.zeros(len(column), dtype=bool)
        is_fc = np.zeros(len(column), dtype=bool)
        is_obs[rows], is_fc[rows] = row_kinds(column.iloc[rows], known[rows])
        return is_obs, is_fc
    if isinstance(column.dtype, pd.CategoricalDtype):
        cats = list(column.cat.categories)
        codes = column.cat.codes.to_numpy()
        is_obs = codes == (cats.index("obs") if "obs" in cats else -2)
        is_fc = known & (codes == (cats.index("forecast") if "forecast" in cats else -2))
        return is_obs, is_fc
    kind = column.to_numpy()
    is_obs = np.asarray(kind == "obs", dtype=bool)
    is_fc = np.zeros(kind.size, dtype=bool)
    other = np.flatnonzero(known & ~is_obs)
    if other.size:
        is_fc[other] = np.asarray(kind[other] == "forecast", dtype=bool)
    return is_obs, is_fc


def float_column(obs: pd.DataFrame, name: str) -> np.ndarray | None:
    """Column ``name`` as float64 (NaN for missing), None if the table has no such column."""
    if name not in obs:
        return None
    series = obs[name]
    if series.dtype == np.float64:
        return series.to_numpy()
    return series.to_numpy(dtype=float, na_value=np.nan)


# Fog groups that are not fog at the site: VC, in the vicinity (not at the station); MI
# shallow, BC patches and PR partial, reported only while the visibility at the station
# is 1000 m or more (WMO-No. 306 FM 15, code table 4678; docs/references.md
# [WMO-No. 306], [FMH-1]). The same groups history.verify leaves out of its fog nights.
FOG_NOT_AT_SITE = frozenset({"VC", "MI", "BC", "PR"})


def weather_codes(column: pd.Series, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Present-weather text of ``rows`` → (code per row, flags per code).

    The flags (reported, FG, FZFG, BR — see ``families.observed_weather``) are worked
    out once per distinct text; code -1 (no text) picks the all-false last row of
    ``flags``.
    """
    import pandas as pd

    if isinstance(column.dtype, pd.CategoricalDtype):  # coded already
        codes = column.cat.codes.to_numpy()[rows]
        uniques = column.cat.categories
    else:
        codes, uniques = pd.factorize(column.to_numpy()[rows], use_na_sentinel=True)
    flags = np.zeros((len(uniques) + 1, 4), dtype=bool)
    for i, value in enumerate(uniques):
        text = str(value).upper()
        tokens = set(text.replace("+", " ").replace("-", " ").split())
        groups = [[tok[k : k + 2] for k in range(0, len(tok), 2)] for tok in tokens]
        flags[i] = (
            text != "",
            any("FG" in g and not FOG_NOT_AT_SITE.intersection(g) for g in groups),
            "FZFG" in tokens,
            "BR" in tokens,
        )
    return codes.astype(np.intp, copy=False), flags
