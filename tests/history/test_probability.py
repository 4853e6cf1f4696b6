"""Probability scores and the site model, checked against scikit-learn (a general-purpose
reference library from the package registry) and hand-worked values."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest
from sklearn.calibration import calibration_curve
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import brier_score_loss, roc_auc_score

from notifier.engine.model import FogModel, ModelError, SiteModel, example_model, input_matrix
from notifier.history.learn import ALL_INPUTS, fit_site, model_thresholds
from notifier.history.probability import (
    brier_skill,
    fog_labels,
    reliability,
    roc_area,
)
from notifier.history.verify import FogSpell

RNG = np.random.default_rng(7)


def test_brier_and_skill_match_sklearn():
    p = RNG.random(500)
    y = RNG.random(500) < p
    b = brier_skill(p, y, np.full(500, y.mean()))
    # scikit-learn's brier_score_loss is the mean squared error of the probability
    assert b.score == pytest.approx(brier_score_loss(y, p))
    assert b.reference == pytest.approx(brier_score_loss(y, np.full(500, y.mean())))
    # worked by hand: skill = 1 - BS / BS_ref
    assert b.skill == pytest.approx(1 - b.score / b.reference)


@pytest.mark.parametrize("ties", [False, True])
def test_roc_area_matches_sklearn(ties):
    p = RNG.random(400)
    if ties:
        p = np.round(p, 1)  # many ties: they count half in both
    y = RNG.random(400) < p
    assert roc_area(p, y) == pytest.approx(roc_auc_score(y, p))


def test_roc_area_needs_both_kinds():
    assert np.isnan(roc_area(np.array([0.2, 0.4]), np.array([True, True])))


def test_reliability_matches_sklearn_calibration_curve():
    p = RNG.random(2000)
    y = RNG.random(2000) < p
    rows = reliability(p, y)
    # sklearn's calibration_curve with uniform tenths: (fraction observed, mean chance)
    frac, mean = calibration_curve(y, p, n_bins=10, strategy="uniform")
    assert [r["observed"] for r in rows] == pytest.approx(list(frac))
    assert [r["mean_p"] for r in rows] == pytest.approx(list(mean))
    assert sum(r["n"] for r in rows) == 2000


def test_fog_labels_look_ahead():
    t0 = datetime(2026, 1, 10, 18, tzinfo=UTC)
    spell = FogSpell(t0 + timedelta(hours=8), t0 + timedelta(hours=11))
    times = np.array([(t0 + timedelta(hours=h)).timestamp() for h in range(14)])
    reports = times.copy()
    fog, known = fog_labels([spell], reports, times, hours=6)
    # fog from hour 8 to 11: within 6 h from hour 2; present until the first clear report
    assert fog.tolist() == [h >= 2 and h < 11 for h in range(14)]
    assert known.all()
    _, known = fog_labels([spell], np.zeros(0), times, hours=6)
    assert not known.any()


def test_model_probability_is_a_logistic_regression():
    """A fitted scikit-learn LogisticRegression, copied into the JSON form, gives the same
    chances (identity calibration)."""
    # inside the inputs' clipping ranges (depression 0–10 °C, wind 0–12 m/s)
    x = RNG.random((300, 2)) * [10.0, 12.0]
    y = (x[:, 0] + RNG.normal(size=300)) < 2.0
    mean, scale = x.mean(0), x.std(0)
    lr = LogisticRegression().fit((x - mean) / scale, y)
    d = example_model()
    site = d["sites"]["pier"]
    site.update(
        fill=mean.tolist(),
        mean=mean.tolist(),
        scale=scale.tolist(),
        coef=lr.coef_[0].tolist(),
        intercept=float(lr.intercept_[0]),
    )
    m = FogModel.from_dict(json.loads(json.dumps(d)))
    values = {"dewpoint_depression_c": x[:, 0], "wind_ms": x[:, 1]}
    p = m.probability(values, ["pier"] * 300, datetime(2026, 1, 1, tzinfo=UTC))
    assert p == pytest.approx(lr.predict_proba((x - mean) / scale)[:, 1])
    # a site without a model: unknown
    assert np.isnan(m.probability(values, ["quay"] * 300, datetime(2026, 1, 1, tzinfo=UTC))).all()
    # drivers: the depression, far below its mean, pushes towards fog
    now = datetime(2026, 1, 1, tzinfo=UTC)
    label, push = m.drivers({"dewpoint_depression_c": 0.0, "wind_ms": 4.0}, "pier", now)[0]
    assert label == "dew-point depression" and push > 0


@pytest.mark.parametrize(
    "change, words",
    [
        (lambda d: d.update(format="other"), "not a fog model"),
        (lambda d: d["sites"]["pier"].update(inputs=["depression", "colour"]), "unknown inputs"),
        (lambda d: d["sites"]["pier"].update(scale=[0.0, 1.0]), "scale must be positive"),
        (lambda d: d["sites"]["pier"].pop("coef"), "missing 'coef'"),
        (lambda d: d["sites"]["pier"].update(coef=[1.0]), "one value per input"),
    ],
)
def test_bad_model_is_refused_with_reason(change, words):
    d = example_model()
    change(d)
    with pytest.raises(ModelError, match=words):
        FogModel.from_dict(d, "m.json")


def test_fit_site_calibrates_on_held_out_groups():
    """On data whose chance is known (a logistic truth), the fitted and calibrated model
    ranks and scales the chance well: ROC area near the truth's, chances reliable."""
    n = 6000
    dep = RNG.gamma(2.0, 2.0, n)
    wind = RNG.gamma(2.0, 1.5, n)
    truth = 1 / (1 + np.exp(-(-1.0 - 1.2 * dep - 0.5 * wind)))
    y = RNG.random(n) < truth
    values = {"dewpoint_depression_c": dep, "wind_ms": wind}
    at = [datetime(2026, 1, 1, tzinfo=UTC) + timedelta(hours=h) for h in range(n)]
    x = input_matrix(values, at, ALL_INPUTS)
    groups = np.array([t.month for t in at])
    m = fit_site(x, y, groups)
    assert m is not None and "depression" in m.inputs and "cloud" not in m.inputs
    p = m.calibrated(m.raw(x[:, [ALL_INPUTS.index(k) for k in m.inputs]]))
    assert roc_area(p, y) > roc_auc_score(y, truth) - 0.03
    assert brier_score_loss(y, p) < brier_score_loss(y, truth) * 1.1
    assert isinstance(m, SiteModel) and np.all(np.diff(m.calibration_x) >= 0)


