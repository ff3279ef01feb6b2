"""Screening stage 1 (geometry of every orbit): orbits per second on 1 and 2 worker processes."""

import concurrent.futures as cf
import multiprocessing
import time

import numpy as np

from dynamics.orbit_input import parse_orbit
from dynamics.screening import screen_geometry

N_ORBITS = 4000
#: Three shared epochs, as in a survey's weekly batch (Earth's orbit is computed per epoch).
EPOCHS_TDB_JD = (2461000.5, 2461200.5, 2461400.5)


def _orbits(n, seed=2027):
    rng = np.random.default_rng(seed)
    out = []
    for k in range(n):
        epoch = EPOCHS_TDB_JD[k % 3]
        out.append(
            parse_orbit(
                {
                    "name": f"random {k} [invented]",
                    "epoch": epoch,
                    "q": float(rng.uniform(0.1, 5.0)),
                    "e": float(rng.uniform(0.0, 0.99)),
                    "i": float(np.degrees(np.arccos(rng.uniform(-1.0, 1.0)))),
                    "node": float(rng.uniform(0.0, 360.0)),
                    "peri": float(rng.uniform(0.0, 360.0)),
                    "tp": epoch,
                }
            )
        )
    return out


def _best_seconds(fn, repeat=3):
    fn()  # warm-up: imports, ephemeris, worker start-up
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def run():
    orbits = _orbits(N_ORBITS)
    one = _best_seconds(lambda: screen_geometry(orbits))
    ctx = multiprocessing.get_context("spawn")
    with cf.ProcessPoolExecutor(max_workers=2, mp_context=ctx) as pool:
        two = _best_seconds(lambda: screen_geometry(orbits, executor=pool))
    yield (
        f"{N_ORBITS:,} random orbits (MOID + nodes, chunks of 64): 1 worker (in process) "
        f"{N_ORBITS / one:,.0f} orbits/s; 2 worker processes {N_ORBITS / two:,.0f} orbits/s"
    )
    yield f"speed-up 2 workers / 1 worker = {one / two:.2f} (same run; ideal 2 on 2 free cores)"
