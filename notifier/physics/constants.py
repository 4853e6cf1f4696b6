"""Physical constants and published coefficients used by :mod:`notifier.physics`.

Every value names its source beside it; each source has an entry, with its status, in
docs/references.md. Units are in the name or the comment.
Sources marked "from memory" were recalled rather than re-read from the original
and are flagged as such in the docstrings and tests that use them.
"""

from __future__ import annotations

# --- Temperature scale -------------------------------------------------------------------
# 0 °C in kelvin, exact by definition of the Celsius scale (SI Brochure, 9th ed., 2019).
ZERO_CELSIUS_K = 273.15

# --- Saturation vapour pressure: Magnus forms -------------------------------------------
# WMO Guide to Instruments and Methods of Observation (WMO-No. 8, "CIMO Guide"),
# Volume I, Annex 4.B: e_w(t) = 6.112 exp(17.62 t / (243.12 + t)) hPa over water,
# valid -45..60 °C; e_i(t) = 6.112 exp(22.46 t / (272.62 + t)) hPa over ice, -65..0 °C.
MAGNUS_E0_HPA = 6.112
MAGNUS_WATER_A = 17.62
MAGNUS_WATER_B_C = 243.12
MAGNUS_WATER_MIN_C = -45.0
MAGNUS_WATER_MAX_C = 60.0
MAGNUS_ICE_A = 22.46
MAGNUS_ICE_B_C = 272.62
MAGNUS_ICE_MIN_C = -65.0
MAGNUS_ICE_MAX_C = 0.0

# --- Radiation ---------------------------------------------------------------------------
# Stefan–Boltzmann constant, W m-2 K-4: CODATA 2018 recommended value (exact in the 2019 SI).
STEFAN_BOLTZMANN = 5.670374419e-8

# Clear-sky emissivity of the air, as compared by Flerchinger et al. (2009),
# Water Resour. Res. 45, W03423 (e in hPa, T in K):
# Brutsaert (1975), Water Resour. Res. 11: eps = 1.24 (e/T)^(1/7).
BRUTSAERT_COEFFICIENT = 1.24
BRUTSAERT_EXPONENT = 1.0 / 7.0
# Brunt (1932), Q. J. R. Meteorol. Soc. 58: eps = 0.52 + 0.065 sqrt(e).
BRUNT_A = 0.52
BRUNT_B_PER_SQRT_HPA = 0.065
# Swinbank (1963), Q. J. R. Meteorol. Soc. 89: eps = 9.37e-6 T^2.
SWINBANK_COEFFICIENT_PER_K2 = 9.37e-6
# Idso (1981), Water Resour. Res. 17: eps = 0.70 + 5.95e-5 e exp(1500/T).
IDSO_A = 0.70
IDSO_B_PER_HPA = 5.95e-5
IDSO_T_SCALE_K = 1500.0

# Cloud corrections (cloud fraction c in 0..1):
# Unsworth & Monteith (1975), Q. J. R. Meteorol. Soc. 101: eps = (1 - 0.84c) eps_clr + 0.84c.
UNSWORTH_MONTEITH_CLOUD_COEFFICIENT = 0.84
# Maykut & Church (1973), J. Appl. Meteor. 12: eps = eps_clr (1 + 0.22 c^2.75).
MAYKUT_CHURCH_COEFFICIENT = 0.22
MAYKUT_CHURCH_EXPONENT = 2.75

# Long-wave emissivity of a natural surface (grass, soil); 0.95-0.98 is the usual range
# (Oke, Boundary Layer Climates, 2nd ed., table of radiative properties; from memory).
DEFAULT_SURFACE_EMISSIVITY = 0.98

# --- Night cooling -----------------------------------------------------------------------
# Craddock & Pritchard (1951), Met Office, minimum-temperature regression for inland
# sites, as given by a secondary source: T_min = 0.316 T + 0.548 Td - 1.24 + K (°C).
CRADDOCK_PRITCHARD_TEMP_COEFFICIENT = 0.316
CRADDOCK_PRITCHARD_DEWPOINT_COEFFICIENT = 0.548
CRADDOCK_PRITCHARD_OFFSET_C = -1.24

# Crossover-temperature method: the afternoon's lowest dew point; the window
# 12:00-18:00 local time is the conventional "afternoon" (from memory).
CROSSOVER_START_HOUR = 12.0
CROSSOVER_END_HOUR = 18.0

# --- Time --------------------------------------------------------------------------------
SECONDS_PER_MINUTE = 60.0
SECONDS_PER_HOUR = 3600.0
SECONDS_PER_DAY = 86400.0
# sqrt(3600 s / 1 h): converts K s^-1/2 to K h^-1/2.
SQRT_SECONDS_PER_HOUR = 60.0

# --- Sun (NOAA solar calculator, after Meeus, Astronomical Algorithms, 2nd ed., 1998) ----
# Zenith angle of the sun's centre at sunrise/sunset: 90° + 0.833° (34' mean refraction at
# the horizon plus 16' solar semidiameter), as used by the NOAA solar calculator.
SUNRISE_ZENITH_DEG = 90.833
# Julian date of the POSIX epoch 1970-01-01T00:00Z (Meeus, ch. 7).
UNIX_EPOCH_JULIAN_DATE = 2440587.5
# Julian date of the J2000.0 epoch and days per Julian century (Meeus, ch. 7, 22).
J2000_JULIAN_DATE = 2451545.0
DAYS_PER_JULIAN_CENTURY = 36525.0
# Minutes of time per degree of longitude / hour angle (360° = 1440 min).
MINUTES_PER_DEGREE = 4.0
