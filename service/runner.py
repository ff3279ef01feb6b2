"""The job runner: threads in the service process that take queued forecasts and run them.

Each of ``settings.job_runners`` threads claims the oldest queued job, runs
:func:`dynamics.forecast.forecast` (its particle chunks go to a local spawn-based process pool
with ``settings.forecast_workers`` processes, or to a Dask cluster when
``settings.dask_scheduler`` is set) and stores the result in one transaction. The forecast's
progress callback records progress, renews the job's lease and raises to stop the forecast when
the job was cancelled or the service is shutting down. A job interrupted by a shutdown goes back
to the queue; one whose process died is re-queued by :meth:`JobStore.recover` at the next
start-up (or by any other live process once its lease has expired).
"""

import concurrent.futures as cf
import logging
import multiprocessing
import threading
import time
import traceback
from concurrent.futures.process import BrokenProcessPool
from dataclasses import replace

from dynamics.errors import TrailcastError

from .jobs import Job, JobStore, LeaseLost, new_runner_name
from .problems import TYPE_BASE
from .settings import Settings

log = logging.getLogger("trailcast.runner")

#: Shortest interval between two progress writes of one job (s); stage changes always write.
PROGRESS_WRITE_INTERVAL_S = 0.25
#: Pause before the next job after the workers could not be reached (s).
WORKERS_RETRY_S = 5.0
#: Most particle crossings stored per trail crossing (evenly thinned beyond that): enough to
#: draw every meteoroid of the default 300-particle budget, small enough to keep results compact.
MAX_STORED_CROSSINGS_PER_TRAIL = 500


class JobCancelled(Exception):
    """Raised from the progress callback: the job's cancellation was requested."""


class ShuttingDown(Exception):
    """Raised from the progress callback: the service is stopping; the job is re-queued."""


def ejection_model(o: dict):
    """The EjectionModel a canonical request's ``options`` describe (forecasts and screenings)."""
    from dynamics.release import EjectionModel

    return replace(
        EjectionModel(),
        speed_law=o["speed_law"],
        mass_index=o["mass_index"],
        meteoroid_density_g_cm3=o["meteoroid_density_g_cm3"],
        nucleus_radius_km=o["nucleus_radius_km"],
    )


def forecast_inputs(job: Job, workers: int):
    """The (OrbitInput, ForecastOptions) a job's canonical request describes."""
    from dynamics.forecast import Calibration, ForecastOptions
    from dynamics.orbit_input import parse_orbit

    req = job.request
    o = req["options"]
    orbit = parse_orbit(req["orbit"])
    options = ForecastOptions(
        first_year=req["years"][0],
        last_year=req["years"][1],
        particles=o["particles"],
        seed=o["seed"],
        trails=tuple(o["trails"]) if o["trails"] is not None else None,
        max_trail_age_years=o["max_trail_age_years"],
        integrator=o["integrator"],
        workers=workers,
        ejection=ejection_model(o),
        dust_mass_per_return_g=o.get("dust_mass_per_return_g"),
        calibration=Calibration(**o["calibration"]) if o.get("calibration") else None,
    )
    return orbit, options


def solution_particle_crossings(computed) -> list[dict]:
    """:func:`particle_crossings` for a multi-solution result, indexed like its merged lists."""
    per_solution = [particle_crossings(r, r.to_json()) for r in computed.results]
    out = []
    for kind, key in (("encounter", "encounters"), ("near_miss", "near_misses")):
        for m, (si, k, row) in enumerate(computed.merged_rows(key)):
            for item in per_solution[si]:
                if item["kind"] == kind and item["index"] == k:
                    out.append(dict(item, index=m, solution=row["solution"]))
    return out


def particle_crossings(computed, result_json: dict) -> list[dict]:
    """Each trail crossing's simulated meteoroids, compact, for the dashboard's charts.

    One item per encounter and near miss (``kind`` and ``index`` point into the result's
    ``encounters`` / ``near_misses``), with the meteoroids behind it: when Earth passes each one's
    node (``t_earth_utc``), the solar longitude then (deg, geometric J2000), the signed miss
    distance (au, meteoroid minus Earth) and the radiant (RA/Dec deg, J2000). Meteoroids without
    a crossing are left out; above :data:`MAX_STORED_CROSSINGS_PER_TRAIL` they are evenly thinned.
    """
    import numpy as np

    from dynamics.timescales import format_utc

    out = []
    for kind, key, group in (
        ("encounter", "encounters", computed.encounters),
        ("near_miss", "near_misses", computed.near_misses),
    ):
        for k, enc in enumerate(group):
            c = enc.crossings
            ok = np.all(
                np.isfinite(
                    [
                        c.t_earth_tdb_jd,
                        c.miss_distance_au,
                        c.solar_longitude_deg,
                        c.ra_deg,
                        c.dec_deg,
                    ]
                ),
                axis=0,
            )
            idx = np.flatnonzero(ok)
            if len(idx) > MAX_STORED_CROSSINGS_PER_TRAIL:
                pick = np.linspace(0, len(idx) - 1, MAX_STORED_CROSSINGS_PER_TRAIL)
                idx = idx[np.unique(pick.round().astype(int))]
            trail = result_json[key][k]["trail"]
            out.append(
                {
                    "kind": kind,
                    "index": k,
                    "year": enc.year,
                    "perihelion_year": trail["perihelion_year"],
                    "revolutions": trail["revolutions"],
                    "t_earth_utc": [
                        str(t) for t in np.atleast_1d(format_utc(c.t_earth_tdb_jd[idx]))
                    ]
                    if len(idx)
                    else [],
                    "solar_longitude_deg": np.round(c.solar_longitude_deg[idx], 5).tolist(),
                    "miss_distance_au": np.round(c.miss_distance_au[idx], 7).tolist(),
                    "ra_deg": np.round(c.ra_deg[idx], 3).tolist(),
                    "dec_deg": np.round(c.dec_deg[idx], 3).tolist(),
                }
            )
    return out


