"""``POST /v1/forecasts``: the orbit, the years and the model options, checked and made canonical."""

from typing import Annotated

from pydantic import Field, create_model, model_validator

from dynamics.orbit_input import require_epoch_in_ephemeris

from ..jobs import canonical_request
from ..options import API_OPTIONS, BY_NAME, MAX_TRAIL_AGE_YEARS
from .common import (
    FIRST_YEAR,
    LAST_YEAR,
    LimitExceeded,
    RequestModel,
    Year,
    check_years,
    option_field,
)
from .orbit import DEMO_ORBIT, OrbitIn

#: Default meteoroids per trail and Earth passage (the option table's, i.e. the engine's).
DEFAULT_PARTICLES = BY_NAME["particles"].default
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


class _ForecastOptionsBase(RequestModel):
    """Model choices; every one optional with the default the command line uses."""

    model_config = {"json_schema_extra": {"examples": [_DEMO_OPTIONS]}}


#: The options object, built from the one option table (:data:`service.options.OPTIONS`).
ForecastOptionsIn = create_model(
    "ForecastOptionsIn",
    __base__=_ForecastOptionsBase,
    __doc__=_ForecastOptionsBase.__doc__,
    **{
        o.name: option_field(
            o,
            annotation={
                "trails": list[TrailYear] | None,
                "calibration": CalibrationIn | None,
            }.get(o.name),
        )
        for o in API_OPTIONS
    },
)
ForecastOptionsIn.__module__ = __name__


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
        None,
        ge=BY_NAME["particles"].ge,
        le=BY_NAME["particles"].le,
        description="Shorthand for options.particles",
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
            and "particles" in opts.model_fields_set
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
        particles = self.particles or opts.particles or DEFAULT_PARTICLES  # null: the default
        if particles > max_particles:
            raise LimitExceeded(
                "particles",
                f"{particles} particles asked; this server takes at most {max_particles} per job",
            )
        options = opts.model_dump()
        options["particles"] = particles
        options["trails"] = sorted(set(opts.trails)) if opts.trails is not None else None
        return canonical_request(orbit.to_json(), first, last, options), orbit.name