def test_thresholds_from_the_shipped_rules():
    import yaml

    from notifier.core.config import default_rules_dir
    from notifier.engine.rule_files import load_rule_set

    rules = load_rule_set([default_rules_dir()])
    # the site-model rules as the YAML file says them, read with PyYAML, not the loader
    raw = yaml.safe_load((default_rules_dir() / "fog.yaml").read_text())["rules"]
    want = {}
    for r in raw:
        if r["id"].startswith("site-model-fog-"):
            level = r["level"]
            want[level] = r["when"][0]["fog_probability"]["at_least"]
            hold = str(r.get("hold", "0h"))
            want[f"{level}_hold_h"] = float(hold[:-1]) if hold.endswith("h") else 0.0
    assert set(want) == {"watch", "warning", "watch_hold_h", "warning_hold_h"}
    assert model_thresholds(rules) == want


@pytest.mark.parametrize("hold_h", [0.0, 1.0, 2.0, 3.0])
def test_held_chance_matches_a_rolling_minimum(hold_h):
    import pandas as pd

    from notifier.history.learn import _held

    rng = np.random.default_rng(int(hold_h * 10))
    chance = rng.random(200)
    chance[rng.random(200) < 0.05] = np.nan  # hours without a chance never hold
    # pandas: the minimum over this hour and the hold's hours before it, all present
    window = int(hold_h) + 1
    ref = pd.Series(chance).rolling(window, min_periods=window).min() >= 0.4
    assert (_held(chance, 0.4, hold_h) == ref.to_numpy()).all()


def test_ceiling_and_rain_inputs_read_no_ceiling_as_three_km_and_unknown_as_unknown():
    # log10 by NumPy's reference; "no ceiling" is fogwatch's 30000 m (FMH-1: no BKN/OVC
    # layer, docs/references.md [FMH-1]) and counts as the 3 km cap
    at = datetime(2026, 11, 3, 4, tzinfo=UTC)
    values = {
        "ceiling_m": np.array([60.0, 30000.0, np.nan]),
        "ceiling_trend_m_per_h": np.array([-900.0, 0.0, np.nan]),
        "hours_since_precip": np.array([2.0, 24.0, np.nan]),
    }
    x = input_matrix(values, at, ["log_ceiling", "ceiling_trend", "since_precip"])
    assert x[0].tolist() == pytest.approx([np.log10(60.0), -500.0, 2.0])
    assert x[1].tolist() == pytest.approx([np.log10(3000.0), 0.0, 24.0])
    assert np.isnan(x[2]).all()
