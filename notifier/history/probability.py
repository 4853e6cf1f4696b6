"""Scores of a probability forecast against what happened: Brier score, its skill
against climatology, ROC area and a reliability table (docs/references.md
[Wilks], chapter on forecast verification), and the labels they are scored on.

The event is the model's: fog at the site now or within the next ``hours`` (a confirmed
spell of fog, as replay counts fog, overlapping ``[t, t + hours]``).

>>> brier = brier_skill(np.array([0.9, 0.1]), np.array([True, False]), np.array([0.5, 0.5]))
>>> round(brier.score, 3), round(brier.reference, 3), round(brier.skill, 2)
(0.01, 0.25, 0.96)
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from notifier.history.verify import FogSpell

__all__ = [
    "BrierScores",
    "brier_skill",
    "chance_scores",
    "fog_labels",
    "probability_scores",
    "reliability",
    "roc_area",
]

# the bins of the reliability table: tenths of probability ([Wilks])
RELIABILITY_BINS = np.linspace(0.0, 1.0, 11)


def fog_labels(
    spells: Sequence[FogSpell], report_s: np.ndarray, times_s: np.ndarray, hours: float
) -> tuple[np.ndarray, np.ndarray]:
    """(fog, known) at each of ``times_s``: a spell overlaps ``[t, t + hours]``, and some
    report (``report_s``, sorted POSIX seconds of the site's reports that say fog or
    not) falls in that span, so the answer is known."""
    span = hours * 3600.0
    fog = np.zeros(len(times_s), dtype=bool)
    for s in spells:
        on = s.onset.timestamp()
        off = np.inf if s.ended is None else s.ended.timestamp()
        fog |= (times_s + span >= on) & (times_s < off)
    lo = np.searchsorted(report_s, times_s, side="left")
    hi = np.searchsorted(report_s, times_s + span, side="right")
    return fog, hi > lo


@dataclass(frozen=True)
class BrierScores:
    score: float  # mean squared error of the probability, 0 best
    reference: float  # the same for the reference (climatology)
    n: int

    @property
    def skill(self) -> float:
        """1 − score / reference: 1 perfect, 0 no better than the reference."""
        return 1.0 - self.score / self.reference if self.reference > 0 else float("nan")


def brier_skill(p: np.ndarray, observed: np.ndarray, reference: np.ndarray) -> BrierScores:
    o = np.asarray(observed, dtype=float)
    return BrierScores(
        float(np.mean((np.asarray(p) - o) ** 2)) if len(o) else float("nan"),
        float(np.mean((np.asarray(reference) - o) ** 2)) if len(o) else float("nan"),
        len(o),
    )


def roc_area(p: np.ndarray, observed: np.ndarray) -> float:
    """The area under the ROC curve: the chance that a random hour with the event gets
    a higher probability than a random hour without (ties count half; the
    Mann–Whitney form). NaN without both kinds of hour."""
    p = np.asarray(p, dtype=float)
    obs = np.asarray(observed, dtype=bool)
    n_pos, n_neg = int(obs.sum()), int((~obs).sum())
    if n_pos == 0 or n_neg == 0:
        return float("nan")
    order = np.argsort(p, kind="mergesort")
    ranks = np.empty(len(p))
    sorted_p = p[order]
    # average ranks for ties
    _, first, counts = np.unique(sorted_p, return_index=True, return_counts=True)
    avg = first + (counts - 1) / 2.0 + 1.0
    ranks[order] = np.repeat(avg, counts)
    return float((ranks[obs].sum() - n_pos * (n_pos + 1) / 2.0) / (n_pos * n_neg))


def reliability(p: np.ndarray, observed: np.ndarray) -> list[dict[str, float | int]]:
    """Per tenth of probability: how many forecasts, their mean probability and how
    often the event followed (empty bins left out)."""
    p = np.asarray(p, dtype=float)
    o = np.asarray(observed, dtype=float)
    which = np.clip(np.digitize(p, RELIABILITY_BINS[1:-1]), 0, len(RELIABILITY_BINS) - 2)
    rows: list[dict[str, float | int]] = []
    for b in range(len(RELIABILITY_BINS) - 1):
        mine = which == b
        if mine.any():
            rows.append(
                {
                    "from": float(RELIABILITY_BINS[b]),
                    "to": float(RELIABILITY_BINS[b + 1]),
                    "n": int(mine.sum()),
                    "mean_p": float(p[mine].mean()),
                    "observed": float(o[mine].mean()),
                }
            )
    return rows


def probability_scores(
    p: np.ndarray, observed: np.ndarray, climatology: np.ndarray | float
) -> dict[str, object]:
    """Brier score and skill against ``climatology``, ROC area and the reliability
    table, over the hours where ``p`` is known."""
    p = np.asarray(p, dtype=float)
    ok = ~np.isnan(p)
    clim = np.broadcast_to(np.asarray(climatology, dtype=float), p.shape)
    b = brier_skill(p[ok], observed[ok], clim[ok])
    return {
        "hours": b.n,
        "event_rate": float(np.mean(observed[ok])) if b.n else None,
        "brier": b.score,
        "brier_climatology": b.reference,
        "brier_skill": b.skill,
        "roc_area": roc_area(p[ok], observed[ok]),
        "reliability": reliability(p[ok], observed[ok]),
    }


def chance_scores(
    chance: np.ndarray,
    times: np.ndarray,
    spells: dict[str, list[FogSpell]],
    reports: dict[str, np.ndarray],
    sites: Sequence[Any],
    hours: float,
) -> dict[str, Any]:
    """The model's chances scored against fog in the ``hours`` after each step, over
    every site's known steps (``reports``: the times of its reports that say fog or not,
    ``truth.fog_truth``), against the climatology of those same steps."""
    ps, labels = [], []
    for i, site in enumerate(sites):
        fog, known = fog_labels(spells[site.id], reports[site.id], times, hours)
        ok = known & ~np.isnan(chance[i])
        ps.append(chance[i][ok])
        labels.append(fog[ok])
    p, y = np.concatenate(ps), np.concatenate(labels)
    out = probability_scores(p, y, float(y.mean()) if len(y) else 0.0)
    out["hours_ahead"] = hours
    return out
