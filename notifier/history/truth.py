"""What happened at each site, as replay and ``fogwatch learn`` score it: the observed
reports, the confirmed fog spells in them (``notifier.history.verify``'s definition) and
the times of the reports that say fog or not."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any, overload

import numpy as np

from notifier.engine.readings import epoch_seconds
from notifier.history.verify import FogSpell, fog_reports, fog_spells

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["fog_spells_by_site", "fog_truth", "observed_rows", "report_times", "rows_by_site"]


def observed_rows(obs: pd.DataFrame) -> pd.DataFrame:
    """The observed rows (not forecasts), in time order."""
    return obs[obs["kind"] == "obs"] if len(obs) else obs


def fog_truth(
    obs: pd.DataFrame, sites: Sequence[Any]
) -> tuple[dict[str, list[FogSpell]], dict[str, np.ndarray]]:
    """Each site's confirmed fog spells in the whole history (``verify``'s definition:
    fog at the site, in consecutive reports, so fog carried into the first night is
    known too) and the sorted POSIX seconds of its reports that say fog or not, from
    one reading of the reports."""
    spells: dict[str, list[FogSpell]] = {s.id: [] for s in sites}
    times = {s.id: np.zeros(0) for s in sites}
    rows = observed_rows(obs)
    if not len(rows):
        return spells, times
    vis = (
        rows["visibility_m"].to_numpy(dtype=float, na_value=np.nan)
        if ("visibility_m" in rows)
        else np.full(len(rows), np.nan)
    )
    wx = rows["weather"].to_numpy(dtype=object) if "weather" in rows else np.full(len(rows), None)
    fog, known = fog_reports(vis, wx)
    t_s = epoch_seconds(rows["time"])
    for sid, mine in zip(spells, rows_by_site(rows["site"], list(spells), known), strict=True):
        spells[sid] = fog_spells(_Moments(t_s[mine]), fog[mine].tolist())
        times[sid] = np.sort(t_s[mine])
    return spells, times


def fog_spells_by_site(obs: pd.DataFrame, sites: Sequence[Any]) -> dict[str, list[FogSpell]]:
    """Each site's confirmed fog spells (:func:`fog_truth`)."""
    return fog_truth(obs, sites)[0]


def report_times(obs: pd.DataFrame, sites: Sequence[Any]) -> dict[str, np.ndarray]:
    """Per site, the sorted POSIX seconds of its reports that say fog or not
    (:func:`fog_truth`)."""
    return fog_truth(obs, sites)[1]


def rows_by_site(
    site: pd.Series, ids: Sequence[str], keep: np.ndarray | None = None
) -> list[np.ndarray]:
    """For each of ``ids``, the positions of its rows in ``site`` (where ``keep``), in
    row order: one stable sort of the rows by site, not a scan of every row per site
    (which made a replay of 1,000 sites spend minutes here)."""
    import pandas as pd

    wanted = pd.Index(list(ids), dtype=object)
    if isinstance(site.dtype, pd.CategoricalDtype):
        # the codes of the categories, read as places in ``ids`` (-1: not one of them)
        places = np.append(wanted.get_indexer(site.cat.categories), -1)
        codes = places[site.cat.codes.to_numpy()]
    else:
        codes = wanted.get_indexer(site.to_numpy(dtype=object))
    if keep is not None:
        codes = np.where(keep, codes, -1)
    order = np.argsort(codes, kind="stable")
    ends = np.cumsum(np.bincount(codes[codes >= 0], minlength=len(wanted)))
    skipped = int(np.count_nonzero(codes < 0))  # sorted first
    return np.split(order[skipped:], ends[:-1]) if len(wanted) else []


class _Moments(Sequence[datetime]):
    """POSIX seconds read as UTC datetimes when indexed (``fog_spells`` reads only the
    few at the ends of a spell)."""

    def __init__(self, seconds: np.ndarray):
        self._seconds = seconds

    def __len__(self) -> int:
        return len(self._seconds)

    @overload
    def __getitem__(self, i: int) -> datetime: ...

    @overload
    def __getitem__(self, i: slice) -> list[datetime]: ...

    def __getitem__(self, i: int | slice) -> datetime | list[datetime]:
        if isinstance(i, slice):
            return [datetime.fromtimestamp(float(t), UTC) for t in self._seconds[i]]
        return datetime.fromtimestamp(float(self._seconds[i]), UTC)
