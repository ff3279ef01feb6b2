"""Prometheus text exposition (format 0.0.4), written by hand.

Three families: jobs by state (read from the database at scrape time, so every server process
reports the same numbers), job run times (also from the database) and HTTP request latencies
(measured in this process: with ``--workers N`` each process reports its own, told apart by the
``pid`` label). Hand-written rather than ``prometheus_client``: three metric families need a few
dozen lines, and the client's multi-process mode would need a shared folder and its own clean-up.
"""

import os
import threading
import time
from collections import defaultdict

from dynamics import __version__

#: Histogram buckets (upper bounds, s) for request latencies: loopback calls take ~1-100 ms.
REQUEST_BUCKETS_S = (0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0)
#: Histogram buckets (s) for job run times: tiny forecasts take seconds, large ones hours.
JOB_BUCKETS_S = (1.0, 5.0, 15.0, 60.0, 300.0, 900.0, 3600.0, 14400.0, 86400.0)

CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"


class RequestLatencies:
    """Per (method, route template, status) latency histograms of this process."""

    def __init__(self):
        self._lock = threading.Lock()
        self._counts: dict[tuple, list[int]] = defaultdict(lambda: [0] * len(REQUEST_BUCKETS_S))
        self._n: dict[tuple, int] = defaultdict(int)
        self._sum: dict[tuple, float] = defaultdict(float)

    def observe(self, method: str, route: str, status: int, seconds: float) -> None:
        key = (method, route, str(status))
        with self._lock:
            buckets = self._counts[key]
            for k, bound in enumerate(REQUEST_BUCKETS_S):
                if seconds <= bound:
                    buckets[k] += 1
            self._n[key] += 1
            self._sum[key] += seconds

    def lines(self) -> list[str]:
        name = "trailcast_http_request_duration_seconds"
        out = [
            f"# HELP {name} HTTP request latency in this server process, by route template.",
            f"# TYPE {name} histogram",
        ]
        pid = os.getpid()
        with self._lock:
            for key in sorted(self._n):
                method, route, status = key
                labels = f'method="{method}",route="{_escape(route)}",status="{status}",pid="{pid}"'
                for bound, count in zip(REQUEST_BUCKETS_S, self._counts[key], strict=True):
                    out.append(f'{name}_bucket{{{labels},le="{bound}"}} {count}')
                out.append(f'{name}_bucket{{{labels},le="+Inf"}} {self._n[key]}')
                out.append(f"{name}_sum{{{labels}}} {self._sum[key]:.6f}")
                out.append(f"{name}_count{{{labels}}} {self._n[key]}")
        return out


def _escape(value: str) -> str:
    return value.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")


def exposition(jobs, latencies: RequestLatencies) -> str:
    """The whole scrape body; ``jobs`` is a :class:`service.jobs.JobStore`."""
    out = [
        "# HELP trailcast_build_info Version of this trailcast server.",
        "# TYPE trailcast_build_info gauge",
        f'trailcast_build_info{{version="{__version__}"}} 1',
        "# HELP trailcast_jobs Forecast jobs in the store, by state.",
        "# TYPE trailcast_jobs gauge",
    ]
    for state, n in jobs.counts_by_state().items():
        out.append(f'trailcast_jobs{{state="{state}"}} {n}')
    name = "trailcast_job_duration_seconds"
    out += [
        f"# HELP {name} Run time (start to finish) of done and failed forecast jobs.",
        f"# TYPE {name} histogram",
    ]
    for state, h in sorted(jobs.duration_histogram(JOB_BUCKETS_S).items()):
        for bound, count in h["buckets"]:
            out.append(f'{name}_bucket{{state="{state}",le="{bound}"}} {count}')
        out.append(f'{name}_bucket{{state="{state}",le="+Inf"}} {h["count"]}')
        out.append(f'{name}_sum{{state="{state}"}} {h["sum"]:.3f}')
        out.append(f'{name}_count{{state="{state}"}} {h["count"]}')
    out += latencies.lines()
    out.append(f"# scraped at unix time {time.time():.3f}")
    return "\n".join(out) + "\n"
