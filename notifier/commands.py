"""Handlers of the one-off commands (check, assess, explain, sources, ...).

Each is a thin layer over the library; ``cli.py`` only parses arguments and maps
exceptions to exit codes.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

from notifier.config import load_config
from notifier.errors import UsageError
from notifier.service import Loaded, evaluate, load, observations_for, open_store, parse_time

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


@dataclass
class ObservationBatch:
    frame: pd.DataFrame
    rejections: list[Any] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def _data_for(loaded: Loaded, args: argparse.Namespace) -> tuple[ObservationBatch, datetime]:
    """Observations for a one-off command: the --data files, or a poll into the store."""
    config = loaded.config
    if getattr(args, "data", None):
        at_guess = parse_time(args.at) if args.at else datetime.now(UTC)
        from notifier.sources import read_files

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
