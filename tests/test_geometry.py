"""Tests of dynamics.geometry (quick-look geometry), its CLI command and its HTTP endpoint.

Correctness is checked against
- established showers and their parents: theoretical radiant, solar longitude and Vg from the
  parent's orbit vs the shower's observed values (from memory, sources beside each row);
- a published Earth MOID (from memory);
- erfa's Earth series (erfa.epv00, Bretagnon & Francou), independent of the DE423 path, for the
  instant Earth passes a node;
- exact geometry (hyperbolic asymptote, an orbit built to touch Earth's).
"""

import json
import math
import subprocess
import sys
import warnings
from pathlib import Path

import erfa
import numpy as np
import pytest
from fastapi.testclient import TestClient

from dynamics.geometry import (
    EARTH_MEAN_J2000,
    RADIANT_METHOD,
    TRAIL_SIMULATION_MOID_AU,
    earth_orbit_at,
    moid_many_vs_earth,
    nodes_many,
    quick_look,
)
from dynamics.orbit_input import parse_orbit
from dynamics.orbits import position_on_orbit
from service.cli import main
from service.main import create_app
from service.settings import Settings

DEMO = Path(__file__).resolve().parents[1] / "examples" / "demo-comet.json"

# --------------------------------------------------------------------------------------------
# Parent orbits, copied from shared/data/reference-orbits.json (heliocentric osculating,
# ecliptic J2000; epochs and tp JD TDB)
# --------------------------------------------------------------------------------------------

# 55P: orbit-solution header of the public small-body ephemeris service, solution J985/69.
_55P = {
    "name": "55P/Tempel-Tuttle",
    "epoch": 2451040.5,
    "q": 0.9764279154675056,
    "e": 0.9055527209724122,
    "i": 162.4865753794343,
    "node": 235.270989149082,
    "peri": 172.5002736828059,
    "tp": 2450872.5977341123,
}
# 1P: orbit-solution header of the public small-body ephemeris service, solution 73.
_1P = {
    "name": "1P/Halley",
    "epoch": 2439857.5,
    "q": 0.5747157977675837,
    "e": 0.9679427911271,
    "i": 162.1878711908339,
    "node": 59.11448293673941,
    "peri": 112.257792004868,
    "tp": 2446470.1488983454,
}
# 21P: public comet elements file of the small-body service, solution K182/14.
_21P = {
    "name": "21P/Giacobini-Zinner",
    "epoch": 2458063.5,
    "q": 1.01349375,
    "e": 0.71046678,
    "i": 32.00303,
    "node": 195.40514,
    "peri": 172.80916,
    "tp": 2458371.76547,
}
# 8P: public comet elements file of the small-body service, solution K215/24.
_8P = {
    "name": "8P/Tuttle",
    "epoch": 2454701.5,
    "q": 1.02726309,
    "e": 0.81978762,
    "i": 54.98197,
    "node": 270.34216,
    "peri": 207.51152,
    "tp": 2454492.51802,
}


def _phaethon():
    """(3200) Phaethon: small-body database solution 1003 as quoted in reference-orbits.json,
    given as a and the mean anomaly at the epoch; converted here to q = a (1 - e) and
    tp = epoch - M / n with M wrapped to [-180, 180) deg (the perihelion passage nearest the
    epoch) and the quoted mean motion n."""
    a_au = 1.271464620920411
    e = 0.8896722843692159
    epoch = 2461200.5
    mean_anomaly_deg = 301.4858235833354
    n_deg_per_day = 0.6874603479501715
    m_wrapped = (mean_anomaly_deg + 180.0) % 360.0 - 180.0
    return {
        "name": "(3200) Phaethon",
        "epoch": epoch,
        "q": a_au * (1.0 - e),
        "e": e,
        "i": 22.31052728047163,
        "node": 265.0988060455101,
        "peri": 322.300168483426,
        "tp": epoch - m_wrapped / n_deg_per_day,
    }


