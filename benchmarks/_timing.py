"""Timing helper: median of repeated runs with ``time.perf_counter``."""

import statistics
import time


def median_seconds(fn, repeat=5, number=1):
    """Median wall time of ``number`` calls of ``fn``, over ``repeat`` repetitions (s per call)."""
    fn()  # warm-up (imports, caches, first ephemeris load)
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        times.append((time.perf_counter() - t0) / number)
    return statistics.median(times)
