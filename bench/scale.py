"""W100 and the scaling table (issue 19): a running ``Service`` over 1k … 100,000 sites.

For each size a SQLite store holds W1-style readings (``generate.observations``: 24 h
every 10 min, forecasts for a share of the sites), written 10,000 sites at a time so the
generator never holds more than one slice. Then, in a fresh child process (its peak
memory read from the kernel, ``VmHWM``), the service's own path is timed:

- **start-up read**: ``Service`` built, its ``RollingWindow`` read whole (10 min before
  the evaluation time), then a first cycle there (which also works out the hold
  windows' feature tables and leaves the alert states);
- **one cycle**: the poll of the evaluation time written to the store as a source
  would, then ``Service.poll_and_assess`` — the window update (the batch read and merged
  in), features, rules, assessment, lifecycle, the outbox commit (states, events,
  snapshots) — the figure a site manager waits for;
- **a reload**: ``Service.reload`` with the sites unchanged (a subscriber renamed): what
  a config change costs a running service, the window kept; then the cycle after it.

The service reads its config as a user's would: a small YAML file naming a sites table
(``sites_file:``, a CSV row per site) beside the store, both read by the service's own
``load()`` at its start and again at the reload, so both figures include them.
Run alone::

    .venv/bin/python bench/run.py --only w100              # W100 only
    .venv/bin/python bench/run.py --only scale             # 1k, 10k, 50k, 100k
    .venv/bin/python bench/scale.py --sites 2000 --dir /tmp/s  # one size, store kept

With ``FOGWATCH_SCALE_PROFILE=file`` the child runs the measured cycle under cProfile
and writes its statistics there (``python -m pstats file``); its figures are then not
the ones to report.
"""

from __future__ import annotations

import argparse
import cProfile
import json
import os
import subprocess
import sys
import tempfile
import time
from datetime import timedelta
from pathlib import Path
from typing import Any

import generate

__all__ = ["SCALE_SITES", "W100_SITES", "load_store", "measure"]

W100_SITES = 100_000
SCALE_SITES = (1_000, 10_000, 50_000, 100_000)
SLICE = 10_000  # sites generated and written at a time


def load_store(directory: Path, n_sites: int, seed: int = generate.SEED) -> tuple[Path, int]:
    """``n_sites`` sites of W1-style readings in ``directory/w{n}.sqlite``, written a
    slice at a time; the readings of ``generate.AT`` itself are kept aside as the poll
    (``generate.last_poll_path``). A store already there is used as it is."""
    import pandas as pd

    from notifier.storage.store import Store

    directory.mkdir(parents=True, exist_ok=True)
    path = directory / f"w{n_sites}.sqlite"
    done = path.with_suffix(".done")
    poll_path = path.with_name(f"w{n_sites}-poll.pkl")
    if done.exists() and path.exists() and poll_path.exists():
        return path, int(done.read_text())
    site_list = generate.sites(n_sites, generate.SEED if seed is None else seed)
    at = generate.AT
    polls, written = [], 0
    with Store(f"sqlite:///{path}") as store:
        for first in range(0, n_sites, SLICE):
            frame = generate.observations(site_list[first : first + SLICE], at, seed + first)
            last = (frame["kind"] == "obs") & (frame["time"] == pd.Timestamp(at))
            polls.append(frame[last])
            written += store.add_observations(frame[~last], received_at=at - timedelta(minutes=10))
            del frame
    poll = pd.concat(polls, ignore_index=True)
    poll.to_pickle(poll_path)
    done.write_text(str(written + len(poll)))
    return path, written + len(poll)