# Observed showers (domain.md section 7): peak solar longitude (J2000), radiant RA, Dec (deg),
# Vg (km/s); from memory: IAU Meteor Data Center list and observer-organisation shower calendars.
_SHOWERS = {
    # Leonids: lambda 235.3, radiant 152 +22, Vg 71 (from memory; IAU MDC / shower calendars)
    "Leonids": (235.3, 152.0, 22.0, 71.0),
    # Ursids: lambda 270.7, radiant 217 +76, Vg 33 (from memory; IAU MDC / shower calendars)
    "Ursids": (270.7, 217.0, 76.0, 33.0),
    # Geminids: lambda 262.2, radiant 112 +33, Vg 34 (from memory; IAU MDC / shower calendars)
    "Geminids": (262.2, 112.0, 33.0, 34.0),
    # Orionids: lambda 208, radiant 95 +16, Vg 66 (from memory; IAU MDC / shower calendars)
    "Orionids": (208.0, 95.0, 16.0, 66.0),
    # eta Aquariids: lambda 45.5, radiant 338 -1, Vg 66 (from memory; IAU MDC / shower calendars)
    "eta Aquariids": (45.5, 338.0, -1.0, 66.0),
    # Draconids (Oct.): lambda 195.4, radiant 262 +54, Vg 20 (from memory; IAU MDC / calendars)
    "Draconids": (195.4, 262.0, 54.0, 20.0),
}

# Theoretical vs observed. A theoretical radiant from the parent's present orbit is expected within
# a few degrees of the shower's (domain.md section 7): the streams' meteoroids left the parent
# centuries ago, their orbits have since been perturbed, and the observed means are rounded to
# ~1 deg, 0.5 deg and 1-2 km/s. Parents passing farther from Earth's orbit (1P/Halley, MOIDs
# 0.07 and 0.15 au) and the unusual Phaethon/Geminid pair get looser limits.
RADIANT_TOL_DEG = 3.0
SOLAR_LONGITUDE_TOL_DEG = 1.5
VG_TOL_KM_S = 1.5
LOOSE_RADIANT_TOL_DEG = 5.0
LOOSE_SOLAR_LONGITUDE_TOL_DEG = 3.0
LOOSE_VG_TOL_KM_S = 2.0

_STRICT = (RADIANT_TOL_DEG, SOLAR_LONGITUDE_TOL_DEG, VG_TOL_KM_S)
_LOOSE = (LOOSE_RADIANT_TOL_DEG, LOOSE_SOLAR_LONGITUDE_TOL_DEG, LOOSE_VG_TOL_KM_S)

_CASES = [
    pytest.param(_55P, "Leonids", _STRICT, id="Leonids-55P"),
    pytest.param(_8P, "Ursids", _STRICT, id="Ursids-8P"),
    pytest.param(_phaethon(), "Geminids", _LOOSE, id="Geminids-Phaethon"),
    pytest.param(_1P, "Orionids", _LOOSE, id="Orionids-1P"),
    pytest.param(_1P, "eta Aquariids", _LOOSE, id="etaAquariids-1P"),
    pytest.param(_21P, "Draconids", _STRICT, id="Draconids-21P"),
]


def _wrap180(x_deg):
    return (x_deg + 180.0) % 360.0 - 180.0


def _branch_for(result, shower_lambda_deg):
    """The MOID point (shower branch) whose solar longitude is nearest the shower's peak."""
    return min(
        result.moid_points,
        key=lambda b: abs(_wrap180(b.solar_longitude_deg - shower_lambda_deg)),
    )


def _separation_deg(ra1, dec1, ra2, dec2):
    """Great-circle separation (deg) by erfa.seps, independent of dynamics.frames."""
    return math.degrees(
        erfa.seps(math.radians(ra1), math.radians(dec1), math.radians(ra2), math.radians(dec2))
    )


# Quantities that follow from others by one or two floating-point operations (angles of a few
# hundred degrees, distances of ~1 au, speeds of ~70 km/s): double-precision rounding only.
ROUNDING_REL_TOL = 1e-12
ANGLE_ROUNDING_TOL_DEG = 1e-9
DISTANCE_ROUNDING_TOL_AU = 1e-12

