"""Forecast jobs: ``/v1/forecasts`` (submit, status, cancel) and their CSV and iCalendar exports.

A forecast takes minutes, so it is a job: ``POST`` answers at once with the job's id, state and
links; ``GET`` shows progress and, when done, the result. The id is a hash of the canonical inputs
and the model version: the same request gives the same id, and a finished result is served again
rather than recomputed.
"""

from fastapi import APIRouter, Response
from pydantic import ConfigDict, Field

from dynamics.forecast import CAUTIONS

from ..exports import encounters_csv, encounters_ics, kind_of
from ..jobs import Job
from ..models import ForecastIn
from ..schemas import ForecastOut
from ..settings import Settings
from ._jobs import JobId, JobRoutes, Jobs, JobStatusBase, product_responses
from ._site import SITE_ICS_NOTE, SITE_LAT, SITE_LON, optional_site
from .geometry import DEMO_ORBIT

router = APIRouter(prefix="/v1", tags=["forecasts"])
ROUTES = JobRoutes("forecast", "/v1/forecasts", "forecast job")
_EXAMPLE_ID = "5d2c3f0e9a1b4c7d8e6f5a4b3c2d1e0f"
_LINKS = ROUTES.links_for(
    "LinksOut",
    _EXAMPLE_ID,
    {"encounters_csv": "encounters.csv", "encounters_ics": "encounters.ics"},
)
LinksOut = _LINKS.model


class JobOut(JobStatusBase):
    """A forecast job's state, progress, timings; the result when done, the error when failed."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                _LINKS.status_example(
                    CAUTIONS,
                    {"fraction": 0.42, "stage": "integration"},
                    parent_name=DEMO_ORBIT["name"],
                    years=[2040, 2040],
                    options={"particles": 30, "seed": 1, "trails": [2026]},
                    result=None,
                )
            ]
        }
    )

    parent_name: str
    result: ForecastOut | None = Field(None, description="The forecast, once done")
    links: LinksOut


def job_out(job: Job) -> JobOut:
    done = job.state == "done"
    return JobOut(
        **JobStatusBase.fields_of(job, CAUTIONS),
        parent_name=job.label,
        result=job.result if done else None,
        links=_LINKS(job.id),
    )


def _to_domain(body: ForecastIn, settings: Settings):
    canonical, name = body.to_domain(settings.max_years_per_job, settings.max_particles_per_job)
    return canonical, name, None


ROUTES.install(
    router,
    ForecastIn,
    _to_domain,
    _LINKS,
    JobOut,
    job_out,
    {
        "submit": (
            "Submit a dust-trail forecast job",
            "Validates the orbit and options and queues a forecast job, answering at once with "
            "its id, state and links (202). The id is a hash of the canonical inputs and the "
            "model version: the same request gives the same id; if that job is already done, "
            "the answer is 200 with `reused: true` and nothing is recomputed; a queued or "
            "running one is returned as is (202, `reused: true`); a failed or cancelled one is "
            "queued again. Requires the bearer token when the server sets one. Predictions are "
            "model estimates; spacecraft operators defer to the responsible agencies.",
        ),
        "get": (
            "State, progress and timings of a forecast job; the result when done",
            "`state` is one of queued, running, done, failed, cancelled. While running, "
            "`progress` gives the fraction done (below 1) and the stage; only a done job shows "
            "1 and `done`. When done, `result` holds the forecast (units in the names; times "
            "UTC; solar longitude geometric J2000); when failed, `error` holds problem details. "
            "Predictions are model estimates with real uncertainty; spacecraft operators defer "
            "to the responsible agencies; observers mind the usual night-time safety.",
        ),
        "cancel": (
            "Cancel a queued or running forecast job",
            "A queued job is cancelled at once (200, state `cancelled`). A running job is asked "
            "to stop (202, `cancel_requested: true`); its computation stops within seconds and "
            "it becomes `cancelled`. A done, failed or cancelled job gives 409. Requires the "
            "bearer token when the server sets one.",
        ),
    },
)


_CSV_EXAMPLE = (
    "forecast_id,parent,kind,year,trail.perihelion_year,trail.revolutions,"
    "trail.perihelion_tdb,node,peak_utc,solar_longitude_deg,miss_distance_au,"
    "miss_distance_spread_au,fwhm_hours,radiant.ra_deg,radiant.dec_deg,vg_km_s,vinf_km_s,"
    "particles,dilution\r\n"
    f"{_EXAMPLE_ID},P/2026 W3 (Hollow Pine) [invented demo comet],encounter,2040,2026,1,"
    "2026-10-30T06:00:01 TDB,descending,2040-04-11T08:32:43Z,21.514,0.004351,0.000772,1.23,"
    "235.24,57.12,25.7,28.03,20,0.9958\r\n"
)


def _encounters_csv(job: Job):
    """A done forecast's encounters and near misses as CSV

    One row per reported trail crossing (`kind` = its classification by predicted activity:
    encounter, negligible or near_miss; `classification.reason` says why, with the numbers),
    one value per column:
    nested keys flattened with dots (`radiant.ra_deg`, `zhr.estimate`, `window.start_utc`);
    every scalar key the forecast has becomes a column. The activity profiles have their own
    CSV (`/v1/forecasts/{id}/profiles.csv`). Times UTC; solar longitude geometric J2000. Text
    cells that a spreadsheet would run as formulas start with an apostrophe. The cautions
    travel in the `Trailcast-Cautions` header: predictions are model estimates; spacecraft
    operators defer to the responsible agencies.
    """
    parent = job.result["parent"].get("name", job.label)
    rows = [
        {"forecast_id": job.id, "parent": parent, "kind": kind_of(e, key), **e}
        for key in ("encounters", "near_misses")
        for e in job.result.get(key, [])
    ]
    headers = {"Trailcast-Cautions": " ".join(CAUTIONS)}
    return encounters_csv(rows), f"trailcast-{job.id}-encounters.csv", headers


ROUTES.add_file(router, "encounters.csv", "text/csv", _CSV_EXAMPLE, _encounters_csv, "exports")


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
        "One event per predicted encounter (near misses and negligible close passes are left "
        "out: no outburst is expected from them). The event spans the forecast's activity window when it gives one, until "
        "then the peak +/- FWHM/2 (at least 5 minutes either side), which the description "
        "says; the description gives the peak, solar longitude, radiant, speed, miss distance "
        "and the cautions."
    )
    + SITE_ICS_NOTE,
    responses=product_responses("text/calendar", _ICS_EXAMPLE),
)
def get_forecast_ics(
    job_id: JobId, jobs: Jobs, lat: float | None = SITE_LAT, lon: float | None = SITE_LON
) -> Response:
    site = optional_site(lat, lon)
    job = ROUTES.finished(jobs, job_id, "exports")
    parent = job.result["parent"].get("name", job.label)
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
