"""Tests of dynamics.solar_longitude against published values and erfa."""

import erfa
import numpy as np
import pytest

from dynamics.constants import ABERRATION_CONSTANT_ARCSEC, C_AU_DAY, JD_J2000
from dynamics.ephemeris import EPHEMERIS_SPAN_TDB_JD, heliocentric_state
from dynamics.errors import OutsideTimeSpan
from dynamics.frames import cartesian_to_spherical, equatorial_to_ecliptic
from dynamics.solar_longitude import (
    earth_heliocentric_longitude_deg,
    solar_longitude_deg,
    solar_longitude_rate_deg_per_day,
    times_of_solar_longitude_tdb,
)

# Eccentricity of Earth's orbit at J2000: 0.016708634 (Meeus, Astronomical Algorithms, 2nd ed.,
# eq. 25.4, from memory).
EARTH_ECCENTRICITY_J2000 = 0.016708634
# Sidereal year, days: 365.256363 (Astronomical Almanac, from memory). Solar longitude referred
# to the fixed equinox J2000 repeats with it.
SIDEREAL_YEAR_DAYS = 365.256363

# Dates (TDB JD) spread over 1900-2100 (erfa.epv00's stated interval of accuracy).
DATES_1900_2100_TDB_JD = np.array(
    [2415020.5, 2421317.25, 2429811.8, 2436934.1, 2443509.5, 2451545.0, 2458849.5, 2466323.7,
     2474807.3, 2481222.9, 2488068.5]
)  # fmt: skip


def _wrap180(angle):
    return (np.asarray(angle) + 180.0) % 360.0 - 180.0


# --- Meeus, Astronomical Algorithms --------------------------------------------------------------


@pytest.mark.reference
def test_meeus_example_25a_low_precision_sun():
    # Meeus, Astronomical Algorithms, 2nd ed. (1998), Example 25.a (from memory):
    # 1992 October 13.0 TD = JDE 2448908.5; true geometric longitude of the Sun 199.90988 deg
    # referred to the mean equinox of date; radius vector R = 0.99766 au.
    t_tdb_jd = 2448908.5  # TD (= TT); TT - TDB is below 2 ms, irrelevant here
    lambda_of_date_deg = 199.90988
    r_meeus_au = 0.99766
    # Meeus ch. 25 (from memory): to refer the Sun's longitude to J2000, subtract
    # 0.01397 deg * (year - 2000), the general precession in longitude per year.
    years_since_2000 = (t_tdb_jd - JD_J2000) / 365.25
    lambda_j2000_deg = lambda_of_date_deg - 0.01397 * years_since_2000
    # Tolerance, deg: 0.01, the accuracy Meeus states for this low-precision method (the simple
    # precession rule adds well under 0.001 deg over 7 years).
    meeus_lowprec_tol_deg = 0.01
    assert abs(_wrap180(solar_longitude_deg(t_tdb_jd) - lambda_j2000_deg)) < meeus_lowprec_tol_deg
    # Tolerance, au: 1e-4. Meeus states no accuracy for R; the method drops the lunar and
    # planetary perturbations (Earth-EMB offset up to 3e-5 au, planetary terms of similar size).
    # A weak check: it catches unit or origin errors, not small ones.
    meeus_lowprec_r_tol_au = 1e-4
    r_au, _ = heliocentric_state("earth", t_tdb_jd)
    assert abs(np.linalg.norm(r_au) - r_meeus_au) < meeus_lowprec_r_tol_au


# --- erfa: epv00 for Earth and Sun, ab for aberration ---------------------------------------------

# Tolerance, arcsec: 0.03. erfa.epv00's heliocentric Earth is good to 11.2 km at most over
# 1900-2100 (SOFA docs, note 4), i.e. 0.016 arcsec seen from 0.98 au; twice that allows for the
# DE405 (epv00's reference) vs DE423 differences of a few km.
EPV00_LONGITUDE_TOL_ARCSEC = 0.03


def _erfa_solar_longitude_deg(t_tdb_jd, apparent):
    """Solar longitude from erfa alone: epv00 for Earth and Sun, ab for aberration."""
    pvh, pvb = erfa.epv00(t_tdb_jd, 0.0)  # BCRS (equatorial J2000), au and au/day
    earth_b, earth_v = pvb["p"], pvb["v"]
    sun_b, sun_v = pvb["p"] - pvh["p"], pvb["v"] - pvh["v"]
    p = sun_b - earth_b
    if apparent:
        dist = np.linalg.norm(p, axis=-1, keepdims=True)
        q = (sun_b - sun_v * dist / erfa.DC) - earth_b  # erfa.DC: speed of light, au/day
        pnat = q / np.linalg.norm(q, axis=-1, keepdims=True)
        v_c = earth_v / erfa.DC
        bm1 = np.sqrt(1.0 - np.sum(v_c**2, axis=-1))
        p = erfa.ab(pnat, v_c, dist[..., 0], bm1)
    lon_deg, _, _ = cartesian_to_spherical(equatorial_to_ecliptic(p))
    return lon_deg