_results_cache: dict = {}


def _quick(orbit_dict, year=None):
    key = (orbit_dict["name"], year)
    if key not in _results_cache:
        _results_cache[key] = quick_look(parse_orbit(orbit_dict), year)
    return _results_cache[key]


# --------------------------------------------------------------------------------------------
# Theoretical radiants vs established showers
# --------------------------------------------------------------------------------------------


@pytest.mark.reference
@pytest.mark.parametrize(("orbit", "shower", "tols"), _CASES)
def test_theoretical_radiant_and_speed_match_shower(orbit, shower, tols):
    lam, ra, dec, vg = _SHOWERS[shower]  # from memory, see _SHOWERS
    radiant_tol_deg, _, vg_tol_km_s = tols
    branch = _branch_for(_quick(orbit), lam)
    rad = branch.radiant
    assert rad is not None
    assert rad.method == RADIANT_METHOD
    assert _separation_deg(rad.ra_deg, rad.dec_deg, ra, dec) < radiant_tol_deg
    assert rad.vg_km_s == pytest.approx(vg, abs=vg_tol_km_s)
    assert rad.vinf_km_s == pytest.approx(math.hypot(rad.vg_km_s, 11.2), rel=ROUNDING_REL_TOL)


_LAMBDA_CASES = [
    pytest.param(*c.values, id=c.id)
    if c.id != "Orionids-1P"
    else pytest.param(
        *c.values,
        id=c.id,
        marks=pytest.mark.xfail(
            strict=True,
            reason=(
                "the closest point of 1P's orbit to Earth's on the Orionid branch comes at "
                "lambda_sun 212.1 deg, 4 deg after the observed peak. Physics: the MOID there "
                "is 0.150 au and the distance from Earth's path to 1P's orbit is 0.158 au at "
                "208 deg (measured), only 5% more, so the minimum is too flat for any closest-"
                "approach method to place a stream whose dust left the parent millennia ago to "
                "better than several degrees"
            ),
        ),
    )
    for c in _CASES
]


@pytest.mark.reference
@pytest.mark.parametrize(("orbit", "shower", "tols"), _LAMBDA_CASES)
def test_solar_longitude_of_closest_point_matches_shower_peak(orbit, shower, tols):
    lam = _SHOWERS[shower][0]  # from memory, see _SHOWERS
    _, lam_tol_deg, _ = tols
    branch = _branch_for(_quick(orbit), lam)
    assert abs(_wrap180(branch.solar_longitude_deg - lam)) < lam_tol_deg
    assert branch.radiant.solar_longitude_deg == branch.solar_longitude_deg


@pytest.mark.reference
def test_halley_has_two_branches_one_per_shower():
    # 1P/Halley's orbit passes Earth's twice, once for each of its showers (the eta Aquariids in
    # May, the Orionids in October; from memory, IAU MDC / shower calendars)
    res = _quick(_1P)
    assert len(res.moid_points) == 2
    eta = _branch_for(res, _SHOWERS["eta Aquariids"][0])
    ori = _branch_for(res, _SHOWERS["Orionids"][0])
    assert eta is not ori
    # the eta Aquariid branch is the closer one (global MOID) in this orbit solution
    assert res.moid_points[0] is eta
    assert res.radiant == eta.radiant


# A published Earth MOID agrees with ours within this: the reference is quoted to 2 significant
# digits from memory, and published values use their own orbit solution and Earth model
# (tests/test_moid.py uses the same tolerance for the same reason).
PUBLISHED_MOID_TOL_AU = 5e-4


@pytest.mark.reference
def test_leonid_parent_moid_matches_published_value():
    # 55P/Tempel-Tuttle: Earth MOID 0.0085 au, small-body database and encyclopedia infobox
    # (from memory)
    res = _quick(_55P)
    assert res.moid_au == pytest.approx(0.0085, abs=PUBLISHED_MOID_TOL_AU)
    assert res.verdict.startswith(f"MOID {res.moid_au:.5f} au < {TRAIL_SIMULATION_MOID_AU} au")
    assert [s.code for s in res.similar_showers][:1] == ["LEO"]


