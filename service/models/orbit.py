"""The orbit object as a real schema: every key with its unit, range (and why) and an example.

The same object is read by every command (README, "The orbit input"); the checks here are
:func:`dynamics.orbit_input.parse_orbit`'s, stated in the schema so that clients (and the
property-based tests) see them. ``to_domain()`` hands the object to ``parse_orbit`` for the checks
that need more than one key (a covariance's shape and definiteness, times with a scale).
"""

import json
from pathlib import Path
from typing import Annotated, Literal

from pydantic import Field, model_validator

from dynamics.errors import InvalidOrbit
from dynamics.orbit_input import (
    EPOCH_SPAN_TDB_JD,
    MAGNITUDE_RANGE,
    MAX_ECCENTRICITY,
    MAX_EVENTS,
    MAX_K1,
    MAX_NAME_LENGTH,
    MAX_NONGRAV_DT_DAYS,
    MAX_OBSERVED_PERIHELIA,
    MAX_PERIHELION_AU,
    MAX_SOLUTIONS,
    MAX_SPEED_MULTIPLIER,
    MEAN_MOTION_TOLERANCE,
    MIN_PERIHELION_AU,
    OrbitInput,
    parse_orbit,
)

from .common import RequestModel

#: Largest |A1|, |A2|, |A3| accepted (au/day^2): 1e-5 at 1 au is about 3 % of solar gravity,
#: orders of magnitude above any published comet fit (parse_orbit's bound).
MAX_NONGRAV_AU_D2 = 1e-5
#: Longest time text accepted (characters); ISO 8601 with a scale needs about 30.
MAX_TIME_TEXT = 64

# The invented demo comet (examples/demo-comet.json) as the OpenAPI example; inline fallback
# when the package runs without the examples folder.
_DEMO_PATH = Path(__file__).resolve().parents[2] / "examples" / "demo-comet.json"
try:
    DEMO_ORBIT = json.loads(_DEMO_PATH.read_text(encoding="utf-8"))
except (OSError, ValueError):  # pragma: no cover - installed without examples/
    DEMO_ORBIT = {
        "name": "P/2026 W3 (Hollow Pine) [invented demo comet]",
        "epoch": "2026-11-20T00:00:00 TDB",
        "q": 0.962,
        "e": 0.828,
        "i": 38.5,
        "node": 21.6,
        "peri": 204.2,
        "tp": "2026-10-30T06:00:00 TDB",
    }

_NAME_PATTERN = r"^[^\x00-\x1f\x7f-\x9f\u2028\u2029]*\S[^\x00-\x1f\x7f-\x9f\u2028\u2029]*$"

TimeIn = Annotated[
    float | Annotated[str, Field(min_length=1, max_length=MAX_TIME_TEXT)],
    Field(
        description="Julian date (TDB, a number) or ISO 8601 text with its scale "
        "(`2026-11-20T00:00:00 TDB`, `...Z` for UTC)",
        examples=["2026-11-20T00:00:00 TDB", 2461364.5],
    ),
]


class NonGravIn(RequestModel):
    """Non-gravitational acceleration parameters (Marsden, Sekanina & Yeomans 1973)."""

    a1: float = Field(
        0.0,
        json_schema_extra={"minimum": -MAX_NONGRAV_AU_D2, "maximum": MAX_NONGRAV_AU_D2},
        description="Radial A1 (au/day^2); |A1| <= 1e-5: above that the force would be a few "
        "percent of solar gravity, no comet fit",
        examples=[1e-9],
    )
    a2: float = Field(
        0.0,
        json_schema_extra={"minimum": -MAX_NONGRAV_AU_D2, "maximum": MAX_NONGRAV_AU_D2},
        description="Transverse A2 (au/day^2); same bound",
        examples=[1e-10],
    )
    a3: float = Field(
        0.0,
        json_schema_extra={"minimum": -MAX_NONGRAV_AU_D2, "maximum": MAX_NONGRAV_AU_D2},
        description="Normal A3 (au/day^2); same bound",
        examples=[0.0],
    )
    dt: float = Field(
        0.0,
        json_schema_extra={"minimum": -MAX_NONGRAV_DT_DAYS, "maximum": MAX_NONGRAV_DT_DAYS},
        description="Asymmetric model (Yeomans & Chodas 1989): days from perihelion to the peak "
        "of outgassing, as the orbit solution lists it (negative: before perihelion); 0 for the "
        "symmetric law",
        examples=[0.0],
    )


