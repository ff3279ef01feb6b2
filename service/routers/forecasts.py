"""Forecast jobs: ``/v1/forecasts`` (submit, status, cancel) and their CSV and iCalendar exports.

A forecast takes minutes, so it is a job: ``POST`` answers at once with the job's id, state and
links; ``GET`` shows progress and, when done, the result. The id is a hash of the canonical inputs
and the model version: the same request gives the same id, and a finished result is served again
rather than recomputed.
"""

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Path, Request, Response
from pydantic import BaseModel, ConfigDict, Field

from dynamics.ejection import EJECTION_SPEED_LAWS
from dynamics.forecast import CAUTIONS
from dynamics.orbit_input import parse_orbit

from ..exports import encounters_csv, encounters_ics
from ..jobs import (
    Job,
    JobNotFound,
    JobStore,
    QueueFull,
    canonical_request,
    parse_utc,
)
from ..problems import TYPE_BASE, Problem, ProblemError, problem_responses
from ..schemas import ForecastOut
from ..security import require_token
from ..settings import Settings, get_settings
from ._jobs import cancel_job, finished_job
from ._site import SITE_ICS_NOTE, SITE_LAT, SITE_LON, optional_site
from .geometry import _DEMO_ORBIT

router = APIRouter(prefix="/v1", tags=["forecasts"])

SpeedLaw = Literal[tuple(sorted(EJECTION_SPEED_LAWS))]  # type: ignore[valid-type]
JobState = Literal["queued", "running", "done", "failed", "cancelled"]
JobId = Annotated[
    str,
    Path(
        pattern="^[0-9a-f]{32}$",
        description="Job id (32 hex digits)",
        examples=["5d2c3f0e9a1b4c7d8e6f5a4b3c2d1e0f"],
    ),
]
_EXAMPLE_ID = "5d2c3f0e9a1b4c7d8e6f5a4b3c2d1e0f"


class ForecastOptionsIn(BaseModel):
    """Model choices; every one optional with the default the command line uses."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={"examples": [{"seed": 1, "trails": [2026], "integrator": "whfast"}]},
    )

    particles: int | None = Field(
        None,
        ge=3,
        le=100_000,
        description="Meteoroids per trail and Earth passage (default 300; the server may set a "
        "lower ceiling)",
    )
    seed: int = Field(1, ge=0, le=2**32 - 1, description="Random seed; same seed, same answer")
    trails: list[int] | None = Field(
        None,
        min_length=1,
        max_length=100,
        description="Only these trails, by perihelion year (default: all within the age limit)",
    )
    max_trail_age_years: float = Field(
        500.0, gt=0.0, le=5000.0, description="Oldest trail followed (years before the first)"
    )
    integrator: Literal["whfast", "ias15"] = Field("whfast", description="REBOUND integrator")
    speed_law: SpeedLaw = Field("whipple1951", description="Ejection speed law")  # type: ignore[valid-type]
    mass_index: float = Field(2.0, gt=1.0, lt=3.0, description="Differential mass index s")
    meteoroid_density_g_cm3: float = Field(
        1.0, ge=0.05, le=8.0, description="Meteoroid bulk density (g/cm^3)"
    )
    nucleus_radius_km: float = Field(2.0, ge=0.01, le=100.0, description="Nucleus radius (km)")
    dust_mass_per_return_g: float | None = Field(
        None,
        ge=1.0,
        le=1e20,
        description="Dust mass released per return (g) for absolute ZHRs; default: 1 m of the "
        "nucleus surface per return (a rule of thumb)",
    )
    calibration: "CalibrationIn | None" = Field(
        None, description="A past observed outburst of this parent: ZHRs are scaled to it"
    )
    clones: int = Field(
        5, ge=0, le=20, description="Clones drawn from the orbit's covariance, when it has one"
    )


class CalibrationIn(BaseModel):
    """A past observed outburst of the same parent (calibrated ZHR mode)."""

    model_config = ConfigDict(extra="forbid")

    year: int = Field(..., ge=1800, le=2199, description="Year of the observed outburst")
    trail_year: int = Field(..., ge=-1999, le=2199, description="Perihelion year of its trail")
    zhr: float = Field(..., gt=0.0, le=1e6, description="Observed peak ZHR")


ForecastOptionsIn.model_rebuild()


class ForecastIn(BaseModel):
    """Request: a parent orbit, the years to forecast and optional model choices."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "orbit": _DEMO_ORBIT,
                    "years": [2040, 2040],
                    "particles": 30,
                    "options": {"seed": 1, "trails": [2026]},
                }
            ]
        },
    )

    orbit: dict[str, Any] = Field(
        ...,
        description="Orbit input object (heliocentric osculating elements, ecliptic and equinox "
        "J2000: name, epoch, q [au], e, i, node, peri [deg], tp; see the README)",
    )
    years: list[int] = Field(
        ...,
        min_length=1,
        max_length=2,
        description="[first, last] calendar years (UTC), inclusive, within 1800-2199; [year] "
        "for one",
    )
    particles: int | None = Field(
        None, ge=3, le=100_000, description="Shorthand for options.particles"
    )
    options: ForecastOptionsIn | None = None


