"""Hindcasts of one public outburst per class of parent: the engine's reach, against history.

Each case is a row of the hindcast catalogue (``validation/hindcasts.json``), whose observed
peak, source and tolerance were written there before any run (see its ``tolerance_reason`` and
``peak_utc_source``). The engine runs with its defaults except the particle budget (kept small
so that ``make test`` stays quick) and, for the split comet, the break-up as an ejection event.

- split comet: the 2022 tau Herculids from 73P's 1995 break-up (5 revolutions);
- old, strongly perturbed Jupiter-family trail: the 2011 October Draconids from 21P's 1900 trail
  (17 revolutions) and the 1946 Draconid storm from the same trail (7 revolutions; added to
  this module after the run that switched the orbit, from the catalogue row and tolerance
  written before). Since 21P's 1900 perihelion is held to its catalogued time (the catalogue's
  observed_perihelia, from memory) the 2011 case passes and the 1946 one is an expected
  failure; before, it was the other way round;
- one-revolution dust of a long-period parent: the 2007 Aurigids from C/1911 N1's previous
  return (about 2,000 years earlier); run by ``make validate`` (several minutes);
- resonant trail: the 1998 Leonid fireball outburst from 55P's 1333 trail (20 revolutions, held
  compact by a mean-motion resonance with Jupiter); run by ``make validate``;
- old Halley-type trails: the two narrow 2009 Leonid peaks the observers' circular attributes
  to 55P's 1533 and 1466 trails (about 14 and 16 revolutions); the catalogue rows were written
  after a first 2009 forecast had been run, with tolerances by the rule of the other rows
  (their ``tolerance_reason``); run by ``make validate``.
"""

import json
from pathlib import Path

import pytest

from dynamics.forecast import ForecastOptions, forecast
from dynamics.orbit_input import parse_orbit
from dynamics.summaries import year_of
from dynamics.timescales import iso_to_tdb_jd
from service.hindcast import orbit_json

CATALOGUE = Path(__file__).resolve().parents[1] / "validation" / "hindcasts.json"


CASES = {
    # row id: (trail perihelion year, options beyond the defaults)
    # the 1995 break-up as the catalogue row's ejection event (30 days of release from
    # 1995-09-01 at 10x the Whipple speeds, with its sources there; set before any run)
    "tah-2022-1995": (1995, {"trails": (1995,)}),
    "dra-2011-1900": (1900, {"trails": (1900,)}),
    "dra-1946": (1900, {"trails": (1900,)}),
    "aur-2007-1rev": (None, {}),  # default scope: the previous return is always in it
    "leo-1998-1333": (1333, {"trails": (1333,)}),
    "leo-2009-1533": (1533, {"trails": (1533,)}),
    "leo-2009-1466": (1466, {"trails": (1466,)}),
}


def _row_and_orbit(row_id):
    cat = json.loads(CATALOGUE.read_text())
    row = next(r for r in cat["rows"] if r["id"] == row_id)
    # the orbit exactly as `trailcast hindcast` builds it (force terms, DT, magnitude)
    data = orbit_json(row["parent"], cat["orbits"][row["parent"]])
    if row.get("ejection_events"):  # a break-up the row's source describes
        data["ejection_events"] = row["ejection_events"]
    return row, parse_orbit(data)


def _hindcast(row_id, particles=150):
    row, orbit = _row_and_orbit(row_id)
    trail_year, extra = CASES[row_id]
    res = forecast(orbit, ForecastOptions(row["year"], row["year"], particles=particles, **extra))
    found = [
        e
        for e in res.encounters + res.near_misses
        if trail_year is None or year_of(e.trail_perihelion_tdb_jd) == trail_year
    ]
    return row, res, found


def _check(row, res, found):
    observed = iso_to_tdb_jd(row["observed"]["peak_utc"])
    tol_min = row["tolerance_min"]  # set in the catalogue before any run, with its reason
    assert found, (res.to_json()["trails"], res.notes)
    best = min(found, key=lambda e: abs(e.peak_tdb_jd - observed))
    offset_min = (best.peak_tdb_jd - observed) * 1440.0
    assert abs(offset_min) <= tol_min, (offset_min, best.to_json()["trail"])
    assert abs(best.miss_distance_au) < 0.01  # it met Earth's path, not a distant crossing


@pytest.mark.reference
@pytest.mark.slow
def test_old_perturbed_trail_within_the_catalogued_tolerance():
    # 21P's 2012 solution integrated back puts the 1900 perihelion 13.5 d before its
    # catalogued time; so dated, the 17-revolution trail peaked 23-27 min early at -0.0066 au.
    # Held to the catalogued time: +4 min, -0.0028 au (300 meteoroids; tolerance 15 min).
    _check(*_hindcast("dra-2011-1900"))


