"""The reliability diagram of a replay's site-model chance (``replay --model … --png``).

Per tenth of chance: how often fog followed against the mean chance given, beside the
diagonal of perfect reliability and the climatological rate (docs/references.md
[Wilks]), each point labelled with its number of steps.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any, cast

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

    from notifier.history.replay import ReplayResult

__all__ = ["reliability_figure"]


def _fmt(v: float | None) -> str:
    return "—" if v is None or v != v else f"{v:+.2f}"


def reliability_figure(results: Sequence[ReplayResult]) -> Figure | None:
    """One panel per rule set that had a site model; None when none had."""
    scored = [r for r in results if r.probability_scores and r.probability_scores["hours"]]
    if not scored:
        return None
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(4.2 * len(scored), 4.4), dpi=100)
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, len(scored), squeeze=False)[0]
    for ax, res in zip(axes, scored, strict=True):
        p = cast(dict[str, Any], res.probability_scores)
        rows = p["reliability"]
        ax.plot([0, 1], [0, 1], color="grey", lw=0.8, ls="--", label="perfect")
        if p.get("event_rate") is not None:
            ax.axhline(p["event_rate"], color="#6a994e", lw=0.8, ls=":", label="climatology")
        ax.plot(
            [r["mean_p"] for r in rows],
            [r["observed"] for r in rows],
            marker="o",
            color="#d1495b",
            label="site model",
        )
        for r in rows:
            ax.annotate(str(r["n"]), (r["mean_p"], r["observed"]), fontsize=6,
                        textcoords="offset points", xytext=(3, -8))  # fmt: skip
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_xlabel("chance of fog given", fontsize=8)
        ax.set_ylabel("how often fog followed", fontsize=8)
        skill = p.get("brier_skill")
        ax.set_title(f"{res.label}: Brier skill {_fmt(skill)}, {p['hours']} steps", fontsize=8)
        ax.legend(fontsize=7, loc="upper left")
    fig.tight_layout()
    return fig
