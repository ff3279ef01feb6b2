"""Where and when a peak can be seen (dynamics/observing.py), checked against outside references:
Meeus's worked examples, ERFA's own reference chain (atco13 from catalogue place to observed
place, epv00, moon98), the handbook rate formula, and geometric facts of the world map.
"""

import json
import math
import warnings
from pathlib import Path

import erfa
import numpy as np
import pytest

from dynamics import observing as obs
from dynamics.errors import InvalidSite
from dynamics.frames import cartesian_to_spherical, spherical_to_cartesian

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
DEMO_RESULT = json.loads((EXAMPLES / "demo-forecast-2039.json").read_text())

#: Altitude/azimuth agreement with Meeus 13.b: his sidereal time assumes UT1 while we take
#: UT1 = UTC (|DUT1| < 0.9 s, i.e. up to 13.5 arcsec of hour angle) and his nutation is the
#: IAU 1980 series (sub-arcsecond from IAU 2000A): 0.005 deg (18 arcsec) covers both.
MEEUS_ALTAZ_TOL_DEG = 0.005
#: Sun against ERFA's atco13 chain fed with epv00: DE423 and epv00 agree to a few km (below
#: 0.01 arcsec at 1 au), atco13 treats the Sun as a star (no 8.8 arcsec topocentric parallax,
#: light deflection near the limb ill-defined): 0.005 deg.
SUN_ERFA_TOL_DEG = 0.005
#: DE423 Moon against erfa.moon98 (Meeus's series): moon98's worst error over 1950-2100 is
#: 18.3 arcsec (its documentation, note 3), so 20 arcsec.
MOON98_TOL_DEG = 20.0 / 3600.0
#: Topocentric Moon altitude against geocentric altitude minus the parallax in altitude on a
#: spherical Earth (Meeus 1998, ch. 40): the ellipsoid changes the parallax by up to 0.3 % of
#: about 1 deg, moon98 adds up to 18 arcsec: 0.01 deg.
MOON_PARALLAX_TOL_DEG = 0.01
#: Meeus 15.a quotes rise, transit and set to the minute: 2 minutes (days).
MEEUS_RISE_TOL_DAYS = 2.0 / 1440.0


def _jd(y, m, d, hours=0.0) -> float:
    return float(sum(erfa.cal2jd(y, m, d))) + hours / 24.0


# --- radiant altitude: Meeus, Astronomical Algorithms, example 13.b ---------------------------


@pytest.mark.reference
def test_altitude_and_azimuth_reproduce_meeus_example_13b():
    # Meeus (1998), Astronomical Algorithms, 2nd ed., example 13.b (from memory): Venus seen from
    # Washington, 1987 April 10, 19h21m00s UT; apparent place alpha = 23h09m16.641s,
    # delta = -6d43m11.61s; latitude +38d55m17s, longitude 77d03m56s W.
    # Result: azimuth A = 68.0337 deg (from the south, westward), altitude h = 15.1249 deg.
    ra_app = 15.0 * (23 + 9 / 60 + 16.641 / 3600)
    dec_app = -(6 + 43 / 60 + 11.61 / 3600)
    lat = 38 + 55 / 60 + 17 / 3600
    lon = -(77 + 3 / 60 + 56 / 3600)
    t = _jd(1987, 4, 10, 19 + 21 / 60)
    # Meeus's place is apparent (true equator and equinox of date); our input is J2000/ICRS, so
    # undo ERFA's bias-precession-nutation matrix (reference library) on it.
    tt = obs._times(t)[1]
    rnpb = erfa.pnm06a(tt, 0.0)
    ra, dec, _ = cartesian_to_spherical(rnpb.T @ spherical_to_cartesian(ra_app, dec_app))
    alt, az = obs.radiant_altaz(ra, dec, t, lat, lon)
    assert alt == pytest.approx(15.1249, abs=MEEUS_ALTAZ_TOL_DEG)  # Meeus 13.b, h
    assert az - 180.0 == pytest.approx(68.0337, abs=MEEUS_ALTAZ_TOL_DEG)  # Meeus 13.b, A


