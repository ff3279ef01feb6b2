"""Earth's state from DE423 vs erfa.epv00, same times, one run."""

import erfa
import numpy as np

from benchmarks._timing import median_seconds
from dynamics.ephemeris import barycentric_state


def run():
    t = np.linspace(2451545.0, 2451545.0 + 3650.0, 10_000)
    ours = median_seconds(lambda: barycentric_state("earth", t), repeat=5)
    ref = median_seconds(lambda: erfa.epv00(t, 0.0), repeat=5)
    yield f"10,000 Earth states: DE423 (jplephem, vectorised) / erfa.epv00 time ratio = {ours / ref:.2f}"
