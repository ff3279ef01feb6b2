"""Tests of dynamics.ephemeris (DE423 through jplephem) against independent references."""

import threading

import erfa
import numpy as np
import pytest

from dynamics import ephemeris
from dynamics.constants import AU_KM, DAY_S, GM_SUN_AU3_D2
from dynamics.ephemeris import (
    BODIES,
    EPHEMERIS_SPAN_TDB_ISO,
    EPHEMERIS_SPAN_TDB_JD,
    barycentric_state,
    barycentric_states,
    ephemeris_info,
    gm_au3_d2,
    heliocentric_state,
)
from dynamics.errors import OutsideTimeSpan
from dynamics.frames import equatorial_to_ecliptic

ARCSEC_RAD = np.pi / (180.0 * 3600.0)

# Dates (TDB JD) spread over 1900-2100, the interval in which erfa.epv00 states its accuracy:
# 1900 Jan 1, then irregular steps so that no orbital phase is favoured, ending 2099 Dec 31.
DATES_1900_2100_TDB_JD = np.array(
    [2415020.5, 2421317.25, 2429811.8, 2436934.1, 2443509.5, 2451545.0, 2458849.5, 2466323.7,
     2474807.3, 2481222.9, 2488068.5]
)  # fmt: skip


def _erfa_epv00_ecliptic(t_tdb_jd):
    """Earth heliocentric and barycentric (r_au, v_au_d) from erfa.epv00, in ecliptic J2000."""
    pvh, pvb = erfa.epv00(t_tdb_jd, 0.0)  # TDB as a two-part JD; BCRS (equatorial), au, au/d
    to_ecl = equatorial_to_ecliptic
    return (to_ecl(pvh["p"]), to_ecl(pvh["v"])), (to_ecl(pvb["p"]), to_ecl(pvb["v"]))


# --- Earth against erfa.epv00 ------------------------------------------------------------------

# Position tolerance, au: 2e-7 au = 30 km. erfa.epv00 (SOFA docs, note 4) quotes max errors of
# 11.2 km (heliocentric) and 13.4 km (barycentric) against DE405 over 1900-2100; DE405 and DE423
# differ for Earth by a few km. 30 km is about twice the series' quoted maximum.
EARTH_POSITION_TOL_AU = 2e-7
# Velocity tolerance, au/day: 1e-8 au/day = 17 mm/s, a little over three times epv00's quoted
# maximum velocity error (5.0 mm/s heliocentric, 4.9 mm/s barycentric, SOFA docs note 4).
EARTH_VELOCITY_TOL_AU_D = 1e-8


@pytest.mark.reference
def test_earth_barycentric_state_matches_erfa_epv00():
    r_au, v_au_d = barycentric_state("earth", DATES_1900_2100_TDB_JD)
    _, (r_ref_au, v_ref_au_d) = _erfa_epv00_ecliptic(DATES_1900_2100_TDB_JD)  # erfa.epv00
    assert np.linalg.norm(r_au - r_ref_au, axis=-1).max() < EARTH_POSITION_TOL_AU
    assert np.linalg.norm(v_au_d - v_ref_au_d, axis=-1).max() < EARTH_VELOCITY_TOL_AU_D


@pytest.mark.reference
def test_earth_heliocentric_state_matches_erfa_epv00():
    r_au, v_au_d = heliocentric_state("earth", DATES_1900_2100_TDB_JD)
    (r_ref_au, v_ref_au_d), _ = _erfa_epv00_ecliptic(DATES_1900_2100_TDB_JD)  # erfa.epv00
    assert np.linalg.norm(r_au - r_ref_au, axis=-1).max() < EARTH_POSITION_TOL_AU
    assert np.linalg.norm(v_au_d - v_ref_au_d, axis=-1).max() < EARTH_VELOCITY_TOL_AU_D


@pytest.mark.reference
def test_earth_is_not_the_earth_moon_barycentre():
    # Earth-EMB distance = Earth-Moon distance / (1 + EMRAT): about 384400 km / 82.3 = 4670 km
    # (mean lunar distance from memory). epv00 is accurate to ~13 km, so using the EMB for Earth
    # would fail the epv00 test above; here we check the offset's size directly.
    min_offset_km, max_offset_km = 4300.0, 5000.0  # perigee/apogee 356500/406700 km, from memory
    r_earth_au, _ = barycentric_state("earth", DATES_1900_2100_TDB_JD)
    r_emb_au, _ = barycentric_state("earthmoon", DATES_1900_2100_TDB_JD)
    offset_km = np.linalg.norm(r_emb_au - r_earth_au, axis=-1) * AU_KM
    assert np.all((offset_km > min_offset_km) & (offset_km < max_offset_km))


