"""Service throughput over loopback: POST /v1/geometry and GET /v1/encounters at 1 and 2 workers.

Starts `trailcast serve --workers N` on a free loopback port (data in a temporary folder, with
synthetic stored forecasts so that the encounters listing has rows to page), drives it with a
bounded asyncio/httpx loop (a fixed number of requests, a fixed number in flight) and stops it.
The load generator shares the machine's cores with the server, so absolute numbers understate a
dedicated server; the 2-worker / 1-worker ratio is measured in the same run.
"""

import asyncio
import json
import os
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import httpx

from service.jobs import JobStore, canonical_request
from service.schemas import EXAMPLE_ENCOUNTER
from service.storage import Store

REQUESTS = 400  # per route and worker count
IN_FLIGHT = 8  # concurrent requests from the load generator
WARMUP = 20
DEMO = json.loads(
    (Path(__file__).resolve().parents[1] / "examples" / "demo-comet.json").read_text()
)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _seed_store(data_dir: Path, forecasts: int = 20, per_forecast: int = 10) -> None:
    """Synthetic done forecasts of the invented demo comet, written as the runner writes them."""
    store = Store(data_dir / "trailcast.sqlite3")
    jobs = JobStore(store)
    for k in range(forecasts):
        request = canonical_request({"name": DEMO["name"]}, 2040, 2049, {"seed": k})
        job, _ = jobs.submit(request, DEMO["name"], max_queued=10_000)
        jobs.claim_next("bench:0:seed")
        encounters = [
            {
                **EXAMPLE_ENCOUNTER,
                "year": 2040 + j,
                "peak_utc": f"{2040 + j}-04-11T{k % 24:02d}:00:00Z",
            }
            for j in range(per_forecast)
        ]
        jobs.finish_done(
            job.id, "bench:0:seed", {"parent": {"name": DEMO["name"]}, "encounters": encounters}
        )
    store.close()


class _Server:
    def __init__(self, data_dir: Path, workers: int):
        self.port = _free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        env = dict(os.environ, TRAILCAST_DATA_DIR=str(data_dir), TRAILCAST_JOB_RUNNERS="0")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(self.port)]
            + ["--workers", str(workers)],
            env=env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
            start_new_session=True,
        )
        deadline = time.monotonic() + 120
        while True:
            try:
                if httpx.get(f"{self.url}/ready", timeout=2).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            if self.proc.poll() is not None or time.monotonic() > deadline:
                self.stop()
                raise RuntimeError("server did not start")
            time.sleep(0.2)

    def stop(self):
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGTERM)
            try:
                self.proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)
                self.proc.wait(timeout=30)


async def _load(url: str, method: str, path: str, body, n: int) -> tuple[float, list[float]]:
    """Send n requests, IN_FLIGHT at a time; (wall seconds, per-request latencies)."""
    latencies: list[float] = []
    queue = iter(range(n))
    limits = httpx.Limits(max_connections=IN_FLIGHT, max_keepalive_connections=IN_FLIGHT)
    async with httpx.AsyncClient(base_url=url, timeout=60, limits=limits) as client:

        async def worker():
            for _ in queue:
                t0 = time.perf_counter()
                r = await client.request(method, path, json=body)
                latencies.append(time.perf_counter() - t0)
                if r.status_code != 200:
                    raise RuntimeError(f"{method} {path}: {r.status_code} {r.text[:200]}")

        t0 = time.perf_counter()
        await asyncio.gather(*(worker() for _ in range(IN_FLIGHT)))
        return time.perf_counter() - t0, latencies


def _measure(url, method, path, body):
    asyncio.run(_load(url, method, path, body, WARMUP))
    wall, lat = asyncio.run(_load(url, method, path, body, REQUESTS))
    q = statistics.quantiles(lat, n=100)
    return REQUESTS / wall, q[49] * 1e3, q[98] * 1e3


ROUTES = (
    ("POST", "/v1/geometry", {"orbit": DEMO, "year": 2040}),
    ("GET", "/v1/encounters?from=2040-01-01&limit=100", None),
)


def run():
    rates: dict[tuple[str, int], float] = {}
    with tempfile.TemporaryDirectory(prefix="trailcast-bench-") as tmp:
        data = Path(tmp) / "var"
        data.mkdir()
        _seed_store(data)
        for workers in (1, 2):
            server = _Server(data, workers)
            try:
                for method, path, body in ROUTES:
                    rps, p50, p99 = _measure(server.url, method, path, body)
                    rates[(path, workers)] = rps
                    yield (
                        f"{method} {path.split('?')[0]}, {workers} worker(s), {IN_FLIGHT} in "
                        f"flight: {rps:.0f} req/s, p50 {p50:.1f} ms, p99 {p99:.1f} ms"
                    )
            finally:
                server.stop()
    for _method, path, _body in ROUTES:
        yield (
            f"{path.split('?')[0]}: 2 workers / 1 worker throughput = "
            f"{rates[(path, 2)] / rates[(path, 1)]:.2f} (load generator on the same cores)"
        )
