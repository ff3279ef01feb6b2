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
    "population_index": 2.512,
    "zhr": {
        "estimate": 12.0,
        "low": 3.0,
        "high": 40.0,
        "mode": "absolute",
        "direct_hit": {"zhr": 13.1, "miss_au": 0.004102},
    },
    "classification": {
        "label": "encounter",
        "zhr_level": 10.0,
        "reason": "predicted peak ZHR 12 at or above 10; passes 0.00435 au from Earth (5.6 "
        "widths); range 3-40 (absolute mode, uncertain by a factor of several); at the low end "
        "of its range it stays below 10",
    },
    "window": {"start_utc": "2040-04-11T07:40:00Z", "end_utc": "2040-04-11T09:30:00Z"},
    "profile": [{"time_utc": "2040-04-11T08:32:43Z", "zhr": 12.0}],
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


class DirectHitOut(BaseModel):
    model_config = ConfigDict(extra="allow")
    zhr: float = Field(..., description="Peak ZHR on the densest line (meteors per hour)")
    miss_au: float = Field(
        ..., description="Where that line lies from Earth's path (au, trail minus Earth)"
    )


class ZhrOut(BaseModel):
    """Zenithal hourly rate at the peak: meteors per hour for one observer under a clear sky
    of limiting magnitude +6.5 with the radiant at the zenith (Koschack & Rendtel 1990)."""

    model_config = ConfigDict(extra="allow")
    estimate: float | None = Field(None, description="Best estimate (meteors per hour)")
    low: float | None = Field(None, description="Lower end of the stated range (meteors/hour)")
    high: float | None = Field(None, description="Upper end of the stated range (meteors/hour)")
    mode: str | None = Field(
        None,
        description="`absolute` (from a stated or default dust mass per return) or "
        "`calibrated` (scaled to a past observed outburst)",
        examples=["absolute"],
    )
    direct_hit: DirectHitOut | None = Field(
        None,
        description="The ZHR if Earth's path ran along the densest line of the visual sizes' "
        "cross-section, and where that line lies: the trail's dust apart from its modelled "
        "position (a crossing several widths out can still hold a storm's density)",
    )


class WindowOut(BaseModel):
    """When the activity stands above its background (UTC, ISO 8601)."""

    model_config = ConfigDict(extra="allow")
    start_utc: str = Field(..., description="Start of the activity window (UTC, ISO 8601)")
    end_utc: str = Field(..., description="End of the activity window (UTC, ISO 8601)")


class ProfilePointOut(BaseModel):
    model_config = ConfigDict(extra="allow")
    time_utc: str = Field(..., description="Time (UTC, ISO 8601)")
    zhr: float = Field(..., description="ZHR at that time (meteors per hour)")


class ClassificationOut(BaseModel):
    """What a crossing is called by its predicted activity at Earth, and why
    (:func:`dynamics.activity.classify_crossing`)."""

    model_config = ConfigDict(extra="allow")
    label: str = Field(
        ...,
        description="`encounter` (predicted peak ZHR at or above `zhr_level`), `negligible` "
        "(passes close to Earth's path but the predicted ZHR stays below the level) or "
        "`near miss` (farther, below the level)",
        examples=["negligible"],
    )
    zhr_level: float | None = Field(
        None,
        description="The ZHR an encounter must reach (meteors per hour); null for a crossing "
        "stored without a ZHR",
    )
    reason: str = Field(
        ..., description="The rule applied, in words, with the distance and the ZHR range"
    )


class EncounterOut(BaseModel):
    """One trail crossing Earth's path; extra keys pass through."""

    model_config = ConfigDict(extra="allow", json_schema_extra={"examples": [EXAMPLE_ENCOUNTER]})

    year: int = Field(..., description="Calendar year (UTC) of the encounter")
    trail: TrailOut
    node: str = Field(..., description="`ascending` or `descending`: where the trail meets Earth")
    peak_utc: str = Field(
        ...,
        description="Time of the highest modelled ZHR (UTC, ISO 8601); `peak_basis` says how "
        "it was found",
    )
    peak_basis: str | None = Field(None, description="How the peak time was found")
    trail_centre_utc: str | None = Field(
        None,
        description="Time Earth passes the middle of the visual-size meteoroids' crossings "
        "(UTC); differs from the peak when sizes pass at different distances from Earth or the "
        "crossings drift with arrival time",
    )
    solar_longitude_deg: float = Field(..., description="At the peak; geometric, J2000 (deg)")
    miss_distance_au: float = Field(
        ..., description="Trail centre minus Earth at the node, signed (au; > 0: outside)"
    )
    miss_distance_spread_au: float = Field(
        ..., description="Half the 16-84 % range of the meteoroids' miss distances (au)"
    )
    fwhm_hours: float = Field(..., description="FWHM of the modelled ZHR profile (h)")
    radiant: RadiantOut
    vg_km_s: float = Field(..., description="Geocentric speed (km/s)")
    vinf_km_s: float = Field(..., description="Speed at the top of the atmosphere (km/s)")
    particles: int = Field(..., description="Simulated meteoroids behind the numbers (count)")
    dilution: float = Field(
        ...,
        description="Along-trail dilution relative to freshly released dust (dimensionless, "
        "0-1; 1 = not yet spread out)",
    )
    population_index: float | None = Field(
        None, description="Population index r (dimensionless) used for the ZHR"
    )
    zhr: ZhrOut | None = Field(None, description="Expected ZHR at the peak (meteors per hour)")
    classification: ClassificationOut | None = Field(
        None, description="Encounter, negligible or near miss, by the predicted activity"
    )
    window: WindowOut | None = Field(
        None, description="Activity window (UTC); null when the profile gives none"
    )
    profile: list[ProfilePointOut] = Field(
        default_factory=list, description="ZHR against time around the peak (UTC; per hour)"
    )


class ForecastOut(BaseModel):
    """A forecast's result: :meth:`dynamics.forecast.ForecastResult.to_json`."""

    model_config = ConfigDict(extra="allow")

    parent: dict[str, Any]
    model: dict[str, Any] = Field(..., description="Model choices, versions, provenance")
    conventions: dict[str, Any]
    encounters: list[EncounterOut] = Field(
        ...,
        description="Crossings classified `encounter`: predicted peak ZHR at or above the level",
    )
    near_misses: list[EncounterOut] = Field(
        ...,
        description="Every other reported crossing: `negligible` ones (close to Earth's path, "
        "predicted ZHR below the level) and `near miss` ones (farther); no outburst expected",
    )
    notes: list[str]
    cautions: list[str]
