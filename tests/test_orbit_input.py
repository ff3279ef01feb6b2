"""Orbit input: validation names the offending field; valid inputs keep their values."""

import json
import math
from pathlib import Path

import numpy as np
import pytest

from dynamics.constants import GAUSSIAN_K
from dynamics.errors import InvalidOrbit
from dynamics.orbit_input import parse_orbit

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"

GOOD = {
    "name": "test orbit (invented)",
    "epoch": 2460000.5,
    "q": 1.0,
    "e": 0.5,
    "i": 10.0,
    "node": 20.0,
    "peri": 30.0,
    "tp": 2459990.5,
}


def with_(**changes):
    d = dict(GOOD)
    for k, v in changes.items():
        if v is ...:
            d.pop(k)
        else:
            d[k] = v
    return d


@pytest.mark.reference
def test_period_follows_keplers_third_law():
    # P = 2 pi a^1.5 / k with the Gaussian constant (IAU 1976): a = 1 au gives the sidereal
    # year of a massless body, 365.2568983 days (Explanatory Supplement, Gauss's year).
    o = parse_orbit(with_(q=0.5, e=0.5))
    assert o.a_au == pytest.approx(1.0)
    assert o.period_days == pytest.approx(2 * math.pi / GAUSSIAN_K, rel=1e-12)
    assert o.period_days == pytest.approx(365.2568983, abs=1e-6)


def test_iso_times_with_scale_are_accepted():
    o = parse_orbit(with_(epoch="2000-01-01T12:00:00 TDB", tp="1999-12-31T12:00:00 TDB"))
    assert o.epoch_tdb_jd == 2451545.0
    assert o.tp_tdb_jd == 2451544.0


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        ({"q": ...}, "q"),
        ({"name": ...}, "name"),
        ({"tp": ...}, "tp"),
        ({"e": -0.1}, "e"),
        ({"q": 0.0}, "q"),
        ({"q": float("nan")}, "q"),
        ({"e": float("inf")}, "e"),
        ({"i": 181.0}, "i"),
        ({"i": -1.0}, "i"),
        ({"node": 360.0}, "node"),
        ({"peri": -0.5}, "peri"),
        ({"q": "1.0"}, "q"),
        ({"e": True}, "e"),
        ({"epoch": "2000-01-01T12:00:00"}, "epoch"),  # no scale
        ({"tp": "not a date TDB"}, "tp"),
        ({"name": ""}, "name"),
        ({"incl": 10.0}, "incl"),  # unknown key (typo for i)
        ({"nongrav": {"a1": "x"}}, "nongrav.a1"),
        ({"nongrav": {"b1": 1e-9}}, "nongrav.b1"),
        ({"nongrav": {"a1": 1e-9, "dt": 400.0}}, "nongrav.dt"),
        ({"nongrav": {"a1": 1e-9, "dt": "late"}}, "nongrav.dt"),
        ({"covariance": [[1.0] * 5] * 5}, "covariance"),
        ({"covariance": (-np.eye(6)).tolist()}, "covariance"),
        ({"solutions": [with_(e=-1.0)]}, "solutions.0.e"),
        ({"solutions": [with_(solutions=[GOOD])]}, "solutions.0.solutions"),
        ({"solutions": []}, "solutions"),
        ({"m1": 40.0}, "m1"),
        ({"m1": "bright"}, "m1"),
        ({"k1": -1.0}, "k1"),
        ({"observed_perihelia": "1900"}, "observed_perihelia"),
        ({"observed_perihelia": [{}]}, "observed_perihelia.0.tp"),
        ({"observed_perihelia": [{"tp": 2459000.5, "when": 1}]}, "observed_perihelia.0.when"),
        # within half a period (516 d here) of the orbit's own perihelion: its own return
        ({"observed_perihelia": [{"tp": 2459890.5}]}, "observed_perihelia.0.tp"),
        ({"observed_perihelia": [{"tp": 2459000.5, "source": 5}]}, "observed_perihelia.0.source"),
        # two times for one return
        ({"observed_perihelia": [{"tp": 2459000.5}, {"tp": 2459100.5}]}, "observed_perihelia"),
        # the mean-anomaly form: not mixed with q/tp, complete, bound, consistent
        ({"a": 2.0, "mean_anomaly": 5.0}, "q"),
        ({"q": ..., "tp": ..., "a": 2.0}, "mean_anomaly"),
        ({"q": ..., "tp": ..., "mean_anomaly": 5.0}, "a"),
        ({"q": ..., "tp": ..., "a": 2.0, "mean_anomaly": 5.0, "e": 1.2}, "a"),
        ({"q": ..., "tp": ..., "a": -2.0, "mean_anomaly": 5.0}, "a"),
        ({"q": ..., "tp": ..., "a": 0.004, "mean_anomaly": 5.0}, "a"),  # q inside the Sun
        ({"q": ..., "tp": ..., "a": 2.0, "mean_anomaly": "5"}, "mean_anomaly"),
        ({"q": ..., "tp": ..., "a": 2.0, "mean_anomaly": 5.0, "n": 0.35}, "n"),
    ],
)
def test_invalid_orbits_name_the_field(changes, field):
    with pytest.raises(InvalidOrbit) as info:
        parse_orbit(with_(**changes))
    assert info.value.field == field


