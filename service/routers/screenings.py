"""Screening jobs: ``/v1/screenings`` (submit, status, cancel) and their JSON and CSV results.

A screening runs the quick-look geometry on every orbit of a batch and small trail forecasts on
the orbits that pass the rule (see :mod:`dynamics.screening`), as a job like a forecast: ``POST``
answers at once, ``GET`` shows per-orbit progress. An orbit that cannot be read is reported with
its index and skipped; the rest of the batch completes.
"""

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Path, Request, Response
from pydantic import BaseModel, ConfigDict, Field

from dynamics.ejection import EJECTION_SPEED_LAWS
from dynamics.forecast import NODE_MAX_DISTANCE_AU
from dynamics.geometry import TRAIL_SIMULATION_MOID_AU
from dynamics.screening import VERDICTS

from ..jobs import JobNotFound, QueueFull, parse_utc, utc_now
from ..problems import TYPE_BASE, Problem, ProblemError, problem_responses
from ..screening import (
    SCREENING_CAUTIONS,
    ScreeningJob,
    ScreeningJobStore,
    canonical_screening_request,
    table_csv,
)
from ..security import require_token
from ..settings import Settings, get_settings
from ._jobs import cancel_job, finished_job
from .geometry import _DEMO_ORBIT

router = APIRouter(prefix="/v1", tags=["screenings"])

SpeedLaw = Literal[tuple(sorted(EJECTION_SPEED_LAWS))]  # type: ignore[valid-type]
JobState = Literal["queued", "running", "done", "failed", "cancelled"]
_EXAMPLE_ID = "7a1e0c4b2d9f8e6a5b3c1d0e9f8a7b6c"
JobId = Annotated[
    str,
    Path(pattern="^[0-9a-f]{32}$", description="Job id (32 hex digits)", examples=[_EXAMPLE_ID]),
]
_CAUTIONS = list(SCREENING_CAUTIONS)


class ScreeningRuleIn(BaseModel):
    """The rule deciding which orbits get a trail forecast (defaults in the README)."""

    model_config = ConfigDict(
        extra="forbid", json_schema_extra={"examples": [{"moid_max_au": 0.05}]}
    )

    moid_max_au: float = Field(
        TRAIL_SIMULATION_MOID_AU, gt=0.0, le=10.0, description="Candidate when MOID < this (au)"
    )
    node_max_au: float = Field(
        NODE_MAX_DISTANCE_AU,
        gt=0.0,
        le=10.0,
        description="... and the nearer node lies within this of Earth's orbit (au)",
    )


class ScreeningOptionsIn(BaseModel):
    """The small forecast run for each candidate; every field optional."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{"particles": 30}]})

    particles: int = Field(30, ge=3, le=100_000, description="Meteoroids per trail and passage")
    seed: int = Field(1, ge=0, le=2**32 - 1, description="Random seed; same seed, same answer")
    max_trail_age_years: float = Field(100.0, gt=0.0, le=5000.0, description="Oldest trail")
    integrator: Literal["whfast", "ias15"] = Field("whfast", description="REBOUND integrator")
    speed_law: SpeedLaw = Field("whipple1951", description="Ejection speed law")  # type: ignore[valid-type]
    mass_index: float = Field(2.0, gt=1.0, lt=3.0, description="Differential mass index s")
    meteoroid_density_g_cm3: float = Field(1.0, ge=0.05, le=8.0, description="g/cm^3")
    nucleus_radius_km: float = Field(2.0, ge=0.01, le=100.0, description="km")


class ScreeningIn(BaseModel):
    """Request: many orbit objects, the years, and optionally the rule and forecast options."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "orbits": [_DEMO_ORBIT],
                    "years": [2039, 2039],
                    "rule": {"moid_max_au": 0.05, "node_max_au": 0.25},
                    "options": {"particles": 30, "max_trail_age_years": 100},
                }
            ]
        },
    )

    orbits: list[dict[str, Any]] = Field(
        ...,
        min_length=1,
        description="Orbit input objects (keys as in the README); one that cannot be read is "
        "reported in the results with its index and skipped",
    )
    years: list[int] = Field(
        ..., min_length=1, max_length=2, description="[first, last] calendar years (UTC)"
    )
    rule: ScreeningRuleIn | None = None
    options: ScreeningOptionsIn | None = None


