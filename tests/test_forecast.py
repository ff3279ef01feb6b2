"""The dust-trail engine end to end: the 1999 Leonid hindcast, reproducibility, the demo."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from reference_cases import PARENT_55P

from dynamics.activity import ENCOUNTER_MIN_ZHR
from dynamics.forecast import ForecastOptions, forecast
from dynamics.frames import angular_separation_deg
from dynamics.orbit_input import parse_orbit
from dynamics.outcomes import EARTH_RADIUS_AU, ENCOUNTER_MAX_MISS_AU, ENCOUNTER_SIGMAS
from dynamics.summaries import year_of, zhr_value
from dynamics.timescales import iso_to_tdb_jd

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


# The 1999 Leonid storm (observer-organisation reports, 1999; from memory): peak 1999-11-18
# about 02:02-02:05 UT at solar longitude 235.285-235.287 deg (J2000), from dust released at the
# 1899 return (three revolutions earlier); radiant near RA 153.5, Dec +22.0 (from memory).
OBSERVED_PEAK_UTC = "1999-11-18T02:04:00Z"
OBSERVED_RADIANT_DEG = (153.5, 22.0)
# Tolerances of the hindcast (what a useful forecast must achieve; they are the acceptance
# criteria of the engine, not fitted): 10 minutes in time, 0.001 au in miss distance for the
# trail's centre (the storm-producing trail passed within ~0.0007 au: McNaught & Asher 1999,
# WGN 27, 85, from memory; their trail centre is that of large, low-beta meteoroids, so it is
# checked on the mass classes of 1 mg and more), 1.5 deg in radiant. The headline miss
# distance is weighted by the number of visual meteoroids (faint ones dominate, and radiation
# pressure moves them outwards): it must stay within twice that tolerance.
PEAK_TOL_MIN = 10.0
MISS_TOL_AU = 0.001
RADIANT_TOL_DEG = 1.5
# Vg of the Leonids, 71 km/s (IAU Meteor Data Center list, from memory); 1 km/s covers the
# rounding of the catalogue value and the spread between trails.
LEONID_VG_KM_S = 71.0
VG_TOL_KM_S = 1.0


@pytest.fixture(scope="module")
def hindcast_1999():
    orbit = parse_orbit(PARENT_55P)
    return forecast(orbit, ForecastOptions(1999, 1999, trails=(1899,), particles=1000, workers=2))


@pytest.mark.reference
@pytest.mark.slow
def test_1999_leonids_from_the_1899_trail(hindcast_1999):
    res = hindcast_1999
    trail = [e for e in res.encounters if e.revolutions == 3 and e.year == 1999]
    assert len(trail) == 1, res.to_json()["encounters"]
    enc = trail[0]
    peak_offset_min = (enc.peak_tdb_jd - iso_to_tdb_jd(OBSERVED_PEAK_UTC)) * 1440.0
    assert abs(peak_offset_min) < PEAK_TOL_MIN
    assert abs(enc.miss_distance_au) < 2 * MISS_TOL_AU
    large = [c for c in enc.mass_classes if c["mass_g"][0] >= 1e-3 - 1e-12]
    assert large and all(abs(c["miss_distance_au"]) < MISS_TOL_AU for c in large)
    sep = angular_separation_deg(enc.ra_deg, enc.dec_deg, *OBSERVED_RADIANT_DEG)
    assert sep < RADIANT_TOL_DEG
    assert enc.vg_km_s == pytest.approx(LEONID_VG_KM_S, abs=VG_TOL_KM_S)
    assert enc.particles > 500  # targeting delivered most of the budget to Earth's passage


@pytest.mark.invariant
@pytest.mark.slow
def test_hindcast_json_carries_the_documented_keys(hindcast_1999):
    out = hindcast_1999.to_json()
    assert {"parent", "model", "encounters", "near_misses", "cautions"} <= set(out)
    assert {
        "version",
        "ejection_model",
        "integrator",
        "particles_integrated",
        "seed",
        "ephemeris",
    } <= set(out["model"])
    enc = out["encounters"][0]
    assert {
        "year",
        "trail",
        "peak_utc",
        "solar_longitude_deg",
        "miss_distance_au",
        "miss_distance_spread_au",
        "fwhm_hours",
        "radiant",
        "vg_km_s",
        "particles",
        "dilution",
    } <= set(enc)
    assert enc["classification"]["label"] == "encounter"  # a storm is far above the level
    assert enc["peak_utc"].endswith("Z") and enc["trail"]["perihelion_tdb"].endswith("TDB")
    assert enc["trail"]["perihelion_tdb"].startswith("1899-07")
    assert out["model"]["ejection_model"]["speed_law"] == "whipple1951"
    json.dumps(out)  # plain JSON types only


@pytest.mark.invariant
@pytest.mark.slow
def test_same_seed_same_result_with_one_or_two_workers():
    orbit = parse_orbit(PARENT_55P)
    opts = dict(trails=(1932,), particles=40, pilot_particles=20, chunk_size=10, candidates=50_000)
    one = forecast(orbit, ForecastOptions(1999, 1999, workers=1, **opts)).to_json()
    two = forecast(orbit, ForecastOptions(1999, 1999, workers=2, **opts)).to_json()
    assert one["encounters"] + one["near_misses"]  # something to compare
    assert one["encounters"] == two["encounters"]
    assert one["near_misses"] == two["near_misses"]


@pytest.fixture(scope="module")
def demo_2039_2040():
    """The invented demo comet (what the README shows), 2039-2040, every trail of a century."""
    orbit = parse_orbit(json.loads((EXAMPLES / "demo-comet.json").read_text()))
    return forecast(orbit, ForecastOptions(2039, 2040, particles=100, max_trail_age_years=100.0))


@pytest.mark.slow
def test_demo_comet_has_an_encounter_and_a_near_miss(demo_2039_2040):
    res = demo_2039_2040
    assert res.encounters and res.near_misses
    assert {e.year for e in res.encounters + res.near_misses} <= {2039, 2040}
    assert max(e.zhr_estimate for e in res.encounters) > 10  # the 2039 outburst is visible


# The classification rule (dynamics.activity.classify_crossing; level ENCOUNTER_MIN_ZHR = 10,
# common practice, no source): an encounter by its predicted activity, a close pass with less is
# "negligible", a farther one "near miss"; both are reported in near_misses, never dropped.
@pytest.mark.invariant
@pytest.mark.slow
def test_encounters_are_split_by_predicted_activity(demo_2039_2040):
    res = demo_2039_2040
    for e in res.encounters:
        assert e.classification.label == "encounter"
        assert zhr_value(e.zhr_estimate) >= ENCOUNTER_MIN_ZHR
    labels = {e.classification.label for e in res.near_misses}
    assert labels <= {"negligible", "near miss"} and "negligible" in labels
    for e in res.near_misses:
        assert zhr_value(e.zhr_estimate) < ENCOUNTER_MIN_ZHR
        reach = ENCOUNTER_SIGMAS * e.miss_distance_spread_au + EARTH_RADIUS_AU
        close = min(ENCOUNTER_MAX_MISS_AU, reach)
        assert (e.classification.label == "negligible") == (abs(e.miss_distance_au) <= close)
    # the JSON carries the label and the reason with the numbers beside the ZHR
    out = res.to_json()
    for key in ("encounters", "near_misses"):
        for row, e in zip(out[key], getattr(res, key), strict=True):
            c = row["classification"]
            assert c["label"] == e.classification.label and c["zhr_level"] == ENCOUNTER_MIN_ZHR
            assert f"ZHR {row['zhr']['estimate']:g}" in c["reason"]  # the number shown
            assert "absolute mode, uncertain by a factor of several" in c["reason"]
    assert "negligible" in out["conventions"]["classification"]


@pytest.mark.invariant
@pytest.mark.slow
def test_trail_outcomes_use_the_same_labels_and_reasons(demo_2039_2040):
    res = demo_2039_2040
    rows = {
        (o["year"], o["trail"]["perihelion_year"], o["revolutions"]): o
        for o in res.trails
        if "peak_zhr" in o
    }
    reported = res.encounters + res.near_misses
    assert reported
    for e in reported:
        o = rows[(e.year, year_of(e.trail_perihelion_tdb_jd), e.revolutions)]
        assert o["outcome"] == e.classification.label
        assert o["reason"] == e.classification.reason
        assert o["peak_zhr"] == zhr_value(e.zhr_estimate)


@pytest.mark.regression
def test_a_close_pass_with_no_activity_is_negligible_and_said_so():
    # Regression (what the engine gives today; the example): the demo comet's 2026 trail
    # passes about 0.002 au from Earth in 2040, within its distance test, with a predicted peak
    # ZHR of 0. It was called an "encounter" with "ZHR 0 (0-0)"; it must be "negligible", be
    # reported with its numbers, and the note must say so.
    orbit = parse_orbit(json.loads((EXAMPLES / "demo-comet.json").read_text()))
    res = forecast(orbit, ForecastOptions(2040, 2040, trails=(2026,), particles=30, workers=1))
    assert res.encounters == ()
    (e,) = res.near_misses
    assert e.classification.label == "negligible"
    assert zhr_value(e.zhr_estimate) < ENCOUNTER_MIN_ZHR
    assert f"{abs(e.miss_distance_au):.5f} au" in e.classification.reason
    (o,) = res.trails
    assert o["outcome"] == "negligible" and o["reason"] == e.classification.reason
    (note,) = [n for n in res.notes if n.startswith("no encounter")]
    assert "negligible activity" in note and "the 2026 trail in 2040" in note
    assert f"ZHR {o['peak_zhr']:.3g}" in note


@pytest.mark.invariant
def test_named_trails_integrate_the_parent_back_only_to_the_oldest_of_them(monkeypatch):
    # The parent's history is the same whatever the backward integration's end (all 22
    # hindcast rows gave identical predictions both ways, on 0a60156), so a forecast of named
    # trails does not pay for the 500 years of the default age limit: it stops a quarter period
    # and 400 days before the oldest one (dynamics.scope.TRAIL_YEAR_MATCH_FRACTION).
    import dynamics.forecast as fc
    from dynamics.scope import TRAIL_YEAR_MATCH_FRACTION

    seen = []

    class Stop(Exception):
        pass

    def spy(orbit, t_min, t_max, **kw):
        seen.append(t_min)
        raise Stop

    monkeypatch.setattr(fc, "cached_parent_history", spy)
    orbit = parse_orbit(json.loads((EXAMPLES / "demo-comet.json").read_text()))
    with pytest.raises(Stop):
        forecast(orbit, ForecastOptions(2040, 2040, trails=(2013, 2026), workers=1))
    reach = TRAIL_YEAR_MATCH_FRACTION * orbit.period_days + 400.0
    assert seen == [pytest.approx(iso_to_tdb_jd("2013-01-01T00:00:00Z") - reach, abs=0.01)]
    with pytest.raises(Stop):  # the default scope still reaches back its 500 years
        forecast(orbit, ForecastOptions(2040, 2040, workers=1))
    y_start = iso_to_tdb_jd("2040-01-01T00:00:00Z")
    assert seen[1] == pytest.approx(y_start - 500 * 365.25, abs=0.01)  # Julian years


@pytest.mark.invariant
def test_a_note_on_many_close_passes_names_the_closest_with_their_revolutions():
    # A parent of short period can have dozens of negligible close passes: the note names the
    # closest ten, each with its revolutions (one trail can pass at several), then counts the
    # rest; every one of them stays in 'trails'.
    from dynamics.outcomes import MAX_LISTED_CLOSE_PASSES, nothing_found_note

    def passage(k):
        return {
            "outcome": "negligible",
            "year": 2030,
            "trail": {"perihelion_year": 1990},
            "revolutions": k,
            "miss_distance_au": 0.001 + 0.0001 * (12 - k),
            "peak_zhr": 0.0,
            "zhr_range": [0.0, 0.0],
            "zhr_level": 10.0,
        }

    note = nothing_found_note([passage(k) for k in range(1, 13)])
    assert "12 passed close to Earth's path" in note
    assert "the 1990 trail in 2030 after 12 revolutions at 0.00100 au" in note  # closest first
    assert note.index("after 12 revolutions") < note.index("after 11 revolutions")
    assert "after 1 revolution at" not in note and "after 2 revolutions" not in note
    assert f"and {12 - MAX_LISTED_CLOSE_PASSES} more" in note
    assert nothing_found_note([passage(3)]).startswith("no encounter: 1 trail passage was")


@pytest.mark.invariant
def test_first_passage_is_a_plain_result():
    hyperbolic = {
        "name": "invented hyperbolic comet",
        "epoch": 2461000.5,
        "q": 1.2,
        "e": 1.01,
        "i": 60.0,
        "node": 30.0,
        "peri": 150.0,
        "tp": 2461010.5,
    }
    res = forecast(parse_orbit(hyperbolic), ForecastOptions(2030, 2031))
    assert res.encounters == () and res.near_misses == ()
    assert any("first passage" in n for n in res.notes)


def test_cli_forecast_bad_years_exit_2(tmp_path):
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "service.cli",
            "forecast",
            str(EXAMPLES / "demo-comet.json"),
            "--years",
            "2040:2030",
        ],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2 and len(proc.stderr.strip().splitlines()) == 1


@pytest.mark.slow
def test_cli_forecast_json_for_one_young_trail():
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "service.cli",
            "forecast",
            str(EXAMPLES / "demo-comet.json"),
            "--years",
            "2040",
            "--trails",
            "2026",
            "--particles",
            "30",
            "--json",
        ],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    rows = out["encounters"] + out["near_misses"]
    assert rows and all(r["trail"]["perihelion_year"] == 2026 for r in rows)
    assert np.isfinite([r["miss_distance_au"] for r in rows]).all()


@pytest.mark.parametrize("bad", ["2039:x:1", "2039:2040:5", "2039:1975:-3", "1975:350"])
def test_cli_bad_calibration_exit_2(bad):
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "service.cli",
            "forecast",
            str(EXAMPLES / "demo-comet.json"),
            "--years",
            "2039",
            "--calibrate",
            bad,
        ],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2 and len(proc.stderr.strip().splitlines()) == 1


@pytest.mark.slow
def test_a_trail_the_targeting_cannot_resolve_is_reported_not_dropped():
    # The 1866 trail of 55P in 2002 (four revolutions, strongly perturbed) is not reached by the
    # current targeting; the result must say so instead of staying silent (regression of a
    # known limitation: if a later version resolves it, this test should become a reference one).
    fractions = []
    res = forecast(
        parse_orbit(PARENT_55P),
        ForecastOptions(2002, 2002, trails=(1866,), particles=60),
        progress=lambda f, stage: fractions.append(f),
    )
    rows = res.encounters + res.near_misses
    assert rows or any("1866 trail" in n and "unresolved" in n for n in res.notes)
    # progress never goes back, also through the refinement rounds this trail needs
    assert fractions == sorted(fractions) and fractions[-1] == 1.0


@pytest.mark.reference
@pytest.mark.slow
def test_zhr_range_spans_the_visual_limits_uncertainty():
    # 2006 Leonids, the 1932 trail after 2 revolutions: only small, high-beta grains reach this
    # far portion of the trail (measured here at 300 meteoroids: 1.1e-5 to 4e-5 g, beta 0.0027
    # to 0.0041), at the +6.5 mag limit (4.4e-5 g at 71.6 km/s), so the modelled ZHR (3,800)
    # rests on the mass-magnitude relation's threshold. Observed: a ZHR of about 80-100 near
    # 04:45 UT on November 19 (from memory). With the limit twice heavier almost no meteoroid
    # counts: the range now reaches down past the observed rate (before: its low end was the
    # bootstrap's 16th percentile over the model factor: 254 at this budget, measured here).
    orbit = parse_orbit(PARENT_55P)
    res = forecast(orbit, ForecastOptions(2006, 2006, trails=(1932,), particles=150, workers=2))
    enc = [
        e for e in res.encounters + res.near_misses if year_of(e.trail_perihelion_tdb_jd) == 1932
    ]
    assert enc
    observed = 80.0  # from memory, see above
    assert enc[0].zhr_low < observed < enc[0].zhr_high
    assert enc[0].zhr_low < enc[0].zhr_estimate / 100.0