class LinksOut(BaseModel):
    self: str = Field(..., examples=[f"/v1/forecasts/{_EXAMPLE_ID}"])
    encounters_csv: str = Field(..., examples=[f"/v1/forecasts/{_EXAMPLE_ID}/encounters.csv"])
    encounters_ics: str = Field(..., examples=[f"/v1/forecasts/{_EXAMPLE_ID}/encounters.ics"])


class JobAcceptedOut(BaseModel):
    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "id": _EXAMPLE_ID,
                    "state": "queued",
                    "reused": False,
                    "links": {
                        "self": f"/v1/forecasts/{_EXAMPLE_ID}",
                        "encounters_csv": f"/v1/forecasts/{_EXAMPLE_ID}/encounters.csv",
                        "encounters_ics": f"/v1/forecasts/{_EXAMPLE_ID}/encounters.ics",
                    },
                }
            ]
        }
    )

    id: str
    state: JobState
    reused: bool = Field(
        ..., description="True when an existing job with the same inputs answered the request"
    )
    links: LinksOut


class ProgressOut(BaseModel):
    fraction: float = Field(..., ge=0.0, le=1.0, examples=[0.42])
    stage: str = Field(..., examples=["integration"])


class TimingsOut(BaseModel):
    created_utc: str
    queued_utc: str
    started_utc: str | None
    finished_utc: str | None
    queued_seconds: float | None = Field(None, description="Queue entry to start (s)")
    run_seconds: float | None = Field(None, description="Start to finish, or to now (s)")