# --------------------------------------------------------------------------------------------
# Node passages against erfa's Earth
# --------------------------------------------------------------------------------------------

# The instant is printed to the whole second (Earth moves 1.2e-5 deg of longitude in 1 s) and
# erfa.epv00 agrees with DE423 to a few km (1e-7 deg seen from the Sun); 1e-4 deg is ~8 s of
# time, well above both and well below anything a forecast resolves.
NODE_PASSAGE_LONGITUDE_TOL_DEG = 1e-4


@pytest.mark.reference
def test_node_passage_time_puts_erfa_earth_at_node_longitude():
    res = _quick(_55P, year=1999)
    desc = next(n for n in res.nodes if n.kind == "descending")
    assert desc.solar_longitude_deg == pytest.approx(
        _55P["node"], abs=ANGLE_ROUNDING_TOL_DEG
    )  # lambda = node
    utc = desc.earth_passages_utc[0]
    assert utc.startswith("1999-11-18T01:")
    # Earth's heliocentric longitude at that instant from erfa.epv00 (heliocentric Earth, BCRS
    # equatorial), rotated to ecliptic J2000 with erfa's IAU 1980 obliquity at J2000
    d1, d2 = erfa.dtf2d("UTC", *(int(x) for x in utc[:10].split("-")), *_hms(utc))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        tt1, tt2 = erfa.taitt(*erfa.utctai(d1, d2))
    pvh, _ = erfa.epv00(tt1, tt2)  # TT instead of TDB: differs by < 2 ms
    eps = erfa.obl80(2451545.0, 0.0)
    x, y, z = pvh["p"]
    y_ecl = y * math.cos(eps) + z * math.sin(eps)
    lon = math.degrees(math.atan2(y_ecl, x)) % 360.0
    assert _wrap180(lon - (_55P["node"] + 180.0)) == pytest.approx(
        0.0, abs=NODE_PASSAGE_LONGITUDE_TOL_DEG
    )
    # The 1999 Leonid storm peaked at lambda_sun 235.285 deg (from memory; observer-organisation
    # reports), 0.014 deg after Earth passed the parent's node. Weak check: trails of the
    # previous century cross Earth's path within a few hundredths of a degree of the parent's
    # node (domain.md section 6b measured the 1899 trail's crossing there).
    assert abs(desc.solar_longitude_deg - 235.285) < LEONID_STORM_FROM_NODE_TOL_DEG


# The storm's trail crossed Earth's path 0.014 deg after the parent's node; 0.05 deg (about an
# hour of time) is the few-hundredths-of-a-degree scale of such offsets for trails a century
# old (common practice, no source): a weak check that the node's solar longitude is the right
# quantity, not a test of a trail model.
LEONID_STORM_FROM_NODE_TOL_DEG = 0.05


def _hms(utc):
    h, m, s = utc[11:19].split(":")
    return int(h), int(m), float(s)


# --------------------------------------------------------------------------------------------
# Exact geometry and invariants
# --------------------------------------------------------------------------------------------

# Distances built from exact geometry agree to double-precision rounding amplified by the MOID
# search (tests/test_moid.py: ~1e-10 au for orbit sizes of a few au).
EXACT_TOL_AU = 1e-9