@pytest.mark.reference
@pytest.mark.parametrize("kind", ["geometric", "apparent"])
def test_solar_longitude_matches_erfa(kind):
    ours_deg = solar_longitude_deg(DATES_1900_2100_TDB_JD, kind)
    ref_deg = _erfa_solar_longitude_deg(DATES_1900_2100_TDB_JD, kind == "apparent")  # erfa
    diff_arcsec = np.abs(_wrap180(ours_deg - ref_deg)) * 3600.0
    assert diff_arcsec.max() < EPV00_LONGITUDE_TOL_ARCSEC


@pytest.mark.reference
def test_apparent_minus_geometric_is_the_aberration():
    # Annual aberration in the Sun's longitude is -kappa (v_perp / v_mean), kappa = 20.49552
    # arcsec (IAU 1976); Earth's transverse speed varies by +-e over the orbit.
    t = np.linspace(JD_J2000, JD_J2000 + SIDEREAL_YEAR_DAYS, 730, endpoint=False)
    d_arcsec = _wrap180(solar_longitude_deg(t, "apparent") - solar_longitude_deg(t)) * 3600.0
    kappa = ABERRATION_CONSTANT_ARCSEC
    # Per date, tolerance arcsec: kappa * e = 0.34 (orbital eccentricity) plus 0.03 for the Sun's
    # barycentric motion (13 m/s, i.e. 0.009 arcsec) and Earth's monthly motion about the EMB
    # (12.5 m/s, 0.009 arcsec).
    per_date_tol_arcsec = kappa * EARTH_ECCENTRICITY_J2000 + 0.03
    assert np.all(np.abs(d_arcsec + kappa) < per_date_tol_arcsec)
    # Over a whole orbit the time-mean of the transverse speed is n a sqrt(1 - e^2), and kappa is
    # defined as n a / (c sqrt(1 - e^2)) (from memory): mean aberration = -kappa (1 - e^2).
    # Tolerance arcsec: 0.005; the periodic terms above average out over the year (we find them
    # below 0.001) and 730 samples resolve the mean to better than that.
    mean_tol_arcsec = 0.005
    expected_mean_arcsec = -kappa * (1.0 - EARTH_ECCENTRICITY_J2000**2)
    assert abs(d_arcsec.mean() - expected_mean_arcsec) < mean_tol_arcsec


# --- Rate --------------------------------------------------------------------------------------


@pytest.mark.reference
def test_rate_extremes_follow_keplers_second_law():
    # For a Kepler ellipse d(lambda)/dt = n (1 + e cos f)^2 / (1 - e^2)^1.5, extremes at
    # perihelion and aphelion; n = 360 deg / sidereal year.
    n_deg_d = 360.0 / SIDEREAL_YEAR_DAYS
    e = EARTH_ECCENTRICITY_J2000
    rate_max = n_deg_d * (1 + e) ** 2 / (1 - e**2) ** 1.5
    rate_min = n_deg_d * (1 - e) ** 2 / (1 - e**2) ** 1.5
    t = np.linspace(JD_J2000, JD_J2000 + SIDEREAL_YEAR_DAYS, 2000)
    rate = solar_longitude_rate_deg_per_day(t)
    # Tolerance, deg/day: 1e-3. Earth's monthly motion about the EMB (12.5 m/s against 29.8 km/s,
    # 4e-4 relative) and planetary perturbations shift the extremes of the real orbit.
    kepler_rate_tol_deg_d = 1e-3
    assert abs(rate.max() - rate_max) < kepler_rate_tol_deg_d
    assert abs(rate.min() - rate_min) < kepler_rate_tol_deg_d


@pytest.mark.invariant
def test_rate_is_derivative_of_longitude():
    # Central difference, h = 0.01 day over the exactly representable step: truncation
    # lambda''' h^2 / 6 ~ 1e-6 deg/day^3 * 1e-4 / 6 and rounding 1e-13 deg / 0.02 day are both
    # below 1e-10 deg/day. Tolerance: 1e-9 deg/day.
    h_days, tol_deg_d = 0.01, 1e-9
    t = DATES_1900_2100_TDB_JD
    step = (t + h_days) - (t - h_days)
    dlam = _wrap180(solar_longitude_deg(t + h_days) - solar_longitude_deg(t - h_days))
    assert np.abs(dlam / step - solar_longitude_rate_deg_per_day(t)).max() < tol_deg_d


# --- Inverse: times of a given solar longitude ---------------------------------------------------

# Round-trip tolerance, seconds: 0.01 s, the accuracy the root finder aims at; it is 250 times the
# resolution of a float64 Julian date (4e-5 s), so a correct solver meets it with room to spare.
ROUND_TRIP_TOL_S = 0.01


@pytest.mark.invariant
@pytest.mark.parametrize("kind", ["geometric", "apparent"])
def test_round_trip_recovers_time(kind):
    rng = np.random.default_rng(20240601)
    first, last = EPHEMERIS_SPAN_TDB_JD
    times = np.concatenate(
        [rng.uniform(first + 5.0, last - 10.0, 40), np.linspace(first + 5.0, last - 10.0, 9)]
    )
    lam_deg = solar_longitude_deg(times, kind)
    for t, lam in zip(times, lam_deg, strict=True):
        roots = times_of_solar_longitude_tdb(lam, t - 3.0, t + 7.0, kind)
        assert len(roots) == 1
        assert abs(roots[0] - t) * 86400.0 < ROUND_TRIP_TOL_S


