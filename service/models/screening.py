"""``POST /v1/screenings``: a batch of orbits, the years, the rule and the candidates' options.

The orbits stay free-form objects on purpose: one that cannot be read does not refuse the
batch, it is reported in the results with its index (the batch-file reader's rule).
"""

import math
from typing import Any

from pydantic import Field, create_model, model_validator

from dynamics.geometry import TRAIL_SIMULATION_MOID_AU
from dynamics.targeting import NODE_MAX_DISTANCE_AU

from ..job_kinds.screening import canonical_screening_request
from ..options import BY_NAME, SCREEN, SCREENING_OPTIONS
from .common import LimitExceeded, RequestModel, Year, check_years, option_field
from .orbit import DEMO_ORBIT

#: Deepest nesting accepted inside one orbit object (levels); an orbit needs 3 (covariance).
MAX_ORBIT_NESTING = 8


def _check_json(value, path: str, depth: int) -> None:
    """Refuse what JSON cannot hold or what no orbit needs: NaN, Infinity, deep nesting."""
    if depth > MAX_ORBIT_NESTING:
        raise ValueError(f"{path}: nested deeper than {MAX_ORBIT_NESTING} levels")
    if isinstance(value, float) and not math.isfinite(value):
        raise ValueError(f"{path}: {value!r} is not a JSON number (NaN and Infinity are refused)")
    if isinstance(value, dict):
        for k, v in value.items():
            _check_json(v, f"{path}.{k}", depth + 1)
    elif isinstance(value, list):
        for k, v in enumerate(value):
            _check_json(v, f"{path}.{k}", depth + 1)


class ScreeningRuleIn(RequestModel):
    """The rule deciding which orbits get a trail forecast (defaults in the README)."""

    model_config = {"json_schema_extra": {"examples": [{"moid_max_au": 0.05}]}}

    moid_max_au: float = Field(
        TRAIL_SIMULATION_MOID_AU, gt=0.0, le=10.0, description="Candidate when MOID < this (au)"
    )
    node_max_au: float = Field(
        NODE_MAX_DISTANCE_AU,
        gt=0.0,
        le=10.0,
        description="... and the nearer node lies within this of Earth's orbit (au)",
    )


class _ScreeningOptionsBase(RequestModel):
    """The small forecast run for each candidate; every field optional."""

    model_config = {"json_schema_extra": {"examples": [{"particles": 30}]}}


#: The candidates' options, built from the one option table (the options a screening takes,
#: with the screening budget's defaults where it has its own).
ScreeningOptionsIn = create_model(
    "ScreeningOptionsIn",
    __base__=_ScreeningOptionsBase,
    __doc__=_ScreeningOptionsBase.__doc__,
    **{o.name: option_field(o, SCREEN) for o in SCREENING_OPTIONS},
)
ScreeningOptionsIn.__module__ = __name__


class ScreeningIn(RequestModel):
    """Request: many orbit objects, the years, and optionally the rule and forecast options."""

    model_config = {
        "json_schema_extra": {
            "examples": [
                {
                    "orbits": [DEMO_ORBIT],
                    "years": [2039, 2039],
                    "rule": {"moid_max_au": 0.05, "node_max_au": 0.25},
                    "options": {"particles": 30, "max_trail_age_years": 100},
                }
            ]
        }
    }

    orbits: list[dict[str, Any]] = Field(
        ...,
        min_length=1,
        description="Orbit objects (the keys of the forecast's `orbit`); one that cannot be "
        "read is reported in the results with its index and skipped. Nesting deeper than "
        f"{MAX_ORBIT_NESTING} levels is refused",
    )
    years: list[Year] = Field(
        ...,
        min_length=1,
        max_length=2,
        description="[first, last] calendar years (UTC), within 1800-2199 (DE423 span)",
    )
    rule: ScreeningRuleIn | None = None
    options: ScreeningOptionsIn | None = None

    @model_validator(mode="after")
    def _consistent(self):
        check_years(self.years)
        for k, orbit in enumerate(self.orbits):
            _check_json(orbit, f"orbits.{k}", 1)
        return self

    def to_domain(self, max_years: int, max_particles: int, max_orbits: int) -> dict:
        """The canonical request (what the job id hashes).

        Raises
        ------
        LimitExceeded
            More orbits, years or meteoroids than this server takes.
        """
        if len(self.orbits) > max_orbits:
            raise LimitExceeded(
                "orbits",
                f"{len(self.orbits)} orbits sent; this server takes at most {max_orbits} per "
                "screening",
            )
        first, last = check_years(self.years, max_years)
        opts = self.options or ScreeningOptionsIn()
        if opts.particles is None:  # null: the screening budget's default
            opts = opts.model_copy(update={"particles": BY_NAME["particles"].default_for(SCREEN)})
        if opts.particles > max_particles:
            raise LimitExceeded(
                "options.particles",
                f"{opts.particles} particles asked; this server takes at most {max_particles} "
                "per job",
            )
        rule = (self.rule or ScreeningRuleIn()).model_dump()
        return canonical_screening_request(self.orbits, first, last, rule, opts.model_dump())
