"""Quick-look geometry of a parent orbit: ``POST /v1/geometry``.

Request body: ``{"orbit": {...the orbit input object...}, "year": 2031}`` (``year`` optional).
The orbit object is the one every command reads (README, "The orbit input"); it is validated by
:func:`dynamics.orbit_input.parse_orbit`, whose errors name the field with an ``orbit.`` prefix
(422 problem+json). The response is :meth:`dynamics.geometry.GeometryResult.to_json`.
"""

from typing import Any

from fastapi import APIRouter, Request
from pydantic import BaseModel, ConfigDict, Field

from ..bounded import BoundedWorkers, ClientGone, TimeLimitExceeded
from ..models import OrbitIn, RequestModel
from ..models.common import Year
from ..models.orbit import DEMO_ORBIT
from ..problems import TYPE_BASE, ProblemError, problem_responses
from ._jobs import SettingsDep

router = APIRouter(prefix="/v1", tags=["geometry"])


def _quick_look_json(orbit_json: dict, year: int | None) -> dict:
    """In the worker process: the quick look as JSON."""
    from dynamics.geometry import quick_look
    from dynamics.orbit_input import parse_orbit

    return quick_look(parse_orbit(orbit_json), year).to_json()


def _workers(request: Request) -> BoundedWorkers:
    state = request.app.state
    if getattr(state, "geometry_workers", None) is None:
        state.geometry_workers = BoundedWorkers(1)
    return state.geometry_workers


def close_workers(app) -> None:
    """Stop the geometry worker process (at shutdown)."""
    workers = getattr(app.state, "geometry_workers", None)
    if workers is not None:
        workers.close()
        app.state.geometry_workers = None


class GeometryIn(RequestModel):
    """Request: the parent's orbit and, optionally, a year for Earth passage times."""

    model_config = ConfigDict(json_schema_extra={"examples": [{"orbit": DEMO_ORBIT, "year": 2031}]})

    orbit: OrbitIn
    year: Year | None = Field(
        None,
        description="Calendar year (UTC) in which to time Earth's passages (DE423: 1800-2199).",
    )


class RadiantOut(BaseModel):
    ra_deg: float = Field(..., description="Right ascension, equatorial J2000 (deg)")
    dec_deg: float = Field(..., description="Declination, equatorial J2000 (deg)")
    vg_km_s: float = Field(..., description="Geocentric speed outside Earth's gravity (km/s)")
    vinf_km_s: float = Field(..., description="Speed at the top of the atmosphere (km/s)")
    solar_longitude_deg: float = Field(..., description="Geometric, equinox J2000 (deg)")
    method: str


class MoidPointOut(BaseModel):
    distance_au: float
    parent_true_anomaly_deg: float
    earth_true_anomaly_deg: float
    parent_longitude_deg: float = Field(..., description="Heliocentric, ecliptic J2000 (deg)")
    earth_longitude_deg: float = Field(..., description="Heliocentric, ecliptic J2000 (deg)")
    parent_r_au: float
    earth_r_au: float
    solar_longitude_deg: float = Field(..., description="When Earth is at its point (deg)")
    earth_passage_utc: str | None
    radiant: RadiantOut | None


class NodeOut(BaseModel):
    kind: str = Field(..., examples=["descending"])
    longitude_deg: float | None = Field(..., description="Heliocentric, ecliptic J2000 (deg)")
    r_au: float | None = Field(..., description="Null if the node is not on the orbit")
    miss_distance_au: float | None = Field(
        ..., description="Parent minus Earth's orbit at the node's longitude (au)"
    )
    solar_longitude_deg: float | None
    earth_passage_utc: str | None
    earth_passages_utc: list[str]


class SimilarShowerOut(BaseModel):
    name: str
    code: str
    parent: str
    d_sh: float
    d_d: float
    d_h: float
    source: str


class GeometryOut(BaseModel):
    """Response: see dynamics.geometry for methods and conventions (also in ``conventions``)."""

    name: str
    year: int | None
    moid_au: float | None = Field(..., description="Earth MOID (au)")
    moid_points: list[MoidPointOut]
    nodes: list[NodeOut]
    radiant: RadiantOut | None
    similar_showers: list[SimilarShowerOut]
    similar_showers_rule: dict[str, Any]
    verdict: str
    screening_rule: dict[str, Any]
    earth_orbit: dict[str, Any]
    conventions: dict[str, str]
    notes: list[str]
    cautions: list[str]


@router.post(
    "/geometry",
    response_model=GeometryOut,
    summary="Quick-look geometry of a parent orbit: MOID, nodes, theoretical radiant, showers",
    description=(
        "Two-body geometry of the parent's orbit against Earth's: every local minimum of the "
        "orbit distance (MOID) with its theoretical radiant, both nodes with miss distances and "
        "solar longitudes (and Earth's passage times in `year`), similar established showers "
        "and a one-line screening verdict. The computation runs in a worker process, at most "
        "`TRAILCAST_REQUEST_MAX_SECONDS` (422 past it), and stops when the client disconnects. "
        "Predictions are model estimates; spacecraft operators defer to the responsible "
        "agencies."
    ),
    responses=problem_responses(422),
)
async def compute_geometry(
    body: GeometryIn, request: Request, settings: SettingsDep
) -> GeometryOut:
    orbit = body.orbit.to_domain()
    try:
        result = await _workers(request).run(
            request, settings.request_max_seconds, _quick_look_json, orbit.to_json(), body.year
        )
    except TimeLimitExceeded as exc:
        raise ProblemError(
            422,
            "Time limit exceeded",
            f"the geometry of this orbit took too long ({exc}); check its elements",
            TYPE_BASE + "time-limit",
        ) from None
    except ClientGone:
        raise ProblemError(499, "Client Closed Request", "the client went away") from None
    return GeometryOut.model_validate(result)
