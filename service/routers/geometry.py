"""Quick-look geometry of a parent orbit: ``POST /v1/geometry``.

Request body: ``{"orbit": {...the orbit input object...}, "year": 2031}`` (``year`` optional).
The orbit object is the one every command reads (README, "The orbit input"); it is validated by
:func:`dynamics.orbit_input.parse_orbit`, whose errors name the field with an ``orbit.`` prefix
(422 problem+json). The response is :meth:`dynamics.geometry.GeometryResult.to_json`.
"""

import json
from pathlib import Path
from typing import Any

from fastapi import APIRouter
from pydantic import BaseModel, ConfigDict, Field

from dynamics.geometry import quick_look
from dynamics.orbit_input import parse_orbit

router = APIRouter(prefix="/v1", tags=["geometry"])

# The invented demo comet (examples/demo-comet.json) as the OpenAPI example; inline fallback
# when the package runs without the examples folder.
_DEMO_PATH = Path(__file__).resolve().parents[2] / "examples" / "demo-comet.json"
try:
    _DEMO_ORBIT = json.loads(_DEMO_PATH.read_text(encoding="utf-8"))
except (OSError, ValueError):  # pragma: no cover - installed without examples/
    _DEMO_ORBIT = {
        "name": "P/2026 W3 (Hollow Pine) [invented demo comet]",
        "epoch": "2026-11-20T00:00:00 TDB",
        "q": 0.962,
        "e": 0.828,
        "i": 38.5,
        "node": 21.6,
        "peri": 204.2,
        "tp": "2026-10-30T06:00:00 TDB",
    }


class GeometryIn(BaseModel):
    """Request: the parent's orbit and, optionally, a year for Earth passage times."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={"examples": [{"orbit": _DEMO_ORBIT, "year": 2031}]},
    )

    orbit: dict[str, Any] = Field(
        ...,
        description=(
            "Orbit input object: heliocentric osculating elements, ecliptic and equinox J2000 "
            "(name, epoch, q [au], e, i, node, peri [deg], tp; see the README)."
        ),
    )
    year: int | None = Field(
        None,
        ge=1800,
        le=2199,
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
        "and a one-line screening verdict. Predictions are model estimates; spacecraft "
        "operators defer to the responsible agencies."
    ),
    responses={422: {"description": "Invalid orbit or year (problem+json naming the field)"}},
)
def compute_geometry(body: GeometryIn) -> GeometryOut:
    orbit = parse_orbit(body.orbit, path="orbit.")
    return GeometryOut.model_validate(quick_look(orbit, body.year).to_json())