def child(db: Path, n_sites: int, seed: int, out: Path) -> None:
    """In a fresh interpreter: the service's start, one cycle, a reload."""
    import pandas as pd
    from run import peak_rss_mb, reset_peak_rss, rss_now_mb

    import notifier.service.cycle as cycle_module

    at = generate.AT
    config_path = db.with_name("w-config.yaml")
    write_sites_table(db.with_name("w-sites.csv"), generate.sites(n_sites, seed))

    def write_config(desk_name: str) -> None:
        config_path.write_text(
            "# written by bench/scale.py: the sites are in the table\n"
            "version: 1\n"
            "sites_file: w-sites.csv\n"
            f"store: {{url: 'sqlite:///{db}'}}\n"
            "channels: [{id: duty, type: text, stdout: false}]\n"
            f"subscribers: [{{id: desk, name: '{desk_name}', channel: duty, operator: true}}]\n",
            encoding="utf-8",
        )

    write_config("Duty desk")
    # where a cycle's time goes: each stage timed inside the service's own calls
    spent = {"evaluate": 0.0, "snapshots": 0.0, "commit": 0.0}

    def timing(name: str, fn: Any) -> Any:
        def timed(*args: Any, **kwargs: Any) -> Any:
            start = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                spent[name] += time.perf_counter() - start

        return timed

    cycle_module.evaluate = timing("evaluate", cycle_module.evaluate)  # type: ignore[assignment]
    cycle_module.site_snapshots = timing("snapshots", cycle_module.site_snapshots)  # type: ignore[assignment]
    outbox_class = cycle_module.Outbox
    outbox_class.commit_cycle = timing("commit", outbox_class.commit_cycle)  # type: ignore[method-assign]
    poll = pd.read_pickle(db.with_name(f"w{n_sites}-poll.pkl"))
    # a store kept from an earlier run (--dir) starts as new: before the poll of `at`,
    # with no alert states, events, deliveries or snapshots
    from notifier.storage.store import Store

    with Store(f"sqlite:///{db}") as store, store.atomic() as conn:
        conn.exec_driver_sql(
            "DELETE FROM observations WHERE kind = 'obs' AND time >= ?", (int(at.timestamp()),)
        )
        for table in ("deliveries", "events", "alert_states", "site_status"):
            conn.exec_driver_sql(f"DELETE FROM {table}")
    rss_ready = peak_rss_mb()
    figures: dict[str, Any] = {"sites": n_sites}

    # wall time and this process's CPU time side by side: on a shared machine the wall
    # time carries the other work, the CPU time much less of it
    def cpu() -> float:  # this process's CPU time and its finished helpers' (the window's
        # second reader, notifier/storage/window_parts.py)
        import resource

        children = resource.getrusage(resource.RUSAGE_CHILDREN)
        return time.process_time() + children.ru_utime + children.ru_stime

    reset_peak_rss()
    t0, c0 = time.perf_counter(), cpu()
    service = cycle_module.Service(config_path, sources=[])
    window_spent = {"s": 0.0}
    service._observations(at - timedelta(minutes=10))
    figures["start_up_read_s"] = time.perf_counter() - t0
    figures["start_up_read_cpu_s"] = cpu() - c0
    figures["rows_held"] = len(service._window or ())
    figures["peak_read_mb"] = peak_rss_mb()
    figures["rss_after_read_mb"] = rss_now_mb()
    reset_peak_rss()
    t1, c1 = time.perf_counter(), cpu()
    first = service.poll_and_assess(at - timedelta(minutes=10))
    figures["first_cycle_s"] = time.perf_counter() - t1
    figures["first_cycle_cpu_s"] = cpu() - c1
    figures["peak_first_cycle_mb"] = peak_rss_mb()
    figures["rss_after_first_cycle_mb"] = rss_now_mb()
    figures["peak_start_mb"] = max(figures["peak_read_mb"], figures["peak_first_cycle_mb"])
    del first

    window = service._window
    assert window is not None
    original_frame = window.frame

    def timed_frame(when: Any) -> Any:
        start = time.perf_counter()
        try:
            return original_frame(when)
        finally:
            window_spent["s"] += time.perf_counter() - start

    window.frame = timed_frame  # type: ignore[method-assign]
    t2 = time.perf_counter()
    service.store.add_observations(poll, received_at=at)
    figures["poll_write_s"] = time.perf_counter() - t2
    figures["poll_rows"] = len(poll)
    reset_peak_rss()
    spent.update(dict.fromkeys(spent, 0.0))
    profile = os.environ.get("FOGWATCH_SCALE_PROFILE")  # a file for the cycle's cProfile
    profiler = cProfile.Profile() if profile else None
    t3, c3 = time.perf_counter(), cpu()
    if profiler is not None:
        profiler.enable()
    report = service.poll_and_assess(at)
    if profiler is not None:
        profiler.disable()
        profiler.dump_stats(profile)
    figures["cycle_s"] = time.perf_counter() - t3
    figures["cycle_cpu_s"] = cpu() - c3
    figures.update({f"cycle_{k}_s": v for k, v in spent.items()})
    figures["window_update_s"] = window_spent["s"]
    figures["window_rows_read"] = window.last_read
    figures["events"] = len(report.events)
    figures["peak_cycle_mb"] = peak_rss_mb()
    del report

    # a reload: one subscriber renamed, the sites unchanged (the files read again)
    write_config("Duty desk (night)")
    reset_peak_rss()
    t4, c4 = time.perf_counter(), cpu()
    ok, message = service.reload()
    figures["reload_s"] = time.perf_counter() - t4
    figures["reload_cpu_s"] = cpu() - c4
    figures["reload_ok"] = ok
    figures["reload_held_s"] = service.reload_held_s
    figures["reload_kept_window"] = service._window is window
    # the window after the reload: brought up to date, not read again
    t5 = time.perf_counter()
    service._observations(at + timedelta(minutes=10))
    figures["window_after_reload_s"] = time.perf_counter() - t5
    figures["window_after_reload_rows_read"] = window.last_read
    figures["peak_reload_mb"] = peak_rss_mb()
    figures["rss_after_imports_mb"] = rss_ready
    figures["peak_mb"] = max(
        figures["peak_start_mb"], figures["peak_cycle_mb"], figures["peak_reload_mb"]
    )
    service.close()
    out.write_text(json.dumps(figures, indent=2))


