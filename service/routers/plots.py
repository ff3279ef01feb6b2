"""Charts of a done forecast: ``/v1/forecasts/{id}/plots`` (which exist) and each as SVG or PNG.

Drawn on the server by :mod:`service.plots` (matplotlib) from the stored result, so that the
dashboard, reports and other dashboards embed the same picture with no script and no network.
"""

from typing import Annotated, Literal

from fastapi import APIRouter, Path, Query, Response
from pydantic import BaseModel, ConfigDict, Field

from dynamics.forecast import CAUTIONS

from .. import plots
from ..exports import PROFILE_COLUMNS, kind_of, profiles_csv
from ..jobs import Job
from ..problems import TYPE_BASE, ProblemError, problem_responses
from ._jobs import Jobs
from .forecasts import ROUTES as FORECASTS

router = APIRouter(prefix="/v1", tags=["plots"])

_EXAMPLE_ID = "5d2c3f0e9a1b4c7d8e6f5a4b3c2d1e0f"
JobId = Annotated[
    str,
    Path(
        pattern="^[0-9a-f]{32}$",
        description="Job id (32 hex digits)",
        examples=[_EXAMPLE_ID],
    ),
]
Chart = Literal["crossings", "profile", "radiants"]
Format = Literal["svg", "png"]
Size = Literal["wide", "narrow"]
CHART_DESCRIPTIONS = {
    "crossings": "Each simulated meteoroid where Earth passes its node: time (UTC; solar "
    "longitude on the top axis) against signed miss distance (au, trail minus Earth); Earth's "
    "path is the line at 0; one colour and marker per trail (filled: encounter, open: near miss).",
    "profile": "Predicted ZHR against time (UTC) per trail, the low-high range as a band (the "
    "profile scaled by the peak's low/estimate and high/estimate) and the activity window hatched.",
    "radiants": "Radiants of the simulated meteoroids (small) and each trail's median (large): "
    "right ascension (increasing to the left) against declination, deg, J2000.",
}


class PlotLinksOut(BaseModel):
    svg: str = Field(..., examples=[f"/v1/forecasts/{_EXAMPLE_ID}/plots/crossings.svg?year=2040"])
    png: str = Field(..., examples=[f"/v1/forecasts/{_EXAMPLE_ID}/plots/crossings.png?year=2040"])


class PlotOut(BaseModel):
    chart: Chart
    year: int
    description: str
    links: PlotLinksOut