class ScreeningLinksOut(BaseModel):
    self: str = Field(..., examples=[f"/v1/screenings/{_EXAMPLE_ID}"])
    results_json: str = Field(..., examples=[f"/v1/screenings/{_EXAMPLE_ID}/results.json"])
    results_csv: str = Field(..., examples=[f"/v1/screenings/{_EXAMPLE_ID}/results.csv"])


class ScreeningAcceptedOut(BaseModel):
    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "id": _EXAMPLE_ID,
                    "state": "queued",
                    "reused": False,
                    "links": {
                        "self": f"/v1/screenings/{_EXAMPLE_ID}",
                        "results_json": f"/v1/screenings/{_EXAMPLE_ID}/results.json",
                        "results_csv": f"/v1/screenings/{_EXAMPLE_ID}/results.csv",
                    },
                }
            ]
        }
    )

    id: str
    state: JobState
    reused: bool = Field(..., description="True when a job with the same inputs answered")
    links: ScreeningLinksOut


class ScreeningProgressOut(BaseModel):
    orbits_done: int = Field(..., ge=0, examples=[120])
    orbits_total: int = Field(..., ge=0, examples=[200])
    fraction: float = Field(..., ge=0.0, le=1.0, examples=[0.6])
    stage: str = Field(..., examples=["trail forecasts"])


class ScreeningJobOut(BaseModel):
    """A screening's state, per-orbit progress and timings; the summary counts when done."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "id": _EXAMPLE_ID,
                    "state": "running",
                    "years": [2039, 2039],
                    "rule": {"moid_max_au": 0.05, "node_max_au": 0.25},
                    "options": {"particles": 30, "seed": 1},
                    "model_version": "0.1.0",
                    "progress": {
                        "orbits_done": 120,
                        "orbits_total": 200,
                        "fraction": 0.6,
                        "stage": "trail forecasts",
                    },
                    "created_utc": "2026-12-01T10:00:00.000Z",
                    "started_utc": "2026-12-01T10:00:01.000Z",
                    "finished_utc": None,
                    "run_seconds": 12.5,
                    "attempts": 1,
                    "error": None,
                    "summary": None,
                    "links": {
                        "self": f"/v1/screenings/{_EXAMPLE_ID}",
                        "results_json": f"/v1/screenings/{_EXAMPLE_ID}/results.json",
                        "results_csv": f"/v1/screenings/{_EXAMPLE_ID}/results.csv",
                    },
                    "cautions": _CAUTIONS,
                }
            ]
        }
    )

    id: str
    state: JobState
    years: list[int]
    rule: dict[str, Any]
    options: dict[str, Any] = Field(..., description="Forecast options, defaults filled in")
    model_version: str
    progress: ScreeningProgressOut
    created_utc: str
    started_utc: str | None
    finished_utc: str | None
    run_seconds: float | None = Field(None, description="Start to finish, or to now (s)")
    attempts: int
    error: Problem | None = None
    summary: dict[str, Any] | None = Field(
        None, description="When done: counts per verdict, rule, options (results in links)"
    )
    links: ScreeningLinksOut
    cautions: list[str]


class ScreeningResultsOut(BaseModel):
    """Every orbit of a done screening, in input order, with the summary."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "screening": {"orbits": 1, "candidates": 1, "verdicts": {"no encounter": 1}},
                    "orbits": [
                        {
                            "index": 0,
                            "name": _DEMO_ORBIT["name"],
                            "verdict": "no encounter",
                            "candidate": True,
                            "rank": 1,
                            "geometry": {"moid_au": 0.00917, "nearest_node_au": 0.00968},
                            "forecast": {"encounters": [], "near_misses": [], "notes": []},
                            "error": None,
                        }
                    ],
                }
            ]
        }
    )

    screening: dict[str, Any] = Field(..., description="Counts, rule, options, cautions")
    orbits: list[dict[str, Any]] = Field(
        ..., description=f"One per orbit; verdicts: {', '.join(VERDICTS)}"
    )


def get_screenings(request: Request) -> ScreeningJobStore:
    return request.app.state.screenings


Screenings = Annotated[ScreeningJobStore, Depends(get_screenings)]
SettingsDep = Annotated[Settings, Depends(get_settings)]


def _links(job_id: str) -> ScreeningLinksOut:
    base = f"/v1/screenings/{job_id}"
    return ScreeningLinksOut(
        self=base, results_json=f"{base}/results.json", results_csv=f"{base}/results.csv"
    )


