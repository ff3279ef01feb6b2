"""``POST /v1/forecasts``: the orbit, the years and the model options, checked and made canonical."""

from typing import Annotated, Literal

from pydantic import Field, model_validator

from dynamics.ejection import EJECTION_SPEED_LAWS
from dynamics.orbit_input import require_epoch_in_ephemeris

from ..jobs import canonical_request
from .common import FIRST_YEAR, LAST_YEAR, LimitExceeded, RequestModel, Year, check_years
from .orbit import DEMO_ORBIT, OrbitIn

SpeedLaw = Literal[tuple(sorted(EJECTION_SPEED_LAWS))]  # type: ignore[valid-type]
#: Default meteoroids per trail and Earth passage (the command line's default).
DEFAULT_PARTICLES = 300
#: Longest trail age accepted (years); no source: beyond a few thousand years the parent's
#: history (and its orbit solution) is too uncertain for a trail to mean anything.
MAX_TRAIL_AGE_YEARS = 5000.0
#: Oldest trail year accepted: the oldest the age limit allows before the first forecast year.
OLDEST_TRAIL_YEAR = FIRST_YEAR - int(MAX_TRAIL_AGE_YEARS)

TrailYear = Annotated[
    int,
    Field(
        ge=OLDEST_TRAIL_YEAR,
        le=LAST_YEAR,
        description=f"Perihelion year of a trail, {OLDEST_TRAIL_YEAR}-{LAST_YEAR}: at most "
        f"{MAX_TRAIL_AGE_YEARS:g} years before the DE423 span, and before the forecast years",
    ),
]

# Demo values from the invented scenario (examples/demo-comet.json).
_DEMO_OPTIONS = {"seed": 1, "trails": [2026], "integrator": "whfast"}


class CalibrationIn(RequestModel):
    """A past observed outburst of the same parent (calibrated ZHR mode)."""

    year: Year = Field(..., description="Year of the observed outburst (1800-2199, DE423 span)")
    trail_year: int = Field(
        ...,
        ge=OLDEST_TRAIL_YEAR,
        le=LAST_YEAR,
        description="Perihelion year of the trail that caused it; before `year`",
    )
    zhr: float = Field(
        ..., gt=0.0, le=1e6, description="Observed peak ZHR (meteors per hour), above 0"
    )

    @model_validator(mode="after")
    def _trail_before_outburst(self):
        if self.trail_year >= self.year:
            raise ValueError(
                "trail_year: must precede year (a trail is released before it meets Earth)"
            )
        return self


class ForecastOptionsIn(RequestModel):
    """Model choices; every one optional with the default the command line uses."""

    model_config = {"json_schema_extra": {"examples": [_DEMO_OPTIONS]}}

    particles: int | None = Field(
        None,
        ge=3,
        le=100_000,
        description=f"Meteoroids per trail and Earth passage (default {DEFAULT_PARTICLES}; the "
        "server may set a lower ceiling)",
    )
    seed: int = Field(1, ge=0, le=2**32 - 1, description="Random seed; same seed, same answer")
    trails: list[TrailYear] | None = Field(
        None,
        min_length=1,
        max_length=100,
        description="Only these trails, by perihelion year (default: all within the age limit)",
    )
    max_trail_age_years: float = Field(
        500.0,
        gt=0.0,
        le=MAX_TRAIL_AGE_YEARS,
        description="Oldest trail followed (years before the first forecast year)",
    )
    integrator: Literal["whfast", "ias15"] = Field("whfast", description="REBOUND integrator")
    speed_law: SpeedLaw = Field("whipple1951", description="Ejection speed law")  # type: ignore[valid-type]
    mass_index: float = Field(
        2.0, gt=1.0, lt=3.0, description="Differential mass index s (1); 1.7-2.2 is typical"
    )
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
    calibration: CalibrationIn | None = Field(
        None, description="A past observed outburst of this parent: ZHRs are scaled to it"
    )
    clones: int = Field(
        5, ge=0, le=20, description="Clones drawn from the orbit's covariance, when it has one"
    )


class ForecastIn(RequestModel):
    """Request: a parent orbit, the years to forecast and optional model choices."""

    model_config = {
        "json_schema_extra": {
            "examples": [
                {
                    "orbit": DEMO_ORBIT,
                    "years": [2040, 2040],
                    "particles": 30,
                    "options": {"seed": 1, "trails": [2026]},
                }
            ]
        }
    }

    orbit: OrbitIn
    years: list[Year] = Field(
        ...,
        min_length=1,
        max_length=2,
        description="[first, last] calendar years (UTC), inclusive, within 1800-2199 (the "
        "DE423 span); [year] for one",
        examples=[[2040, 2040]],
    )
    particles: int | None = Field(
        None, ge=3, le=100_000, description="Shorthand for options.particles"
    )
    options: ForecastOptionsIn | None = None

    @model_validator(mode="after")
    def _consistent(self):
        check_years(self.years)
        opts = self.options
        if opts is not None and opts.trails is not None:
            late = [t for t in opts.trails if t > self.years[-1]]
            if late:
                raise ValueError(
                    f"options.trails: {late[0]} is after the last forecast year: a trail must "
                    "be released before it can meet Earth"
                )
        if (
            self.particles is not None
            and opts is not None
            and opts.particles is not None
            and self.particles != opts.particles
        ):
            raise ValueError("particles: particles and options.particles differ; give one")
        return self

    def to_domain(self, max_years: int, max_particles: int) -> tuple[dict, str]:
        """The canonical request (what the job id hashes) and the parent's name.

        Raises
        ------
        dynamics.errors.InvalidOrbit
            What only the whole orbit object shows.
        LimitExceeded
            More years or meteoroids than this server takes.
        """
        orbit = self.orbit.to_domain()
        require_epoch_in_ephemeris(orbit, "orbit.")
        first, last = check_years(self.years, max_years)
        opts = self.options or ForecastOptionsIn()
        particles = self.particles or opts.particles or DEFAULT_PARTICLES
        if particles > max_particles:
            raise LimitExceeded(
                "particles",
                f"{particles} particles asked; this server takes at most {max_particles} per job",
            )
        options = opts.model_dump()
        options["particles"] = particles
        options["trails"] = sorted(set(opts.trails)) if opts.trails is not None else None
        return canonical_request(orbit.to_json(), first, last, options), orbit.name
