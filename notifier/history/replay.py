"""Replay: run the rules over history with a simulated clock, and score them.

The replay calls the same code as the live service — features, rules, assessment and
the alert lifecycle — stepping a simulated clock through the history. It delivers
nothing unless asked to write the messages into a folder. Each step sees only the
readings up to its own time (and forecast rows), exactly as a live cycle would.
"""

from __future__ import annotations

import math
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from notifier.core.timefmt import iso_z
from notifier.engine.assess import results_where
from notifier.engine.features import FeatureCache
from notifier.engine.readings import epoch_seconds
from notifier.history.verify import (
    Contingency,
    NightOutcome,
    fog_observed,
    median_lead_min,
    night_of,
    table,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.engine.alerts import Event
    from notifier.service.cycle import Loaded

__all__ = ["ReplayResult", "replay", "to_json"]

HISTORY = timedelta(hours=26)  # what one step's features can look back on
BATCH = 144  # steps whose features and rules are worked out together (a day at 10 min)
AHEAD = timedelta(hours=37)  # forecast rows one step can use


@dataclass
class ReplayResult:
    start: datetime
    end: datetime
    step_s: float
    site_ids: list[str]
    events: list[Event]
    times: np.ndarray  # POSIX seconds of each step
    fog_level: np.ndarray  # sites × steps: 0 none, 1 watch, 2 warning
    nights: list[NightOutcome]
    label: str = "rules"
    delivered: int = 0
    extra: dict[str, Any] = field(default_factory=dict)

    def table(self, level: str = "warning", site: str | None = None) -> Contingency:
        return table([n for n in self.nights if site is None or n.site == site], level)

    def lead(self, which: str, site: str | None = None) -> float | None:
        return median_lead_min([n for n in self.nights if site is None or n.site == site], which)


def _fog_onsets(
    obs: pd.DataFrame, sites: Sequence[Any], start: datetime, end: datetime
) -> dict[tuple[str, datetime], datetime]:
    """First observed fog of each site-night in [start, end]."""
    import pandas as pd

    zones = {s.id: s.timezone for s in sites}
    out: dict[tuple[str, datetime], datetime] = {}
    if not len(obs):
        return out
    rows = obs[(obs["kind"] == "obs") & (obs["time"] >= start) & (obs["time"] <= end)]
    vis = (
        rows["visibility_m"].to_numpy(dtype=float, na_value=np.nan)
        if ("visibility_m" in rows)
        else np.full(len(rows), np.nan)
    )
    wx = rows["weather"].to_numpy(dtype=object) if "weather" in rows else np.full(len(rows), None)
    # fog_observed, row by row in effect: its weather test once per distinct text
    codes, texts = pd.factorize(wx, use_na_sentinel=True)
    foggy_text = np.array([*(fog_observed(None, text) for text in texts), False], dtype=bool)
    with np.errstate(invalid="ignore"):
        fog = (vis < 1000.0) | foggy_text[codes]
    foggy = rows.loc[fog, ["site", "time"]].sort_values("time")
    for site_id, t in zip(foggy["site"], foggy["time"], strict=True):
        if site_id not in zones:
            continue
        when = t.to_pydatetime().astimezone(UTC)
        key = (site_id, night_of(when, zones[site_id]))
        out.setdefault(key, when)
    return out


def _why_not(sa: Any) -> list[str]:
    """For a miss: each fog rule for this site and what kept it from firing."""
    lines = []
    for r in results_where(sa, lambda rule: rule.hazard == "fog"):
        if not r.applies or r.fires:
            continue
        if r.missing:
            lines.append(f"{r.rule.id}: unknown {', '.join(r.missing)}")
            continue
        failed = [
            f"{o.test.feature} {o.value:.4g} {o.test.describe_threshold()}"
            for o in r.outcomes
            if not o.held
        ]
        if not failed and not r.hold_met:
            failed = [f"held for less than {r.rule.hold_s / 60:.0f} min"]
        lines.append(f"{r.rule.id}: not met: {'; '.join(failed[:3])}")
    return lines


def replay(
    loaded: Loaded,
    obs: pd.DataFrame,
    start: datetime,
    end: datetime,
    step_s: float = 600.0,
    *,
    label: str = "rules",
    deliver_to: Path | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> ReplayResult:
    """Step from ``start`` to ``end`` and collect events, alert periods and night scores."""
    import pandas as pd

    from notifier.engine.assess import HOLD_STEP_S, assess_times, level_rank
    from notifier.engine.lifecycle import step

    config = loaded.config
    sites = list(config.sites)
    ids = [s.id for s in sites]
    start, end = start.astimezone(UTC), end.astimezone(UTC)
    obs = obs.sort_values("time", kind="stable").reset_index(drop=True) if len(obs) else obs
    if len(obs):
        # sites coded in the configuration's order: the feature pass reads the codes as
        # site indices instead of looking each row's text up (the rows are in time order)
        # (from codes: rows of sites not configured become missing without a warning)
        site_dtype = pd.CategoricalDtype(pd.Index(ids, dtype=object))
        kind_dtype = pd.CategoricalDtype(pd.Index(["forecast", "obs"], dtype=object))
        obs = obs.assign(
            site=pd.Categorical.from_codes(
                site_dtype.categories.get_indexer(obs["site"].to_numpy(dtype=object)),
                dtype=site_dtype,
            ),
            kind=pd.Categorical.from_codes(
                kind_dtype.categories.get_indexer(obs["kind"].to_numpy(dtype=object)),
                dtype=kind_dtype,
            ),
        )
    t_rows = epoch_seconds(obs["time"]) if len(obs) else np.array([])
    pos = {sid: i for i, sid in enumerate(ids)}
    n_steps = int(math.floor((end - start).total_seconds() / step_s)) + 1
    times = start.timestamp() + np.arange(n_steps) * step_s
    fog_level = np.zeros((len(sites), n_steps), dtype=np.int8)
    onsets = _fog_onsets(obs, sites, start, end)
    onset_steps: dict[int, list[tuple[int, tuple[str, datetime]]]] = {}
    for key, when in onsets.items():
        k = int(math.ceil((when.timestamp() - times[0]) / step_s))
        onset_steps.setdefault(min(max(k, 0), n_steps - 1), []).append((pos[key[0]], key))
    why_not: dict[tuple[str, datetime], list[str]] = {}
    states: dict[Any, Any] = {}
    events: list[Event] = []
    cache: dict[float, Any] = {}
    features = FeatureCache()  # the feature code's cache, kept from batch to batch
    stale = config.alerts.stale_after / 60.0
    hold_s = max((r.hold_s for r in loaded.rules.rules), default=0.0) + HOLD_STEP_S
    batch: list[list[Any]] = []
    for k, t_s in enumerate(times):
        now = datetime.fromtimestamp(float(t_s), UTC)
        if k % BATCH == 0:
            # features and rules for a batch of steps at once (sites × times)
            batch_times = times[k : k + BATCH]
            lo, hi = np.searchsorted(
                t_rows,
                [
                    t_s - HISTORY.total_seconds() - hold_s,
                    float(batch_times[-1]) + AHEAD.total_seconds(),
                ],
            )
            window = obs.iloc[lo:hi] if len(obs) else obs
            cache.clear()
            batch = assess_times(
                loaded.rules,
                sites,
                window,
                [datetime.fromtimestamp(float(t), UTC) for t in batch_times],
                stale_after_min=stale,
                cache=cache,
                feature_cache=features,
            )
        assessments = batch[k % BATCH]
        states, found = step(states, assessments, now, config.alerts)
        events.extend(found)
        for (site_id, hazard), st in states.items():
            if hazard == "fog":
                fog_level[pos[site_id], k] = level_rank(st.level)
        for i, key in onset_steps.get(k, []):
            why_not[key] = _why_not(assessments[i])
        if progress is not None:
            progress(k + 1, n_steps)

    nights = _nights(sites, times, fog_level, onsets, events, why_not, start, end, step_s)
    result = ReplayResult(start, end, step_s, ids, events, times, fog_level, nights, label)
    if deliver_to is not None:
        result.delivered = _write_messages(loaded, events, deliver_to)
    return result


def _nights(
    sites: Sequence[Any],
    times: np.ndarray,
    fog_level: np.ndarray,
    onsets: dict[tuple[str, datetime], datetime],
    events: Sequence[Event],
    why_not: dict[tuple[str, datetime], list[str]],
    start: datetime,
    end: datetime,
    step_s: float,
) -> list[NightOutcome]:
    out = []
    fog_events: dict[str, list[Event]] = {}
    for e in events:
        if e.hazard == "fog":
            fog_events.setdefault(e.site_id, []).append(e)
    for i, site in enumerate(sites):
        night = night_of(start, site.timezone)
        while night < end:
            nxt = night + timedelta(days=1)
            n_start, n_end = night.timestamp(), nxt.timestamp()
            # only nights the replay covers whole (to within one step)
            if n_start >= start.timestamp() - step_s and n_end <= end.timestamp() + step_s:
                sel = (times >= n_start) & (times < n_end)
                levels = fog_level[i, sel]
                ts = times[sel]
                o = NightOutcome(site.id, night, fog_onset=onsets.get((site.id, night)))
                if (levels >= 1).any():
                    o.first_watch = datetime.fromtimestamp(float(ts[levels >= 1][0]), UTC)
                if (levels >= 2).any():
                    o.first_warning = datetime.fromtimestamp(float(ts[levels >= 2][0]), UTC)
                o.rules = sorted(
                    {
                        r
                        for e in fog_events.get(site.id, ())
                        if n_start <= e.time.timestamp() < n_end
                        for r in e.rules
                    }
                )
                o.why_not = why_not.get((site.id, night), [])
                out.append(o)
            night = datetime.combine(nxt.date(), night.timetz()).replace(tzinfo=night.tzinfo)
    return out


def _write_messages(loaded: Loaded, events: Sequence[Event], folder: Path) -> int:
    from notifier.core.config import FolderChannel
    from notifier.delivery.channels import build_channel
    from notifier.delivery.messages import render
    from notifier.storage.outbox import Delivery

    channel = build_channel(FolderChannel(id="replay", type="folder", path=folder))
    with channel:
        for ev in events:
            site = loaded.config.site(ev.site_id)
            delivery = Delivery(ev.id, "replay", "replay", "replay@fogwatch.invalid")
            channel.send(render(ev, site, loaded.rules), delivery, f"fw-replay-{ev.id}")
    return len(events)


def to_json(results: Sequence[ReplayResult]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for res in results:
        per_site = {}
        for sid in res.site_ids:
            per_site[sid] = {
                "warning": res.table("warning", sid).as_dict(),
                "watch": res.table("watch", sid).as_dict(),
                "median_lead_min": {
                    "watch": res.lead("watch", sid),
                    "warning": res.lead("warning", sid),
                },
            }
        out[res.label] = {
            "from": iso_z(res.start),
            "to": iso_z(res.end),
            "step_s": res.step_s,
            "overall": {
                "warning": res.table("warning").as_dict(),
                "watch": res.table("watch").as_dict(),
                "median_lead_min": {"watch": res.lead("watch"), "warning": res.lead("warning")},
            },
            "sites": per_site,
            "events": [
                {
                    "time": iso_z(e.time),
                    "site": e.site_id,
                    "hazard": e.hazard,
                    "type": e.type,
                    "level": e.level,
                    "rules": list(e.rules),
                }
                for e in res.events
            ],
            "false_alarms": [
                {
                    "site": n.site,
                    "night": n.night.date().isoformat(),
                    "first_warning": iso_z(n.first_warning),
                    "rules": n.rules,
                }
                for n in res.nights
                if n.category("warning") == "false_alarm"
            ],
            "misses": [
                {
                    "site": n.site,
                    "night": n.night.date().isoformat(),
                    "onset": iso_z(n.fog_onset),
                    "first_watch": iso_z(n.first_watch),
                    "why_not": n.why_not,
                }
                for n in res.nights
                if n.category("warning") == "miss"
            ],
        }
    return out


def _fmt(v: float | None, spec: str = ".2f") -> str:
    return "—" if v is None or (isinstance(v, float) and math.isnan(v)) else format(v, spec)


def report_text(results: Sequence[ReplayResult]) -> str:
    """Timeline, tables and scores; two rule sets side by side when given."""
    first = results[0]
    lines = [
        f"fogwatch replay {iso_z(first.start)} → {iso_z(first.end)}, "
        f"step {first.step_s / 60:g} min, {len(first.site_ids)} site(s), "
        f"{len(first.nights)} site-night(s)",
        "",
    ]
    for res in results:
        lines.append(f"Alert timeline ({res.label})")
        for e in res.events:
            if e.type == "reminder":
                continue
            lines.append(
                f"  {iso_z(e.time)}  {e.site_id:<22} {e.hazard:<8} {e.type:<10} "
                f"{e.level:<7} {', '.join(e.rules)}"
            )
        if not res.events:
            lines.append("  (no alerts)")
        lines.append("")
    header = f"{'':<24}" + "".join(f"{r.label:>22}" for r in results)
    lines.append("Verification (a night is warned when a fog warning was in force in it;")
    lines.append("fog is visibility below 1000 m or a reported FG/FZFG)")
    lines.append(header)
    rows = [
        ("hits", lambda r: str(r.table().hits)),
        ("misses", lambda r: str(r.table().misses)),
        ("false alarms", lambda r: str(r.table().false_alarms)),
        ("correct quiet nights", lambda r: str(r.table().correct_negatives)),
        ("POD", lambda r: _fmt(r.table().pod)),
        ("FAR", lambda r: _fmt(r.table().far)),
        ("CSI", lambda r: _fmt(r.table().csi)),
        ("frequency bias", lambda r: _fmt(r.table().bias)),
        ("POD (watch or warning)", lambda r: _fmt(r.table("watch").pod)),
        ("FAR (watch or warning)", lambda r: _fmt(r.table("watch").far)),
        ("median lead, watch (min)", lambda r: _fmt(r.lead("watch"), ".0f")),
        ("median lead, warning (min)", lambda r: _fmt(r.lead("warning"), ".0f")),
    ]
    for name, fn in rows:
        lines.append(f"  {name:<22}" + "".join(f"{fn(r):>22}" for r in results))
    lines.append("")
    for res in results:
        sites = res.site_ids
        lines.append(f"Per site ({res.label}): hits/misses/false alarms/quiet, POD, FAR, CSI")
        for sid in sites:
            t = res.table("warning", sid)
            lines.append(
                f"  {sid:<24} {t.hits}/{t.misses}/{t.false_alarms}/"
                f"{t.correct_negatives}  POD {_fmt(t.pod)}  FAR {_fmt(t.far)}  "
                f"CSI {_fmt(t.csi)}"
            )
        fa = [n for n in res.nights if n.category("warning") == "false_alarm"]
        miss = [n for n in res.nights if n.category("warning") == "miss"]
        if fa:
            lines.append(f"False alarms ({res.label}):")
            for n in fa:
                lines.append(
                    f"  {n.site} night of {n.night.date()}: warning from "
                    f"{iso_z(n.first_warning)}; rules {', '.join(n.rules)}"
                )
        if miss:
            lines.append(f"Misses ({res.label}):")
            for n in miss:
                late = n.lead_min("warning")
                said = (
                    f"warning came {-late:.0f} min after onset"
                    if late is not None
                    else "no warning"
                )
                lines.append(
                    f"  {n.site} night of {n.night.date()}: fog from {iso_z(n.fog_onset)}; {said}"
                )
                lines.extend(f"      {w}" for w in n.why_not[:4])
        lines.append("")
    lines.append(
        "Scores of an automated estimate on past data; they do not make it an official forecast."
    )
    return "\n".join(lines)


def write_csv(results: Sequence[ReplayResult], path: Path) -> None:
    import csv

    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(
            ["rules", "time", "site", "hazard", "type", "level", "previous_level", "rules_fired"]
        )
        for res in results:
            for e in res.events:
                w.writerow(
                    [
                        res.label,
                        iso_z(e.time),
                        e.site_id,
                        e.hazard,
                        e.type,
                        e.level,
                        e.previous_level,
                        " ".join(e.rules),
                    ]
                )


def write_png(result: ReplayResult, obs: pd.DataFrame, path: Path) -> None:
    """Observed visibility against watch and warning periods, one panel per site."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    n = len(result.site_ids)
    fig = Figure(figsize=(10, 1.6 * n + 0.8), dpi=100)
    FigureCanvasAgg(fig)
    times = [datetime.fromtimestamp(float(t), UTC) for t in result.times]
    for i, sid in enumerate(result.site_ids):
        ax = fig.add_subplot(n, 1, i + 1)
        rows = obs[(obs["site"] == sid) & (obs["kind"] == "obs")] if len(obs) else obs
        if len(rows) and "visibility_m" in rows:
            ax.plot(
                rows["time"].dt.tz_convert("UTC").dt.tz_localize(None),
                rows["visibility_m"],
                color="black",
                lw=0.8,
                label="visibility",
            )
        ax.axhline(1000, color="grey", lw=0.6, ls="--")
        lv = result.fog_level[i]
        # matplotlib plots datetimes through its unit converters; its stubs name only numbers
        naive: list[Any] = [t.replace(tzinfo=None) for t in times]
        ax.fill_between(
            naive,
            0,
            1,
            where=lv >= 1,
            transform=ax.get_xaxis_transform(),
            color="#f2c14e",
            alpha=0.35,
            step="post",
            label="watch",
        )
        ax.fill_between(
            naive,
            0,
            1,
            where=lv >= 2,
            transform=ax.get_xaxis_transform(),
            color="#d1495b",
            alpha=0.35,
            step="post",
            label="warning",
        )
        ax.set_yscale("log")
        ax.set_ylim(50, 30000)
        ax.set_ylabel(sid, fontsize=7)
        if i == 0:
            ax.legend(fontsize=7, loc="upper right", ncol=3)
    fig.suptitle(
        f"fogwatch replay ({result.label}): visibility (m) and alert periods, UTC", fontsize=9
    )
    fig.tight_layout()
    fig.savefig(path, format="png")


def progress_bar(stream: Any = None) -> Callable[[int, int], None]:
    stream = stream or sys.stderr
    last = [-1]

    def show(done: int, total: int) -> None:
        pct = int(100 * done / total)
        if pct != last[0] and (pct % 5 == 0 or done == total):
            last[0] = pct
            bar = "#" * (pct // 5) + "-" * (20 - pct // 5)
            stream.write(f"\rreplay [{bar}] {pct:3d}% ({done}/{total} steps)")
            if done == total:
                stream.write("\n")
            stream.flush()

    return show
