"""A site's learned fog model: the chance of fog now or within the next few hours.

``fogwatch learn`` fits, per site, a logistic regression on the engine's own features
(the inputs below) and a calibration map from its raw output to observed frequencies
(isotonic regression on held-out months); this module is what the engine needs to use
it: the model read from its JSON form, and the probability and its drivers for a
feature table. It does no IO and needs no fitting library: a logistic regression is a
weighted sum and a logistic, a calibration map a piecewise-linear table
(docs/references.md [Wilks] for logistic regression and reliability).

An input the data cannot give (NaN) is replaced by the training median, so it pushes
the chance neither way; a site the model has no fit for gets NaN ("unknown"), and rules
on ``fog_probability`` stay quiet there.

>>> from datetime import UTC
>>> m = FogModel.from_dict(example_model())
>>> values = {"dewpoint_depression_c": np.array([0.3, 8.0]), "wind_ms": np.array([1.0, 6.0])}
>>> p = m.probability(values, ["pier", "pier"], datetime(2026, 1, 10, 3, tzinfo=UTC))
>>> bool(p[0] > p[1])
True
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from types import MappingProxyType
from typing import Any

import numpy as np

__all__ = [
    "INPUTS",
    "MODEL_FORMAT",
    "FogModel",
    "ModelError",
    "SiteModel",
    "input_matrix",
]

MODEL_FORMAT = "fogwatch-fog-model/1"


class ModelError(ValueError):
    """A model file that cannot be used (its text says why)."""


def _clip(lo: float, hi: float):  # type: ignore[no-untyped-def]
    return lambda v: np.clip(v, lo, hi)


def _day_angle(at: datetime, n: int) -> np.ndarray:
    doy = at.timetuple().tm_yday
    return np.full(n, 2.0 * math.pi * (doy - 1) / 365.25)


# Each input: (label, feature it is read from, transform). The transforms keep the few
# readings far outside the fog range from steering a linear model (a 20 °C depression
# says no more than a 10 °C one), and give the depression a log form: the chance of fog
# changes most between 0 and 2 °C (common practice).
INPUTS: Mapping[str, tuple[str, str, Any]] = MappingProxyType(
    {
        "depression": ("dew-point depression", "dewpoint_depression_c", _clip(0.0, 10.0)),
        "log_depression": (
            "dew-point depression (log)",
            "dewpoint_depression_c",
            lambda v: np.log(0.25 + np.clip(v, 0.0, 10.0)),
        ),
        "depression_trend": ("depression trend", "depression_trend_c_per_h", _clip(-2.0, 2.0)),
        "rh": ("relative humidity", "rh_pct", _clip(30.0, 100.0)),
        "wind": ("wind", "wind_ms", _clip(0.0, 12.0)),
        "calm": ("calm or light wind", "wind_ms", lambda v: (v <= 3.0).astype(float)),
        "cloud": ("cloud cover", "cloud_pct", _clip(0.0, 100.0)),
        "cooling": ("cooling potential", "cooling_potential", _clip(0.0, 1.0)),
        "margin": ("projected minimum above dew point", "min_margin_c", _clip(-5.0, 10.0)),
        "night": ("night", "is_night", lambda v: v.astype(float)),
        "since_sunset": ("time since sunset", "hours_since_sunset", _clip(0.0, 16.0)),
        "to_sunrise": ("time to sunrise", "hours_to_sunrise", _clip(0.0, 16.0)),
        "log_visibility": (
            "visibility",
            "visibility_m",
            lambda v: np.log10(np.clip(v, 50.0, 20000.0)),
        ),
        "visibility_trend": (
            "visibility trend",
            "visibility_trend_m_per_h",
            _clip(-5000.0, 5000.0),
        ),
        "mist": ("mist observed", "observed_mist", lambda v: v.astype(float)),
        "fog_now": ("fog observed", "observed_fog", lambda v: v.astype(float)),
        "temp": ("air temperature", "temp_c", _clip(-30.0, 40.0)),
        # the cloud base in a log form: 30 m and 300 m differ for fog as 300 m and 3 km
        # do; "no ceiling" (30000) and anything above 3 km read as 3 km (common practice)
        "log_ceiling": (
            "ceiling",
            "ceiling_m",
            lambda v: np.log10(np.clip(v, 30.0, 3000.0)),
        ),
        "ceiling_trend": ("ceiling trend", "ceiling_trend_m_per_h", _clip(-500.0, 500.0)),
        "since_precip": ("time since precipitation", "hours_since_precip", _clip(0.0, 24.0)),
    }
)
# the season as two inputs (winter and spring nights differ); from the evaluation time
SEASON = ("season_cos", "season_sin")


def input_matrix(
    values: Mapping[str, np.ndarray], at: datetime | Sequence[datetime], names: Sequence[str]
) -> np.ndarray:
    """The model inputs ``names`` (rows: sites, or times when ``at`` is a sequence)
    from feature arrays; NaN where a feature is unknown."""
    n = len(next(iter(values.values()))) if values else 0
    if isinstance(at, datetime):
        angle = _day_angle(at, n)
    else:
        angle = np.array([2.0 * math.pi * (t.timetuple().tm_yday - 1) / 365.25 for t in at])
    cols = []
    for name in names:
        if name == "season_cos":
            cols.append(np.cos(angle))
        elif name == "season_sin":
            cols.append(np.sin(angle))
        else:
            _, feature, transform = INPUTS[name]
            raw = np.asarray(values.get(feature, np.full(n, np.nan)), dtype=float)
            with np.errstate(invalid="ignore"):
                col = np.asarray(transform(raw), dtype=float)
            cols.append(np.where(np.isnan(raw), np.nan, col))
    return np.column_stack(cols) if cols else np.zeros((n, 0))


def input_label(name: str) -> str:
    return "season" if name in SEASON else INPUTS[name][0]


@dataclass(frozen=True)
class SiteModel:
    """One site's fitted model (see the module docstring)."""

    inputs: tuple[str, ...]
    fill: np.ndarray  # training median of each input, for unknown values
    mean: np.ndarray
    scale: np.ndarray
    coef: np.ndarray
    intercept: float
    calibration_x: np.ndarray  # raw probability → calibrated, piecewise linear
    calibration_y: np.ndarray
    extra: dict[str, Any] = field(default_factory=dict)  # period, scores: shown, not used

    def scaled(self, x: np.ndarray) -> np.ndarray:
        x = np.where(np.isnan(x), self.fill, x)
        return (x - self.mean) / self.scale

    def raw(self, x: np.ndarray) -> np.ndarray:
        z = self.scaled(x) @ self.coef + self.intercept
        return 1.0 / (1.0 + np.exp(-np.clip(z, -40.0, 40.0)))

    def calibrated(self, raw: np.ndarray) -> np.ndarray:
        if len(self.calibration_x) < 2:
            return raw
        return np.interp(raw, self.calibration_x, self.calibration_y)

    def as_dict(self) -> dict[str, Any]:
        return {
            "inputs": list(self.inputs),
            "fill": self.fill.tolist(),
            "mean": self.mean.tolist(),
            "scale": self.scale.tolist(),
            "coef": self.coef.tolist(),
            "intercept": self.intercept,
            "calibration": {"raw": self.calibration_x.tolist(), "p": self.calibration_y.tolist()},
            **self.extra,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any], where: str = "model") -> SiteModel:
        try:
            inputs = tuple(str(n) for n in d["inputs"])
            unknown = [n for n in inputs if n not in INPUTS and n not in SEASON]
            if unknown:
                raise ModelError(f"{where}: unknown inputs {unknown}")
            arrays = [np.asarray(d[k], dtype=float) for k in ("fill", "mean", "scale", "coef")]
            if any(a.shape != (len(inputs),) for a in arrays):
                raise ModelError(f"{where}: fill, mean, scale and coef need one value per input")
            if np.any(arrays[2] <= 0) or not all(np.all(np.isfinite(a)) for a in arrays):
                raise ModelError(f"{where}: scale must be positive and every number finite")
            cal = d.get("calibration") or {"raw": [], "p": []}
            cx, cy = np.asarray(cal["raw"], dtype=float), np.asarray(cal["p"], dtype=float)
            if cx.shape != cy.shape or np.any(np.diff(cx) < 0) or np.any((cy < 0) | (cy > 1)):
                raise ModelError(f"{where}: calibration needs rising raw values and p in 0–1")
            known = {"inputs", "fill", "mean", "scale", "coef", "intercept", "calibration"}
            fill, mean, scale, coef = arrays
            return cls(
                inputs,
                fill,
                mean,
                scale,
                coef,
                intercept=float(d["intercept"]),
                calibration_x=cx,
                calibration_y=cy,
                extra={k: v for k, v in d.items() if k not in known},
            )
        except KeyError as exc:
            raise ModelError(f"{where}: missing {exc.args[0]!r}") from None
        except (TypeError, ValueError) as exc:
            if isinstance(exc, ModelError):
                raise
            raise ModelError(f"{where}: {exc}") from None


