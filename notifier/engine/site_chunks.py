"""Features of many sites worked out a share of the sites at a time (pure: no I/O).

The feature code lays every site's readings out as one block (a row per site, a column
per reading time), some fifteen arrays of sites × columns. At 100,000 sites that block
and its temporaries are 2.5 GB at once, over a window that itself holds 1.8 GB: the
service's peak memory. A site's features depend only on its own readings, so the
sites are taken :data:`SITE_CHUNK` at a time and the tables joined: the block is a
fraction of the size, and the time the same.

This is done only where it costs nothing to find a share's rows: the table the
service's rolling window hands out, whose ``site`` column is coded by the configured
sites in order and whose rows are grouped by site in that order. Any other table, and
any site list of up to :data:`SITE_CHUNK` sites, goes through in one piece. A share's
tables equal the whole's, but for the last bits of the least-squares cooling fit (its
block can be a column narrower, which reorders a sum; as for ``compute_features_at``,
tested to 1e-9).
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from notifier.engine.catalog import FeatureSettings, FeatureTable
from notifier.engine.steps import features_at

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Site
    from notifier.engine.features import FeatureCache

__all__ = ["SITE_CHUNK", "SITE_TIME_CHUNK", "features_by_share", "share_size"]

#: sites worked out together at one time: 25,000 sites make a block of some 0.6 GB
SITE_CHUNK = 25_000
#: sites × times worked out together: the block's temporaries grow with both. A first
#: cycle works out its time and every hold step behind it (fifteen times): with 25,000
#: sites a share, that cycle's peak was 1.5 GB above the window's at 100,000 sites
#: (bench/README.md); a share of 1,000 sites there, of 5,000 at three times, costs no
#: more time (measured at 10,000 sites) and a fraction of the memory.
SITE_TIME_CHUNK = 15_000


def features_by_share(
    obs: pd.DataFrame,
    sites: Sequence[Site],
    times: Sequence[datetime],
    settings: FeatureSettings | None = None,
    *,
    cache: FeatureCache | None = None,
    chunk: int | None = None,
) -> list[FeatureTable]:
    """``steps.features_at(obs, sites, times, …)``, ``chunk`` sites at a time where the
    table allows it (see the module docstring); by default :func:`share_size`."""
    chunk = share_size(len(times)) if chunk is None else chunk
    bounds = _row_bounds(obs, sites, chunk)
    if bounds is None:
        return features_at(obs, sites, times, settings, cache=cache)
    codes = obs["site"].cat.codes.to_numpy()
    parts: list[list[FeatureTable]] = []
    for first in range(0, len(sites), chunk):
        mine = sites[first : first + chunk]
        rows = slice(int(bounds[first // chunk]), int(bounds[first // chunk + 1]))
        share = obs.iloc[rows].copy(deep=False)
        share["site"] = pd.Categorical.from_codes(
            codes[rows] - first, categories=pd.Index([s.id for s in mine]), validate=False
        )
        parts.append(features_at(share, mine, times, settings, cache=cache))
        del share
    return [_joined(tables) for tables in zip(*parts, strict=True)]


def share_size(n_times: int) -> int:
    """Sites a share for ``n_times`` times: :data:`SITE_TIME_CHUNK` sites × times, at
    least 1,000 sites and at most :data:`SITE_CHUNK`."""
    return min(SITE_CHUNK, max(1_000, SITE_TIME_CHUNK // max(n_times, 1)))


def _row_bounds(obs: pd.DataFrame | None, sites: Sequence[Site], chunk: int) -> np.ndarray | None:
    """Where each share's rows begin (and the last ends), or None: one piece."""
    if obs is None or len(sites) <= chunk or "site" not in obs:
        return None
    column = obs["site"]
    if not isinstance(column.dtype, pd.CategoricalDtype):
        return None
    ids = [s.id for s in sites]
    if len(column.cat.categories) != len(ids) or list(column.cat.categories) != ids:
        return None
    codes = column.cat.codes.to_numpy()
    if codes.size and bool((codes[1:] < codes[:-1]).any()):  # not grouped in site order
        return None
    starts = np.arange(0, len(ids), chunk)
    return np.searchsorted(codes, np.append(starts, len(ids)), side="left")


def _joined(tables: Sequence[FeatureTable]) -> FeatureTable:
    """The shares' tables at one time as one table over all their sites."""
    first = tables[0]
    drivers = None
    if first.drivers is not None:
        drivers = np.concatenate([t.drivers for t in tables if t.drivers is not None])
    return FeatureTable(
        at=first.at,
        site_ids=[sid for t in tables for sid in t.site_ids],
        values={name: np.concatenate([t.values[name] for t in tables]) for name in first.values},
        projection_method=np.concatenate([t.projection_method for t in tables]),
        last_time=np.concatenate([t.last_time for t in tables]),
        fit_t0_c=np.concatenate([t.fit_t0_c for t in tables]),
        fit_k_per_sqrt_h=np.concatenate([t.fit_k_per_sqrt_h for t in tables]),
        last_sunset=np.concatenate([t.last_sunset for t in tables]),
        drivers=drivers,
    )
