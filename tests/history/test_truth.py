"""Each site's rows, found by one sort (``truth.rows_by_site``), against pandas' own
grouping (``DataFrame.groupby(...).indices``, the reference), and the fog spells read
from them against ``verify.fog_spells`` given every report's datetime."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import pandas as pd
import pytest

from notifier.history.truth import fog_spells_by_site, rows_by_site
from notifier.history.verify import fog_reports, fog_spells

RNG = np.random.default_rng(19)
IDS = [f"zz-t{k}" for k in range(7)]


def _random_sites(n: int) -> np.ndarray:
    # configured sites, and a few rows of a site not configured
    return RNG.choice([*IDS, "zz-elsewhere"], size=n)


@pytest.mark.parametrize("categorical", [False, True], ids=["text", "categorical"])
def test_rows_by_site_are_pandas_groups(categorical):
    sites = _random_sites(500)
    keep = RNG.random(500) < 0.8
    column = pd.Series(sites, dtype="category" if categorical else object)
    found = rows_by_site(column, IDS, keep)
    groups = pd.DataFrame({"site": sites[keep], "row": np.flatnonzero(keep)}).groupby("site")
    expected = {sid: groups.get_group(sid)["row"].to_numpy() for sid in groups.groups}
    assert len(found) == len(IDS)
    for sid, rows in zip(IDS, found, strict=True):
        # pandas keeps each group's rows in their order in the frame
        np.testing.assert_array_equal(rows, expected.get(sid, np.zeros(0, dtype=int)))


def test_rows_by_site_with_categories_in_another_order():
    # a categorical column whose categories are not the configured order, with a
    # missing value: each row still goes to its own site
    categories = sorted(set(IDS) - {"zz-t3"})[::-1]
    sites = _random_sites(200).astype(object)
    sites[::17] = None
    sites[~np.isin(sites, categories)] = None  # a site among no category: missing
    column = pd.Series(pd.Categorical(sites, categories=categories))
    found = rows_by_site(column, IDS)
    text = column.astype(object).to_numpy()
    for sid, rows in zip(IDS, found, strict=True):
        np.testing.assert_array_equal(rows, np.flatnonzero(text == sid))


def test_fog_spells_by_site_are_verifys_spells():
    n = 2_000
    t0 = datetime(2026, 11, 1, tzinfo=UTC).timestamp()
    times = t0 + np.sort(RNG.integers(0, 40 * 86400 // 600, n)) * 600.0
    obs = pd.DataFrame(
        {
            "site": _random_sites(n),
            "time": pd.to_datetime(times, unit="s", utc=True),
            "kind": "obs",
            # long runs of low visibility, and reports that say nothing
            "visibility_m": np.where(RNG.random(n) < 0.5, 400.0, 9000.0),
            "weather": RNG.choice([None, "FG", "BR", "-RA"], size=n),
        }
    )
    obs.loc[RNG.random(n) < 0.1, "visibility_m"] = np.nan
    spells = fog_spells_by_site(obs, [type("S", (), {"id": sid})() for sid in IDS])
    fog, known = fog_reports(obs["visibility_m"].to_numpy(), obs["weather"].to_numpy())
    told = 0
    for sid in IDS:
        mine = (obs["site"].to_numpy() == sid) & known
        at = [datetime.fromtimestamp(t, UTC) for t in times[mine]]
        assert spells[sid] == fog_spells(at, fog[mine].tolist())
        told += len(spells[sid])
    assert told > 10
