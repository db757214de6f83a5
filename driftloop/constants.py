"""Physical and geodetic constants, each with its symbol, unit and source.

All values are SI.  Nothing here is tuned; every number is a published
constant or follows algebraically from one (marked *derived*).
"""

from __future__ import annotations

#: Semi-major axis of the WGS 84 ellipsoid, a (m).
#: NGA.STND.0036 (2014), *World Geodetic System 1984*, v1.0.0, Table 3.1.
WGS84_A_M = 6378137.0

#: Inverse flattening of the WGS 84 ellipsoid, 1/f (dimensionless). Same source.
WGS84_INV_F = 298.257223563

#: Semi-minor axis b = a (1 - f) (m). *Derived*.
WGS84_B_M = WGS84_A_M * (1.0 - 1.0 / WGS84_INV_F)

#: First eccentricity squared of the WGS 84 ellipsoid, e^2 = f (2 - f)
#: (dimensionless). *Derived* from the flattening (0.00669437999).
WGS84_E2 = (2.0 - 1.0 / WGS84_INV_F) / WGS84_INV_F

#: Mean radius R1 = (2a + b) / 3 (m), IUGG definition. *Derived* (6371008.77 m).
EARTH_MEAN_RADIUS_M = (2.0 * WGS84_A_M + WGS84_B_M) / 3.0

#: Nominal mean angular velocity of the Earth, Omega (rad/s).
#: NGA.STND.0036 (2014), WGS 84 defining parameter.  This is the sidereal rate,
#: not 2 pi / 86400 s.
EARTH_ROTATION_RATE_RAD_S = 7.2921150e-5

#: Sidereal day 2 pi / Omega (s). *Derived* (23.9345 h).
SIDEREAL_DAY_S = 2.0 * 3.141592653589793 / EARTH_ROTATION_RATE_RAD_S

#: Periods of the main tidal constituents (h), 360 degrees divided by the
#: constituent speed as tabulated by NOAA CO-OPS (harmonic constituent speeds).
TIDAL_PERIODS_H = {
    "M2": 12.4206012,
    "S2": 12.0,
    "K1": 23.9344697,
    "O1": 25.8193417,
}

#: Reference density of sea water used with the slab mixed-layer model (kg/m3).
#: Conventional Boussinesq reference value (common practice).
SEAWATER_DENSITY_KG_M3 = 1025.0

#: Density of air near the sea surface (kg/m3), used with the bulk wind-stress
#: formula in the synthetic generator (common practice, from memory).
AIR_DENSITY_KG_M3 = 1.22