@pytest.mark.reference
@pytest.mark.slow
@pytest.mark.xfail(
    reason="with 21P's 1900 perihelion held to its catalogued time (Nov 28, from memory, day "
    "fraction unknown) the 7-revolution trail's 1946 peak comes +28 min late at -0.0013 au "
    "(tolerance 15 min); with the integrated Nov 14.5 it came +13.6 min. The same change "
    "brings the 17-revolution 2011 peak from -27 to +4 min: one time of ejection cannot "
    "satisfy both here, so the trail's own model (ejection, the comet's 1900 orbit beyond "
    "its perihelion time) is suspect, not the time alone",
    strict=False,
)
def test_old_perturbed_trail_storm_within_the_catalogued_tolerance():
    _check(*_hindcast("dra-1946"))


@pytest.fixture(scope="module")
def split_comet():
    return _hindcast("tah-2022-1995")


@pytest.mark.reference
@pytest.mark.slow
def test_split_comet_trail_is_reached_from_its_break_up(split_comet):
    row, res, found = split_comet
    assert found, (res.to_json()["trails"], res.notes)
    enc = found[0]
    assert enc.event == "fragmentation" and enc.revolutions == 5
    assert abs(enc.miss_distance_au) < 0.01
    # the radiant of the 2022 outburst: slow (Vg ~12 km/s) from near RA 208, Dec +28 (IAU
    # Meteor Data Center list for the tau Herculids, from memory); 2 km/s and 5 deg cover the
    # spread between published radiants of this diffuse shower
    assert enc.vg_km_s == pytest.approx(12.0, abs=2.0)


@pytest.mark.reference
@pytest.mark.slow
def test_split_comet_within_the_catalogued_tolerance(split_comet):
    _check(*split_comet)


@pytest.mark.reference
@pytest.mark.validation
def test_one_revolution_dust_of_a_long_period_parent_within_the_catalogued_tolerance():
    _check(*_hindcast("aur-2007-1rev", particles=300))


@pytest.mark.reference
@pytest.mark.validation
@pytest.mark.xfail(
    reason="known weakness, not tuned: the 1333 trail is reached (its resonant 20-revolution "
    "branch 0.0067-0.0070 au outside Earth's path, compact; in some draws a 19-revolution "
    "branch 0.0001 au away with ZHR ~470) but it crosses 1.6 deg of solar longitude late "
    "(+36 to +39 h): the trail's place along Earth's path rests on the parent's node in 1333, "
    "from 665 years of the parent's history integrated back from a modern orbit through its "
    "1366 close approach",
    strict=False,
)
def test_resonant_trail_within_the_catalogued_tolerance(resonant):
    _check(*resonant)


@pytest.fixture(scope="module")
def resonant():
    return _hindcast("leo-1998-1333", particles=300)


@pytest.mark.reference
@pytest.mark.validation
def test_resonant_trail_is_reached_and_stays_compact(resonant):
    # The catalogue row's trail: 20 revolutions of the 1333 dust, held together by the 5:14
    # mean-motion resonance with Jupiter (Asher, Bailey & Emel'yanenko 1999, from memory).
    # Reached means meteoroids of that branch crossed Earth's path within the window; compact
    # means a cross-section of a few 1e-4 au after 665 years (measured: 1.5e-4 au), where the
    # same trail's non-resonant 19-revolution branch in this run spreads ~5x wider.
    row, res, found = resonant
    branch = [e for e in found if e.revolutions == row["trails"][0]["revolutions"]]
    assert branch, res.to_json()["trails"]
    assert branch[0].miss_distance_spread_au < 5e-4


@pytest.mark.reference
@pytest.mark.validation
def test_old_halley_type_trail_within_the_catalogued_tolerance():
    # The 1533 trail after 14 revolutions: first run (both 2009 trails, 300 meteoroids) at
    # solar longitude 235.684 against 235.67 +/- 0.03 published in CBET 2046 (the row's
    # source, read in a stored copy): +20 min, -0.0025 au
    # from Earth's path, where the modelled activity is negligible.
    _check(*_hindcast("leo-2009-1533", particles=300))


@pytest.mark.reference
@pytest.mark.validation
@pytest.mark.xfail(
    reason="known weakness, not tuned: the 1466 trail's 16-revolution meteoroids that reach "
    "Earth's passage in 2009 cross 0.076 au outside Earth's path (IAS15 gives the same to "
    "1e-4 au, and a pilot span 6.7x wider found no other branch), at solar longitude 235.68 "
    "against 235.50 published in CBET 2046 (the row's source); the 13-15-revolution passages "
    "arrive years away",
    strict=False,
)
def test_older_halley_type_trail_within_the_catalogued_tolerance():
    _check(*_hindcast("leo-2009-1466", particles=300))