@pytest.mark.invariant
def test_orbit_built_through_earths_orbit_has_zero_moid_and_miss_distance():
    # a parent whose ascending node lies exactly on Earth's osculating ellipse at longitude 40 deg
    eo, _ = earth_orbit_at(2460000.5)
    lon = 40.0
    nu = np.linspace(-180.0, 180.0, 360001)
    pts = position_on_orbit(*eo.elements, nu)
    k = np.argmin(np.abs(_wrap180(np.degrees(np.arctan2(pts[:, 1], pts[:, 0])) - lon)))
    # the sampled point nearest 40 deg (its own longitude becomes the node)
    lon_k = float(np.degrees(np.arctan2(pts[k, 1], pts[k, 0])) % 360.0)
    r_k = float(np.hypot(pts[k, 0], pts[k, 1]))
    # perihelion at the node: q = r_k, argument of perihelion 0
    orbit = {
        "name": "touching",
        "epoch": 2460000.5,
        "q": r_k,
        "e": 0.6,
        "i": 30.0,
        "node": lon_k,
        "peri": 0.0,
        "tp": 2460000.5,
    }
    res = quick_look(parse_orbit(orbit))
    asc = res.nodes[0]
    # Earth's orbit is tilted by ~0.004 deg to the ecliptic: its point is 1e-4 au above it at
    # most, which is the distance scale of this check
    earth_z_tol_au = abs(float(pts[k, 2])) + EXACT_TOL_AU
    assert asc.miss_distance_au == pytest.approx(0.0, abs=earth_z_tol_au)
    assert res.moid_au == pytest.approx(0.0, abs=earth_z_tol_au)
    assert asc.solar_longitude_deg == pytest.approx(
        (lon_k + 180.0) % 360.0, abs=ANGLE_ROUNDING_TOL_DEG
    )


@pytest.mark.invariant
def test_node_beyond_hyperbolic_asymptote_is_null():
    # e = 2, peri = 0: ascending node at perihelion (r = q), descending node at nu = 180 deg,
    # beyond the asymptote (|nu| < 120 deg) -- exact geometry
    orbit = {
        "name": "hyperbola",
        "epoch": 2460000.5,
        "q": 1.5,
        "e": 2.0,
        "i": 40.0,
        "node": 10.0,
        "peri": 0.0,
        "tp": 2460000.5,
    }
    res = quick_look(parse_orbit(orbit))
    asc, desc = res.nodes
    assert asc.r_au == pytest.approx(1.5, abs=DISTANCE_ROUNDING_TOL_AU)
    assert desc.r_au is None and desc.miss_distance_au is None
    assert res.to_json()["nodes"][1]["r_au"] is None


# Vectorised and scalar paths do the same arithmetic in a different order: rounding only.
VECTOR_TOL_AU = 1e-10


@pytest.mark.invariant
def test_vectorised_paths_match_quick_look():
    rng = np.random.default_rng(42)
    n = 12
    el = np.stack(
        [
            rng.uniform(0.3, 2.0, n),
            rng.uniform(0.0, 0.95, n),
            rng.uniform(1.0, 179.0, n),
            rng.uniform(0.0, 360.0, n),
            rng.uniform(0.0, 360.0, n),
        ],
        axis=1,
    )
    epoch = 2460000.5
    eo, _ = earth_orbit_at(epoch)
    many = moid_many_vs_earth(*el.T, eo)
    nodes = nodes_many(*el.T, eo)
    for k, (q, e, i, node, peri) in enumerate(el):
        orbit = {
            "name": f"random {k}",
            "epoch": epoch,
            "q": q,
            "e": e,
            "i": i,
            "node": node,
            "peri": peri,
            "tp": epoch,
        }
        res = quick_look(parse_orbit(orbit))
        assert many[k] == pytest.approx(res.moid_au, abs=VECTOR_TOL_AU)
        for j, kind in enumerate(("ascending", "descending")):
            assert nodes[f"{kind}_miss_distance_au"][k] == pytest.approx(
                res.nodes[j].miss_distance_au, abs=VECTOR_TOL_AU
            )


@pytest.mark.invariant
def test_epoch_outside_de423_falls_back_to_mean_elements_with_a_note():
    orbit = dict(_55P, epoch=2305447.5, tp=2305447.5)  # 1600 Jan 1, before DE423
    res = quick_look(parse_orbit(orbit))
    assert res.earth_orbit.model == "mean J2000 elements"
    assert res.earth_orbit.elements == EARTH_MEAN_J2000
    assert any("outside DE423" in n for n in res.notes)