@pytest.mark.invariant
def test_celestial_pole_stands_at_the_latitude_and_azimuth_is_north():
    # Geometry: the celestial pole's altitude is the geodetic latitude (to the pole's
    # precession since J2000, 0.2 deg by 2040: hence the J2000 pole is only close).
    for lat in (-45.0, 10.0, 52.0):
        pole_dec = 90.0 if lat > 0 else -90.0
        t = _jd(2039, 4, 11, 23.0)
        tt = obs._times(t)[1]
        rnpb = erfa.pnm06a(tt, 0.0)
        ra, dec, _ = cartesian_to_spherical(rnpb.T @ np.array([0.0, 0.0, np.sign(pole_dec)]))
        alt, az = obs.radiant_altaz(ra, dec, t, lat, 0.0)
        assert alt == pytest.approx(abs(lat), abs=1e-3)  # true pole of date at |latitude|
        expected_az = 0.0 if lat > 0 else 180.0
        assert min(abs(az - expected_az), 360 - abs(az - expected_az)) < 0.5


# --- Sun: against ERFA's reference chain --------------------------------------------------------


def _erfa_sun_altaz(t_utc_jd, lat, lon, hm):
    """Sun from erfa.epv00 (geocentric direction = minus Earth's heliocentric position), then
    erfa.atco13 (ICRS -> observed, no refraction: pressure 0), dut1 = 0: all ERFA."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        tt1, tt2 = erfa.taitt(*erfa.utctai(t_utc_jd, 0.0))
        tdb = tt1 + tt2  # TT ~ TDB to 2 ms: the Sun moves 0.00003 arcsec meanwhile
        pvh, _pvb = erfa.epv00(tdb, 0.0)
        ra, dec = erfa.c2s(-pvh["p"])
        aob, zob, *_ = erfa.atco13(
            ra,
            dec,
            0,
            0,
            0,
            0,
            t_utc_jd,
            0.0,
            0.0,
            math.radians(lon),
            math.radians(lat),
            hm,
            0,
            0,
            0,
            0,
            0,
            0.55,
        )
    return 90.0 - math.degrees(zob), math.degrees(aob) % 360.0


@pytest.mark.reference
@pytest.mark.parametrize(
    ("date", "lat", "lon", "hm"),
    [
        ((1999, 11, 18, 2.0), 37.0, -3.0, 600.0),
        ((2000, 6, 21, 12.0), 51.48, 0.0, 45.0),
        ((2024, 3, 20, 3.5), -33.9, 18.4, 0.0),
        ((2039, 4, 11, 23.3), 50.0, 10.0, 300.0),
        ((2080, 12, 21, 18.0), -70.0, 120.0, 2000.0),
    ],
)
def test_sun_altitude_and_azimuth_match_erfa_epv00_and_atco13(date, lat, lon, hm):
    t = _jd(*date)
    alt, az, dist = obs.body_altaz("sun", t, lat, lon, hm)
    ref_alt, ref_az = _erfa_sun_altaz(t, lat, lon, hm)
    assert float(alt) == pytest.approx(ref_alt, abs=SUN_ERFA_TOL_DEG)
    if abs(ref_alt) < 89.0:  # azimuth is undefined at the zenith
        daz = (float(az) - ref_az + 180.0) % 360.0 - 180.0
        assert abs(daz) * math.cos(math.radians(ref_alt)) < SUN_ERFA_TOL_DEG
    assert 0.98 < float(dist) < 1.02  # Earth-Sun distance, au (perihelion 0.983, aphelion 1.017)


@pytest.mark.reference
def test_twilight_and_sunrise_times_put_the_sun_at_the_limit_in_erfa():
    # The times found by root finding, checked with ERFA's own chain (epv00 + atco13): at each,
    # the Sun stands at the event's defining altitude.
    site = obs.Site(52.0, 5.0, 0.0)
    t0 = _jd(2039, 4, 11, 12.0)
    found = {}
    for level in (
        obs.SUN_DAY_ALT_DEG,
        obs.CIVIL_TWILIGHT_ALT_DEG,
        obs.NAUTICAL_TWILIGHT_ALT_DEG,
        obs.ASTRONOMICAL_TWILIGHT_ALT_DEG,
    ):
        events = obs.find_crossings(
            lambda x: obs.body_altaz("sun", x, site.lat_deg, site.lon_deg)[0], t0, t0 + 1, level
        )
        assert [kind for _, kind in events] == ["set", "rise"], level  # one night, in order
        for t, _kind in events:
            assert _erfa_sun_altaz(t, site.lat_deg, site.lon_deg, 0.0)[0] == pytest.approx(
                level, abs=SUN_ERFA_TOL_DEG
            )
        found[level] = events
    # Deeper limits come later in the evening and earlier in the morning.
    sets = [found[lv][0][0] for lv in sorted(found, reverse=True)]
    rises = [found[lv][1][0] for lv in sorted(found, reverse=True)]
    assert sets == sorted(sets) and rises == sorted(rises, reverse=True)


@pytest.mark.reference
def test_rise_and_set_reproduce_meeus_example_15a():
    # Meeus (1998), Astronomical Algorithms, example 15.a (from memory): Venus at Boston
    # (latitude +42d20m, longitude 71d05m W), 1988 March 20, standard altitude h0 = -0.5667 deg:
    # rising 12h25m UT, setting 2h55m UT (both on March 20).
    lat, lon = 42 + 20 / 60, -(71 + 5 / 60)
    t0 = _jd(1988, 3, 20)
    events = obs.find_crossings(
        lambda x: obs.body_altaz("venus", x, lat, lon)[0], t0, t0 + 1, -0.5667
    )
    by_kind = {kind: t for t, kind in events}
    assert by_kind["set"] == pytest.approx(t0 + (2 + 55 / 60) / 24, abs=MEEUS_RISE_TOL_DAYS)
    assert by_kind["rise"] == pytest.approx(t0 + (12 + 25 / 60) / 24, abs=MEEUS_RISE_TOL_DAYS)


# --- Moon ---------------------------------------------------------------------------------------


@pytest.mark.reference
@pytest.mark.parametrize("date", [(1992, 4, 12, 0.0), (2039, 4, 11, 23.3), (2100, 1, 1, 6.0)])
def test_de423_moon_direction_matches_erfa_moon98(date):
    # erfa.moon98 (Meeus's series in ERFA; worst error 18.3 arcsec over 1950-2100, its note 3)
    # against DE423's geocentric Moon, both GCRS/ICRF, geometric.
    from dynamics.ephemeris import barycentric_states
    from dynamics.frames import angular_separation_deg, ecliptic_to_equatorial

    t = _jd(*date)
    _, tt, tdb = obs._times(t)
    st = barycentric_states(["earth", "moon"], tdb)
    ours = ecliptic_to_equatorial(st["moon"][0] - st["earth"][0])
    ref = erfa.moon98(tt, 0.0)["p"]
    a1, d1 = erfa.c2s(ours)
    a2, d2 = erfa.c2s(ref)
    sep = angular_separation_deg(*np.degrees([a1, d1, a2, d2]))
    assert float(sep) < MOON98_TOL_DEG


@pytest.mark.reference
def test_moon_illuminated_fraction_reproduces_meeus_example_48a():
    # Meeus (1998), example 48.a (from memory): 1992 April 12, 0h TD: k = 0.6786.
    # Our instants are UTC; 0h TD is 59 s earlier in UTC (Delta T 1992 = 59 s, from memory),
    # during which k changes by under 1e-4.
    sky = obs.sky_state(0.0, 0.0, _jd(1992, 4, 12) - 59 / 86400, 0.0, 0.0)
    # k is seen from the observer (here on the equator at longitude 0); from the geocentre it
    # differs by the Moon's parallax over the phase angle, < 0.01 of k.
    assert float(sky.moon_illuminated_fraction) == pytest.approx(0.6786, abs=0.01)
    grid = obs.world_grid(0.0, 0.0, _jd(1992, 4, 12) - 59 / 86400, 100.0, 2.5, step_deg=10)
    assert grid.moon_illuminated_fraction == pytest.approx(0.6786, abs=0.0015)  # geocentric


@pytest.mark.reference
def test_topocentric_moon_altitude_includes_the_parallax():
    # The Moon's altitude seen from the surface is lower than from the geocentre by the
    # parallax in altitude, sin p = (R / distance) cos h (spherical Earth; Meeus 1998, ch. 40).
    # Geocentric reference: moon98's direction through ERFA's atco13 (no parallax).
    t = _jd(2039, 4, 11, 23.3)
    lat, lon = 50.0, 10.0
    alt, _, dist_au = obs.body_altaz("moon", t, lat, lon, 0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        tt1, tt2 = erfa.taitt(*erfa.utctai(t, 0.0))
        ra, dec = erfa.c2s(erfa.moon98(tt1, tt2)["p"])
        _, zob, *_ = erfa.atco13(
            ra,
            dec,
            0,
            0,
            0,
            0,
            t,
            0.0,
            0.0,
            math.radians(lon),
            math.radians(lat),
            0.0,
            0,
            0,
            0,
            0,
            0,
            0.55,
        )
    geo_alt = 90.0 - math.degrees(zob)
    r_earth_au = (
        6371.0 / 149_597_870.7
    )  # mean Earth radius, 6371 km (common value, from memory), in au
    p = math.degrees(math.asin(r_earth_au / float(dist_au) * math.cos(math.radians(geo_alt))))
    assert float(alt) == pytest.approx(geo_alt - p, abs=MOON_PARALLAX_TOL_DEG)
    assert p > 0.5  # the Moon's parallax is about 1 deg: the check is not vacuous


# --- the hourly rate ----------------------------------------------------------------------------


@pytest.mark.reference
def test_hourly_rate_is_the_inverse_of_the_handbook_zhr_formula():
    # ZHR = HR * r^(6.5 - lm) / sin(h_R) (Koschack & Rendtel 1990, WGN 18, 44; Rendtel, Arlt &
    # McBeath 1995, Handbook for Visual Meteor Observers), F = 1. Worked by hand from that
    # formula: 30 meteors in an hour at h_R = 40 deg, lm 5.9, r = 2.2 give
    # ZHR = 30 * 2.2^0.6 / sin 40 deg = 30 * 1.604969 / 0.642788 = 74.907.
    assert obs.expected_hourly_rate(74.907, 40.0, 2.2, 5.9) == pytest.approx(30.0, rel=1e-4)
    # The standard observer (lm 6.5) with the radiant at the zenith counts the ZHR itself.
    assert obs.expected_hourly_rate(376.0, 90.0, 2.5, 6.5) == pytest.approx(376.0)
    # Each magnitude of lost sky divides the rate by r (definition of the population index).
    assert obs.expected_hourly_rate(100.0, 90.0, 2.5, 5.5) == pytest.approx(40.0)
    # Below the horizon: no meteors from this radiant.
    assert obs.expected_hourly_rate(100.0, -5.0, 2.5) == 0.0
    with pytest.raises(ValueError):
        obs.expected_hourly_rate(100.0, 30.0, 1.0)


# --- the world map: known cases ----------------------------------------------------------------


@pytest.mark.reference
@pytest.mark.parametrize("hours", [0.0, 6.0, 12.0, 18.0])
def test_radiant_near_the_north_pole_is_never_observable_from_far_south(hours):
    # Geometry: a star of declination d culminates at 90 - |lat - d|: a radiant at Dec +85
    # reaches at most -54 deg from latitude -59 (the grid's cells next to -60), and never rises
    # south of latitude -5 (to the 0.3 deg the pole moved since J2000).
    grid = obs.world_grid(120.0, 85.0, _jd(2039, 6, 21, hours), 1000.0, 2.5)
    rows = np.abs(grid.lat_deg + 60.0) <= 1.0
    assert not grid.observable[rows].any()
    assert grid.radiant_alt_deg[rows].max() < -54.0 + 0.3
    assert np.isnan(grid.hourly_rate[rows]).all()
    assert grid.radiant_alt_deg[grid.lat_deg < -5.5].max() < 0.3


@pytest.mark.reference
def test_peak_at_local_midnight_on_the_meridian_is_observable_there():
    # Built with ERFA alone: at 2039 Dec 21 0h UTC take the Sun's RA (epv00) and the Greenwich
    # apparent sidereal time (gst06a); the longitude where the Sun is at lower culmination
    # (local apparent midnight) and a radiant of RA = Sun's RA + 180 deg on the meridian there.
    t = _jd(2039, 12, 21)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        tt1, tt2 = erfa.taitt(*erfa.utctai(t, 0.0))
        pvh, _ = erfa.epv00(tt1, tt2)
        sun_ra = math.degrees(erfa.c2s(-pvh["p"])[0]) % 360
        gast = math.degrees(erfa.gst06a(t, 0.0, tt1, tt2))
    radiant_ra, radiant_dec, lat = (sun_ra + 180.0) % 360, 30.0, 40.0
    lon = (radiant_ra - gast + 180.0) % 360.0 - 180.0  # local sidereal time = radiant's RA
    sky = obs.sky_state(radiant_ra, radiant_dec, t, lat, lon)
    # On the meridian: altitude 90 - |lat - dec| = 80 deg (to precession since J2000, 0.6 deg).
    assert float(sky.radiant_alt_deg) == pytest.approx(80.0, abs=0.7)
    # Sun at lower culmination in December: lat + dec_sun - 90 = 40 - 23.4 - 90 = -73.4 deg.
    assert float(sky.sun_alt_deg) == pytest.approx(-73.4, abs=0.7)
    grid = obs.world_grid(radiant_ra, radiant_dec, t, 200.0, 2.5)
    i = int(np.argmin(np.abs(grid.lat_deg - lat)))
    j = int(np.argmin(np.abs(grid.lon_deg - lon)))
    assert grid.observable[i, j]
    # HR = ZHR sin h: within the 2-deg cell the altitude stays within 78-82 deg.
    assert 200.0 * math.sin(math.radians(78)) <= grid.hourly_rate[i, j] <= 200.0
    regions = obs.best_regions(grid)
    assert any(r["lat_from_deg"] <= lat < r["lat_to_deg"] for r in regions)


@pytest.mark.invariant
def test_cyclic_runs_join_across_the_date_line():
    mask = np.array([True, True, False, False, True, True, True])
    assert obs._runs(mask) == [(4, 1)]
    assert obs._runs(np.zeros(5, bool)) == [] and obs._runs(np.ones(5, bool)) == [(0, 4)]


# --- the demo comet's site view ------------------------------------------------------------------


@pytest.mark.reference
def test_site_view_of_the_demo_encounter_is_consistent_with_its_parts():
    site = obs.Site(50.0, 10.0, 300.0)
    view = obs.site_view(DEMO_RESULT, [site])
    enc = view["sites"][0]["encounters"][0]
    peak = enc["at_peak"]
    e = DEMO_RESULT["encounters"][0]
    # The rate at the peak is the handbook formula at the computed radiant altitude.
    expected = obs.expected_hourly_rate(
        e["zhr"]["estimate"], peak["radiant_alt_deg"], e["population_index"]
    )
    assert peak["hourly_rate"] == pytest.approx(expected, abs=0.2)
    assert peak["observable"] and peak["sky"] == "night"
    # Events come in time order; sunset before dusk before dawn before sunrise.
    names = [x["event"] for x in enc["events"]]
    assert (
        names.index("sunset")
        < names.index("astronomical dusk")
        < names.index("astronomical dawn")
        < names.index("sunrise")
    )
    # The timeline's ZHR at the peak is the profile's at that time.
    row = next(r for r in enc["timeline"] if r["time_utc"] == e["peak_utc"])
    assert row["zhr"] == pytest.approx(max(p["zhr"] for p in e["profile"]), rel=0.05)
    assert view["cautions"] and "company" in " ".join(view["cautions"])


def test_sites_are_validated_with_the_field_named():
    assert obs.parse_site("48.5,-123.4,230") == obs.Site(48.5, -123.4, 230.0)
    assert obs.Site(0.0, 350.0).lon_deg == pytest.approx(-10.0)
    for text, field in (
        ("91,0", "lat"),
        ("0,400", "lon"),
        ("1,2,20000", "elevation"),
        ("north,2", "site"),
        ("1", "site"),
    ):
        with pytest.raises(InvalidSite) as exc:
            obs.parse_site(text)
        assert exc.value.field == field


def test_old_dates_use_universal_time_with_delta_t():
    # Before 1960 the instants are UT and TT = UT + Delta T (Espenak & Meeus 2006): positions
    # are finite and the Sun is below the horizon at local midnight.
    alt, _, _ = obs.body_altaz("sun", _jd(1899, 11, 15, 0.0), 0.0, 0.0)
    assert float(alt) < -60.0


def test_results_without_an_activity_model_still_get_the_geometry():
    # Results stored before the activity stage have no ZHR, profile or population index: the
    # site view still says where the radiant, Sun and Moon are, and gives no rate.
    e = {**DEMO_RESULT["encounters"][0], "profile": [], "window": None}
    for key in ("zhr", "population_index"):
        e.pop(key)
    view = obs.site_encounter_view(e, obs.Site(50.0, 10.0))
    assert view["at_peak"]["hourly_rate"] is None and view["at_peak"]["observable"]
    assert all(row["hourly_rate"] is None for row in view["timeline"])
    assert view["verdict"] == "observable at the peak (no rate: the forecast has no ZHR)"