class Executors:
    """Where forecast chunks run: a shared local process pool, or a Dask cluster's executor."""

    def __init__(self, settings: Settings):
        self.settings = settings
        self._lock = threading.Lock()
        self._pool: cf.ProcessPoolExecutor | None = None
        self._client = None

    @property
    def kind(self) -> str:
        return "dask" if self.settings.dask_scheduler else "local"

    def get(self):
        """The executor for the next forecast (None: run chunks in the runner thread)."""
        with self._lock:
            if self.settings.dask_scheduler:
                return self._dask_client().get_executor()
            if self.settings.forecast_workers <= 1:
                return None
            if self._pool is None:
                ctx = multiprocessing.get_context("spawn")  # safe under a threaded server
                self._pool = cf.ProcessPoolExecutor(
                    max_workers=self.settings.forecast_workers, mp_context=ctx
                )
            return self._pool

    def discard_pool(self) -> None:
        """Forget a broken local pool (a worker process died); the next job makes a new one."""
        with self._lock:
            if self._pool is not None:
                self._pool.shutdown(wait=False, cancel_futures=True)
                self._pool = None

    def _dask_client(self):
        if self._client is None:
            from distributed import Client

            self._client = Client(self.settings.dask_scheduler, timeout=10, set_as_default=False)
        return self._client

    def check(self) -> str:
        """A one-line description of the workers; raises when they cannot be reached."""
        if self.settings.dask_scheduler:
            with self._lock:
                client = self._dask_client()
            n = len(client.scheduler_info().get("workers", {}))
            if n == 0:
                raise RuntimeError(f"Dask scheduler {self.settings.dask_scheduler} has no workers")
            return f"dask: {n} workers at {self.settings.dask_scheduler}"
        return f"local: {self.settings.forecast_workers} processes per forecast"

    def close(self) -> None:
        with self._lock:
            if self._pool is not None:
                self._pool.shutdown(wait=False, cancel_futures=True)
                self._pool = None
            if self._client is not None:
                try:
                    self._client.close(timeout=5)
                except Exception:  # noqa: BLE001 - closing is best effort
                    log.exception("closing the Dask client failed")
                self._client = None