# --- Planets against erfa.plan94 ---------------------------------------------------------------

# Maximum differences of erfa.plan94 (Simon et al. 1994, A&A 282, 663) from DE200 over 1800-2100,
# as quoted in its SOFA/ERFA documentation (note 5): longitude L and latitude B in arcsec, radius
# R in km. "earthmoon" is plan94's EMB (np = 3).
PLAN94_MAX_ERRORS = {
    # body: (plan94 index, L arcsec, B arcsec, R km)
    "mercury": (1, 7.0, 1.0, 500.0),
    "venus": (2, 7.0, 1.0, 1100.0),
    "earthmoon": (3, 9.0, 1.0, 1300.0),
    "mars": (4, 26.0, 1.0, 9000.0),
    "jupiter": (5, 78.0, 6.0, 82000.0),
    "saturn": (6, 87.0, 14.0, 263000.0),
    "uranus": (7, 86.0, 7.0, 661000.0),
    "neptune": (8, 11.0, 2.0, 248000.0),
}


@pytest.mark.reference
@pytest.mark.parametrize("body", list(PLAN94_MAX_ERRORS))
def test_planet_heliocentric_positions_match_erfa_plan94(body):
    index, l_arcsec, b_arcsec, r_km = PLAN94_MAX_ERRORS[body]
    r_au, _ = heliocentric_state(body, DATES_1900_2100_TDB_JD)
    pv = erfa.plan94(DATES_1900_2100_TDB_JD, 0.0, index)  # heliocentric, equatorial J2000, au
    r_ref_au = equatorial_to_ecliptic(pv["p"])
    dist_au = np.linalg.norm(r_au, axis=-1)
    # Tolerance, au, per date: plan94's quoted maximum errors turned into a displacement at the
    # planet's distance: angular errors times distance (along track, across track) combined in
    # quadrature with the radial error. DE423 differs from DE200 by far less than these limits.
    tol_au = np.sqrt(
        (l_arcsec * ARCSEC_RAD * dist_au) ** 2
        + (b_arcsec * ARCSEC_RAD * dist_au) ** 2
        + (r_km / AU_KM) ** 2
    )
    assert np.all(np.linalg.norm(r_au - r_ref_au, axis=-1) < tol_au)


# --- Masses -----------------------------------------------------------------------------------

# Sun/body mass ratios of the IAU 2009 System of Astronomical Constants (Luzum et al. 2011,
# Celest. Mech. Dyn. Astr. 110, 293, Table 1), from memory. Mercury is left out: DE423 refitted
# its mass to MESSENGER flybys (Folkner 2010), so it departs from the IAU 2009 value by 1e-5.
IAU2009_SUN_TO_BODY_MASS_RATIO = {
    "venus": 408523.719,
    "earthmoon": 328900.5596,
    "earth": 332946.0487,
    "mars": 3098703.59,
    "jupiter": 1047.348644,
    "saturn": 3497.9018,
    "uranus": 22902.98,
    "neptune": 19412.26,
}
# Relative tolerance: 2e-6. The IAU 2009 ratios come from the fits of the previous ephemerides
# and are rounded to 7-10 digits; DE423's own values differ from them by up to about 1.2e-6
# (Neptune). A wrong GM key (another planet) would be off by orders of magnitude.
MASS_RATIO_REL_TOL = 2e-6


@pytest.mark.reference
@pytest.mark.parametrize("body", list(IAU2009_SUN_TO_BODY_MASS_RATIO))
def test_mass_ratios_match_iau2009(body):
    ratio = gm_au3_d2("sun") / gm_au3_d2(body)
    assert ratio == pytest.approx(IAU2009_SUN_TO_BODY_MASS_RATIO[body], rel=MASS_RATIO_REL_TOL)


