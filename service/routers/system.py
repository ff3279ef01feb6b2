"""Liveness, readiness and version: the routes a process supervisor and a dashboard poll."""

import platform
import sqlite3

from fastapi import APIRouter, Request
from fastapi.responses import PlainTextResponse
from pydantic import BaseModel, Field

from dynamics import __version__
from dynamics.ephemeris import ephemeris_info

from .. import storage
from ..metrics import CONTENT_TYPE, exposition
from ..problems import problem, problem_responses

router = APIRouter(tags=["system"])


class HealthOut(BaseModel):
    status: str = Field(..., examples=["ok"])


class VersionOut(BaseModel):
    name: str = Field("trailcast", examples=["trailcast"])
    version: str = Field(..., examples=[__version__])
    python: str = Field(..., examples=["3.11.7"])
    libraries: dict[str, str] = Field(..., description="Versions of the numerical libraries used.")
    ephemeris: dict = Field(..., description="Planetary ephemeris and its span.")
    schema_version: int = Field(..., description="Database schema version this build expects.")


class ReadyOut(BaseModel):
    status: str = Field(..., examples=["ready"])
    database: str = Field(..., examples=["ok"])
    schema_version: int
    workers: str = Field(
        ...,
        description="Where forecast chunks run and whether they are reachable",
        examples=["local: 2 processes per forecast"],
    )
    job_runners: int = Field(..., description="Jobs this process runs at a time (0: none)")


@router.get("/health", response_model=HealthOut, summary="Liveness: the process answers")
def get_health() -> HealthOut:
    return HealthOut(status="ok")


@router.get(
    "/ready",
    response_model=ReadyOut,
    summary="Readiness: the database answers and the forecast workers are reachable",
    description=(
        "Ready when the database answers and, if this process runs jobs, its runner threads are "
        "alive and the workers are reachable (the local process pool, or the Dask scheduler "
        "with at least one worker when TRAILCAST_DASK_SCHEDULER is set)."
    ),
    responses=problem_responses(503),
)
def get_ready(request: Request):
    try:
        version = request.app.state.store.query("PRAGMA user_version")[0][0]
    except (sqlite3.Error, AttributeError) as exc:
        return problem(503, "Service Unavailable", f"database not reachable: {exc}")
    settings = request.app.state.settings
    runner = request.app.state.runner
    if settings.job_runners == 0:
        workers = "none: this process runs no jobs (TRAILCAST_JOB_RUNNERS=0)"
    else:
        if not runner.alive():
            return problem(503, "Service Unavailable", "job runner threads are not running")
        try:
            workers = runner.executors.check()
        except Exception as exc:  # noqa: BLE001 - any failure to reach them means not ready
            return problem(503, "Service Unavailable", f"workers not reachable: {exc}")
    return ReadyOut(
        status="ready",
        database="ok",
        schema_version=version,
        workers=workers,
        job_runners=settings.job_runners,
    )


@router.get(
    "/metrics",
    response_class=PlainTextResponse,
    summary="Prometheus metrics: jobs by state, job durations, request latencies",
    description=(
        "Prometheus text exposition format 0.0.4. `trailcast_jobs{state}` and "
        "`trailcast_job_duration_seconds` come from the database (the same from every server "
        "process); `trailcast_http_request_duration_seconds` is per process (`pid` label)."
    ),
    responses={
        200: {
            "content": {
                "text/plain": {
                    "schema": {"type": "string"},
                    "example": 'trailcast_jobs{state="done"} 3\n',
                }
            }
        }
    },
)
def get_metrics(request: Request) -> PlainTextResponse:
    body = exposition(request.app.state.jobs, request.app.state.latencies)
    return PlainTextResponse(body, media_type=CONTENT_TYPE)


@router.get(
    "/version", response_model=VersionOut, summary="Versions of trailcast and its libraries"
)
def get_version() -> VersionOut:
    return VersionOut(
        version=__version__,
        python=platform.python_version(),
        libraries=_library_versions(),
        ephemeris=ephemeris_info(),
        schema_version=storage.schema_version(),
    )


def _library_versions() -> dict[str, str]:
    from importlib.metadata import PackageNotFoundError, version

    out = {}
    for dist in (
        "numpy",
        "scipy",
        "pyerfa",
        "jplephem",
        "de423",
        "rebound",
        "reboundx",
        "fastapi",
        "pydantic",
    ):
        try:
            out[dist] = version(dist)
        except PackageNotFoundError:
            out[dist] = "not installed"
    return out