def write_sites_table(path: Path, sites: Any) -> None:
    """``sites`` as a sites table (``sites_file:``, notifier/core/sites_file.py)."""
    import csv

    from notifier.core.config import Site
    from notifier.core.sites_file import LIST_COLUMNS

    columns = list(Site.model_fields)
    with path.open("w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(columns)
        for site in sites:
            row = []
            for name in columns:
                value = getattr(site, name)
                if name in LIST_COLUMNS:
                    value = ";".join(str(v) for v in value or ())
                row.append("" if value is None else value)
            writer.writerow(row)


def measure(directory: Path, n_sites: int, seed: int = generate.SEED) -> dict[str, Any]:
    """Build (or reuse) the store for ``n_sites`` and time the service in a child."""
    start = time.perf_counter()
    db, rows = load_store(directory, n_sites, seed)
    load_s = time.perf_counter() - start
    out = directory / f"w{n_sites}.json"
    cmd = [sys.executable, str(Path(__file__).resolve()), "--child", str(db), "--out", str(out)]
    cmd += ["--sites", str(n_sites), "--seed", str(seed)]
    subprocess.run(cmd, check=True)
    figures = json.loads(out.read_text())
    figures.update({"rows_in_store": rows, "store_build_s": load_s})
    return figures


def table(results: list[dict[str, Any]]) -> str:
    lines = [
        "| sites | rows held | start-up read (CPU) | first cycle (CPU)"
        " | one cycle (CPU; window update)"
        " | reload (lock held) | peak memory | in the cycle: assess / snapshots / commit |",
        "|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for r in results:
        lines.append(
            f"| {r['sites']:,} | {r['rows_held']:,}"
            f" | {r['start_up_read_s']:.1f} s ({r['start_up_read_cpu_s']:.1f} s)"
            f" | {r['first_cycle_s']:.1f} s ({r['first_cycle_cpu_s']:.1f} s)"
            f" | {r['cycle_s']:.2f} s ({r['cycle_cpu_s']:.2f} s;"
            f" window {r['window_update_s']:.2f} s)"
            f" | {r['reload_s']:.2f} s ({r.get('reload_held_s', float('nan')) * 1000:.1f} ms)"
            f" | {r['peak_mb']:,.0f} MB"
            f" | {r['cycle_evaluate_s']:.2f} / {r['cycle_snapshots_s']:.2f}"
            f" / {r['cycle_commit_s']:.2f} s |"
        )
    return "\n".join(lines)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sites", type=int, nargs="*", default=[W100_SITES])
    parser.add_argument("--seed", type=int, default=generate.SEED)
    parser.add_argument("--dir", type=Path, default=None, help="keep the stores here")
    parser.add_argument("--child", type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--out", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child, args.sites[0], args.seed, args.out)
        return 0
    with tempfile.TemporaryDirectory(prefix="fogwatch-scale-") as name:
        directory = args.dir or Path(name)
        results = [measure(directory, n, args.seed) for n in args.sites]
    print(table(results))
    print(json.dumps(results, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
