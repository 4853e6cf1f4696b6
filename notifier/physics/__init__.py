"""Pure physics for fogwatch: moisture, long-wave radiation, night cooling, trends, sun.

Every function is a pure function over numpy arrays (scalars work too and give numpy
floats): no file, network, clock or logging. Units are in every parameter name. Input
outside a formula's valid range, or NaN, gives NaN without a warning; downstream, NaN
means "unknown", never "below threshold". Constants and their sources are in
:mod:`notifier.physics.constants`.
"""

from .cooling import (
    brunt_cooling_coefficient_k_per_sqrt_h,
    craddock_pritchard_min_c,
    crossover_temp_c,
    fao_square_root_trend_c,
    fit_sqrt_cooling,
    project_sqrt_cooling_c,
)
from .moisture import (
    dewpoint_c,
    frost_point_c,
    frost_point_from_dewpoint_c,
    relative_humidity_pct,
    saturation_vapor_pressure_hpa,
    vapor_pressure_hpa,
)
from .radiation import (
    clear_sky_emissivity,
    cloudy_sky_emissivity,
    downwelling_longwave_wm2,
    net_longwave_loss_wm2,
)
from .sun import night_bounds_utc, night_length_h, sunrise_sunset_utc
from .trend import hours_to_zero, robust_slope_per_h

__all__ = [
    # moisture
    "saturation_vapor_pressure_hpa",
    "vapor_pressure_hpa",
    "dewpoint_c",
    "relative_humidity_pct",
    "frost_point_c",
    "frost_point_from_dewpoint_c",
    # radiation
    "clear_sky_emissivity",
    "cloudy_sky_emissivity",
    "downwelling_longwave_wm2",
    "net_longwave_loss_wm2",
    # cooling
    "brunt_cooling_coefficient_k_per_sqrt_h",
    "fit_sqrt_cooling",
    "project_sqrt_cooling_c",
    "fao_square_root_trend_c",
    "craddock_pritchard_min_c",
    "crossover_temp_c",
    # trend
    "robust_slope_per_h",
    "hours_to_zero",
    # sun
    "sunrise_sunset_utc",
    "night_bounds_utc",
    "night_length_h",
]
