"""``fogwatch learn``: fit each site's fog model on its own history, and score it honestly.

For each site with enough history the engine's own features are taken at every hour
(one replay of the configured rules at an hourly step, which also gives the rules'
scores on the same nights), labelled with whether fog (a confirmed spell, as replay
counts fog) is present or begins within the next ``hours``, and fitted with a logistic
regression whose output is then calibrated by isotonic regression on held-out months
(``notifier.engine.model`` holds what the engine needs of the result).

Scoring is blocked by month: each calendar month in turn is held out, a model fitted on
the others (its calibration on their own held-out months) and used on it, as an
operator would use a model on a month it never saw; the hours of one night are not
independent, so an hour-by-hour split would flatter the model (docs/references.md
[Wilks]). The held-out chances are scored hour by hour (Brier score and skill
against the training months' climatology, ROC area, reliability) and night by night as
the shipped rules on ``fog_probability`` use them, beside the rules and the one-line
rule on the same nights.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import numpy as np

from notifier.core.errors import UsageError
from notifier.engine.model import INPUTS, SEASON, FogModel, SiteModel, input_matrix
from notifier.history.probability import fog_labels, probability_scores
from notifier.history.truth import fog_truth
from notifier.history.verify import NightOutcome, alert_for_night, median_lead_min, table

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from notifier.engine.rules import RuleSet
    from notifier.history.replay import ReplayResult
    from notifier.service.loading import Loaded

__all__ = ["MIN_FOG_NIGHTS", "LearnedSite", "learn", "model_thresholds"]

STEP_S = 3600.0  # the hourly step the features are taken at
MIN_FOG_NIGHTS = 8  # fewer nights with fog cannot be told from chance
# chances the night scores use when the rules name none. By the cost–loss model a user
# should act when the chance exceeds the cost of protecting over the loss it avoids
# (docs/references.md [Murphy 1977]); holding a vessel movement, a spray round or a
# crowd plan for fog costs far less than an accident in it, a ratio of about 0.1–0.3
# (common practice): the warning at 0.25, the watch at 0.1.
DEFAULT_THRESHOLDS = {"watch": 0.1, "warning": 0.25, "watch_hold_h": 0.0, "warning_hold_h": 0.0}
C_REGULARISATION = 0.5  # inverse strength of the ridge penalty on the scaled inputs
ALL_INPUTS = (*INPUTS, *SEASON)


@dataclass
class LearnedSite:
    """One site's outcome: its model (None when refused), why not, and its scores."""

    site_id: str
    model: SiteModel | None
    refused: str | None = None
    scores: dict[str, Any] = field(default_factory=dict)


def model_thresholds(rules: RuleSet) -> dict[str, float]:
    """The chance at which the rules raise a fog watch and warning on
    ``fog_probability`` (the lowest ``at_least``/``above`` per level), and how long that
    rule wants it held (``watch_hold_h``, ``warning_hold_h``)."""
    from notifier.engine.rules import Comparison, Group

    found: dict[str, float] = {}
    hold_h = 0.0

    def walk(cond: Any, level: str) -> None:
        if isinstance(cond, Group):
            for child in cond.children:
                walk(child, level)
        elif isinstance(cond, Comparison) and cond.feature == "fog_probability":
            if cond.op in ("at_least", "above") and float(cond.value) < found.get(level, 1.0):
                found[level] = float(cond.value)
                found[f"{level}_hold_h"] = hold_h

    for rule in rules.rules:
        if rule.hazard == "fog":
            hold_h = rule.hold_s / 3600.0
            walk(rule.when, rule.level)
    return {**DEFAULT_THRESHOLDS, **found}


# ---- fitting --------------------------------------------------------------------------


def _fit_raw(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, ...] | None:
    """(inputs kept, fill, mean, scale, coef, intercept) of a logistic regression on the
    inputs that vary; None when ``y`` holds one class only."""
    from sklearn.linear_model import LogisticRegression

    if y.all() or not y.any():
        return None
    finite = np.isfinite(x)
    keep = np.flatnonzero(
        [finite[:, j].sum() > 1 and np.std(x[finite[:, j], j]) > 0 for j in range(x.shape[1])]
    )
    xs = x[:, keep]
    fill = np.nanmedian(xs, axis=0)
    xf = np.where(np.isnan(xs), fill, xs)
    mean, scale = xf.mean(axis=0), xf.std(axis=0)
    scale[scale <= 0] = 1.0
    lr = LogisticRegression(C=C_REGULARISATION, max_iter=2000)
    lr.fit((xf - mean) / scale, y)
    return keep, fill, mean, scale, lr.coef_[0], np.array([lr.intercept_[0]])