class EjectionEventIn(RequestModel):
    """A break-up or outburst of the parent: the trail of the return it falls in is released
    as it says (README, "How a forecast is computed")."""

    kind: Literal["fragmentation", "outburst"] = Field(..., description="What happened")
    start: TimeIn = Field(..., description="When the release began (within an active arc)")
    duration_days: float = Field(
        5.0, gt=0.0, le=365.0, description="Release spread uniformly over this many days"
    )
    speed_multiplier: float = Field(
        1.0,
        gt=0.0,
        le=MAX_SPEED_MULTIPLIER,
        description="Ejection speeds are the speed law's times this (break-ups: several times)",
    )
    mass_range_g: Annotated[list[float], Field(min_length=2, max_length=2)] | None = Field(
        None, description="Size range of the event's dust [min, max], grams"
    )
    source: str = Field("", max_length=500, description="Where the event's numbers come from")


class ObservedPerihelionIn(RequestModel):
    """The perihelion time of an earlier return, from that apparition's observations."""

    tp: TimeIn = Field(
        ...,
        description="Perihelion time of that return: Julian date (TDB) or ISO 8601 text with "
        "its scale; at least half a period before the orbit's own",
    )
    source: str = Field("", max_length=500, description="Where the time comes from")


#: The two ways to place the orbit in time (JSON Schema): q and tp, or a and the mean anomaly.
_PLACED_BY = [{"required": ["q", "tp"]}, {"required": ["a", "mean_anomaly"]}]


