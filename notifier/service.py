"""One cycle of the service, and the command handlers built on it.

``evaluate`` is the shared middle: observations in, assessments out. The live service,
``once``, ``assess`` and the demo call it with different clocks and data edges.
"""

from __future__ import annotations

import argparse
import json
import logging
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

from notifier.config import Config, load_config
from notifier.errors import UsageError
from notifier.rules import RuleSet, load_rule_set

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.assess import SiteAssessment
    from notifier.store import Store

__all__ = ["Loaded", "evaluate", "load", "observations_for", "parse_time"]

log = logging.getLogger(__name__)

FORECAST_HORIZON = timedelta(hours=36)


@dataclass
class Loaded:
    """A validated config with its rule set."""

    config: Config
    rules: RuleSet


@dataclass
class ObservationBatch:
    frame: pd.DataFrame
    rejections: list[Any] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def load(config_path: str | Path) -> Loaded:
    config = load_config(config_path)
    return Loaded(config, load_rule_set(config.rule_paths()))


def parse_time(text: str | None, default: datetime | None = None) -> datetime:
    """ISO 8601 with offset or Z; a naive time is taken as UTC."""
    if text is None:
        return default if default is not None else datetime.now(UTC)
    try:
        t = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError as exc:
        raise UsageError(
            f"--at: expected an ISO 8601 time such as 2026-11-20T03:00Z, got: {text!r}"
        ) from exc
    return (t if t.tzinfo else t.replace(tzinfo=UTC)).astimezone(UTC)


def open_store(config: Config) -> Store:
    from notifier.store import Store

    return Store(config.store_url)


def observations_for(config: Config, store: Store, at: datetime) -> pd.DataFrame:
    """The rolling window for every site: observed rows up to ``at``, forecasts ahead."""
    start = at - timedelta(seconds=config.store.window)
    return store.window([s.id for s in config.sites], start, at + FORECAST_HORIZON)


def evaluate(loaded: Loaded, obs: pd.DataFrame, at: datetime) -> list[SiteAssessment]:
    from notifier.assess import assess

    return assess(
        loaded.rules,
        loaded.config.sites,
        obs,
        at,
        stale_after_min=loaded.config.alerts.stale_after / 60.0,
    )


def _data_for(loaded: Loaded, args: argparse.Namespace) -> tuple[ObservationBatch, datetime]:
    """Observations for a one-off command: the --data files, or a poll into the store."""
    config = loaded.config
    if getattr(args, "data", None):
        from notifier.sources import read_files

        at_guess = parse_time(args.at) if args.at else datetime.now(UTC)
        frame, rejections, warnings = read_files([Path(p) for p in args.data], config, at_guess)
        if args.at is None and len(frame):
            # replaying a file: judge it at its newest observation, not at today's clock
            observed = frame[frame["kind"] == "obs"]
            if len(observed):
                at_guess = observed["time"].max().to_pydatetime().astimezone(UTC)
        return ObservationBatch(frame, rejections, warnings), at_guess
    at = parse_time(args.at)
    from notifier.sources import poll_all

    with open_store(config) as store:
        results = poll_all(config, store, at)
        frame = observations_for(config, store, at)
    batch = ObservationBatch(frame)
    for r in results:
        batch.rejections.extend(r.rejections)
        batch.warnings.extend(r.warnings)
        if not r.ok:
            batch.warnings.append(f"source {r.source_id}: {r.error}")
    return batch, at


def _report_input(batch: ObservationBatch, stream: Any) -> None:
    import sys

    stream = stream or sys.stderr
    for w in batch.warnings:
        print(f"warning: {w}", file=stream)
    for r in batch.rejections[:20]:
        print(f"rejected: {r}", file=stream)
    if len(batch.rejections) > 20:
        print(f"rejected: … and {len(batch.rejections) - 20} more", file=stream)


def cli_assess(args: argparse.Namespace) -> int:
    from notifier.assess import to_json
    from notifier.views import assessment_table

    loaded = load(args.config)
    batch, at = _data_for(loaded, args)
    _report_input(batch, None)
    assessments = evaluate(loaded, batch.frame, at)
    if args.json:
        print(json.dumps(to_json(assessments), indent=2, ensure_ascii=False))
    else:
        print(assessment_table(assessments))
    return 0


def cli_explain(args: argparse.Namespace) -> int:
    from notifier.views import explanation

    loaded = load(args.config)
    ids = [s.id for s in loaded.config.sites]
    if args.site not in ids:
        raise UsageError(f"unknown site {args.site!r} (known: {', '.join(ids)})")
    batch, at = _data_for(loaded, args)
    _report_input(batch, None)
    assessments = evaluate(loaded, batch.frame, at)
    (sa,) = [a for a in assessments if a.site.id == args.site]
    print(explanation(sa, loaded.rules))
    return 0


def cli_sources(args: argparse.Namespace) -> int:
    from notifier.sources import health_report

    config = load_config(args.config)
    with open_store(config) as store:
        print(health_report(store, config))
    return 0
