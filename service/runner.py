"""The job runner: threads in the service process that take queued jobs of every kind and run them.

Each of ``settings.job_runners`` threads claims the oldest queued job (forecast, screening ...),
runs it through its kind's module (:mod:`service.job_kinds`) with the shared executor (a local
spawn-based process pool with ``settings.forecast_workers`` processes whose workers die with this
process, or a Dask cluster when ``settings.dask_scheduler`` is set) and stores the result in one
transaction. What every kind shares lives here, once:

- progress: the kind reports ``(fraction, stage[, items_done])`` through :class:`RunContext`;
  each report renews the lease, and raises to stop the computation when the job was cancelled,
  ran past ``settings.job_max_seconds`` or the service is shutting down; computations that run
  long between reports ask ``RunContext.should_stop`` (the parent-history integration does);
- a heartbeat thread renews the lease while a chunk runs, and notices cancellation;
- a dead worker pool (``BrokenProcessPool``) is replaced and the job re-queued (the attempt
  counts, so a job that keeps killing its workers ends as failed);
- a shutdown puts the running job back in the queue; a job whose process died is re-queued by
  :meth:`JobStore.recover` at the next start-up (or by any live process once its lease expired);
- retention: finished jobs older than ``settings.job_retention_days`` or beyond the newest
  ``settings.job_retention_count`` are deleted now and then.
"""

import concurrent.futures as cf
import logging
import threading
import time
import traceback
from concurrent.futures.process import BrokenProcessPool

from dynamics.errors import ComputationStopped, TrailcastError

from .jobs import PROBLEM_TYPE_BASE, Job, JobStore, LeaseLost, new_runner_name
from .settings import Settings

log = logging.getLogger("trailcast.runner")

#: Shortest interval between two progress writes of one job (s); stage changes always write.
PROGRESS_WRITE_INTERVAL_S = 0.25
#: Pause before the next job after the workers could not be reached (s).
WORKERS_RETRY_S = 5.0
#: Interval between two retention sweeps (s); no source: old jobs may wait that long.
RETENTION_INTERVAL_S = 600.0


class JobCancelled(Exception):
    """Raised from the progress callback: the job's cancellation was requested."""


class ShuttingDown(Exception):
    """Raised from the progress callback: the service is stopping; the job is re-queued."""


class JobTimedOut(Exception):
    """Raised from the progress callback: the job ran past ``settings.job_max_seconds``."""


def make_local_pool(workers: int) -> cf.ProcessPoolExecutor:
    """A spawn-based process pool (safe under a threaded server) whose workers die with us."""
    from dynamics.executors import process_pool

    return process_pool(workers)


def kill_pool(pool: cf.ProcessPoolExecutor) -> None:
    """Stop a local pool now, running tasks included (their results are no longer wanted).

    ``ProcessPoolExecutor`` has no public way to stop a task that already runs, so its worker
    processes are killed; the pool is then broken and must not be used again.
    """
    for proc in list((getattr(pool, "_processes", None) or {}).values()):
        try:
            proc.kill()
        except (OSError, AttributeError):
            pass
    pool.shutdown(wait=False, cancel_futures=True)


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
                self._pool = make_local_pool(self.settings.forecast_workers)
            return self._pool

    def discard_pool(self, kill: bool = False) -> None:
        """Forget the local pool (broken: a worker died; or ``kill``: its running tasks belong
        to a cancelled or timed-out job and are stopped); the next job makes a new one."""
        with self._lock:
            if self._pool is not None:
                if kill:
                    kill_pool(self._pool)
                else:
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


class RunContext:
    """What a job kind's ``run`` gets: the executor, progress reporting and the stop checks."""

    def __init__(self, runner: "JobRunner", job: Job, executor):
        self.runner = runner
        self.job = job
        self.executor = executor
        self.store = runner.jobs.store
        self.workers = runner.settings.forecast_workers
        self.cancel_seen = threading.Event()
        self.deadline = time.monotonic() + runner.settings.job_max_seconds
        self._last_t = 0.0
        self._last_stage: str | None = None

    def check(self) -> None:
        """Raise when the job must stop: shutdown, cancellation or its time limit."""
        if self.runner._stop.is_set():
            raise ShuttingDown
        if self.cancel_seen.is_set():
            raise JobCancelled
        if time.monotonic() > self.deadline:
            raise JobTimedOut

    def should_stop(self) -> bool:
        """For computations that poll (no exception of ours may cross them)."""
        try:
            self.check()
        except (ShuttingDown, JobCancelled, JobTimedOut):
            return True
        return False

    def progress(self, fraction: float, stage: str, items_done: int | None = None) -> None:
        """Record progress (at most every :data:`PROGRESS_WRITE_INTERVAL_S` unless the stage
        changes); raise to stop the job (see :meth:`check`)."""
        self.check()
        now = time.monotonic()
        if stage != self._last_stage or now - self._last_t >= PROGRESS_WRITE_INTERVAL_S:
            self._last_t, self._last_stage = now, stage
            if self.runner.jobs.heartbeat(
                self.job.id, self.runner.name, fraction, stage, items_done
            ):
                self.cancel_seen.set()
        self.check()