# --------------------------------------------------------------------------------------------
# Regression: the demo comet (what the README shows)
# --------------------------------------------------------------------------------------------

# Regression, not correctness: what this implementation gave when written. Far above rounding,
# far below any change that matters.
REGRESSION_TOL_AU = 1e-8


@pytest.mark.regression
def test_demo_comet_moid_unchanged():
    res = quick_look(parse_orbit(json.loads(DEMO.read_text())), 2031)
    assert res.moid_au == pytest.approx(0.009174682416, abs=REGRESSION_TOL_AU)  # regression
    assert res.nodes[1].earth_passages_utc == ("2031-04-12T03:16:17Z",)  # regression


# --------------------------------------------------------------------------------------------
# CLI
# --------------------------------------------------------------------------------------------


def test_cli_geometry_table(capsys):
    assert main(["geometry", str(DEMO), "--year", "2031"]) == 0
    out = capsys.readouterr().out
    assert "MOID" in out and "descending" in out and "2031-04-12" in out
    assert "run a trail simulation" in out


def test_cli_geometry_json(capsys):
    assert main(["geometry", str(DEMO), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert {"moid_au", "moid_points", "nodes", "radiant", "similar_showers", "verdict"} <= set(out)
    assert out["conventions"]["solar_longitude"].startswith("geometric")
    assert out["nodes"][0]["earth_passage_utc"] is None  # no --year


@pytest.mark.parametrize(
    ("content", "args"),
    [
        ('{"name":"x","epoch":2460000.5,"q":1,"e":-1,"i":1,"node":1,"peri":1,"tp":2460000.5}', []),
        (None, ["--year", "2500"]),
    ],
)
def test_cli_geometry_bad_input_one_line_exit_2(tmp_path, content, args):
    path = tmp_path / "orbit.json"
    path.write_text(content if content is not None else DEMO.read_text())
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", "geometry", str(path), *args],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    assert proc.stdout == ""
    assert len(proc.stderr.strip().splitlines()) == 1


# --------------------------------------------------------------------------------------------
# HTTP
# --------------------------------------------------------------------------------------------


@pytest.fixture
def client(tmp_path):
    app = create_app(Settings(data_dir=tmp_path))
    with TestClient(app) as c:
        yield c


def test_post_geometry_demo_comet(client):
    body = {"orbit": json.loads(DEMO.read_text()), "year": 2031}
    r = client.post("/v1/geometry", json=body)
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["moid_au"] < TRAIL_SIMULATION_MOID_AU
    assert out["nodes"][1]["kind"] == "descending"
    assert out["nodes"][1]["earth_passage_utc"] == "2031-04-12T03:16:17Z"
    assert out["radiant"]["method"] == RADIANT_METHOD
    assert out["cautions"]


@pytest.mark.parametrize(
    ("body", "field"),
    [
        ({"orbit": {**json.loads(DEMO.read_text()), "q": -1.0}}, "orbit.q"),
        ({"orbit": {**json.loads(DEMO.read_text()), "colour": "red"}}, "orbit.colour"),
        ({"orbit": json.loads(DEMO.read_text()), "year": 2500}, "year"),
    ],
)
def test_post_geometry_bad_input_is_422_naming_the_field(client, body, field):
    r = client.post("/v1/geometry", json=body)
    assert r.status_code == 422
    assert r.headers["content-type"].startswith("application/problem+json")
    assert r.json()["field"] == field


def test_openapi_documents_geometry_with_demo_example(client):
    spec = client.get("/openapi.json").json()
    op = spec["paths"]["/v1/geometry"]["post"]
    assert op["operationId"]
    assert "422" in op["responses"]
    text = json.dumps(spec)
    assert "Hollow Pine" in text


def test_verdict_without_a_moid_names_the_orbit_type():
    """Issue 13, finding 8: an elliptic orbit without a MOID was called "this open orbit"."""
    from dynamics.geometry import _verdict

    assert "open orbit" not in _verdict(None, open_orbit=False)
    assert "open orbit" in _verdict(None, open_orbit=True)