def _site_model(parts: tuple[np.ndarray, ...], cal_x: np.ndarray, cal_y: np.ndarray) -> SiteModel:
    keep, fill, mean, scale, coef, intercept = parts
    return SiteModel(
        tuple(ALL_INPUTS[j] for j in keep),
        fill,
        mean,
        scale,
        coef,
        float(intercept[0]),
        cal_x,
        cal_y,
    )


def _held_out(
    x: np.ndarray, y: np.ndarray, groups: np.ndarray, fit: Any
) -> tuple[np.ndarray, np.ndarray]:
    """(chance, climatology) for each row from ``fit`` on the other groups' rows (NaN
    where the other groups hold one class only)."""
    p = np.full(len(y), np.nan)
    clim = np.full(len(y), np.nan)
    for g in np.unique(groups):
        out = groups == g
        m = fit(x[~out], y[~out], groups[~out])
        if m is not None:
            p[out] = m.calibrated(m.raw(x[out][:, [ALL_INPUTS.index(n) for n in m.inputs]]))
            clim[out] = y[~out].mean()
    return p, clim


def fit_site(x: np.ndarray, y: np.ndarray, groups: np.ndarray) -> SiteModel | None:
    """A calibrated model on rows ``x`` (all of ``ALL_INPUTS``), labels ``y``: the
    regression on every row, its calibration map fitted on the chances each group got
    from a regression on the other groups (isotonic, so only the order matters)."""
    from sklearn.isotonic import IsotonicRegression

    parts = _fit_raw(x, y)
    if parts is None:
        return None
    raw = np.full(len(y), np.nan)
    for g in np.unique(groups):
        out = groups == g
        inner = _fit_raw(x[~out], y[~out])
        if inner is not None:
            m = _site_model(inner, np.zeros(0), np.zeros(0))
            raw[out] = m.raw(x[out][:, inner[0]])
    ok = ~np.isnan(raw)
    if ok.sum() < 10 or not y[ok].any():
        return _site_model(parts, np.zeros(0), np.zeros(0))
    iso = IsotonicRegression(y_min=0.0, y_max=1.0, out_of_bounds="clip").fit(raw[ok], y[ok])
    return _site_model(parts, np.asarray(iso.X_thresholds_), np.asarray(iso.y_thresholds_))


# ---- the whole job ----------------------------------------------------------------------


