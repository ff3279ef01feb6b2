"""Quick-look geometry for 10,000 random orbits (vectorised MOID + nodes) vs one erfa.epv00 call."""

import erfa
import numpy as np

from benchmarks._timing import median_seconds
from dynamics.geometry import earth_orbit_at, moid_many_vs_earth, nodes_many, quick_look
from dynamics.orbit_input import parse_orbit

N_ORBITS = 10_000
N_SCALAR = 50  # full quick_look (all minima, radiants, showers) on a subset
EPOCH_TDB_JD = 2461000.5


def _random_elements(rng, n):
    q = rng.uniform(0.1, 5.0, n)
    e = rng.uniform(0.0, 0.99, n)
    incl = np.degrees(np.arccos(rng.uniform(-1.0, 1.0, n)))  # isotropic poles
    node = rng.uniform(0.0, 360.0, n)
    peri = rng.uniform(0.0, 360.0, n)
    return q, e, incl, node, peri


def run():
    rng = np.random.default_rng(2026)
    el = _random_elements(rng, N_ORBITS)
    earth, _ = earth_orbit_at(EPOCH_TDB_JD)

    def vectorised():
        moid_many_vs_earth(*el, earth)
        nodes_many(*el, earth)

    orbits = [
        parse_orbit(
            {
                "name": f"random {k}",
                "epoch": EPOCH_TDB_JD,
                "q": float(el[0][k]),
                "e": float(el[1][k]),
                "i": float(el[2][k]),
                "node": float(el[3][k]),
                "peri": float(el[4][k]),
                "tp": EPOCH_TDB_JD,
            }
        )
        for k in range(N_SCALAR)
    ]

    def scalar():
        for o in orbits:
            quick_look(o)

    per_orbit_vec = median_seconds(vectorised, repeat=3) / N_ORBITS
    per_orbit_scalar = median_seconds(scalar, repeat=3) / N_SCALAR
    epv00 = median_seconds(lambda: erfa.epv00(EPOCH_TDB_JD, 0.0), repeat=5, number=2000)
    yield (
        f"{N_ORBITS:,} random orbits, MOID (moid_many) + both nodes, vectorised: per orbit / one "
        f"erfa.epv00 call = {per_orbit_vec / epv00:.1f}"
    )
    yield (
        f"full quick_look (every minimum, radiants, showers), {N_SCALAR} orbits one by one: "
        f"per orbit / one erfa.epv00 call = {per_orbit_scalar / epv00:.0f}; "
        f"scalar / vectorised per orbit = {per_orbit_scalar / per_orbit_vec:.1f}"
    )