class _OrbitFields(RequestModel):
    """The orbit's keys. The ranges are stated in the schema and checked by
    :func:`dynamics.orbit_input.parse_orbit` first, so that the API, the command line and the
    dashboard word every refusal the same way (``orbit.q: perihelion distance must be ...``)."""

    # q and tp, or a and the mean anomaly: one of the two ways to place the orbit
    model_config = {"json_schema_extra": {"anyOf": _PLACED_BY}}

    @model_validator(mode="before")
    @classmethod
    def _checked_like_every_command(cls, data):
        try:
            parse_orbit(data, allow_solutions=cls is OrbitIn)
        except InvalidOrbit as exc:
            raise ValueError(str(exc)) from None
        return data

    name: str = Field(
        ...,
        json_schema_extra={"minLength": 1, "maxLength": MAX_NAME_LENGTH, "pattern": _NAME_PATTERN},
        description=f"Designation and name, at most {MAX_NAME_LENGTH} characters, no control "
        "characters or line breaks (the name travels into CSV and iCalendar files)",
        examples=[DEMO_ORBIT["name"]],
    )
    epoch: TimeIn = Field(
        ...,
        description="Osculation epoch: Julian date (TDB) or ISO 8601 text with its scale. A "
        f"forecast needs it within the DE423 span {EPOCH_SPAN_TDB_JD[0]}-{EPOCH_SPAN_TDB_JD[1]} "
        "(1799-12-16 to 2200-02-01: the parent is integrated from it with DE423 planets); the "
        "quick-look geometry takes any epoch",
        examples=[DEMO_ORBIT["epoch"]],
    )
    q: float | None = Field(
        None,
        json_schema_extra={"exclusiveMinimum": MIN_PERIHELION_AU, "maximum": MAX_PERIHELION_AU},
        description="Perihelion distance (au); with tp, or else a and mean_anomaly; above the "
        f"Sun's radius ({MIN_PERIHELION_AU:.5f} "
        "au, IAU 2015 Resolution B3: at or below it the parent plunges into the Sun) and at "
        f"most {MAX_PERIHELION_AU:g} au (no known small body has q above about 80 au; dust "
        "from farther out cannot reach Earth's orbit)",
        examples=[DEMO_ORBIT["q"]],
    )
    e: float = Field(
        ...,
        json_schema_extra={"minimum": 0.0, "maximum": MAX_ECCENTRICITY},
        description=f"Eccentricity (1): 0 circle, < 1 ellipse, 1 parabola, > 1 hyperbola; at "
        f"most {MAX_ECCENTRICITY:g} (interstellar objects so far have e < 7)",
        examples=[DEMO_ORBIT["e"]],
    )
    i: float = Field(
        ...,
        json_schema_extra={"minimum": 0.0, "maximum": 180.0},
        description="Inclination (deg), ecliptic and equinox J2000, 0-180",
        examples=[DEMO_ORBIT["i"]],
    )
    node: float = Field(
        ...,
        json_schema_extra={"minimum": 0.0, "exclusiveMaximum": 360.0},
        description="Longitude of the ascending node (deg), ecliptic and equinox J2000, [0, 360)",
        examples=[DEMO_ORBIT["node"]],
    )
    peri: float = Field(
        ...,
        json_schema_extra={"minimum": 0.0, "exclusiveMaximum": 360.0},
        description="Argument of perihelion (deg), ecliptic and equinox J2000, [0, 360)",
        examples=[DEMO_ORBIT["peri"]],
    )
    tp: TimeIn | None = Field(
        None,
        description="Perihelion time: Julian date (TDB) or ISO 8601 text with its scale; with q",
        examples=[DEMO_ORBIT["tp"]],
    )
    a: float | None = Field(
        None,
        json_schema_extra={"exclusiveMinimum": 0.0},
        description="Semi-major axis (au) of a bound orbit (e < 1), in place of q and tp with "
        "mean_anomaly: the element set catalogues give for asteroids; q = a (1 - e) must lie "
        "in q's range",
    )
    mean_anomaly: float | None = Field(
        None,
        description="Mean anomaly at the epoch (deg), with a; the perihelion nearest the epoch "
        "becomes tp",
    )
    n: float | None = Field(
        None,
        json_schema_extra={"exclusiveMinimum": 0.0},
        description="Optional mean motion (deg/day), a check on a: it must agree with Kepler's "
        f"third law to a relative {MEAN_MOTION_TOLERANCE:g}",
    )
    nongrav: NonGravIn | None = Field(
        None, description="Optional non-gravitational parameters (au/day^2)"
    )
    m1: float | None = Field(
        None,
        json_schema_extra={"minimum": MAGNITUDE_RANGE[0], "maximum": MAGNITUDE_RANGE[1]},
        description="Optional total absolute magnitude M1 (m = M1 + 5 log10 Delta + K1 log10 "
        "r): sets the dust production per return through the water production (Jorda et al. "
        "2008) unless a production is stated",
    )
    k1: float | None = Field(
        None,
        json_schema_extra={"minimum": 0.0, "maximum": MAX_K1},
        description="Slope K1 of the total magnitude law (default 10, i.e. n = 4)",
    )
    observed_perihelia: (
        Annotated[list[ObservedPerihelionIn], Field(max_length=MAX_OBSERVED_PERIHELIA)] | None
    ) = Field(
        None,
        description="Optional perihelion times of earlier returns, observed or fitted at the "
        "time; the parent's history is held to them going back (README, 'Parent history')",
    )
    covariance: (
        Annotated[
            list[Annotated[list[float], Field(min_length=6, max_length=6)]],
            Field(min_length=6, max_length=6),
        ]
        | None
    ) = Field(
        None,
        description="Optional 6 x 6 covariance over (q, e, i, node, peri, tp) in (au, 1, deg, "
        "deg, deg, day): symmetric, positive semi-definite; clones are drawn from it",
    )


class OrbitSolutionIn(_OrbitFields):
    """An alternative orbit solution (same keys as the orbit; solutions do not nest)."""


class OrbitIn(_OrbitFields):
    """A parent's orbit: heliocentric osculating elements, ecliptic and equinox J2000."""

    model_config = {"json_schema_extra": {"examples": [DEMO_ORBIT], "anyOf": _PLACED_BY}}

    solutions: list[OrbitSolutionIn] | None = Field(
        None,
        min_length=1,
        max_length=MAX_SOLUTIONS,
        description=f"Optional alternative orbit fits (at most {MAX_SOLUTIONS}); each is "
        "forecast with the same seed and the differences reported",
    )
    ejection_events: list[EjectionEventIn] | None = Field(
        None,
        max_length=MAX_EVENTS,
        description="Optional break-ups or outbursts that released a return's trail (kind, "
        "start, duration in days, speed multiplier, size range in grams, source)",
    )

    def to_domain(self, path: str = "orbit.") -> OrbitInput:
        """The validated :class:`~dynamics.orbit_input.OrbitInput` (InvalidOrbit naming the
        field, with ``path`` in front, for what only the whole object can show)."""
        return parse_orbit(self.model_dump(exclude_none=True), path=path)