def _collect(
    loaded: Loaded,
    obs: pd.DataFrame,
    start: datetime,
    end: datetime,
    truth: pd.DataFrame | None,
) -> tuple[ReplayResult, dict[str, dict[str, np.ndarray]]]:
    """One hourly replay of the rules: its result, and each site's feature values
    (each feature over the steps) for the model's inputs."""
    from notifier.history.replay import feature_column, replay

    wanted = sorted({feature for _, feature, _ in INPUTS.values()})
    sites = loaded.config.sites
    n_steps = int((end - start).total_seconds() // STEP_S) + 1
    # features × sites × steps, each step's column read from its feature table
    values = np.full((len(wanted), len(sites), n_steps), np.nan)

    def keep(k: int, assessments: Sequence[Any]) -> None:
        for j, f in enumerate(wanted):
            values[j, :, k] = feature_column(assessments, f)

    plain = type(loaded)(loaded.config, loaded.rules, None)  # the rules without a model
    result = replay(plain, obs, start, end, STEP_S, truth=truth, on_step=keep)
    return result, {s.id: dict(zip(wanted, values[:, i], strict=True)) for i, s in enumerate(sites)}


def _months(times: np.ndarray, zone: str) -> np.ndarray:
    """Each step's local calendar month as one number (the blocks held out)."""
    from zoneinfo import ZoneInfo

    tz = ZoneInfo(zone)
    out = np.empty(len(times), dtype=np.int64)
    for k, t in enumerate(times):
        local = datetime.fromtimestamp(float(t), UTC).astimezone(tz)
        out[k] = local.year * 100 + local.month
    return out


def _held(chance: np.ndarray, threshold: float, hold_h: float) -> np.ndarray:
    """Where the hourly ``chance`` has been at least ``threshold`` for ``hold_h`` hours
    (this hour and the ones the hold reaches back to), as the rule's hold asks."""
    with np.errstate(invalid="ignore"):
        ok = chance >= threshold
    out = ok.copy()
    for back in range(1, int(np.ceil(hold_h * 3600.0 / STEP_S - 1e-9)) + 1):
        out[back:] &= ok[:-back]
        out[:back] = False
    return out


def _night_rows(
    result: ReplayResult, site_id: str, chance: np.ndarray, thresholds: dict[str, float]
) -> dict[str, Any]:
    """Night scores of the rules, the one-line rule and the held-out chances (as the
    rules on ``fog_probability`` use them) on the same nights of one site."""
    nights = [n for n in result.nights if n.site == site_id]
    warning = _held(chance, thresholds["warning"], thresholds["warning_hold_h"])
    watch = _held(chance, thresholds["watch"], thresholds["watch_hold_h"])
    level = np.where(warning, 2, np.where(watch, 1, 0)).astype(np.int8)
    model_nights = []
    for n in nights:
        start, end = n.night.timestamp(), n.night.timestamp() + 86400.0
        onset = None if n.fog_onset is None else n.fog_onset.timestamp()
        carried = None if n.carried_fog_until is None else n.carried_fog_until.timestamp()
        m = NightOutcome(
            n.site, n.night, fog_onset=n.fog_onset, carried_fog_until=n.carried_fog_until
        )
        for rank, name in ((1, "first_watch"), (2, "first_warning")):
            when = alert_for_night(result.times, level, rank, start, end, onset, carried)
            setattr(m, name, None if when is None else datetime.fromtimestamp(when, UTC))
        model_nights.append(m)
    rows: dict[str, Any] = {}
    for name, outs in (("rules", nights), ("model", model_nights)):
        for lvl in ("warning", "watch"):
            rows[f"{name} {lvl}"] = {
                **table(outs, lvl).as_dict(),
                "median_lead_min": median_lead_min(outs, f"first_{lvl}"),
            }
    refs = result.references
    if refs is not None:
        rows["one-line rule"] = refs.as_dict().get("one_liner")
    return rows


def learn_site(
    site_id: str,
    zone: str,
    result: ReplayResult,
    values: dict[str, np.ndarray],
    labels: tuple[np.ndarray, np.ndarray],
    hours: float,
    thresholds: dict[str, float],
) -> LearnedSite:
    """Fit and score one site (see the module docstring)."""
    nights = [n for n in result.nights if n.site == site_id]
    fog_nights = sum(n.fog_onset is not None for n in nights)
    if fog_nights < MIN_FOG_NIGHTS:
        return LearnedSite(
            site_id,
            None,
            f"{fog_nights} night(s) with fog in the history; at least {MIN_FOG_NIGHTS} are "
            "needed to tell a model from chance (give a longer history)",
        )
    times = result.times
    at = [datetime.fromtimestamp(float(t), UTC) for t in times]
    x_all = input_matrix(values, at, ALL_INPUTS)
    fog, known = labels
    usable = known & ~np.isnan(values["dewpoint_depression_c"])
    x, y, groups = x_all[usable], fog[usable], _months(times[usable], zone)
    if len(np.unique(groups)) < 3:
        return LearnedSite(site_id, None, "history spans fewer than 3 months; give a longer one")
    model = fit_site(x, y, groups)
    if model is None:
        return LearnedSite(site_id, None, "no hour of the history has fog within the look-ahead")
    p, clim = _held_out(x, y, groups, fit_site)
    chance = np.full(len(times), np.nan)
    chance[usable] = p
    scored = ~np.isnan(p)
    scores: dict[str, Any] = {
        "hours": probability_scores(p[scored], y[scored], clim[scored]),
        "nights": _night_rows(result, site_id, chance, thresholds),
        "fog_nights": fog_nights,
        "thresholds": thresholds,
    }
    extra = {
        "trained": {
            "from": at[0].isoformat(),
            "to": at[-1].isoformat(),
            "hours": int(len(y)),
            "fog_hours": int(y.sum()),
            "fog_nights": fog_nights,
        },
        "cross_validated": {"by": "calendar month", "hours": _plain(scores["hours"])},
    }
    model = SiteModel(**{**model.__dict__, "extra": extra})
    return LearnedSite(site_id, model, None, scores)


def _plain(d: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in d.items() if k != "reliability"}


def learn(
    loaded: Loaded,
    obs: pd.DataFrame,
    start: datetime,
    end: datetime,
    *,
    hours: float = 6.0,
    site: str | None = None,
    truth: pd.DataFrame | None = None,
) -> tuple[FogModel, list[LearnedSite]]:
    """Fit every site (or ``site``) of the config on ``obs`` from ``start`` to ``end``."""
    if hours <= 0 or hours > 24:
        raise UsageError("--hours must be more than 0 and at most 24")
    if site is not None:
        try:
            chosen = loaded.config.site(site)
        except KeyError:
            raise UsageError(f"--site: no site {site!r} in the config") from None
        config = loaded.config.model_copy(update={"sites": (chosen,)})
        loaded = type(loaded)(config, loaded.rules, None)
    # loaded before the limit below, which holds only for libraries loaded by then
    import sklearn.isotonic  # noqa: F401
    import sklearn.linear_model  # noqa: F401
    from threadpoolctl import threadpool_limits

    result, values = _collect(loaded, obs, start, end, truth)
    spells, reports = fog_truth(obs if truth is None else truth, loaded.config.sites)
    thresholds = model_thresholds(loaded.rules)
    learned = []
    # The regressions are small (a few thousand hours × twenty inputs): the solver's
    # BLAS calls cost more in waking threads than they gain from them, several times
    # over on a busy two-core machine, and one thread takes the same solver's steps.
    with threadpool_limits(limits=1):
        for s in loaded.config.sites:
            labels = fog_labels(spells[s.id], reports[s.id], result.times, hours)
            learned.append(
                learn_site(s.id, s.timezone, result, values[s.id], labels, hours, thresholds)
            )
    model = FogModel(
        hours,
        {ls.site_id: ls.model for ls in learned if ls.model is not None},
        {"written": datetime.now(UTC).isoformat(timespec="seconds"), "by": "fogwatch learn"},
    )
    return model, learned


def report_lines(learned: Sequence[LearnedSite], hours: float) -> list[str]:
    """The table ``fogwatch learn`` prints."""
    lines = []
    for ls in learned:
        if ls.model is None:
            lines.append(f"{ls.site_id}: no model: {ls.refused}")
            continue
        h = ls.scores["hours"]
        t = ls.scores["thresholds"]
        lines += [
            f"{ls.site_id}: {ls.scores['fog_nights']} nights with fog; scored with each "
            "calendar month held out in turn",
            f"  {'':40} {'POD':>5} {'FAR':>5} {'CSI':>5} {'bias':>5} {'lead':>6}",
        ]
        for name, row in ls.scores["nights"].items():
            if row is None:
                continue
            label = {
                "model warning": f"model warning (chance ≥ {t['warning']:.2f}{_for(t, 'warning')})",
                "model watch": f"model watch (chance ≥ {t['watch']:.2f}{_for(t, 'watch')})",
            }.get(name, name)
            lead = row.get("median_lead_min")
            lines.append(
                f"  {label:40} {_f(row['pod'])} {_f(row['far'])} {_f(row['csi'])} "
                f"{_f(row['bias'])} {'' if lead is None else f'{lead / 60:5.1f}h':>6}"
            )
        lines.append(
            f"  hourly, fog within {hours:g} h: Brier {h['brier']:.3f} "
            f"(climatology {h['brier_climatology']:.3f}), skill {h['brier_skill']:+.2f}, "
            f"ROC area {h['roc_area']:.2f}, {h['hours']} hours"
        )
        lines.append(
            "  reliability: "
            + ", ".join(
                f"{r['from']:.1f}–{r['to']:.1f}: {r['observed']:.2f} of {r['n']}"
                for r in h["reliability"]
            )
        )
    return lines


def _for(thresholds: dict[str, float], level: str) -> str:
    hold = thresholds.get(f"{level}_hold_h", 0.0)
    return f" for {hold:g} h" if hold else ""


def _f(v: float | None) -> str:
    return f"{'–':>5}" if v is None or v != v else f"{v:5.2f}"