class JobOut(BaseModel):
    """A job's state, progress, timings; the result when done, the error when failed."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "id": _EXAMPLE_ID,
                    "state": "running",
                    "parent_name": _DEMO_ORBIT["name"],
                    "years": [2040, 2040],
                    "options": {"particles": 30, "seed": 1, "trails": [2026]},
                    "model_version": "0.1.0",
                    "progress": {"fraction": 0.42, "stage": "integration"},
                    "timings": {
                        "created_utc": "2026-12-01T10:00:00.000Z",
                        "queued_utc": "2026-12-01T10:00:00.000Z",
                        "started_utc": "2026-12-01T10:00:01.000Z",
                        "finished_utc": None,
                        "queued_seconds": 1.0,
                        "run_seconds": 12.5,
                    },
                    "attempts": 1,
                    "cancel_requested": False,
                    "error": None,
                    "result": None,
                    "links": {
                        "self": f"/v1/forecasts/{_EXAMPLE_ID}",
                        "encounters_csv": f"/v1/forecasts/{_EXAMPLE_ID}/encounters.csv",
                        "encounters_ics": f"/v1/forecasts/{_EXAMPLE_ID}/encounters.ics",
                    },
                    "cautions": list(CAUTIONS),
                }
            ]
        }
    )

    id: str
    state: JobState
    parent_name: str
    years: list[int]
    options: dict[str, Any] = Field(..., description="Every model option, defaults filled in")
    model_version: str
    progress: ProgressOut
    timings: TimingsOut
    attempts: int = Field(..., description="Times a runner started this job")
    cancel_requested: bool
    error: Problem | None = Field(None, description="Why the job failed (problem details)")
    result: ForecastOut | None = Field(None, description="The forecast, once done")
    links: LinksOut
    cautions: list[str]


def get_jobs(request: Request) -> JobStore:
    return request.app.state.jobs


Jobs = Annotated[JobStore, Depends(get_jobs)]
SettingsDep = Annotated[Settings, Depends(get_settings)]


def _links(job_id: str) -> LinksOut:
    base = f"/v1/forecasts/{job_id}"
    return LinksOut(
        self=base,
        encounters_csv=f"{base}/encounters.csv",
        encounters_ics=f"{base}/encounters.ics",
    )


def _seconds(a: str | None, b: str | None) -> float | None:
    from ..jobs import utc_now

    if a is None:
        return None
    end = parse_utc(b) if b else utc_now()
    return round((end - parse_utc(a)).total_seconds(), 3)


def job_out(job: Job) -> JobOut:
    return JobOut(
        id=job.id,
        state=job.state,
        parent_name=job.parent_name,
        years=[job.first_year, job.last_year],
        options=job.request["options"],
        model_version=job.model_version,
        progress=ProgressOut(
            fraction=min(1.0, max(0.0, job.progress_fraction)), stage=job.progress_stage
        ),
        timings=TimingsOut(
            created_utc=job.created_utc,
            queued_utc=job.queued_utc,
            started_utc=job.started_utc,
            finished_utc=job.finished_utc,
            queued_seconds=_seconds(job.queued_utc, job.started_utc) if job.started_utc else None,
            run_seconds=_seconds(job.started_utc, job.finished_utc),
        ),
        attempts=job.attempts,
        cancel_requested=job.cancel_requested,
        error=job.error,
        result=job.result if job.state == "done" else None,
        links=_links(job.id),
        cautions=list(CAUTIONS),
    )


def _not_found(job_id: str) -> ProblemError:
    return ProblemError(404, "Not Found", f"no forecast job {job_id}", TYPE_BASE + "job-not-found")


def _limit(field: str, detail: str) -> ProblemError:
    return ProblemError(422, "Limit exceeded", detail, TYPE_BASE + "limit-exceeded", field=field)


def canonical_from_body(body: ForecastIn, settings: Settings) -> tuple[dict, str]:
    """Validate the body against the model and the server's limits; canonical request + name."""
    orbit = parse_orbit(body.orbit, path="orbit.")
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
        raise _limit(
            "years",
            f"{last - first + 1} years asked; this server takes at most "
            f"{settings.max_years_per_job} per job",
        )
    opts = body.options or ForecastOptionsIn()
    if body.particles is not None and opts.particles is not None:
        if body.particles != opts.particles:
            raise ProblemError(
                422,
                "Invalid request",
                "particles and options.particles differ; give one",
                TYPE_BASE + "invalid-request",
                field="particles",
            )
    particles = body.particles or opts.particles or 300
    if particles > settings.max_particles_per_job:
        raise _limit(
            "particles",
            f"{particles} particles asked; this server takes at most "
            f"{settings.max_particles_per_job} per job",
        )
    if opts.calibration is not None and opts.calibration.trail_year >= opts.calibration.year:
        raise ProblemError(
            422,
            "Invalid request",
            "options.calibration.trail_year must precede options.calibration.year",
            TYPE_BASE + "invalid-request",
            field="options.calibration.trail_year",
        )
    options = opts.model_dump()
    options["particles"] = particles
    options["trails"] = sorted(set(opts.trails)) if opts.trails is not None else None
    return canonical_request(orbit.to_json(), first, last, options), orbit.name


