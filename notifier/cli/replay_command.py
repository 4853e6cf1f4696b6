"""``fogwatch replay``: the rules over a history, scored night by night."""

from __future__ import annotations

import argparse
import json
import sys
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

from notifier.cli.commands import _report_input, read_data
from notifier.core.errors import UsageError
from notifier.service.loading import Loaded, load, parse_time

if TYPE_CHECKING:  # pragma: no cover
    from notifier.core.config import Config

__all__ = ["cli_replay"]


def cli_replay(args: argparse.Namespace) -> int:
    """Run the rules over history and score them; optionally a second rule set too."""
    from notifier.core.config import parse_duration_s
    from notifier.engine.rule_files import load_rule_set
    from notifier.history import replay as rp
    from notifier.history import report as rt

    loaded = load(args.config, getattr(args, "model", None))
    start, end = parse_time(args.start), parse_time(args.end)
    if end <= start:
        raise UsageError("--to must be after --from")
    try:
        step_s = parse_duration_s(args.step)
    except ValueError as exc:
        raise UsageError(f"--step: {exc}") from exc
    if step_s <= 0:
        raise UsageError("--step must be positive")
    batch = read_data(args.data, loaded.config, datetime.now(UTC))
    _report_input(batch)
    frame = batch.frame
    sets = [(loaded, "rules")]
    if args.rules_b:
        other = Loaded(loaded.config, load_rule_set([Path(args.rules_b)]), loaded.model)
        sets.append((other, "rules-b"))
    n_steps = int((end - start).total_seconds() // step_s) + 1
    results = []
    for which, label in sets:
        bar = (
            rt.progress_bar() if (n_steps > 300 and not args.json and sys.stderr.isatty()) else None
        )
        deliver = Path(args.deliver_to) / label if args.deliver_to else None
        results.append(
            rp.replay(
                which, frame, start, end, step_s, label=label, deliver_to=deliver, progress=bar
            )
        )
    if args.json:
        print(json.dumps(rt.to_json(results), indent=2, ensure_ascii=False))
    else:
        print(rt.report_text(results))
    if not results[0].nights:
        print(f"replay: {_whole_nights_hint(loaded.config, start, end)}", file=sys.stderr)
    if args.csv:
        rt.write_csv(results, Path(args.csv))
    if args.png:
        rt.write_png(results, frame, Path(args.png))  # and NAME-reliability.png with a model
    if args.deliver_to:
        for res in results:
            print(
                f"replay ({res.label}): {res.delivered} message(s) the subscribers would have "
                f"received, written into {Path(args.deliver_to) / res.label}",
                file=sys.stderr,
            )
    return 0


def _whole_nights_hint(config: Config, start: datetime, end: datetime) -> str:
    """What to ask instead when --from/--to hold no whole site-night (local noon to noon)."""
    from datetime import timedelta

    from notifier.core.timefmt import iso_z
    from notifier.history.verify import night_of

    zone = config.sites[0].timezone
    first = night_of(start, zone)
    last = night_of(end, zone)
    if last < end:
        last = night_of(last + timedelta(hours=36), zone)  # the local noon after --to
    return (
        f"no whole site-night (local noon to noon) between {iso_z(start)} and {iso_z(end)}, "
        f"so nothing was scored; e.g. --from {iso_z(first)} --to {iso_z(last)} "
        f"(noon to noon at {config.sites[0].id}, {zone})"
    )