@pytest.mark.reference
def test_earth_moon_mass_ratio_matches_iau2009():
    # IAU 2009 (Luzum et al. 2011): Moon/Earth mass ratio 1.23000371e-2, from memory.
    moon_to_earth_iau2009 = 1.23000371e-2
    # Relative tolerance: 5e-8. The IAU 2009 value was taken from DE421 (EMRAT 81.30056907, from
    # memory); DE423 refitted it to 81.300569416, a relative change of about 2e-8.
    rel_tol = 5e-8
    assert gm_au3_d2("moon") / gm_au3_d2("earth") == pytest.approx(
        moon_to_earth_iau2009, rel=rel_tol
    )


@pytest.mark.reference
def test_solar_gm_is_gaussian_constant_squared():
    # DE423 adopts GMS = k^2 (Gaussian constant, IAU 1976), as do its predecessors.
    # Relative tolerance: 1e-14, a few float64 roundings.
    rel_tol = 1e-14
    assert gm_au3_d2("sun") == pytest.approx(GM_SUN_AU3_D2, rel=rel_tol)


@pytest.mark.invariant
def test_earth_and_moon_gm_add_up_to_earth_moon_gm():
    rel_tol = 1e-15  # float64 rounding
    total = gm_au3_d2("earth") + gm_au3_d2("moon")
    assert total == pytest.approx(gm_au3_d2("earthmoon"), rel=rel_tol)


# --- Invariants of the Earth/Moon split and of the API -------------------------------------------


@pytest.mark.invariant
def test_earth_moon_barycentre_is_mass_weighted_mean_of_earth_and_moon():
    # Tolerance, au: 1e-15 au (0.15 mm), float64 rounding of positions near 1 au.
    tol_au = 1e-15
    gm_e, gm_m = gm_au3_d2("earth"), gm_au3_d2("moon")
    states = barycentric_states(["earth", "moon", "earthmoon"], DATES_1900_2100_TDB_JD)
    r_e, v_e = states["earth"]
    r_m, v_m = states["moon"]
    r_b, v_b = states["earthmoon"]
    assert np.abs((gm_e * r_e + gm_m * r_m) / (gm_e + gm_m) - r_b).max() < tol_au
    assert np.abs((gm_e * v_e + gm_m * v_m) / (gm_e + gm_m) - v_b).max() < tol_au


@pytest.mark.invariant
def test_velocity_is_derivative_of_position():
    # Central difference with h = 0.001 day over the exactly representable step (t+h) - (t-h).
    # Truncation error |r'''| h^2 / 6 is largest for the Moon's monthly motion about Earth,
    # 0.00257 au * (0.23 rad/day)^3 * 1e-6 / 6 = 5e-12 au/day; position rounding adds about
    # 1e-15 au / 0.002 day = 5e-13 au/day. Tolerance: 1e-11 au/day (0.02 mm/s), twice the sum.
    h_days, tol_au_d = 1e-3, 1e-11
    t = DATES_1900_2100_TDB_JD
    step_days = ((t + h_days) - (t - h_days))[:, None]
    for body in ("earth", "moon", "mars", "jupiter"):
        _, v_au_d = barycentric_state(body, t)
        r_plus, _ = barycentric_state(body, t + h_days)
        r_minus, _ = barycentric_state(body, t - h_days)
        assert np.abs((r_plus - r_minus) / step_days - v_au_d).max() < tol_au_d


@pytest.mark.invariant
def test_shapes_broadcast_over_times():
    r_au, v_au_d = barycentric_state("mars", 2451545.0)
    assert r_au.shape == (3,) and v_au_d.shape == (3,)
    r_au, v_au_d = barycentric_state("mars", DATES_1900_2100_TDB_JD)
    assert r_au.shape == (len(DATES_1900_2100_TDB_JD), 3)
    grid = DATES_1900_2100_TDB_JD[:10].reshape(2, 5)
    r_au, _ = heliocentric_state("moon", grid)
    assert r_au.shape == (2, 5, 3)
    r_au, v_au_d = barycentric_state("earth", np.array([]))
    assert r_au.shape == (0, 3)


@pytest.mark.invariant
def test_barycentric_states_dict_stacked_and_single_agree():
    bodies = ["sun", "mercury", "venus", "earth", "mars", "jupiter", "saturn", "uranus", "neptune"]
    t = 2455000.5
    as_dict = barycentric_states(bodies, t)
    r_au, v_au_d = barycentric_states(bodies, t, stacked=True)
    assert r_au.shape == (len(bodies), 3) and v_au_d.shape == (len(bodies), 3)
    for k, body in enumerate(bodies):
        r1, v1 = barycentric_state(body, t)
        np.testing.assert_array_equal(as_dict[body][0], r1)
        np.testing.assert_array_equal(r_au[k], r1)
        np.testing.assert_array_equal(v_au_d[k], v1)


