"""The one route helper for every kind of job (forecasts, screenings, and whatever comes next).

A job resource is a :class:`JobRoutes`: its kind, its path prefix and what its pages are called.
Submitting (queue full: 429; wakes the runner; 200 when a done job answers), reading, cancelling
and fetching a finished job's products turn the store's exceptions into the documented problems
here, once, instead of once per router.
"""

import inspect
from collections.abc import Callable
from dataclasses import dataclass
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Path, Request, Response
from pydantic import BaseModel, ConfigDict, Field, create_model

from ..jobs import Job, JobConflict, JobNotFound, JobStore, QueueFull, seconds_between
from ..problems import TYPE_BASE, Problem, ProblemError, problem_responses
from ..security import require_token
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

    def links_for(self, name: str, example_id: str, products: dict[str, str]) -> "JobLinks":
        """This kind's links (:func:`job_links`)."""
        return job_links(name, self.prefix, example_id, products)

    def install(self, router, body_model, to_domain, links, status_model, status_out, texts):
        """Add this kind's submit, read and cancel routes (:func:`install_job_routes`)."""
        install_job_routes(
            self,
            router,
            body_model=body_model,
            to_domain=to_domain,
            links=links,
            accepted=links.accepted_model(
                status_model.__name__.removesuffix("Out") + "AcceptedOut"
            ),
            status_model=status_model,
            status_out=status_out,
            texts=texts,
        )

    def add_file(self, router, name: str, media_type: str, example: str, make, products: str):
        """Add ``GET {prefix}/{id}/{name}``: a done job's file (CSV, iCalendar ...).

        ``make(job)`` returns ``(body, filename, headers)``; its docstring's first line is the
        route's summary and the rest its description. 404 / 409 (not done: ``products`` do not
        exist yet) as for every job.
        """
        summary, _, description = inspect.getdoc(make).partition("\n\n")

        def get_file(job_id: JobId, jobs: Jobs) -> Response:
            body, filename, headers = make(self.finished(jobs, job_id, products))
            return Response(
                body,
                media_type=f"{media_type}; charset=utf-8",
                headers={"Content-Disposition": f'attachment; filename="{filename}"', **headers},
            )

        get_file.__name__ = f"get_{self.kind}_{name.replace('.', '_')}"
        router.add_api_route(
            self.prefix.removeprefix(router.prefix) + "/{job_id}/" + name,
            get_file,
            methods=["GET"],
            response_class=Response,
            summary=summary.replace("\n", " "),
            description=description.replace("\n", " "),
            responses=product_responses(media_type, example),
        )

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


class JobStatusBase(BaseModel):
    """What every job's page shows; each kind adds its inputs, result and links."""

    id: str
    state: JobState
    years: list[int] = Field(..., description="[first, last] calendar years (UTC)")
    options: dict[str, Any] = Field(..., description="Every model option, defaults filled in")
    model_version: str
    progress: ProgressOut
    timings: TimingsOut
    attempts: int = Field(..., description="Times a runner started this job")
    cancel_requested: bool
    error: Problem | None = Field(None, description="Why the job failed (problem details)")
    cautions: list[str]

    @staticmethod
    def fields_of(job: Job, cautions: list[str]) -> dict:
        """The fields of this base for ``job`` (:func:`status_fields`)."""
        return status_fields(job, cautions)


def status_fields(job: Job, cautions: list[str]) -> dict:
    """The :class:`JobStatusBase` fields of ``job``."""
    return {
        "id": job.id,
        "state": job.state,
        "years": [job.first_year, job.last_year],
        "options": job.request["options"],
        "model_version": job.model_version,
        "progress": progress_out(job),
        "timings": timings_out(job),
        "attempts": job.attempts,
        "cancel_requested": job.cancel_requested,
        "error": job.error,
        "cautions": list(cautions),
    }


def accepted_model(name: str, links_model: type[BaseModel], example: dict) -> type[BaseModel]:
    """The ``POST`` answer of a kind: id, state, whether an existing job answered, links."""
    return create_model(
        name,
        __config__=ConfigDict(json_schema_extra={"examples": [example]}),
        id=(str, ...),
        state=(JobState, ...),
        reused=(
            bool,
            Field(..., description="True when an existing job with the same inputs answered"),
        ),
        links=(links_model, ...),
    )


@dataclass(frozen=True)
class RouteTexts:
    """Summary and description of one route in the OpenAPI description."""

    summary: str
    description: str