def test_total_magnitude_is_kept_and_shared_by_solutions():
    o = parse_orbit(with_(m1=11.5, k1=15.0, solutions=[with_(e=0.5), with_(e=0.5, m1=13.0)]))
    assert (o.m1, o.k1) == (11.5, 15.0)
    assert (o.solutions[0].m1, o.solutions[0].k1) == (11.5, 15.0)  # inherited
    assert o.solutions[1].m1 == 13.0  # its own
    assert parse_orbit(o.to_json()).m1 == 11.5  # round trip
    assert parse_orbit(with_()).m1 is None


def test_observed_perihelia_are_sorted_shared_by_solutions_and_round_trip():
    o = parse_orbit(
        with_(
            observed_perihelia=[
                {"tp": 2457920.5, "source": "b"},
                {"tp": "2014-08-18T12:00:00 TDB", "source": "a"},  # JD 2456888.0
            ],
            solutions=[with_(e=0.5)],
        )
    )
    assert [p.tp_tdb_jd for p in o.observed_perihelia] == [2456888.0, 2457920.5]  # oldest first
    assert [p.source for p in o.observed_perihelia] == ["a", "b"]
    assert o.solutions[0].observed_perihelia == o.observed_perihelia  # observations are shared
    assert parse_orbit(o.to_json()) == o
    assert parse_orbit(with_()).observed_perihelia == ()


def test_not_an_object():
    with pytest.raises(InvalidOrbit):
        parse_orbit([1, 2, 3])


def test_covariance_and_solutions_are_kept():
    cov = np.diag([1e-8, 1e-9, 1e-6, 1e-6, 1e-6, 1e-4])
    o = parse_orbit(
        with_(
            covariance=cov.tolist(), solutions=[with_(e=0.51), with_(e=0.49)], nongrav={"a1": 1e-9}
        )
    )
    assert o.covariance.shape == (6, 6)
    assert [s.e for s in o.solutions] == [0.51, 0.49]
    assert o.nongrav.a1_au_d2 == 1e-9 and o.nongrav.a3_au_d2 == 0.0
    assert o.nongrav.dt_days == 0.0  # the symmetric law unless a DT is given
    assert parse_orbit(o.to_json()) == o  # the JSON form round-trips
    asym = parse_orbit(with_(nongrav={"a2": -4e-10, "dt": -32.8}))
    assert asym.nongrav.dt_days == -32.8
    assert parse_orbit(asym.to_json()) == asym


@pytest.mark.parametrize("e", [1.0, 1.000000001, 4.5])
def test_open_orbits_are_accepted(e):
    o = parse_orbit(with_(e=e))
    assert math.isinf(o.period_days)


