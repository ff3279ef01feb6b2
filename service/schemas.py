"""Response models shared by several routers: a forecast's JSON and its encounters.

They mirror :meth:`dynamics.forecast.ForecastResult.to_json` at the service's edge and allow extra
keys, so that fields the numerical core adds later (an activity model's ``zhr``, ``window`` ...)
pass through unchanged.
"""

from typing import Any

from pydantic import BaseModel, ConfigDict, Field

EXAMPLE_ENCOUNTER = {
    "year": 2040,
    "trail": {
        "perihelion_tdb": "2026-10-30T06:00:01 TDB",
        "perihelion_year": 2026,
        "revolutions": 1,
    },
    "node": "descending",
    "peak_utc": "2040-04-11T08:32:43Z",
    "solar_longitude_deg": 21.514,
    "miss_distance_au": 0.004351,
    "miss_distance_spread_au": 0.000772,
    "fwhm_hours": 1.23,
    "radiant": {"ra_deg": 235.24, "dec_deg": 57.12},
    "vg_km_s": 25.7,
    "vinf_km_s": 28.03,
    "particles": 20,
    "dilution": 0.9958,
}


class TrailOut(BaseModel):
    model_config = ConfigDict(extra="allow")
    perihelion_tdb: str = Field(..., description="Perihelion of the return that shed the trail")
    perihelion_year: int
    revolutions: int = Field(..., description="Revolutions of the trail since release")


class RadiantOut(BaseModel):
    model_config = ConfigDict(extra="allow")
    ra_deg: float = Field(..., description="Right ascension, equatorial J2000 (deg)")
    dec_deg: float = Field(..., description="Declination, equatorial J2000 (deg)")


class EncounterOut(BaseModel):
    """One trail crossing Earth's path; extra keys (e.g. ``zhr``) pass through."""

    model_config = ConfigDict(extra="allow", json_schema_extra={"examples": [EXAMPLE_ENCOUNTER]})

    year: int
    trail: TrailOut
    node: str
    peak_utc: str = Field(..., description="Time Earth passes the trail's centre (UTC, ISO 8601)")
    solar_longitude_deg: float = Field(..., description="At the peak; geometric, J2000 (deg)")
    miss_distance_au: float = Field(..., description="Trail minus Earth at the node (au)")
    miss_distance_spread_au: float
    fwhm_hours: float = Field(..., description="FWHM of the simulated Earth passage times (h)")
    radiant: RadiantOut
    vg_km_s: float = Field(..., description="Geocentric speed (km/s)")
    vinf_km_s: float = Field(..., description="Speed at the top of the atmosphere (km/s)")
    particles: int = Field(..., description="Simulated meteoroids behind the numbers")
    dilution: float


class ForecastOut(BaseModel):
    """A forecast's result: :meth:`dynamics.forecast.ForecastResult.to_json`."""

    model_config = ConfigDict(extra="allow")

    parent: dict[str, Any]
    model: dict[str, Any] = Field(..., description="Model choices, versions, provenance")
    conventions: dict[str, Any]
    encounters: list[EncounterOut]
    near_misses: list[EncounterOut] = Field(
        ..., description="Trails that pass near but miss: no outburst expected from them"
    )
    notes: list[str]
    cautions: list[str]