def install_job_routes(
    routes: JobRoutes,
    router: APIRouter,
    *,
    body_model: type[BaseModel],
    to_domain: Callable,
    links: Callable[[str], BaseModel],
    accepted: type[BaseModel],
    status_model: type[BaseModel],
    status_out: Callable[[Job], BaseModel],
    texts: dict[str, tuple[str, str]],
) -> None:
    """Add ``POST {prefix}``, ``GET {prefix}/{id}`` and ``DELETE {prefix}/{id}`` for one kind.

    ``to_domain(body, settings)`` gives ``(canonical request, label, items_total or None)``;
    ``status_out(job)`` the kind's status page; ``texts`` maps submit, get and cancel to their
    (summary, description).
    """
    texts = {k: RouteTexts(*v) for k, v in texts.items()}
    path = routes.prefix.removeprefix(router.prefix)

    def submit(
        body: body_model,  # type: ignore[valid-type]
        request: Request,
        response: Response,
        jobs: Jobs,
        settings: SettingsDep,
    ):
        canonical, label, items_total = to_domain(body, settings)
        job, queued = routes.submit(
            jobs, request, response, settings, canonical, label, items_total
        )
        return accepted(id=job.id, state=job.state, reused=not queued, links=links(job.id))

    def read(job_id: JobId, jobs: Jobs):
        return status_out(routes.get(jobs, job_id))

    def cancel(job_id: JobId, jobs: Jobs, response: Response):
        return status_out(routes.cancel(jobs, job_id, response))

    for verb, fn in (("submit", submit), ("get", read), ("cancel", cancel)):
        fn.__name__ = f"{verb}_{routes.kind}"
    guarded = [Depends(require_token)]
    router.add_api_route(
        path,
        submit,
        methods=["POST"],
        response_model=accepted,
        status_code=202,
        summary=texts["submit"].summary,
        description=texts["submit"].description,
        responses={
            200: {"description": "Already done: served from the store", "model": accepted},
            **problem_responses(401, 413, 422, 429),
        },
        dependencies=guarded,
    )
    router.add_api_route(
        path + "/{job_id}",
        read,
        methods=["GET"],
        response_model=status_model,
        summary=texts["get"].summary,
        description=texts["get"].description,
        responses=problem_responses(404, 422),
    )
    router.add_api_route(
        path + "/{job_id}",
        cancel,
        methods=["DELETE"],
        response_model=status_model,
        summary=texts["cancel"].summary,
        description=texts["cancel"].description,
        responses={
            202: {"description": "Running job asked to stop", "model": status_model},
            **problem_responses(401, 404, 409, 422),
        },
        dependencies=guarded,
    )


#: Timings of a job in the OpenAPI examples (invented).
EXAMPLE_TIMINGS = {
    "created_utc": "2026-12-01T10:00:00.000Z",
    "queued_utc": "2026-12-01T10:00:00.000Z",
    "started_utc": "2026-12-01T10:00:01.000Z",
    "finished_utc": None,
    "queued_seconds": 1.0,
    "run_seconds": 12.5,
}


@dataclass(frozen=True)
class JobLinks:
    """A kind's links: the model, a builder, and the example (for the OpenAPI description)."""

    model: type[BaseModel]
    example: dict
    prefix: str
    products: dict[str, str]

    def __call__(self, job_id: str) -> BaseModel:
        base = f"{self.prefix}/{job_id}"
        return self.model(self=base, **{k: f"{base}/{v}" for k, v in self.products.items()})

    @property
    def example_id(self) -> str:
        return self.example["self"].rsplit("/", 1)[1]

    def accepted_model(self, name: str) -> type[BaseModel]:
        """The ``POST`` answer's model with these links."""
        example = {"id": self.example_id, "state": "queued", "reused": False}
        return accepted_model(name, self.model, {**example, "links": self.example})

    def status_example(self, cautions, progress: dict, **fields) -> dict:
        """A running job's page as an OpenAPI example (invented values)."""
        return {
            "id": self.example_id,
            "state": "running",
            "progress": progress,
            "timings": EXAMPLE_TIMINGS,
            "attempts": 1,
            "cancel_requested": False,
            "error": None,
            "model_version": "0.1.0",
            **fields,
            "links": self.example,
            "cautions": list(cautions),
        }


def job_links(name: str, prefix: str, example_id: str, products: dict[str, str]) -> JobLinks:
    """Links of a job of one kind: ``self`` and one per product (``field -> path suffix``)."""
    base = f"{prefix}/{example_id}"
    example = {"self": base, **{k: f"{base}/{v}" for k, v in products.items()}}
    fields = {k: (str, Field(..., examples=[v])) for k, v in example.items()}
    return JobLinks(create_model(name, **fields), example, prefix, products)


def product_responses(media_type: str, example: str) -> dict:
    """OpenAPI responses of a done job's file product (CSV, iCalendar): the file, or 404/409."""
    return {
        200: {"content": {media_type: {"schema": {"type": "string"}, "example": example}}},
        **problem_responses(404, 409, 422),
    }
