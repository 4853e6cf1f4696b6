"""The SQL of a window read (``Store.window``): the rows of some sites and kinds from a
time on, in the order the rolling window keeps them (site, time, kind).

Pure: the text and its parameters, for the store's dialect and parameter mark.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from notifier.core.columns import CANONICAL_COLUMNS

__all__ = ["window_sql"]


def window_sql(
    dialect: str,
    mark: str,
    *,
    start_s: int,
    end_s: int | None,
    kinds: Sequence[str],
    site_ids: Sequence[str] | None = None,
    after: int | None = None,
    site_range: tuple[str | None, str | None] = (None, None),
) -> tuple[str, list[Any]]:
    """(the query, its parameters): rows with ``start_s <= time`` (``<= end_s``), of
    ``kinds``, written after batch ``after``, of ``site_ids`` and of the sites from
    ``site_range[0]`` (included) to ``site_range[1]`` (not included), each bound left
    out when ``None``.

    >>> window_sql("sqlite", "?", start_s=60, end_s=None, kinds=["obs"], after=7)[1]
    [60, 'obs', 7]
    """
    sql = (
        f"SELECT {', '.join(CANONICAL_COLUMNS)} FROM observations "
        f"WHERE time >= {mark} AND kind IN ({', '.join([mark] * len(kinds))})"
    )
    params: list[Any] = [start_s, *kinds]
    if end_s is not None:
        sql += f" AND time <= {mark}"
        params.append(end_s)
    if after is not None:
        sql += f" AND batch > {mark}"
        params.append(int(after))
    first_site, past_site = site_range
    if first_site is not None:
        sql += f" AND site >= {mark}"
        params.append(first_site)
    if past_site is not None:
        sql += f" AND site < {mark}"
        params.append(past_site)
    if site_ids is not None:
        site_ids = list(site_ids)
        if dialect == "postgresql":  # one parameter, any number
            sql += f" AND site = ANY({mark})"
            params.append(site_ids)
        else:
            sql += f" AND site IN ({', '.join([mark] * len(site_ids))})"
            params += site_ids
    if after is not None and dialect == "sqlite":
        # "+site": SQLite would otherwise walk the whole primary-key index to save the
        # sort, rather than take the few rows of the latest batches by their index
        sql += " ORDER BY +site, time, kind"
    else:
        sql += " ORDER BY site, time, kind"
    return sql, params
