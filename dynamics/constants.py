"""Physical and astronomical constants used throughout trailcast, each with its source.

Inside trailcast the unit system is au, day (TDB) and solar mass; angles in degrees at the
interfaces, radians inside numerical kernels. Where two published values coexist, the source is
part of the name.
"""

import math

# --- Lengths and times ----------------------------------------------------------------------
AU_M = 149_597_870_700.0  # m; IAU 2012 Resolution B2 (exact by definition)
AU_KM = AU_M / 1000.0  # km
SOLAR_RADIUS_KM = 695_700.0  # km; nominal solar radius, IAU 2015 Resolution B3
SOLAR_RADIUS_AU = SOLAR_RADIUS_KM / AU_KM  # au (about 0.00465)
DAY_S = 86_400.0  # s; SI day used by TDB/TT Julian dates
JD_J2000 = 2_451_545.0  # JD of the epoch J2000.0 (2000 Jan 1.5 TT); IAU 1976 / Lieske (1979)
JD_MJD_OFFSET = 2_400_000.5  # MJD = JD - 2400000.5; IAU 1973 resolution
DAYS_PER_JULIAN_YEAR = 365.25  # IAU 1976 (Julian year)
DAYS_PER_JULIAN_CENTURY = 36_525.0  # IAU 1976

KM_S_PER_AU_DAY = AU_KM / DAY_S  # 1 au/day in km/s (about 1731.46)

# --- Gravitation ----------------------------------------------------------------------------
GAUSSIAN_K = 0.01720209895  # au^(3/2) day^-1 Msun^-1/2; IAU 1976 (Gauss's constant, defining)
GM_SUN_AU3_D2 = GAUSSIAN_K**2  # au^3/day^2; heliocentric two-body parameter for comet elements
# (DE423 quotes GMS = 2.959122082855911e-4 au^3/day^2, identical to k^2 to 16 digits.)

# --- Frames ---------------------------------------------------------------------------------
OBLIQUITY_J2000_IAU1976_ARCSEC = 84_381.448  # mean obliquity of the ecliptic at J2000; IAU 1976
OBLIQUITY_J2000_IAU2006_ARCSEC = 84_381.406  # the same in IAU 2006 (P03); differs by 0.04"
OBLIQUITY_J2000_DEG = OBLIQUITY_J2000_IAU1976_ARCSEC / 3600.0  # the one trailcast uses

# --- Light and radiation ----------------------------------------------------------------------
C_M_S = 299_792_458.0  # m/s; SI definition
C_AU_DAY = C_M_S * DAY_S / AU_M  # speed of light in au/day (about 173.14)
ABERRATION_CONSTANT_ARCSEC = 20.49552  # constant of annual aberration; IAU 1976

# --- Earth ----------------------------------------------------------------------------------
EARTH_ESCAPE_KM_S = 11.2  # km/s, escape speed at the top of the atmosphere; common practice
# (sqrt(2 GM_earth / (6371 km + 100 km)) = 11.1 km/s; meteor literature rounds to 11.2)

TWO_PI = 2.0 * math.pi
DEG = math.pi / 180.0  # radians per degree