def test_demo_comet_is_valid_and_invented():
    data = json.loads((EXAMPLES / "demo-comet.json").read_text())
    o = parse_orbit(data)
    assert "invented" in o.name
    assert o.e < 1.0


def test_near_sun_example_is_placed_by_mean_anomaly_and_invented():
    # examples/near-sun-asteroid.json shows the catalogue form (a, mean anomaly, n) of an
    # invented parent whose whole orbit lies inside the 3 au active zone.
    data = json.loads((EXAMPLES / "near-sun-asteroid.json").read_text())
    assert {"a", "mean_anomaly", "n"} <= set(data) and "q" not in data
    o = parse_orbit(data)
    assert "invented" in o.name
    assert o.q_au == pytest.approx(data["a"] * (1.0 - data["e"]))
    assert o.aphelion_au < 3.0


# 2P/Encke, solution K235/35 of the public comet elements file of the small-body service (a
# stored copy; copied from ../shared/data/reference-orbits.json): heliocentric osculating,
# ecliptic J2000, epoch and tp JD TDB.
PARENT_2P = {
    "epoch": 2457760.5,
    "q": 0.335901,
    "e": 0.84833408,
    "i": 11.77823,
    "node": 334.56005,
    "peri": 186.56269,
    "tp": 2457822.59253,
}


@pytest.mark.reference
def test_mean_anomaly_form_gives_the_perihelion_time_rebound_gives():
    # A periodic comet's catalogued elements (PARENT_2P, source above): REBOUND, a
    # general-purpose N-body library, turns its perihelion time into the mean anomaly at the
    # epoch (two-body, the Sun's GM in au^3/day^2); read back in the
    # catalogue's other form (a, mean anomaly, n), the orbit must give the same q and tp.
    import rebound

    from dynamics.constants import GM_SUN_AU3_D2

    ref = PARENT_2P
    a = ref["q"] / (1.0 - ref["e"])
    sim = rebound.Simulation()
    sim.G = GM_SUN_AU3_D2
    sim.t = ref["epoch"]
    sim.add(m=1.0)
    sim.add(
        primary=sim.particles[0],
        a=a,
        e=ref["e"],
        inc=math.radians(ref["i"]),
        Omega=math.radians(ref["node"]),
        omega=math.radians(ref["peri"]),
        T=ref["tp"],
    )
    p = sim.particles[1]
    m_deg = math.degrees(p.M) % 360.0
    n_deg = math.degrees(p.n)
    o = parse_orbit(
        {
            "name": "reference comet",
            "epoch": ref["epoch"],
            "a": a,
            "e": ref["e"],
            "i": ref["i"],
            "node": ref["node"],
            "peri": ref["peri"],
            "mean_anomaly": m_deg,
            "n": n_deg,
        }
    )
    assert o.q_au == pytest.approx(ref["q"], rel=1e-12)
    # round-off of M (1e-13 rad) over n (0.0188 rad/day) is 1e-11 day; 1e-6 d (0.09 s) leaves
    # room for REBOUND's Kepler solver (no source for its tolerance)
    assert o.tp_tdb_jd == pytest.approx(ref["tp"], abs=1e-6)
    assert "a" not in o.to_json() and o.to_json()["tp"] == o.tp_tdb_jd


def test_mean_anomaly_form_takes_the_perihelion_nearest_the_epoch():
    # M = 350 deg is 10 deg before perihelion: the perihelion comes 10 / n days after the epoch,
    # not 350 / n days before it. n = k a^-1.5 with the Gaussian constant.
    n_deg = math.degrees(GAUSSIAN_K) * 2.0**-1.5
    d = with_(q=..., tp=..., a=2.0, mean_anomaly=350.0, n=n_deg)
    o = parse_orbit(d)
    assert o.q_au == pytest.approx(1.0)
    assert o.tp_tdb_jd - GOOD["epoch"] == pytest.approx(10.0 / n_deg, rel=1e-9)
    assert parse_orbit(dict(d, mean_anomaly=-10.0)).tp_tdb_jd == pytest.approx(o.tp_tdb_jd)