class PlotIndexOut(BaseModel):
    """Which charts a done forecast has, per year, with their SVG and PNG addresses."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "forecast_id": _EXAMPLE_ID,
                    "years": [2040],
                    "default_year": 2040,
                    "particle_crossings": True,
                    "plots": [
                        {
                            "chart": "crossings",
                            "year": 2040,
                            "description": CHART_DESCRIPTIONS["crossings"],
                            "links": {
                                "svg": f"/v1/forecasts/{_EXAMPLE_ID}/plots/crossings.svg?year=2040",
                                "png": f"/v1/forecasts/{_EXAMPLE_ID}/plots/crossings.png?year=2040",
                            },
                        }
                    ],
                    "profiles_csv": f"/v1/forecasts/{_EXAMPLE_ID}/profiles.csv",
                    "cautions": list(CAUTIONS),
                }
            ]
        }
    )

    forecast_id: str
    years: list[int] = Field(..., description="Calendar years (UTC) the forecast covers")
    default_year: int | None = Field(
        None, description="First year with an encounter, else with a near miss, else the first"
    )
    particle_crossings: bool = Field(
        ...,
        description="Whether the stored result holds each meteoroid's crossing (results stored "
        "before the dashboard existed do not: their crossing chart has no points)",
    )
    plots: list[PlotOut]
    profiles_csv: str = Field(
        ...,
        description="The activity profiles behind the profile chart as CSV (one row per point)",
        examples=[f"/v1/forecasts/{_EXAMPLE_ID}/profiles.csv"],
    )
    cautions: list[str]


def _done_job(jobs, job_id: str) -> Job:
    return FORECASTS.finished(jobs, job_id, "plots")


def _plot_url(job_id: str, chart: str, year: int, fmt: str) -> str:
    return f"/v1/forecasts/{job_id}/plots/{chart}.{fmt}?year={year}"


@router.get(
    "/forecasts/{job_id}/plots",
    response_model=PlotIndexOut,
    summary="The charts of a done forecast, per year, with SVG and PNG links",
    description=(
        "Lists the trail-crossing, activity-profile and radiant charts for every year of a done "
        "forecast. Predictions are model estimates with real uncertainty; spacecraft operators "
        "defer to the responsible agencies."
    ),
    responses=problem_responses(404, 409, 422),
)
def list_plots(job_id: JobId, jobs: Jobs) -> PlotIndexOut:
    job = _done_job(jobs, job_id)
    years = plots.forecast_years(job.result)
    return PlotIndexOut(
        forecast_id=job.id,
        years=years,
        default_year=plots.default_year(job.result),
        particle_crossings="particle_crossings" in job.result,
        plots=[
            PlotOut(
                chart=chart,
                year=year,
                description=CHART_DESCRIPTIONS[chart],
                links=PlotLinksOut(
                    svg=_plot_url(job.id, chart, year, "svg"),
                    png=_plot_url(job.id, chart, year, "png"),
                ),
            )
            for year in years
            for chart in plots.CHARTS
        ],
        profiles_csv=f"/v1/forecasts/{job.id}/profiles.csv",
        cautions=list(CAUTIONS),
    )


_PROFILES_EXAMPLE = (
    ",".join(PROFILE_COLUMNS) + "\r\n"
    f"{_EXAMPLE_ID},P/2026 W3 (Hollow Pine) [invented demo comet],encounter,2040,2026,1,"
    "2040-04-11T08:32:43Z,2040-04-11T08:30:00Z,85.0\r\n"
)


@router.get(
    "/forecasts/{job_id}/profiles.csv",
    response_class=Response,
    summary="The activity profiles of a done forecast as CSV: one row per profile point",
    description=(
        "The predicted ZHR against time (UTC) of every encounter and near miss that has an "
        "activity profile: which crossing (forecast, parent, kind, year, trail, peak time, as in "
        "`encounters.csv`), then `time_utc` and `zhr`. Crossings without a profile add no row. "
        "Predictions are model estimates (a factor of several either way in absolute mode); "
        "cautions in the `Trailcast-Cautions` header."
    ),
    responses={
        200: {
            "content": {"text/csv": {"schema": {"type": "string"}, "example": _PROFILES_EXAMPLE}}
        },
        **problem_responses(404, 409, 422),
    },
)
def get_profiles_csv(job_id: JobId, jobs: Jobs) -> Response:
    job = _done_job(jobs, job_id)
    parent = job.result["parent"].get("name", job.parent_name)
    rows = [
        {"forecast_id": job.id, "parent": parent, "kind": kind_of(e, key), **e}
        for key in ("encounters", "near_misses")
        for e in job.result.get(key, [])
    ]
    return Response(
        profiles_csv(rows),
        media_type="text/csv; charset=utf-8",
        headers={
            "Content-Disposition": f'attachment; filename="trailcast-{job.id}-profiles.csv"',
            "Trailcast-Cautions": " ".join(CAUTIONS),
        },
    )


@router.get(
    "/forecasts/{job_id}/plots/{chart}.{fmt}",
    response_class=Response,
    summary="One chart of a done forecast as SVG or PNG",
    description=(
        "`chart` is `crossings`, `profile` or `radiants`; `fmt` is `svg` or `png`; `year` "
        "defaults to the first year with an encounter. " + " ".join(CHART_DESCRIPTIONS.values())
    ),
    responses={
        200: {
            "content": {
                "image/svg+xml": {"schema": {"type": "string"}},
                "image/png": {"schema": {"type": "string", "format": "binary"}},
            }
        },
        **problem_responses(404, 409, 422),
    },
)
def get_plot(
    job_id: JobId,
    chart: Annotated[Chart, Path(description="Which chart", examples=["crossings"])],
    fmt: Annotated[Format, Path(description="Image format", examples=["svg"])],
    jobs: Jobs,
    year: int | None = Query(
        None, ge=1800, le=2199, description="Forecast year (UTC)", examples=[2040]
    ),
    download: bool = Query(False, description="Ask the browser to save it (attachment)"),
    size: Annotated[
        Size,
        Query(
            description="Layout: `wide` (720 x 403 pt, legend beside the axes) for boxes of "
            "about 600 px and more; `narrow` (331 x 461 pt, legend below) for phones, where its "
            "text stays 11 px or more",
            examples=["narrow"],
        ),
    ] = "wide",
) -> Response:
    job = _done_job(jobs, job_id)
    if year is None:
        year = plots.default_year(job.result) or 0
    try:
        body = plots.render_cached(job.id, job.result, chart, year, fmt, size)
    except plots.NoSuchYear as exc:
        raise ProblemError(
            422, "Invalid request", f"year: {exc}", TYPE_BASE + "invalid-request", field="year"
        ) from None
    name = f"trailcast-{job.id}-{chart}-{year}{'' if size == 'wide' else '-' + size}.{fmt}"
    disposition = "attachment" if download else "inline"
    return Response(
        body,
        media_type=plots.FORMATS[fmt],
        headers={
            "Content-Disposition": f'{disposition}; filename="{name}"',
            "Cache-Control": "public, max-age=86400",  # a done forecast never changes
        },
    )
