"""Reports on replay results: text, JSON, CSV of events, a PNG chart, a progress bar.

``replay`` (in ``notifier.history.replay``) produces the results; this module only
presents them. Two results side by side are two rule sets over the same history; the
reference forecasts (``notifier.history.verify``) are scored beside them on the same
nights.
"""

from __future__ import annotations

import math
import sys
from collections.abc import Callable, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

from notifier.core.timefmt import iso_z

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd
    from matplotlib.figure import Figure

    from notifier.history.replay import ReplayResult

__all__ = [
    "progress_bar",
    "report_text",
    "timeline_figure",
    "to_json",
    "write_csv",
    "write_png",
]


#: said instead of scores when --from/--to hold no whole site-night (verify's definition)
NO_WHOLE_NIGHT = [
    "Nothing scored: no whole site-night lies between --from and --to. A site-night runs",
    "from local noon to the next local noon at each site; widen the range to cover one.",
]


def to_json(results: Sequence[ReplayResult]) -> dict[str, Any]:
    """Each result's scores, events, false alarms and misses, keyed by its label."""
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
        refs = res.references
        out[res.label] = {
            "from": iso_z(res.start),
            "to": iso_z(res.end),
            "step_s": res.step_s,
            "overall": {
                "warning": res.table("warning").as_dict(),
                "watch": res.table("watch").as_dict(),
                "median_lead_min": {"watch": res.lead("watch"), "warning": res.lead("warning")},
                "brier_warning": _num(refs.brier_of(res.nights)) if refs else None,
            },
            # the reference forecasts on the same nights (the warning level)
            "references": refs.as_dict() if refs else None,
            # with a site model: its chance scored hour by hour (NaN scores as null)
            "probability": _json_safe(res.probability_scores),
            "sites": per_site,
            # nights left out of every score: the visibility went unreported for hours
            "unwatched_nights": [
                {"site": n.site, "night": n.night.date().isoformat()} for n in res.unwatched
            ],
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


def _json_safe(v: Any) -> Any:
    if isinstance(v, dict):
        return {k: _json_safe(x) for k, x in v.items()}
    if isinstance(v, list):
        return [_json_safe(x) for x in v]
    return None if isinstance(v, float) and v != v else v


def _num(v: float) -> float | None:
    return None if math.isnan(v) else round(v, 4)


def report_text(results: Sequence[ReplayResult]) -> str:
    """Timeline, tables and scores; two rule sets side by side when given."""
    first = results[0]
    lines = [
        f"fogwatch replay {iso_z(first.start)} → {iso_z(first.end)}, "
        f"step {first.step_s / 60:g} min, {len(first.site_ids)} site(s), "
        f"{len(first.nights)} site-night(s)",
        "",
    ]
    if first.unwatched:
        lines[-1:-1] = [
            f"{len(first.unwatched)} more site-night(s) not scored: their visibility went "
            "unreported for more than 3 h",
            "between 18:00 and 09:00 local, so no forecast on them can be verified",
        ]
    for res in results:
        lines.extend(_timeline_lines(res))
    if not first.nights:
        lines += [*NO_WHOLE_NIGHT, ""]
        lines.append(
            "Scores of an automated estimate on past data; they do not make it an official "
            "forecast."
        )
        return "\n".join(lines)
    lines.extend(_score_lines(results))
    lines.extend(_reference_lines(results))
    lines.extend(_probability_lines(results))
    for res in results:
        lines.extend(_per_site_lines(res))
    lines.append(
        "Scores of an automated estimate on past data; they do not make it an official forecast."
    )
    return "\n".join(lines)


def _probability_lines(results: Sequence[ReplayResult]) -> list[str]:
    """With a site model: the chance scored hour by hour against fog within its hours."""
    lines = []
    for res in results:
        p = res.probability_scores
        if not p or not p["hours"]:
            continue
        lines += [
            f"Site model ({res.label}), chance of fog within {p['hours_ahead']:g} h, "
            f"{p['hours']} steps: Brier {p['brier']:.3f} (climatology "
            f"{p['brier_climatology']:.3f}), skill {p['brier_skill']:+.2f}, "
            f"ROC area {_fmt(p['roc_area'])}",
            "  reliability (chance → how often fog followed, steps): "
            + ", ".join(
                f"{r['from']:.1f}–{r['to']:.1f} → {r['observed']:.2f} ({r['n']})"
                for r in p["reliability"]
            ),
            "",
        ]
    return lines


def _timeline_lines(res: ReplayResult) -> list[str]:
    """The alert timeline of one rule set (reminders left out)."""
    lines = [f"Alert timeline ({res.label})"]
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
    return lines


def _score_lines(results: Sequence[ReplayResult]) -> list[str]:
    """The verification table over all sites, one column per rule set."""
    header = f"{'':<24}" + "".join(f"{r.label:>22}" for r in results)
    lines = [
        "Verification by site-night, local noon to noon (a fog night is one fog began in:",
        "visibility below 1000 m or FG/FZFG at the site, in two reports 20 min apart; it is",
        "warned when a warning raised in the night, or in force at the onset, came before it)",
        header,
    ]
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
    return lines


def _reference_lines(results: Sequence[ReplayResult]) -> list[str]:
    """Each rule set beside the reference forecasts, on the same nights (warning level)."""
    refs = results[0].references
    if refs is None:
        return []
    from notifier.history.verify import table

    one_liner = table(refs.one_liner, "warning")
    rows = [(r.label, r.table(), refs.brier_of(r.nights)) for r in results]
    rows += [
        ("one-liner", one_liner, refs.brier_of(refs.one_liner)),
        ("always warn", refs.always, refs.brier_of_constant(1.0)),
        ("never warn", refs.never, refs.brier_of_constant(0.0)),
    ]
    lines = [
        "Reference forecasts on the same nights (warning level): one-liner = at 21:00 local,",
        "warn if the dew-point depression is ≤ 2 °C and the wind < 3 m/s; climatology = the",
        "base rate of fog nights as a probability. Brier: a yes/no forecast as 1 or 0.",
        f"  {'forecast':<22}{'hits/misses/fa/quiet':>22}{'POD':>7}{'FAR':>7}{'CSI':>7}"
        f"{'bias':>7}{'Brier':>8}",
    ]
    for name, t, brier in rows:
        counts = f"{t.hits}/{t.misses}/{t.false_alarms}/{t.correct_negatives}"
        lines.append(
            f"  {name:<22}{counts:>22}{_fmt(t.pod):>7}{_fmt(t.far):>7}{_fmt(t.csi):>7}"
            f"{_fmt(t.bias):>7}{_fmt(brier, '.3f'):>8}"
        )
    climatology = f"climatology (p {_fmt(refs.base_rate, '.3f')})"
    lines.append(f"  {climatology:<22}{'':>22}{'':>28}{_fmt(refs.brier_climatology, '.3f'):>8}")
    summary = [f"{r.label} CSI {_fmt(r.table().csi)}" for r in results]
    summary += [
        f"one-liner CSI {_fmt(one_liner.csi)}",
        f"always-warn CSI {_fmt(refs.always.csi)}",
    ]
    lines.append("  " + " · ".join(summary))
    lines.append("")
    return lines


def _per_site_lines(res: ReplayResult) -> list[str]:
    """One rule set's scores per site, then its false alarms and misses night by night."""
    lines = [
        f"Per site ({res.label}): hits/misses/false alarms/quiet, POD, FAR, CSI, frequency bias"
    ]
    for sid in res.site_ids:
        t = res.table("warning", sid)
        unwatched = sum(n.site == sid for n in res.unwatched)
        lines.append(
            f"  {sid:<24} {t.hits}/{t.misses}/{t.false_alarms}/"
            f"{t.correct_negatives}  POD {_fmt(t.pod)}  FAR {_fmt(t.far)}  "
            f"CSI {_fmt(t.csi)}  bias {_fmt(t.bias)}"
            + (f"  ({unwatched} night(s) not scored)" if unwatched else "")
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
            if late is None:
                said = "no warning"
            elif late == 0:
                said = "warning came only with the fog"
            else:
                said = f"warning came {-late:.0f} min after onset"
            lines.append(
                f"  {n.site} night of {n.night.date()}: fog from {iso_z(n.fog_onset)}; {said}"
            )
            lines.extend(f"      {w}" for w in n.why_not[:4])
    lines.append("")
    return lines


def write_csv(results: Sequence[ReplayResult], path: Path) -> None:
    """Every event of every result, one row each."""
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


def timeline_figure(results: Sequence[ReplayResult], obs: pd.DataFrame) -> Figure:
    """Observed visibility against watch and warning periods: one row of panels per site,
    one column per rule set (so a second set sits beside the first, on the same axes)."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    n, m = len(results[0].site_ids), len(results)
    fig = Figure(figsize=(10 * m, 1.6 * n + 0.8), dpi=100)
    FigureCanvasAgg(fig)
    axes = fig.subplots(n, m, squeeze=False, sharex=True, sharey=True)
    for j, result in enumerate(results):
        times = [datetime.fromtimestamp(float(t), UTC) for t in result.times]
        # matplotlib plots datetimes through its unit converters; its stubs name only numbers
        naive: list[Any] = [t.replace(tzinfo=None) for t in times]
        for i, sid in enumerate(result.site_ids):
            ax = axes[i][j]
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
            for rank, colour, label in ((1, "#f2c14e", "watch"), (2, "#d1495b", "warning")):
                ax.fill_between(
                    naive,
                    0,
                    1,
                    where=lv >= rank,
                    transform=ax.get_xaxis_transform(),
                    color=colour,
                    alpha=0.35,
                    step="post",
                    label=label,
                )
            ax.set_yscale("log")
            ax.set_ylim(50, 30000)
            if j == 0:
                ax.set_ylabel(sid, fontsize=7)
            if i == 0:
                ax.set_title(result.label, fontsize=8)
                if j == 0:
                    ax.legend(fontsize=7, loc="upper right", ncol=3)
    labels = ", ".join(r.label for r in results)
    fig.suptitle(f"fogwatch replay ({labels}): visibility (m) and alert periods, UTC", fontsize=9)
    fig.tight_layout()
    return fig


def write_png(results: Sequence[ReplayResult], obs: pd.DataFrame, path: Path) -> list[Path]:
    """:func:`timeline_figure` of every rule set, as one PNG file; with a site model,
    its reliability diagram beside it as ``NAME-reliability.png``. The files written."""
    timeline_figure(results, obs).savefig(path, format="png")
    written = [path]
    from notifier.history.reliability_chart import reliability_figure

    diagram = reliability_figure(results)
    if diagram is not None:
        beside = path.with_name(f"{path.stem}-reliability{path.suffix or '.png'}")
        diagram.savefig(beside, format="png")
        written.append(beside)
    return written


def progress_bar(stream: Any = None) -> Callable[[int, int], None]:
    """A ``progress`` callback for ``replay`` that draws a bar on ``stream`` (stderr)."""
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