@dataclass(frozen=True)
class FogModel:
    """The fitted models of some sites, for one look-ahead (``hours``)."""

    hours: float
    sites: dict[str, SiteModel]
    extra: dict[str, Any] = field(default_factory=dict)

    def probability(
        self,
        values: Mapping[str, np.ndarray],
        site_ids: Sequence[str],
        at: datetime | Sequence[datetime],
    ) -> np.ndarray:
        """The calibrated chance per site (NaN where the site has no model); ``at`` is
        one time, or one per row (a history's rows: a site at each of several times)."""
        out = np.full(len(site_ids), np.nan)
        for site_id, rows in _rows_by_site(site_ids).items():
            m = self.sites.get(site_id)
            if m is None:
                continue
            when = at if isinstance(at, datetime) else [at[i] for i in rows.tolist()]
            x = input_matrix({k: np.asarray(v)[rows] for k, v in values.items()}, when, m.inputs)
            out[rows] = m.calibrated(m.raw(x))
        return out

    def drivers(
        self, values: Mapping[str, float], site_id: str, at: datetime, n: int = 3
    ) -> list[tuple[str, float]]:
        """The ``n`` inputs that pushed this site's chance most, as (label, push): the
        push is the input's share of the log-odds against the site's typical hour
        (positive: towards fog). Season and unknown inputs are left out."""
        m = self.sites.get(site_id)
        if m is None:
            return []
        x = input_matrix({k: np.array([v]) for k, v in values.items()}, at, m.inputs)[0]
        push = m.scaled(x[None, :])[0] * m.coef
        ranked = sorted(
            (
                (input_label(name), float(p))
                for name, p, v in zip(m.inputs, push, x, strict=True)
                if name not in SEASON and not math.isnan(v)
            ),
            key=lambda lp: -abs(lp[1]),
        )
        merged: dict[str, float] = {}
        for label, p in ranked:  # depression and its log form read as one
            merged[label.replace(" (log)", "")] = merged.get(label.replace(" (log)", ""), 0.0) + p
        return sorted(merged.items(), key=lambda lp: -abs(lp[1]))[:n]

    def as_dict(self) -> dict[str, Any]:
        return {
            "format": MODEL_FORMAT,
            "hours": self.hours,
            **self.extra,
            "sites": {sid: m.as_dict() for sid, m in self.sites.items()},
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any], where: str = "model") -> FogModel:
        if not isinstance(d, Mapping) or d.get("format") != MODEL_FORMAT:
            raise ModelError(f"{where}: not a fog model (expected format {MODEL_FORMAT!r})")
        try:
            hours = float(d["hours"])
            sites = {
                str(sid): SiteModel.from_dict(m, f"{where}: site {sid}")
                for sid, m in dict(d["sites"]).items()
            }
        except KeyError as exc:
            raise ModelError(f"{where}: missing {exc.args[0]!r}") from None
        except (TypeError, ValueError) as exc:
            if isinstance(exc, ModelError):
                raise
            raise ModelError(f"{where}: {exc}") from None
        extra = {k: v for k, v in d.items() if k not in {"format", "hours", "sites"}}
        return cls(hours, sites, extra)


def _rows_by_site(site_ids: Sequence[str]) -> dict[str, np.ndarray]:
    ids = np.asarray(site_ids, dtype=object)
    return {str(s): np.flatnonzero(ids == s) for s in dict.fromkeys(site_ids)}


def example_model() -> dict[str, Any]:
    """A tiny hand-made model for the examples (not fitted to anything)."""
    inputs = ["depression", "wind"]
    return {
        "format": MODEL_FORMAT,
        "hours": 6,
        "sites": {
            "pier": {
                "inputs": inputs,
                "fill": [3.0, 3.0],
                "mean": [3.0, 3.0],
                "scale": [2.0, 2.0],
                "coef": [-1.5, -0.5],
                "intercept": -2.0,
                "calibration": {"raw": [0.0, 1.0], "p": [0.0, 1.0]},
            }
        },
    }