@pytest.mark.invariant
def test_heliocentric_sun_is_zero_and_all_bodies_available():
    r_au, v_au_d = heliocentric_state("sun", 2451545.0)
    assert np.all(r_au == 0.0) and np.all(v_au_d == 0.0)
    for body in BODIES:
        r_au, _ = barycentric_state(body, 2451545.0)
        assert np.all(np.isfinite(r_au))
        assert gm_au3_d2(body) > 0.0


@pytest.mark.invariant
def test_concurrent_first_use_is_safe(monkeypatch):
    # Force a fresh lazy load, then let several threads race for it: all get the same answers.
    monkeypatch.setattr(ephemeris, "_ephemeris", None)
    monkeypatch.setattr(ephemeris, "_loaded_series", set())
    results, errors = [], []

    def work():
        try:
            results.append(barycentric_state("earth", DATES_1900_2100_TDB_JD)[0])
        except Exception as exc:  # pragma: no cover - reported below
            errors.append(exc)

    threads = [threading.Thread(target=work) for _ in range(4)]
    for th in threads:
        th.start()
    for th in threads:
        th.join()
    assert not errors
    for r_au in results[1:]:
        np.testing.assert_array_equal(r_au, results[0])


# --- Span and errors ---------------------------------------------------------------------------


@pytest.mark.reference
def test_span_dates_match_erfa_calendar():
    # The ISO span quoted in messages and metadata, checked with erfa.jd2cal.
    for jd, iso in zip(EPHEMERIS_SPAN_TDB_JD, EPHEMERIS_SPAN_TDB_ISO, strict=True):
        year, month, day, frac = erfa.jd2cal(jd, 0.0)
        assert f"{int(year):04d}-{int(month):02d}-{int(day):02d}" == iso and frac == 0.0


@pytest.mark.invariant
def test_span_ends_are_inside():
    r_au, _ = barycentric_state("earth", np.array(EPHEMERIS_SPAN_TDB_JD))
    assert np.all(np.isfinite(r_au))


@pytest.mark.invariant
@pytest.mark.parametrize(
    "t_tdb_jd",
    [
        EPHEMERIS_SPAN_TDB_JD[0] - 1e-3,
        EPHEMERIS_SPAN_TDB_JD[1] + 1e-3,  # jplephem alone would extrapolate one record here
        EPHEMERIS_SPAN_TDB_JD[1] + 20.0,
        [2451545.0, 2600000.0],
    ],
)
def test_outside_span_raises(t_tdb_jd):
    with pytest.raises(OutsideTimeSpan, match="DE423 covers 1799-12-16 to 2200-02-01 TDB") as exc:
        barycentric_state("earth", t_tdb_jd)
    assert exc.value.span == EPHEMERIS_SPAN_TDB_JD


@pytest.mark.invariant
def test_unknown_body_raises_with_valid_names():
    with pytest.raises(ValueError, match="valid names are: sun, mercury"):
        barycentric_state("pluto", 2451545.0)
    with pytest.raises(ValueError, match="unknown body"):
        gm_au3_d2("vulcan")
    with pytest.raises(ValueError, match="unknown body"):
        barycentric_states(["sun", "ceres"], 2451545.0)


@pytest.mark.invariant
def test_non_finite_time_raises():
    with pytest.raises(ValueError, match="finite"):
        barycentric_state("earth", np.nan)


@pytest.mark.reference
def test_ephemeris_info_reports_provenance():
    info = ephemeris_info()
    assert info["name"] == "DE423"
    assert info["span_tdb_jd"] == list(EPHEMERIS_SPAN_TDB_JD)
    assert "343R-10-001" in info["source"]  # Folkner (2010), memorandum number
    # DE423's au differs from the IAU 2012 value (149597870.700 km, exact) by < 1 m.
    assert abs(info["au_km"] - AU_KM) < 1e-3
    assert info["units"]["length"] == "au" and "TDB" in info["units"]["time"]
    assert DAY_S == 86400.0  # the day of the velocity unit is the SI day of TDB