@pytest.mark.invariant
def test_year_boundary_number_of_roots():
    # lambda_sun = 280 deg falls around Jan 1 (280.378 deg at J2000.0, see the doctest).
    lam = 280.0
    (t_a,) = times_of_solar_longitude_tdb(lam, JD_J2000 - 10.0, JD_J2000 + 10.0)
    year = SIDEREAL_YEAR_DAYS
    # A window a little longer than a year around two Jan 1sts holds both crossings.
    assert len(times_of_solar_longitude_tdb(lam, t_a - 1.0, t_a + year + 1.0)) == 2
    # A calendar-year-like window starting just after a crossing holds only the next one.
    assert len(times_of_solar_longitude_tdb(lam, t_a + 1.0, t_a + 366.0)) == 1
    # Shorter than a year and away from the crossing: none.
    assert len(times_of_solar_longitude_tdb(lam, t_a + 1.0, t_a + 360.0)) == 0
    # Half-open window: the start is included, the end excluded.
    np.testing.assert_array_equal(times_of_solar_longitude_tdb(lam, t_a, t_a + 1.0), [t_a])
    assert len(times_of_solar_longitude_tdb(lam, t_a - 1.0, t_a)) == 0
    # Target given outside [0, 360) means the same longitude.
    np.testing.assert_allclose(times_of_solar_longitude_tdb(lam - 360.0, t_a - 1, t_a + 1), [t_a])


@pytest.mark.reference
def test_crossings_repeat_with_the_sidereal_year_over_the_whole_span():
    # Over 1800-2200 each solar longitude recurs once per sidereal year.
    # Tolerance, days: 0.02 (29 min). The real Earth's longitude is perturbed by the Moon (about
    # 6 arcsec, Earth about the EMB) and the planets (Venus, Jupiter: of order 10 arcsec each);
    # at about 1 deg/day, some 30 arcsec shift a crossing by about 12 min.
    interval_tol_days = 0.02
    first, last = EPHEMERIS_SPAN_TDB_JD
    roots = times_of_solar_longitude_tdb(280.0, first, last)
    n_years_expected = (last - first) / SIDEREAL_YEAR_DAYS  # 400.1: 400 or 401 crossings
    assert int(n_years_expected) <= len(roots) <= int(n_years_expected) + 1
    assert np.abs(np.diff(roots) - SIDEREAL_YEAR_DAYS).max() < interval_tol_days
    # Tolerance: 1e-7 deg (0.0004 arcsec, 0.01 s of motion), roots solve the equation.
    assert np.abs(_wrap180(solar_longitude_deg(roots) - 280.0)).max() < 1e-7


# --- Conventions and errors ----------------------------------------------------------------------


@pytest.mark.invariant
def test_earth_heliocentric_longitude_is_opposite_to_the_sun():
    # Tolerance, deg: 1e-9, float64 rounding of atan2 and the 180-degree shift.
    tol_deg = 1e-9
    r_au, _ = heliocentric_state("earth", DATES_1900_2100_TDB_JD)
    lon_deg, _, _ = cartesian_to_spherical(r_au)
    ours = earth_heliocentric_longitude_deg(DATES_1900_2100_TDB_JD)
    assert np.abs(_wrap180(ours - lon_deg)).max() < tol_deg


@pytest.mark.invariant
def test_range_and_shape():
    t = np.linspace(2378500.0, 2524600.0, 5000)
    lam = solar_longitude_deg(t, "apparent")
    assert lam.shape == t.shape and np.all((lam >= 0.0) & (lam < 360.0))
    assert np.ndim(solar_longitude_deg(2451545.0)) == 0
    assert solar_longitude_deg(t.reshape(100, 50)).shape == (100, 50)


@pytest.mark.invariant
def test_light_time_constant_is_consistent():
    # The apparent correction uses c in au/day; 1 au of light time is 499.005 s (IAU 2012 au,
    # SI c), a check that C_AU_DAY is in the expected unit.
    assert 86400.0 / C_AU_DAY == pytest.approx(499.004784, abs=1e-6)


@pytest.mark.invariant
def test_errors():
    with pytest.raises(OutsideTimeSpan, match="DE423 covers"):
        solar_longitude_deg(2600000.0)
    with pytest.raises(OutsideTimeSpan, match="DE423 covers"):
        times_of_solar_longitude_tdb(10.0, 2524000.0, 2525000.0)
    with pytest.raises(ValueError, match="valid kinds"):
        solar_longitude_deg(2451545.0, kind="true")
    with pytest.raises(ValueError, match="before"):
        times_of_solar_longitude_tdb(10.0, 2451545.0, 2451540.0)
    assert len(times_of_solar_longitude_tdb(10.0, 2451545.0, 2451545.0)) == 0