def _job_out(job: ScreeningJob) -> ScreeningJobOut:
    run_s = None
    if job.started_utc:
        end = parse_utc(job.finished_utc) if job.finished_utc else utc_now()
        run_s = round((end - parse_utc(job.started_utc)).total_seconds(), 3)
    total = max(job.orbits_total, 0)
    done = min(job.orbits_done, total)
    return ScreeningJobOut(
        id=job.id,
        state=job.state,
        years=[job.first_year, job.last_year],
        rule=job.request["rule"],
        options=job.request["options"],
        model_version=job.model_version,
        progress=ScreeningProgressOut(
            orbits_done=done,
            orbits_total=total,
            fraction=done / total if total else 1.0,
            stage=job.progress_stage,
        ),
        created_utc=job.created_utc,
        started_utc=job.started_utc,
        finished_utc=job.finished_utc,
        run_seconds=run_s,
        attempts=job.attempts,
        error=job.error,
        summary=job.result["screening"] if job.state == "done" and job.result else None,
        links=_links(job.id),
        cautions=_CAUTIONS,
    )


def _not_found(job_id: str) -> ProblemError:
    return ProblemError(404, "Not Found", f"no screening {job_id}", TYPE_BASE + "job-not-found")


@router.post(
    "/screenings",
    response_model=ScreeningAcceptedOut,
    status_code=202,
    summary="Submit a batch of orbits for screening",
    description=(
        "Queues a screening job: the quick-look geometry (Earth MOID, node distances) for every "
        "orbit, and a small trail forecast for each orbit that passes the rule (default: MOID "
        "< 0.05 au and the nearer node within 0.25 au of Earth's orbit). Answers at once (202) "
        "with the job's id; the id is a hash of the canonical inputs, so the same batch gives "
        "the same job (200 with `reused: true` when it is already done). An orbit that cannot "
        "be read does not refuse the batch: it is reported in the results with its index. "
        "Predictions are model estimates; spacecraft operators defer to the responsible "
        "agencies."
    ),
    responses={
        200: {"description": "Already done: served from the store", "model": ScreeningAcceptedOut},
        **problem_responses(401, 413, 422, 429),
    },
    dependencies=[Depends(require_token)],
)
def submit_screening(
    body: ScreeningIn,
    request: Request,
    response: Response,
    screenings: Screenings,
    settings: SettingsDep,
) -> ScreeningAcceptedOut:
    if len(body.orbits) > settings.max_orbits_per_screening:
        raise ProblemError(
            422,
            "Limit exceeded",
            f"{len(body.orbits)} orbits sent; this server takes at most "
            f"{settings.max_orbits_per_screening} per screening",
            TYPE_BASE + "limit-exceeded",
            field="orbits",
        )
    first, last = body.years[0], body.years[-1]
    for k, y in enumerate(body.years):
        if not 1800 <= y <= 2199:
            raise ProblemError(
                422,
                "Invalid request",
                f"years.{k}: {y} lies outside 1800-2199 (the DE423 ephemeris span)",
                TYPE_BASE + "invalid-request",
                field=f"years.{k}",
            )
    if last < first:
        raise ProblemError(
            422,
            "Invalid request",
            f"years: last ({last}) precedes first ({first})",
            TYPE_BASE + "invalid-request",
            field="years",
        )
    if last - first + 1 > settings.max_years_per_job:
        raise ProblemError(
            422,
            "Limit exceeded",
            f"{last - first + 1} years asked; this server takes at most "
            f"{settings.max_years_per_job} per job",
            TYPE_BASE + "limit-exceeded",
            field="years",
        )
    opts = body.options or ScreeningOptionsIn()
    if opts.particles > settings.max_particles_per_job:
        raise ProblemError(
            422,
            "Limit exceeded",
            f"{opts.particles} particles asked; this server takes at most "
            f"{settings.max_particles_per_job} per job",
            TYPE_BASE + "limit-exceeded",
            field="options.particles",
        )
    rule = (body.rule or ScreeningRuleIn()).model_dump()
    canonical = canonical_screening_request(body.orbits, first, last, rule, opts.model_dump())
    try:
        job, queued = screenings.submit(canonical, settings.max_queued_jobs)
    except QueueFull as exc:
        raise ProblemError(
            429,
            "Too Many Requests",
            f"the screening queue is full ({exc}); submit again later",
            TYPE_BASE + "queue-full",
            headers={"Retry-After": "60"},
        ) from None
    if queued:
        runner = getattr(request.app.state, "screening_runner", None)
        if runner is not None:
            runner.wake()
    if job.state == "done":
        response.status_code = 200
    response.headers["Location"] = f"/v1/screenings/{job.id}"
    return ScreeningAcceptedOut(id=job.id, state=job.state, reused=not queued, links=_links(job.id))