class JobRunner:
    """``settings.job_runners`` threads running queued jobs of every kind; :meth:`start`."""

    def __init__(self, jobs: JobStore, settings: Settings, kinds=None):
        from .job_kinds import kinds as all_kinds

        self.jobs = jobs
        self.settings = settings
        self.kinds = kinds if kinds is not None else all_kinds()
        self.name = new_runner_name()
        self.executors = Executors(settings)
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._threads: list[threading.Thread] = []

    # --- lifecycle ---------------------------------------------------------------------------

    def start(self) -> list[str]:
        """Re-queue jobs whose process died, apply retention, start the runner threads; return
        the re-queued ids."""
        requeued = self.jobs.recover(
            self.name, self.settings.job_lease_seconds, self.settings.max_job_attempts
        )
        if requeued:
            log.warning("re-queued %d interrupted job(s): %s", len(requeued), ", ".join(requeued))
        self.apply_retention()
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

    def apply_retention(self) -> int:
        """Delete finished jobs beyond the retention settings; return how many."""
        try:
            n = self.jobs.prune(self.settings.job_retention_days, self.settings.job_retention_count)
        except Exception:  # noqa: BLE001 - a busy database: the next sweep will do
            log.exception("retention sweep failed")
            return 0
        if n:
            log.info("retention: deleted %d finished job(s)", n)
        return n

    # --- work --------------------------------------------------------------------------------

    def _loop(self) -> None:
        last_recover = last_retention = time.monotonic()
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
                if time.monotonic() - last_retention > RETENTION_INTERVAL_S:
                    self.apply_retention()
                    last_retention = time.monotonic()
                job = self.jobs.claim_next(self.name, tuple(self.kinds))
            except Exception:  # noqa: BLE001 - the database may be busy; try again
                log.exception("job queue not readable")
                job = None
            if job is None:
                self._wake.wait(poll_s)
                self._wake.clear()
                continue
            self._run(job)

    def _run(self, job: Job) -> None:
        kind = self.kinds[job.kind]
        log.info("%s job %s: started (attempt %d)", job.kind, job.id, job.attempts)
        try:
            executor = self.executors.get()
        except Exception as exc:  # noqa: BLE001 - e.g. the Dask scheduler is unreachable
            log.error("job %s: no workers: %s", job.id, exc)
            if job.attempts < self.settings.max_job_attempts:
                self.jobs.release(job.id, self.name, f"queued (workers unreachable: {exc})", True)
                self._stop.wait(WORKERS_RETRY_S)
            else:
                self._fail(job, 503, "Workers unreachable", str(exc))
            return
        ctx = RunContext(self, job, executor)
        beat_stop = threading.Event()
        beat = threading.Thread(
            target=self._heartbeat, args=(job.id, beat_stop, ctx.cancel_seen), daemon=True
        )
        beat.start()
        try:
            try:
                result = kind.run(job, ctx)
            except ComputationStopped:
                ctx.check()  # says why: shutdown, cancellation or the time limit
                raise
            # computed: stored even if a stop came in the last instant (storing takes little)
            if self.jobs.finish_done(job.id, self.name, result):
                log.info("job %s: done", job.id)
            else:
                log.warning("job %s: finished but no longer held by this runner", job.id)
        except JobCancelled:
            self._stop_local_work(executor)
            self.jobs.finish(job.id, self.name, "cancelled")
            log.info("job %s: cancelled", job.id)
        except ShuttingDown:
            self.jobs.release(job.id, self.name, "queued (re-queued at shutdown)")
            log.info("job %s: re-queued at shutdown", job.id)
        except JobTimedOut:
            self._stop_local_work(executor)
            self._fail(
                job,
                422,
                "Time limit exceeded",
                f"the job ran longer than this server allows "
                f"({self.settings.job_max_seconds:g} s); ask for fewer years, trails or "
                "meteoroids",
                kind_="time-limit",
            )
        except LeaseLost:
            log.warning("job %s: lease lost; another runner has it", job.id)
        except BrokenProcessPool:
            self.executors.discard_pool()
            if job.attempts < self.settings.max_job_attempts:
                self.jobs.release(
                    job.id, self.name, "queued (a worker process died)", count_attempt=True
                )
                log.warning("job %s: a worker process died; re-queued", job.id)
            else:
                self._fail(job, 500, "Worker process died", "a worker process died repeatedly")
        except TrailcastError as exc:
            self._fail(job, 422, "Cannot compute", str(exc))
        except Exception as exc:  # noqa: BLE001 - a job must never take the runner down
            log.error("job %s failed:\n%s", job.id, traceback.format_exc())
            self._fail(job, 500, kind.failure_title, f"{type(exc).__name__}: {exc}")
        finally:
            beat_stop.set()
            beat.join(5.0)

    def _stop_local_work(self, executor) -> None:
        """Chunks of a stopped job still running in the local pool: kill them (CPU for the next
        job). With one runner thread the pool serves only this job; with several it is shared,
        and the others' chunks would die too, so it is left alone then."""
        if (
            executor is not None
            and executor is self.executors._pool
            and self.settings.job_runners == 1
        ):
            self.executors.discard_pool(kill=True)

    def _fail(
        self, job: Job, status: int, title: str, detail: str, kind_: str | None = None
    ) -> None:
        kind_ = kind_ or {422: "computation", 503: "workers-unreachable"}.get(status, "job-failed")
        self.jobs.finish(
            job.id,
            self.name,
            "failed",
            {"type": PROBLEM_TYPE_BASE + kind_, "title": title, "status": status, "detail": detail},
        )
        log.info("job %s: failed: %s", job.id, detail)

    def _heartbeat(self, job_id: str, stop: threading.Event, cancel_seen: threading.Event):
        """Renew the lease while chunks run (progress comes only between chunks)."""
        interval = min(self.settings.job_lease_seconds / 4, 1.0)
        while not stop.wait(interval):
            try:
                if self.jobs.heartbeat(job_id, self.name):
                    cancel_seen.set()
            except LeaseLost:
                return
            except Exception:  # noqa: BLE001 - a busy database: the next beat will do
                log.exception("heartbeat of job %s failed", job_id)
