"""The features: what each one is, how it is shown, and how a site's exposure shapes them.

``FEATURES`` names every feature a rule can test and ``explain`` can show, with its
label, unit and a short description; a :class:`FeatureTable` holds their values for a
list of sites at one evaluation time. ``FeatureSettings`` are the windows and limits
the features are computed with (see ``notifier.engine.features``).

A feature that cannot be computed from the data present is NaN ("unknown"); rules that
need it do not fire and ``explain`` says so. The one exception is ``data_age_min``,
which is +inf for a site that has never reported: no data is the loudest kind of stale.

How site exposure shapes the physics (each factor is deliberately simple and shown in
``explain``):

- valley: cold air drains downslope and pools on calm clear nights, so the floor cools
  more than open ground (2–5 K colder is typical — Whiteman 2000, *Mountain
  Meteorology*, from memory); walls also hide part of the sky (sky view 0.85).
  Fog forms first and thickest in the lowest ground.
- forest: the canopy returns long-wave radiation, so the sky view is small (0.45) and
  the air under it cools less (Oke 1987, *Boundary Layer Climates*, from memory).
- waterside: moist air, and water that cools far more slowly than land, moderate the
  night's fall (cooling ×0.8, +1 K on a projected minimum; common practice).
- coast: like waterside for cooling; sea and advection fog rules apply.
- urban: stored heat and reduced sky view keep nights 1–3 K warmer (Oke 1982, QJRMS
  108, from memory): sky view 0.7, cooling ×0.75, +1.5 K.

>>> EXPOSURE_EFFECTS["valley"].sky_view
0.85
>>> FEATURES["dewpoint_depression_c"].unit
'°C'
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

import numpy as np

from notifier.core.columns import NO_CEILING_M
from notifier.core.timefmt import quantity_text
from notifier.engine.model import FogModel

__all__ = [
    "EXPOSURE_EFFECTS",
    "FEATURES",
    "NOW_FEATURES",
    "SHOWN_FEATURES",
    "ExposureEffect",
    "FeatureSettings",
    "FeatureSpec",
    "FeatureTable",
    "format_value",
]


@dataclass(frozen=True)
class FeatureSpec:
    label: str
    unit: str
    kind: str = "number"  # number | bool
    decimals: int = 1
    description: str = ""
    # False for the flags that only say whether a sensor reports (``*_known``): a rule's
    # test of one decides which branch may hold, but "precipitation reported: no" in a
    # message would read as "it is dry", so it is left out of the reasons shown; and for
    # the clock of the night (night, time to sunrise, time since sunset): a test of one
    # only says "tonight", which the message's "When:" says in words
    in_reasons: bool = True


FEATURES: dict[str, FeatureSpec] = {
    "temp_c": FeatureSpec("air temperature", "°C", description="latest screen temperature"),
    "dewpoint_c": FeatureSpec("dew point", "°C"),
    "rh_pct": FeatureSpec("relative humidity", "%", decimals=0),
    "dewpoint_depression_c": FeatureSpec(
        "dew-point depression", "°C", description="air temperature minus dew point"
    ),
    "depression_trend_c_per_h": FeatureSpec(
        "depression trend",
        "°C/h",
        decimals=2,
        description="Theil–Sen slope of the depression over the last 3 h; negative = closing",
    ),
    "depression_step_c": FeatureSpec(
        "depression reporting step",
        "°C",
        decimals=2,
        description="smallest change of the depression between successive readings "
        "(whole °F give 0.56); NaN if it never moves",
    ),
    "depression_closing": FeatureSpec(
        "depression closing",
        "",
        kind="bool",
        description="trend ≤ −max(0.1 °C/h, reporting step ÷ 3 h): closing by more "
        "than the data can resolve",
    ),
    "hours_to_saturation": FeatureSpec(
        "time to saturation", "h", description="depression ÷ closing rate (trend)"
    ),
    "hours_to_crossing": FeatureSpec(
        "time to dew-point crossing",
        "h",
        description="when the night's cooling curve reaches the dew point",
    ),
    "hours_to_fog": FeatureSpec(
        "time to fog", "h", description="the sooner of saturation and crossing"
    ),
    "projected_min_temp_c": FeatureSpec(
        "projected minimum",
        "°C",
        description="forecast rows, else the square-root cooling fit since sunset, "
        "else Craddock–Pritchard from midday values",
    ),
    "min_margin_c": FeatureSpec(
        "projected minimum minus dew point", "°C", description="negative: below the dew point"
    ),
    "crossover_temp_c": FeatureSpec(
        "crossover temperature", "°C", description="lowest dew point of the afternoon"
    ),
    "min_minus_crossover_c": FeatureSpec("projected minimum minus crossover", "°C"),
    "cloud_pct": FeatureSpec("cloud cover", "%", decimals=0),
    "cloud_known": FeatureSpec(
        "cloud cover reported",
        "",
        kind="bool",
        in_reasons=False,
        description="observed or forecast; never unknown",
    ),
    "wind_ms": FeatureSpec("wind", "m/s"),
    "net_longwave_wm2": FeatureSpec(
        "net long-wave loss",
        "W/m²",
        decimals=0,
        description="Brutsaert clear sky, Unsworth–Monteith cloud, sky view by exposure",
    ),
    "cooling_potential": FeatureSpec(
        "cooling potential",
        "",
        decimals=2,
        description="0–1: radiative loss × light-wind factor × exposure factor",
    ),
    "is_night": FeatureSpec("night", "", kind="bool", in_reasons=False),
    "hours_to_sunrise": FeatureSpec("time to sunrise", "h", in_reasons=False),
    "hours_since_sunset": FeatureSpec("time since sunset", "h", in_reasons=False),
    "surface_temp_c": FeatureSpec("surface temperature", "°C"),
    "frost_point_c": FeatureSpec("frost point", "°C"),
    "surface_minus_frost_point_c": FeatureSpec(
        "surface minus frost point",
        "°C",
        description="surface temperature minus frost point (minus dew point above 0 °C)",
    ),
    "water_temp_c": FeatureSpec("water temperature", "°C"),
    "dewpoint_minus_water_c": FeatureSpec("dew point minus water temperature", "°C"),
    "water_temp_known": FeatureSpec(
        "water temperature reported", "", kind="bool", in_reasons=False, description="never unknown"
    ),
    "water_temp_estimated": FeatureSpec(
        "water temperature from climatology",
        "",
        kind="bool",
        in_reasons=False,
        description="the site's monthly water_temp_monthly_c stands in; never unknown",
    ),
    "water_minus_air_c": FeatureSpec("water minus air temperature", "°C"),
    "onshore": FeatureSpec("onshore wind", "", kind="bool"),
    "visibility_m": FeatureSpec("visibility", "m", decimals=0),
    "visibility_known": FeatureSpec(
        "visibility reported", "", kind="bool", in_reasons=False, description="never unknown"
    ),
    "visibility_trend_m_per_h": FeatureSpec(
        "visibility trend",
        "m/h",
        decimals=0,
        description="Theil–Sen slope of the visibility over the last 3 h; negative = falling",
    ),
    "ceiling_m": FeatureSpec(
        "ceiling",
        "m",
        decimals=0,
        description="lowest broken/overcast cloud base or vertical visibility; 30000 = no ceiling",
    ),
    "ceiling_trend_m_per_h": FeatureSpec(
        "ceiling trend",
        "m/h",
        decimals=0,
        description="Theil–Sen slope of the ceiling (capped at 2000 m) over the last 3 h; "
        "negative = lowering",
    ),
    "ceiling_known": FeatureSpec(
        "ceiling reported", "", kind="bool", in_reasons=False, description="never unknown"
    ),
    "precip_last_3h_mm": FeatureSpec(
        "precipitation, last 3 h", "mm", description="from the hourly amounts reported"
    ),
    "hours_since_precip": FeatureSpec(
        "time since precipitation",
        "h",
        description="since the last report of 0.1 mm or more; 24 if none in the last 24 h",
    ),
    "precip_known": FeatureSpec(
        "precipitation reported",
        "",
        kind="bool",
        in_reasons=False,
        description="precipitation amounts in the last 24 h; never unknown",
    ),
    "observed_fog": FeatureSpec("fog observed", "", kind="bool"),
    "observed_mist": FeatureSpec("mist observed", "", kind="bool"),
    "observed_freezing_fog": FeatureSpec("freezing fog observed", "", kind="bool"),
    "fog_probability": FeatureSpec(
        "chance of fog",
        "",
        decimals=2,
        description="learned chance (0–1) of fog now or within the model's hours; "
        "unknown without a model (fogwatch learn)",
    ),
    "data_age_min": FeatureSpec("data age", "min", decimals=0),
    "data_stale": FeatureSpec(
        "data stale",
        "",
        kind="bool",
        description="no reading for longer than alerts.stale_after; never unknown",
    ),
}


#: What a person is shown of a site's measurements now, beside any alert.
NOW_FEATURES = (
    "temp_c",
    "dewpoint_c",
    "dewpoint_depression_c",
    "surface_temp_c",
    "visibility_m",
    "wind_ms",
    "cloud_pct",
)
#: What an event keeps of the features: the measurements and the night's projections
#: (the features its rules test are added to these).
SHOWN_FEATURES = (*NOW_FEATURES, "projected_min_temp_c", "hours_to_fog")


def format_value(feature: str, value: float) -> str:
    """A feature's value as a person reads it: its decimals and unit from :data:`FEATURES`.

    >>> format_value("dewpoint_depression_c", 0.84), format_value("rh_pct", 97.2)
    ('0.8 °C', '97%')
    >>> format_value("ceiling_m", 121.9), format_value("ceiling_m", 30000.0)
    ('122 m', 'no ceiling')
    """
    if feature == "ceiling_m" and value >= NO_CEILING_M:
        return "no ceiling"
    spec = FEATURES[feature]
    return quantity_text(value, spec.unit, decimals=spec.decimals, kind=spec.kind)


@dataclass(frozen=True)
class ExposureEffect:
    sky_view: float
    cooling_factor: float
    min_offset_c: float  # added to projections not made from the site's own night curve


EXPOSURE_EFFECTS: dict[str, ExposureEffect] = {
    "open": ExposureEffect(1.0, 1.0, 0.0),
    "valley": ExposureEffect(0.85, 1.2, -2.0),
    "forest": ExposureEffect(0.45, 1.0, 0.5),
    "waterside": ExposureEffect(1.0, 0.8, 1.0),
    "coast": ExposureEffect(1.0, 0.85, 0.5),
    "urban": ExposureEffect(0.7, 0.75, 1.5),
}


@dataclass(frozen=True)
class FeatureSettings:
    current_max_age_h: float = 3.0  # older readings are not "current"
    trend_window_h: float = 3.0
    trend_min_span_h: float = 0.75
    # a cooling fit is trusted with at least this many readings over this span, once
    # the evening transition is over (common practice: 2–3 points after sunset fit
    # almost any curve)
    fit_min_span_h: float = 2.0
    fit_min_points: int = 4
    # the thermal admittance that caps a fitted cooling rate by Brunt's law, J m⁻² K⁻¹
    # s^-½: between dry (~620) and wet sand (~2550), docs/references.md [Oke 1987]; a
    # lower value gives a looser cap
    cap_thermal_admittance: float = 1200.0
    evening_transition_h: float = 1.5
    # a depression closing slower than this is "not closing" (0.1 °C/h, common practice);
    # coarser data need more: its reporting step over the trend window (see families)
    min_closing_c_per_h: float = 0.1
    step_noise_c: float = 0.005  # smaller changes are float noise, not a reporting step
    water_max_age_h: float = 24.0  # water temperature changes slowly
    block_hours: float = 24.0
    # Radiation fog needs light wind: calm to ~3 m/s is typical, stronger wind mixes the
    # cooled layer away (EUMETrain / UCAR MetEd conceptual models; numbers common practice).
    wind_full_cooling_ms: float = 2.5
    wind_no_cooling_ms: float = 7.0
    # Clear-sky net loss on a calm night is ~70–100 W/m² (82.5 W/m² at 10 °C in
    # docs/references.md [LW check]); 80 W/m² is taken as "full" radiative cooling.
    full_loss_wm2: float = 80.0
    surface_emissivity: float = 0.98
    # a site model from `fogwatch learn` (notifier.engine.model); None: fog_probability
    # is unknown
    model: FogModel | None = None
    # data older than this is stale: the config's alerts.stale_after (90 min by default,
    # three missed half-hourly reports, common practice) sets it, and with it the
    # data_stale feature the data-gap rule tests, so one setting drives both
    stale_after_min: float = 90.0


@dataclass
class FeatureTable:
    """Features for ``site_ids`` at ``at``: ``values[name]`` is an array over sites."""

    at: datetime
    site_ids: list[str]
    values: dict[str, np.ndarray]
    projection_method: np.ndarray  # str per site: forecast | cooling-fit | midday-estimate
    last_time: np.ndarray  # POSIX seconds of the newest observation, NaN if none
    fit_t0_c: np.ndarray  # tonight's square-root cooling fit (NaN where none)
    fit_k_per_sqrt_h: np.ndarray
    last_sunset: np.ndarray  # POSIX seconds
    # with a site model: per site, the inputs that moved its chance most, in words
    drivers: np.ndarray | None = None

    def row(self, i: int) -> dict[str, float]:
        return {name: float(arr[i]) for name, arr in self.values.items()}

    def index(self, site_id: str) -> int:
        return self.site_ids.index(site_id)

    def __getitem__(self, name: str) -> np.ndarray:
        return self.values[name]