@router.post(
    "/forecasts",
    response_model=JobAcceptedOut,
    status_code=202,
    summary="Submit a dust-trail forecast job",
    description=(
        "Validates the orbit and options and queues a forecast job, answering at once with its "
        "id, state and links (202). The id is a hash of the canonical inputs and the model "
        "version: the same request gives the same id; if that job is already done, the answer "
        "is 200 with `reused: true` and nothing is recomputed; a queued or running one is "
        "returned as is (202, `reused: true`); a failed or cancelled one is queued again. "
        "Requires the bearer token when the server sets one. Predictions are model estimates; "
        "spacecraft operators defer to the responsible agencies."
    ),
    responses={
        200: {"description": "Already done: served from the store", "model": JobAcceptedOut},
        **problem_responses(401, 413, 422, 429),
    },
    dependencies=[Depends(require_token)],
)
def submit_forecast(
    body: ForecastIn,
    request: Request,
    response: Response,
    jobs: Jobs,
    settings: SettingsDep,
) -> JobAcceptedOut:
    canonical, name = canonical_from_body(body, settings)
    try:
        job, queued = jobs.submit(canonical, name, settings.max_queued_jobs)
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
    response.headers["Location"] = f"/v1/forecasts/{job.id}"
    return JobAcceptedOut(id=job.id, state=job.state, reused=not queued, links=_links(job.id))


@router.get(
    "/forecasts/{job_id}",
    response_model=JobOut,
    summary="State, progress and timings of a forecast job; the result when done",
    description=(
        "`state` is one of queued, running, done, failed, cancelled. While running, `progress` "
        "gives the fraction done and the stage (updated after every integration chunk). When "
        "done, `result` holds the forecast (units in the names; times UTC; solar longitude "
        "geometric J2000); when failed, `error` holds problem details. Predictions are model "
        "estimates with real uncertainty; spacecraft operators defer to the responsible "
        "agencies; observers mind the usual night-time safety."
    ),
    responses=problem_responses(404, 422),
)
def get_forecast(job_id: JobId, jobs: Jobs) -> JobOut:
    try:
        return job_out(jobs.get(job_id, with_result=True))
    except JobNotFound:
        raise _not_found(job_id) from None


@router.delete(
    "/forecasts/{job_id}",
    response_model=JobOut,
    summary="Cancel a queued or running forecast job",
    description=(
        "A queued job is cancelled at once (200, state `cancelled`). A running job is asked to "
        "stop (202, `cancel_requested: true`); it becomes `cancelled` after its current "
        "integration chunk. A done, failed or cancelled job gives 409. Requires the bearer "
        "token when the server sets one."
    ),
    responses={
        202: {"description": "Running job asked to stop", "model": JobOut},
        **problem_responses(401, 404, 409, 422),
    },
    dependencies=[Depends(require_token)],
)
def cancel_forecast(response: Response, job_id: JobId, jobs: Jobs) -> JobOut:
    return job_out(cancel_job(jobs, job_id, response, _not_found))


def _done_job(jobs: JobStore, job_id: str) -> Job:
    return finished_job(jobs, job_id, _not_found, "job", "exports")


_CSV_EXAMPLE = (
    "forecast_id,parent,kind,year,trail.perihelion_year,trail.revolutions,"
    "trail.perihelion_tdb,node,peak_utc,solar_longitude_deg,miss_distance_au,"
    "miss_distance_spread_au,fwhm_hours,radiant.ra_deg,radiant.dec_deg,vg_km_s,vinf_km_s,"
    "particles,dilution\r\n"
    f"{_EXAMPLE_ID},P/2026 W3 (Hollow Pine) [invented demo comet],encounter,2040,2026,1,"
    "2026-10-30T06:00:01 TDB,descending,2040-04-11T08:32:43Z,21.514,0.004351,0.000772,1.23,"
    "235.24,57.12,25.7,28.03,20,0.9958\r\n"
)


