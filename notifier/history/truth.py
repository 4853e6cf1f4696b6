"""What happened at each site, as replay and ``fogwatch learn`` score it: the observed
reports, the confirmed fog spells in them (``notifier.history.verify``'s definition) and
the times of the reports that say fog or not."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import numpy as np

from notifier.engine.readings import epoch_seconds
from notifier.history.verify import FogSpell, fog_reports, fog_spells

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["fog_spells_by_site", "observed_rows", "report_times"]


def observed_rows(obs: pd.DataFrame) -> pd.DataFrame:
    """The observed rows (not forecasts), in time order."""
    return obs[obs["kind"] == "obs"] if len(obs) else obs


def fog_spells_by_site(obs: pd.DataFrame, sites: Sequence[Any]) -> dict[str, list[FogSpell]]:
    """Each site's confirmed fog spells in the whole history (``verify``'s definition:
    fog at the site, in consecutive reports), so fog carried into the first night is
    known too."""
    out: dict[str, list[FogSpell]] = {s.id: [] for s in sites}
    rows = observed_rows(obs)
    if not len(rows):
        return out
    vis = (
        rows["visibility_m"].to_numpy(dtype=float, na_value=np.nan)
        if ("visibility_m" in rows)
        else np.full(len(rows), np.nan)
    )
    wx = rows["weather"].to_numpy(dtype=object) if "weather" in rows else np.full(len(rows), None)
    fog, known = fog_reports(vis, wx)
    site_ids = rows["site"].to_numpy(dtype=object)
    t_s = epoch_seconds(rows["time"])
    for sid in out:
        mine = np.flatnonzero((site_ids == sid) & known)
        times = [datetime.fromtimestamp(float(t), UTC) for t in t_s[mine]]
        out[sid] = fog_spells(times, fog[mine].tolist())
    return out


def report_times(obs: pd.DataFrame, sites: Sequence[Any]) -> dict[str, np.ndarray]:
    """Per site, the sorted POSIX seconds of its reports that say fog or not."""
    out = {s.id: np.zeros(0) for s in sites}
    rows = observed_rows(obs)
    if not len(rows):
        return out
    vis = (
        rows["visibility_m"].to_numpy(dtype=float, na_value=np.nan)
        if "visibility_m" in rows
        else np.full(len(rows), np.nan)
    )
    wx = rows["weather"].to_numpy(dtype=object) if "weather" in rows else np.full(len(rows), None)
    _, known = fog_reports(vis, wx)
    site_ids = rows["site"].to_numpy(dtype=object)
    t_s = epoch_seconds(rows["time"])
    for sid in out:
        out[sid] = np.sort(t_s[(site_ids == sid) & known])
    return out