@router.get(
    "/screenings/{job_id}",
    response_model=ScreeningJobOut,
    summary="State and per-orbit progress of a screening; its summary when done",
    description=(
        "`progress` counts finished orbits (orbits found in the store count at once). When "
        "done, `summary` gives the counts per verdict, the rule and the forecast options; every "
        "orbit's result is at `links.results_json` and `links.results_csv`. Predictions are "
        "model estimates; spacecraft operators defer to the responsible agencies; observers "
        "mind the usual night-time safety."
    ),
    responses=problem_responses(404, 422),
)
def get_screening(job_id: JobId, screenings: Screenings) -> ScreeningJobOut:
    try:
        return _job_out(screenings.get(job_id, with_result=True))
    except JobNotFound:
        raise _not_found(job_id) from None


@router.delete(
    "/screenings/{job_id}",
    response_model=ScreeningJobOut,
    summary="Cancel a queued or running screening",
    description=(
        "A queued screening is cancelled at once (200); a running one stops after its current "
        "orbit (202, results of finished orbits stay stored). A finished one gives 409."
    ),
    responses={202: {"description": "Cancellation requested"}, **problem_responses(404, 409, 422)},
    dependencies=[Depends(require_token)],
)
def cancel_screening(job_id: JobId, screenings: Screenings, response: Response) -> ScreeningJobOut:
    return _job_out(cancel_job(screenings, job_id, response, _not_found))


def _done(screenings: ScreeningJobStore, job_id: str) -> ScreeningJob:
    return finished_job(screenings, job_id, _not_found, "screening", "results")


@router.get(
    "/screenings/{job_id}/results.json",
    response_model=ScreeningResultsOut,
    summary="Every orbit of a done screening with its verdict and, for candidates, encounters",
    description=(
        "Orbits in input order (`index`), each with its geometry (MOID, node miss distances), "
        "rank (1 = smallest MOID), whether it passed the rule and why, its verdict and, for "
        "candidates, the forecast's encounters and near misses (times UTC, solar longitude "
        "geometric J2000). Unreadable orbits carry verdict `invalid` and the error."
    ),
    responses=problem_responses(404, 409, 422),
)
def get_screening_results(job_id: JobId, screenings: Screenings) -> ScreeningResultsOut:
    return ScreeningResultsOut(**_done(screenings, job_id).result)


_CSV_EXAMPLE = (
    "line,rank,name,verdict,candidate,moid_au,nearest_node_au,ascending_miss_distance_au,"
    "descending_miss_distance_au,encounters,near_misses,first_encounter_peak_utc,"
    "closest_encounter_miss_distance_au,max_zhr,error,key\r\n"
    f"1,1,{_DEMO_ORBIT['name']},no encounter,True,0.00917,0.00968,6.12013,-0.00968,0,0,,,,,"
    "3f0c...\r\n"
)


@router.get(
    "/screenings/{job_id}/results.csv",
    response_class=Response,
    summary="A done screening as CSV: one row per orbit",
    description=(
        "Columns: line (the orbit's place in the request counted from 1, as `trailcast "
        "screen` numbers the lines of a batch file), rank, name, verdict, candidate, "
        "MOID and node distances (au), numbers of encounters and near misses, the first "
        "encounter's peak (UTC), the closest encounter's miss distance (au), the largest ZHR "
        "estimate, the error of an unreadable or failed orbit and its content key. Cautions in "
        "the `Trailcast-Cautions` header."
    ),
    responses={
        200: {"content": {"text/csv": {"schema": {"type": "string"}, "example": _CSV_EXAMPLE}}},
        **problem_responses(404, 409, 422),
    },
)
def get_screening_csv(job_id: JobId, screenings: Screenings) -> Response:
    job = _done(screenings, job_id)
    # Numbered from 1, as `trailcast screen` numbers the lines of a batch file: item k of the
    # request is line k of a JSON-lines file holding the same orbits.
    rows = [
        {**r, "line": r["index"] + 1 if "index" in r else r["line"]} for r in job.result["orbits"]
    ]
    return Response(
        table_csv({"orbits": rows}),
        media_type="text/csv; charset=utf-8",
        headers={
            "Content-Disposition": f'attachment; filename="trailcast-screening-{job.id}.csv"',
            "Trailcast-Cautions": " ".join(_CAUTIONS),
        },
    )
