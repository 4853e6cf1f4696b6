"""``fogwatch learn``: fit each site's fog model on its history and print its scores."""

from __future__ import annotations

import argparse
import json
import sys
from datetime import UTC, datetime
from pathlib import Path

from notifier.core.errors import UsageError

__all__ = ["cli_learn"]


def cli_learn(args: argparse.Namespace) -> int:
    from notifier.cli.commands import ObservationBatch, _report_input
    from notifier.history.learn import learn, report_lines
    from notifier.ingest.poll import read_files
    from notifier.service.loading import load, parse_time

    loaded = load(args.config)
    frame, rejections, warnings = read_files(
        [Path(p) for p in args.data], loaded.config, datetime.now(UTC)
    )
    _report_input(ObservationBatch(frame, rejections, warnings))
    if not len(frame):
        raise UsageError("--data: no usable rows in the input")
    truth = None
    if args.labels:
        truth, rej, warn = read_files(
            [Path(p) for p in args.labels], loaded.config, datetime.now(UTC)
        )
        _report_input(ObservationBatch(truth, rej, warn))
        if args.site is None and len(loaded.config.sites) > 1:
            raise UsageError("--labels needs --site: whose fog do the labels tell?")
        site = args.site or loaded.config.sites[0].id
        truth = truth.assign(site=site)
    times = frame["time"]
    start = parse_time(args.start) if args.start else times.min().to_pydatetime()
    end = parse_time(args.end) if args.end else times.max().to_pydatetime()
    model, learned = learn(loaded, frame, start, end, hours=args.hours, site=args.site, truth=truth)
    print("\n".join(report_lines(learned, args.hours)))
    if not model.sites:
        print("fogwatch learn: no site had enough history; no model written", file=sys.stderr)
        return 1
    out = Path(args.out)
    tmp = out.with_name(out.name + ".tmp")
    tmp.write_text(json.dumps(model.as_dict(), indent=1) + "\n", encoding="utf-8")
    tmp.replace(out)
    print(
        f"model for {len(model.sites)} site(s) written to {out}; load it with `model: {out}` "
        "in the config or `replay --model`. Scores of an automated estimate on past data; "
        "they do not make it an official forecast."
    )
    return 0
