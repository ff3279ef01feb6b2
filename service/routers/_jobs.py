"""The one route helper for every kind of job (forecasts, screenings, and whatever comes next).

A job resource is a :class:`JobRoutes`: its kind, its path prefix and what its pages are called.
Submitting (queue full: 429; wakes the runner; 200 when a done job answers), reading, cancelling
and fetching a finished job's products turn the store's exceptions into the documented problems
here, once, instead of once per router.
"""

from dataclasses import dataclass
from typing import Annotated, Literal

from fastapi import Depends, Path, Request, Response
from pydantic import BaseModel, Field

from ..jobs import Job, JobConflict, JobNotFound, JobStore, QueueFull, seconds_between
from ..problems import TYPE_BASE, ProblemError
from ..settings import Settings, get_settings


def get_jobs(request: Request) -> JobStore:
    """The job store of this app (every kind)."""
    return request.app.state.jobs


Jobs = Annotated[JobStore, Depends(get_jobs)]
SettingsDep = Annotated[Settings, Depends(get_settings)]


@dataclass(frozen=True)
class JobRoutes:
    """Route helpers for one kind of job."""

    kind: str
    #: ``/v1/forecasts``: where the jobs of this kind live.
    prefix: str
    #: Word used in messages (``forecast job``, ``screening``).
    label: str

    def not_found(self, job_id: str) -> ProblemError:
        return ProblemError(
            404, "Not Found", f"no {self.label} {job_id}", TYPE_BASE + "job-not-found"
        )

    def submit(
        self,
        jobs: JobStore,
        request: Request,
        response: Response,
        settings: Settings,
        canonical: dict,
        label: str,
        items_total: int | None = None,
    ) -> tuple[Job, bool]:
        """Queue (or find) the job; sets 200 for a done one and the Location header."""
        try:
            job, queued = jobs.submit(
                canonical,
                label,
                settings.max_queued_jobs,
                kind=self.kind,
                items_total=items_total,
            )
        except QueueFull as exc:
            raise ProblemError(
                429,
                "Too Many Requests",
                f"the job queue is full ({exc}); submit again later",
                TYPE_BASE + "queue-full",
                headers={"Retry-After": "60"},
            ) from None
        if queued:
            runner = getattr(request.app.state, "runner", None)
            if runner is not None:
                runner.wake()
        if job.state == "done":
            response.status_code = 200
        response.headers["Location"] = f"{self.prefix}/{job.id}"
        return job, queued

    def get(self, jobs: JobStore, job_id: str) -> Job:
        """The job with its result; 404 when unknown (or of another kind)."""
        try:
            return jobs.get(job_id, with_result=True, kind=self.kind)
        except JobNotFound:
            raise self.not_found(job_id) from None

    def finished(self, jobs: JobStore, job_id: str, products: str) -> Job:
        """The done job with its result, or 404 / 409 (not done yet: ``products`` don't exist)."""
        job = self.get(jobs, job_id)
        if job.state != "done" or job.result is None:
            raise ProblemError(
                409,
                "Conflict",
                f"{self.label} {job_id} is {job.state}: {products} exist once it is done",
                TYPE_BASE + "job-not-done",
                state=job.state,
            )
        return job

    def cancel(self, jobs: JobStore, job_id: str, response: Response) -> Job:
        """Cancel a queued (200) or running (202: it stops within seconds) job; 404 / 409."""
        try:
            job = jobs.cancel(job_id, kind=self.kind)
        except JobNotFound:
            raise self.not_found(job_id) from None
        except JobConflict as exc:
            raise ProblemError(409, "Conflict", str(exc), TYPE_BASE + "job-finished") from None
        if job.state == "running":
            response.status_code = 202
        return job


# --- what every job's page shows ------------------------------------------------------------

JobState = Literal["queued", "running", "done", "failed", "cancelled"]
JobId = Annotated[
    str,
    Path(
        pattern="^[0-9a-f]{32}$",
        description="Job id (32 hex digits)",
        examples=["5d2c3f0e9a1b4c7d8e6f5a4b3c2d1e0f"],
    ),
]


class ProgressOut(BaseModel):
    """How far a job is. While running the fraction stays below 1 and the stage is never
    `done`; only a done job shows 1 and `done`."""

    fraction: float = Field(..., ge=0.0, le=1.0, examples=[0.42])
    stage: str = Field(..., examples=["integration"])
    items_done: int | None = Field(
        None,
        ge=0,
        description="Items finished, for kinds that count items (a screening's "
        "orbits; stored ones count at once)",
        examples=[120],
    )
    items_total: int | None = Field(None, ge=0, examples=[200])


class TimingsOut(BaseModel):
    created_utc: str
    queued_utc: str
    started_utc: str | None
    finished_utc: str | None
    queued_seconds: float | None = Field(None, description="Queue entry to start (s)")
    run_seconds: float | None = Field(None, description="Start to finish, or to now (s)")


def progress_out(job: Job) -> ProgressOut:
    fraction, stage = job.shown_progress()
    total = job.items_total
    done = None if total is None else min(max(job.items_done or 0, 0), total)
    return ProgressOut(fraction=fraction, stage=stage, items_done=done, items_total=total)


def timings_out(job: Job) -> TimingsOut:
    return TimingsOut(
        created_utc=job.created_utc,
        queued_utc=job.queued_utc,
        started_utc=job.started_utc,
        finished_utc=job.finished_utc,
        queued_seconds=seconds_between(job.queued_utc, job.started_utc)
        if job.started_utc
        else None,
        run_seconds=seconds_between(job.started_utc, job.finished_utc),
    )
