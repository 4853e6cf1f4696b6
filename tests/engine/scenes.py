"""Invented scenario sites and data for rule-engine tests (not real places or data)."""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta

import numpy as np
import pandas as pd

from notifier.core.config import Site, default_rules_dir
from notifier.engine.rule_files import load_rule_set

RULES = load_rule_set([default_rules_dir()])
EVENING = date(2026, 10, 14)


def site(site_id: str = "field-a", exposure: str = "open", use: str = "farm", **kw: object) -> Site:
    base: dict[str, object] = dict(
        id=site_id,
        name=site_id.replace("-", " ").title(),
        lat=52.3,
        lon=-1.8,
        timezone="Europe/London",
        exposure=exposure,
        use=use,
    )
    base.update(kw)
    return Site.model_validate(base)


def steady(
    site_id: str,
    end: datetime,
    hours: float = 3.0,
    step_min: int = 10,
    **values: float | str | None,
) -> pd.DataFrame:
    """Constant readings every ``step_min`` for ``hours`` up to ``end``.

    A value given as a (start, stop) tuple ramps linearly over the period.
    """
    n = int(hours * 60 / step_min) + 1
    times = [end - timedelta(minutes=step_min * (n - 1 - i)) for i in range(n)]
    data: dict[str, object] = {
        "site": site_id,
        "time": pd.to_datetime(times, utc=True),
        "kind": "obs",
    }
    for name, v in values.items():
        data[name] = np.linspace(v[0], v[1], n) if isinstance(v, tuple) else v
    frame = pd.DataFrame(data)
    if "temp_c" in frame and "dewpoint_c" in frame and "rh_pct" not in frame:
        from notifier.physics import relative_humidity_pct

        frame["rh_pct"] = relative_humidity_pct(
            frame["temp_c"].to_numpy(float), frame["dewpoint_c"].to_numpy(float)
        )
    return frame


def utc(y: int, mo: int, d: int, h: int, mi: int = 0) -> datetime:
    return datetime(y, mo, d, h, mi, tzinfo=UTC)
