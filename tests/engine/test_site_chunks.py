"""Features a share of the sites at a time (notifier/engine/site_chunks.py) against the
whole site list in one block, and that against one site at a time
(tests/engine/test_fast_path.py holds the one block to that): the same tables, to
1e-9 (the cooling fit's sums may be ordered differently in a narrower block)."""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pandas as pd
import pytest

from notifier.engine import site_chunks
from notifier.engine.features import FeatureCache
from notifier.engine.site_chunks import features_by_share
from notifier.engine.steps import features_at
from tests.engine.test_fast_path import AT, _assert_same, _columns, world  # noqa: F401


def test_public_names():
    assert site_chunks.__all__ == [
        "SITE_CHUNK",
        "SITE_TIME_CHUNK",
        "features_by_share",
        "share_size",
    ]


@pytest.mark.parametrize(
    ("n_times", "sites"),
    [(1, 15_000), (3, 5_000), (15, 1_000), (40, 1_000), (0, 15_000)],
    ids=["one", "three", "a-first-cycle", "many", "none"],
)
def test_a_share_holds_fewer_sites_the_more_times(n_times, sites):
    # the block's temporaries grow with sites × times (bench/README.md, 2026-12-05 night)
    assert site_chunks.share_size(n_times) == sites


def _count_share_sizes(monkeypatch) -> list[int]:
    """The number of sites of each ``features_at`` call ``features_by_share`` makes."""
    calls: list[int] = []
    original = site_chunks.features_at

    def counted(obs, sites, *args, **kwargs):
        calls.append(len(sites))
        return original(obs, sites, *args, **kwargs)

    monkeypatch.setattr(site_chunks, "features_at", counted)
    return calls


def test_the_default_share_follows_the_times(world, monkeypatch):  # noqa: F811
    sites, obs = world
    calls = _count_share_sizes(monkeypatch)
    # share_size's floor (1,000 sites) is above this world's 240: a smaller rule of the
    # same form shows the default taking the number of times into account
    monkeypatch.setattr(site_chunks, "share_size", lambda n_times: 300 // n_times)
    coded = _window_coded(sites, obs)
    features_by_share(coded, sites, [AT - timedelta(minutes=m) for m in (20, 10, 0)])
    assert calls == [100, 100, 40]


def _window_coded(sites, obs) -> pd.DataFrame:
    """As the rolling window hands it out: grouped by site in the sites' order, the site
    column coded by the sites, rows of unknown sites left out."""
    ids = [s.id for s in sites]
    known = obs[obs["site"].isin(ids)]
    rank = pd.Series(range(len(ids)), index=ids)
    order = np.lexsort((known["time"].to_numpy(), rank[known["site"]].to_numpy()))
    table = known.iloc[order].reset_index(drop=True)
    return table.assign(
        site=pd.Categorical(table["site"], categories=ids),
        kind=table["kind"].astype("category"),
        weather=table["weather"].astype("category"),
    )


@pytest.mark.parametrize("chunk", [7, 50, 239], ids=["seven", "fifty", "all-but-one"])
def test_shares_give_the_whole_lists_tables(world, chunk):  # noqa: F811
    sites, obs = world
    coded = _window_coded(sites, obs)
    times = [AT - timedelta(minutes=m) for m in (20, 10, 0)]
    whole = features_at(coded, sites, times)
    cache = FeatureCache()
    for _ in range(2):  # a second call with the cache of the first, as a service does
        shared = features_by_share(coded, sites, times, cache=cache, chunk=chunk)
        ids = [s.id for s in sites]
        for got, want in zip(shared, whole, strict=True):
            assert got.at == want.at and got.site_ids == want.site_ids == ids
            _assert_same(_columns(got), _columns(want), ids, 1e-9)


def test_a_table_not_coded_by_the_sites_goes_in_one_piece(world, monkeypatch):  # noqa: F811
    sites, obs = world
    calls = _count_share_sizes(monkeypatch)
    coded = _window_coded(sites, obs)
    shuffled = coded.sample(frac=1.0, random_state=3)  # not grouped in the sites' order
    for table in (obs, shuffled, coded.astype({"site": str})):
        calls.clear()
        features_by_share(table, sites, [AT], chunk=50)
        assert calls == [len(sites)]
    calls.clear()
    features_by_share(coded, sites, [AT], chunk=50)
    assert calls == [50, 50, 50, 50, 40]