@router.get(
    "/forecasts/{job_id}/encounters.csv",
    response_class=Response,
    summary="A done forecast's encounters and near misses as CSV",
    description=(
        "One row per trail crossing (`kind` = encounter or near_miss), one value per column: "
        "nested keys flattened with dots (`radiant.ra_deg`, `zhr.estimate`, "
        "`window.start_utc`); every scalar key the forecast has becomes a column. The activity "
        "profiles have their own CSV (`/v1/forecasts/{id}/profiles.csv`). Times UTC; solar "
        "longitude geometric J2000. The "
        "cautions travel in the `Trailcast-Cautions` header: predictions are model estimates; "
        "spacecraft operators defer to the responsible agencies."
    ),
    responses={
        200: {"content": {"text/csv": {"schema": {"type": "string"}, "example": _CSV_EXAMPLE}}},
        **problem_responses(404, 409, 422),
    },
)
def get_forecast_csv(job_id: JobId, jobs: Jobs) -> Response:
    job = _done_job(jobs, job_id)
    parent = job.result["parent"].get("name", job.parent_name)
    rows = [
        {"forecast_id": job.id, "parent": parent, "kind": kind, **e}
        for kind, key in (("encounter", "encounters"), ("near_miss", "near_misses"))
        for e in job.result.get(key, [])
    ]
    return Response(
        encounters_csv(rows),
        media_type="text/csv; charset=utf-8",
        headers={
            "Content-Disposition": f'attachment; filename="trailcast-{job.id}-encounters.csv"',
            "Trailcast-Cautions": " ".join(CAUTIONS),
        },
    )


_ICS_EXAMPLE = (
    "BEGIN:VCALENDAR\r\nVERSION:2.0\r\nPRODID:-//trailcast//trailcast 0.1.0//EN\r\n"
    "BEGIN:VEVENT\r\nSUMMARY:Possible meteor outburst: P/2026 W3 (Hollow Pine) [invented demo "
    "comet]\\, 2026 trail\r\nDTSTART:20400411T080154Z\r\nDTEND:20400411T090332Z\r\n"
    f"UID:{_EXAMPLE_ID}-0@trailcast\r\nEND:VEVENT\r\nEND:VCALENDAR\r\n"
)


@router.get(
    "/forecasts/{job_id}/encounters.ics",
    response_class=Response,
    summary="A done forecast's encounters as an iCalendar (RFC 5545)",
    description=(
        "One event per predicted encounter (near misses are left out: no outburst is expected "
        "from them). The event spans the forecast's activity window when it gives one, until "
        "then the peak +/- FWHM/2 (at least 5 minutes either side), which the description "
        "says; the description gives the peak, solar longitude, radiant, speed, miss distance "
        "and the cautions."
    )
    + SITE_ICS_NOTE,
    responses={
        200: {
            "content": {"text/calendar": {"schema": {"type": "string"}, "example": _ICS_EXAMPLE}}
        },
        **problem_responses(404, 409, 422),
    },
)
def get_forecast_ics(
    job_id: JobId, jobs: Jobs, lat: float | None = SITE_LAT, lon: float | None = SITE_LON
) -> Response:
    site = optional_site(lat, lon)
    job = _done_job(jobs, job_id)
    parent = job.result["parent"].get("name", job.parent_name)
    items = [
        (job.id, k, parent, e, job.finished_utc) for k, e in enumerate(job.result["encounters"])
    ]
    body = encounters_ics(
        items, f"trailcast: {parent}", job.result.get("cautions", list(CAUTIONS)), site=site
    )
    return Response(
        body,
        media_type="text/calendar; charset=utf-8",
        headers={
            "Content-Disposition": f'attachment; filename="trailcast-{job.id}-encounters.ics"'
        },
    )