class JobRunner:
    """``settings.job_runners`` threads running queued jobs; start with :meth:`start`."""

    def __init__(self, jobs: JobStore, settings: Settings):
        self.jobs = jobs
        self.settings = settings
        self.name = new_runner_name()
        self.executors = Executors(settings)
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._threads: list[threading.Thread] = []
        self._running: set[str] = set()
        self._running_lock = threading.Lock()

    # --- lifecycle ---------------------------------------------------------------------------

    def start(self) -> list[str]:
        """Re-queue jobs whose process died, then start the runner threads; return re-queued ids."""
        requeued = self.jobs.recover(
            self.name, self.settings.job_lease_seconds, self.settings.max_job_attempts
        )
        if requeued:
            log.warning("re-queued %d interrupted job(s): %s", len(requeued), ", ".join(requeued))
        for k in range(self.settings.job_runners):
            t = threading.Thread(target=self._loop, name=f"trailcast-runner-{k}", daemon=True)
            t.start()
            self._threads.append(t)
        return requeued

    def stop(self, timeout_s: float = 30.0) -> None:
        """Stop taking jobs, interrupt running ones (back to the queue) and join the threads."""
        self._stop.set()
        self._wake.set()
        deadline = time.monotonic() + timeout_s
        for t in self._threads:
            t.join(max(0.0, deadline - time.monotonic()))
        self.executors.close()

    def wake(self) -> None:
        """A job was queued in this process: look at once instead of at the next poll."""
        self._wake.set()

    def alive(self) -> bool:
        return all(t.is_alive() for t in self._threads)

    # --- work --------------------------------------------------------------------------------

    def _loop(self) -> None:
        last_recover = time.monotonic()
        poll_s = min(1.0, self.settings.job_lease_seconds / 4)
        while not self._stop.is_set():
            try:
                if time.monotonic() - last_recover > self.settings.job_lease_seconds / 2:
                    self.jobs.recover(
                        self.name,
                        self.settings.job_lease_seconds,
                        self.settings.max_job_attempts,
                    )
                    last_recover = time.monotonic()
                job = self.jobs.claim_next(self.name)
            except Exception:  # noqa: BLE001 - the database may be busy; try again
                log.exception("job queue not readable")
                job = None
            if job is None:
                self._wake.wait(poll_s)
                self._wake.clear()
                continue
            self._run(job)

    def _run(self, job: Job) -> None:
        from dynamics.forecast import forecast
        from dynamics.uncertainty import forecast_solutions

        log.info("job %s: started (attempt %d)", job.id, job.attempts)
        with self._running_lock:
            self._running.add(job.id)
        beat_stop = threading.Event()
        cancel_seen = threading.Event()
        beat = threading.Thread(
            target=self._heartbeat, args=(job.id, beat_stop, cancel_seen), daemon=True
        )
        beat.start()
        last = {"t": 0.0, "stage": None}

        def progress(fraction: float, stage: str) -> None:
            if self._stop.is_set():
                raise ShuttingDown
            now = time.monotonic()
            if stage != last["stage"] or now - last["t"] >= PROGRESS_WRITE_INTERVAL_S:
                last["t"], last["stage"] = now, stage
                if self.jobs.heartbeat(job.id, self.name, fraction, stage):
                    raise JobCancelled
            if cancel_seen.is_set():
                raise JobCancelled

        try:
            executor = self.executors.get()
        except Exception as exc:  # noqa: BLE001 - e.g. the Dask scheduler is unreachable
            log.error("job %s: no workers: %s", job.id, exc)
            beat_stop.set()
            if job.attempts < self.settings.max_job_attempts:
                self.jobs.release(job.id, self.name, f"queued (workers unreachable: {exc})", True)
                self._stop.wait(WORKERS_RETRY_S)
            else:
                self._fail(job, 503, "Workers unreachable", str(exc))
            with self._running_lock:
                self._running.discard(job.id)
            return
        try:
            orbit, options = forecast_inputs(job, self.settings.forecast_workers)
            if orbit.solutions or orbit.covariance is not None:
                clones = job.request["options"].get("clones", 5)
                computed = forecast_solutions(
                    orbit, options, clones=clones, progress=progress, executor=executor
                )
                result = computed.to_json()
                result["particle_crossings"] = solution_particle_crossings(computed)
            else:
                computed = forecast(orbit, options, progress=progress, executor=executor)
                result = computed.to_json()
                result["particle_crossings"] = particle_crossings(computed, result)
            if self._stop.is_set():
                raise ShuttingDown
            if self.jobs.finish_done(job.id, self.name, result):
                log.info("job %s: done", job.id)
            else:
                log.warning("job %s: finished but no longer held by this runner", job.id)
        except JobCancelled:
            self.jobs.finish(job.id, self.name, "cancelled")
            log.info("job %s: cancelled", job.id)
        except ShuttingDown:
            self.jobs.release(job.id, self.name, "queued (re-queued at shutdown)")
            log.info("job %s: re-queued at shutdown", job.id)
        except LeaseLost:
            log.warning("job %s: lease lost; another runner has it", job.id)
        except BrokenProcessPool:
            self.executors.discard_pool()
            if job.attempts < self.settings.max_job_attempts:
                self.jobs.release(
                    job.id, self.name, "queued (a worker process died)", count_attempt=True
                )
            else:
                self._fail(job, 500, "Worker process died", "a worker process died repeatedly")
        except TrailcastError as exc:
            self._fail(job, 422, "Cannot compute", str(exc))
        except Exception as exc:  # noqa: BLE001 - a job must never take the runner down
            log.error("job %s failed:\n%s", job.id, traceback.format_exc())
            self._fail(job, 500, "Forecast failed", f"{type(exc).__name__}: {exc}")
        finally:
            beat_stop.set()
            beat.join(5.0)
            with self._running_lock:
                self._running.discard(job.id)

    def _fail(self, job: Job, status: int, title: str, detail: str) -> None:
        kind = {422: "computation", 503: "workers-unreachable"}.get(status, "job-failed")
        self.jobs.finish(
            job.id,
            self.name,
            "failed",
            {"type": TYPE_BASE + kind, "title": title, "status": status, "detail": detail},
        )
        log.info("job %s: failed: %s", job.id, detail)

    def _heartbeat(self, job_id: str, stop: threading.Event, cancel_seen: threading.Event):
        """Renew the lease while chunks run (progress comes only between chunks)."""
        interval = self.settings.job_lease_seconds / 4
        while not stop.wait(interval):
            try:
                if self.jobs.heartbeat(job_id, self.name):
                    cancel_seen.set()
            except LeaseLost:
                return
            except Exception:  # noqa: BLE001 - a busy database: the next beat will do
                log.exception("heartbeat of job %s failed", job_id)
