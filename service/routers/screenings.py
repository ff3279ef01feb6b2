"""Screening jobs: ``/v1/screenings`` (submit, status, cancel) and their JSON and CSV results.

A screening runs the quick-look geometry on every orbit of a batch and small trail forecasts on
the orbits that pass the rule (see :mod:`dynamics.screening`), as a job like a forecast: ``POST``
answers at once, ``GET`` shows per-orbit progress. An orbit that cannot be read is reported with
its index and skipped; the rest of the batch completes.
"""

from typing import Any

from fastapi import APIRouter
from pydantic import BaseModel, ConfigDict, Field

from dynamics.screening import VERDICTS

from ..jobs import Job
from ..models import ScreeningIn
from ..models.orbit import DEMO_ORBIT
from ..problems import problem_responses
from ..screening import SCREENING_CAUTIONS, table_csv
from ..settings import Settings
from ._jobs import JobId, JobRoutes, Jobs, JobStatusBase

router = APIRouter(prefix="/v1", tags=["screenings"])
ROUTES = JobRoutes("screening", "/v1/screenings", "screening")
_CAUTIONS = list(SCREENING_CAUTIONS)
_LINKS = ROUTES.links_for(
    "ScreeningLinksOut",
    "7a1e0c4b2d9f8e6a5b3c1d0e9f8a7b6c",
    {"results_json": "results.json", "results_csv": "results.csv"},
)


class ScreeningJobOut(JobStatusBase):
    """A screening's state, per-orbit progress and timings; the summary counts when done.
    `progress.items_done` and `items_total` count the batch's orbits."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                _LINKS.status_example(
                    _CAUTIONS,
                    {
                        "fraction": 0.6,
                        "stage": "trail forecasts",
                        "items_done": 120,
                        "items_total": 200,
                    },
                    years=[2039, 2039],
                    rule={"moid_max_au": 0.05, "node_max_au": 0.25},
                    options={"particles": 30, "seed": 1},
                    summary=None,
                )
            ]
        }
    )

    rule: dict[str, Any]
    summary: dict[str, Any] | None = Field(
        None, description="When done: counts per verdict, rule, options (results in links)"
    )
    links: _LINKS.model  # type: ignore[valid-type]


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
                            "name": DEMO_ORBIT["name"],
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


def _job_out(job: Job) -> ScreeningJobOut:
    summary = job.result["screening"] if job.state == "done" and job.result else None
    return ScreeningJobOut(
        **JobStatusBase.fields_of(job, _CAUTIONS),
        rule=job.request["rule"],
        summary=summary,
        links=_LINKS(job.id),
    )


def _to_domain(body: ScreeningIn, settings: Settings):
    canonical = body.to_domain(
        settings.max_years_per_job,
        settings.max_particles_per_job,
        settings.max_orbits_per_screening,
    )
    return canonical, f"batch of {len(body.orbits)} orbits", len(body.orbits)


ROUTES.install(
    router,
    ScreeningIn,
    _to_domain,
    _LINKS,
    ScreeningJobOut,
    _job_out,
    {
        "submit": (
            "Submit a batch of orbits for screening",
            "Queues a screening job: the quick-look geometry (Earth MOID, node distances) for "
            "every orbit, and a small trail forecast for each orbit that passes the rule "
            "(default: MOID < 0.05 au and the nearer node within 0.25 au of Earth's orbit). "
            "Answers at once (202) with the job's id; the id is a hash of the canonical inputs, "
            "so the same batch gives the same job (200 with `reused: true` when it is already "
            "done). An orbit that cannot be read does not refuse the batch: it is reported in "
            "the results with its index. Predictions are model estimates; spacecraft operators "
            "defer to the responsible agencies.",
        ),
        "get": (
            "State and per-orbit progress of a screening; its summary when done",
            "`progress.items_done` counts finished orbits (orbits found in the store count at "
            "once). When done, `summary` gives the counts per verdict, the rule and the "
            "forecast options; every orbit's result is at `links.results_json` and "
            "`links.results_csv`. Predictions are model estimates; spacecraft operators defer "
            "to the responsible agencies; observers mind the usual night-time safety.",
        ),
        "cancel": (
            "Cancel a queued or running screening",
            "A queued screening is cancelled at once (200); a running one stops within seconds "
            "(202; results of finished orbits stay stored). A finished one gives 409.",
        ),
    },
)


def _done(jobs, job_id: str) -> Job:
    return ROUTES.finished(jobs, job_id, "results")


@router.get(
    "/screenings/{job_id}/results.json",
    response_model=ScreeningResultsOut,
    summary="Every orbit of a done screening with its verdict and, for candidates, encounters",
    responses=problem_responses(404, 409, 422),
)
def get_screening_results(job_id: JobId, jobs: Jobs) -> ScreeningResultsOut:
    """Orbits in input order (`index`), each with its geometry (MOID, node miss distances),
    rank (1 = smallest MOID), whether it passed the rule and why, its verdict and, for
    candidates, the forecast's encounters and near misses (times UTC, solar longitude
    geometric J2000). Unreadable orbits carry verdict `invalid` and the error."""
    return ScreeningResultsOut(**_done(jobs, job_id).result)


_CSV_EXAMPLE = (
    "line,rank,name,verdict,candidate,moid_au,nearest_node_au,ascending_miss_distance_au,"
    "descending_miss_distance_au,encounters,near_misses,first_encounter_peak_utc,"
    "closest_encounter_miss_distance_au,max_zhr,error,key\r\n"
    f"1,1,{DEMO_ORBIT['name']},no encounter,True,0.00917,0.00968,6.12013,-0.00968,0,0,,,,,"
    "3f0c...\r\n"
)


def _results_csv(job: Job):
    """A done screening as CSV: one row per orbit

    Columns: line (the orbit's place in the request counted from 1, as `trailcast screen`
    numbers the lines of a batch file), rank, name, verdict, candidate, MOID and node
    distances (au), numbers of encounters and near misses, the first encounter's peak (UTC),
    the closest encounter's miss distance (au), the largest ZHR estimate (meteors per hour),
    the error of an unreadable or failed orbit and its content key. Text cells that a
    spreadsheet would run as formulas start with an apostrophe. Cautions in the
    `Trailcast-Cautions` header.
    """
    # Numbered from 1, as `trailcast screen` numbers the lines of a batch file: item k of the
    # request is line k of a JSON-lines file holding the same orbits.
    rows = [
        {**r, "line": r["index"] + 1 if "index" in r else r["line"]} for r in job.result["orbits"]
    ]
    headers = {"Trailcast-Cautions": " ".join(_CAUTIONS)}
    return table_csv({"orbits": rows}), f"trailcast-screening-{job.id}.csv", headers


ROUTES.add_file(router, "results.csv", "text/csv", _CSV_EXAMPLE, _results_csv, "results")
