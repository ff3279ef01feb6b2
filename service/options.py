"""The one table of forecast options: every surface that takes them is built from it.

Each :class:`Option` names its API field (``options.<name>`` of ``POST /v1/forecasts`` and
``POST /v1/screenings``), its command-line flag, type, default, help text with unit, and limits.
From this table come the request models (:mod:`service.models.forecast`,
:mod:`service.models.screening`), the flags of ``forecast``, ``submit``, ``screen`` and
``hindcast`` (:func:`add_arguments`), the README's option table (:func:`markdown_table`) and
the engine options a request describes (:func:`forecast_options`, :func:`screening_options`).
A second copy of a default or a limit drifts (issue 14 found five); ``tests/test_options.py``
checks that every surface still agrees with this table.

Defaults are read from the engine's dataclasses (:class:`dynamics.forecast.ForecastOptions`,
:class:`dynamics.release.EjectionModel`), never retyped here; the limits are the service's
(physical or practical bounds, each with its reason).
"""

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from dynamics.ejection import EJECTION_SPEED_LAWS
from dynamics.forecast import ForecastOptions
from dynamics.nbody import INTEGRATORS
from dynamics.release import EjectionModel
from dynamics.scope import MAX_DEFAULT_TRAIL_REVOLUTIONS
from dynamics.screening import screening_forecast_options
from dynamics.uncertainty import DEFAULT_CLONES

#: Longest trail age accepted (years); no source: beyond a few thousand years the parent's
#: history (and its orbit solution) is too uncertain for a trail to mean anything.
MAX_TRAIL_AGE_YEARS = 5000.0
#: Most trails named in one request; no source: a century of returns of the shortest-period
#: comets known (about 3.3 years) is about 30, so 100 leaves room without unbounded lists.
MAX_NAMED_TRAILS = 100
#: Most meteoroids per trail and Earth passage a request may ask (1); the server's own ceiling
#: (TRAILCAST_MAX_PARTICLES_PER_JOB) is usually lower. No source: beyond this the memory of one
#: trail's crossings, not the statistics, is what limits.
MAX_PARTICLES = 100_000
#: Fewest meteoroids per trail and passage (1): a spread and a centre need at least three.
MIN_PARTICLES = 3
#: Largest random seed: numpy's legacy seeding takes 32-bit unsigned integers.
MAX_SEED = 2**32 - 1
#: Most covariance clones (1); no source: a budget, each clone is one more full forecast.
MAX_CLONES = 20
#: Most local worker processes (1); no source: far above any machine's cores we run on.
MAX_WORKERS = 256

#: Where an option can be given (the surfaces checked by tests/test_options.py).
FORECAST, SUBMIT, SCREEN, HINDCAST = "forecast", "submit", "screen", "hindcast"


def _engine_default(cls, name: str):
    """The default of field ``name`` of the engine's dataclass ``cls`` (None for a factory)."""
    f = {f.name: f for f in dataclasses.fields(cls)}[name]
    return None if f.default is dataclasses.MISSING else f.default


_SCREENING_BUDGET = screening_forecast_options(2000, 2000)


@dataclass(frozen=True)
class Option:
    """One forecast option, as every surface shows it.

    Attributes
    ----------
    name : str
        API field (``options.<name>``) and the argparse destination.
    flag : str
        Command-line flag.
    type : type
        int, float or str: what one value is on the command line and in JSON.
    default
        The engine's default (None: the engine decides, as ``help`` says).
    help : str
        What it is, with its unit; the default and limits are added by :meth:`cli_help`.
    engine : str
        Where the default comes from (shown in the README's table).
    ge, gt, le, lt : float or None
        Limits (inclusive or exclusive).
    choices : tuple of str or None
        The accepted names.
    max_items : int or None
        For a list: most items.
    nullable : bool
        The API accepts ``null`` (meaning the default).
    surfaces : frozenset of str
        Commands that take it (:data:`FORECAST`, :data:`SUBMIT`, :data:`SCREEN`,
        :data:`HINDCAST`).
    api : bool
        A field of the request models' ``options``; False for where a computation runs
        (the server decides that), which changes no answer.
    screening_default
        Default in a screening when it differs from a forecast's (the screening budget of
        :func:`dynamics.screening.screening_forecast_options`); None: the same.
    metavar : str or None
    parse : callable or None
        Turns the command-line text into the API value (raises ValueError with a message).
    repeatable : bool
        The flag may be given several times.
    """

    name: str
    flag: str
    type: type
    default: Any
    help: str
    engine: str
    ge: float | None = None
    gt: float | None = None
    le: float | None = None
    lt: float | None = None
    choices: tuple[str, ...] | None = None
    max_items: int | None = None
    nullable: bool = False
    surfaces: frozenset = frozenset({FORECAST, SUBMIT})
    api: bool = True
    screening_default: Any = None
    metavar: str | None = None
    parse: Callable[[str], Any] | None = None
    repeatable: bool = False

    def default_for(self, surface: str):
        """The default on ``surface`` (screening has its own budget for some options)."""
        if surface == SCREEN and self.screening_default is not None:
            return self.screening_default
        return self.default

    def limits_text(self) -> str:
        """The limits in words, e.g. ``3-100000``, ``> 0 and <= 5000``, or the choices."""
        if self.choices:
            return ", ".join(self.choices)
        lo = (
            f">= {_num(self.ge)}"
            if self.ge is not None
            else (f"> {_num(self.gt)}" if self.gt is not None else "")
        )
        hi = (
            f"<= {_num(self.le)}"
            if self.le is not None
            else (f"< {_num(self.lt)}" if self.lt is not None else "")
        )
        if self.ge is not None and self.le is not None:
            return f"{_num(self.ge)}-{_num(self.le)}"
        text = " and ".join(t for t in (lo, hi) if t)
        if self.max_items is not None:
            text = (text + "; " if text else "") + f"at most {self.max_items}"
        return text

    def default_text(self, surface: str = FORECAST) -> str:
        value = self.default_for(surface)
        if value is None:
            return {
                "workers": "one per core",
                "trails": "all within the age limit",
                "dust_mass_per_return_g": "from the orbit's M1, else 1 m of the nucleus surface",
                "calibration": "none: absolute ZHRs",
                "events": "none",
            }[self.name]
        return _num(value) if isinstance(value, int | float) else str(value)

    def cli_help(self, surface: str = FORECAST) -> str:
        """The help text: what it is, its limits and its default on ``surface``."""
        limits = self.limits_text()
        return (
            self.help.replace("%", "%%")
            + (f"; {'one of ' if self.choices else ''}{limits}" if limits else "")
            + f" (default {self.default_text(surface)})"
        )


def _num(x) -> str:
    """A limit or default as people write it: 4294967295, 0.05, 1e+20."""
    return str(int(x)) if float(x).is_integer() and abs(x) < 1e15 else f"{x:g}"


def _trail_years(text: str) -> list[int]:
    try:
        return [int(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise ValueError(f"takes perihelion years separated by commas, got {text!r}") from None


def _calibration(text: str) -> dict:
    try:
        year, trail, zhr = text.split(":")
        return {"year": int(year), "trail_year": int(trail), "zhr": float(zhr)}
    except ValueError:
        raise ValueError(f"takes YEAR:TRAIL_YEAR:ZHR, e.g. 2039:1975:350, got {text!r}") from None


_FO, _EM = ForecastOptions, EjectionModel

#: The table. Order is the order of the help, the schema and the README.
OPTIONS: tuple[Option, ...] = (
    Option(
        "particles",
        "--particles",
        int,
        _engine_default(_FO, "particles"),
        "meteoroids per trail and Earth passage (1); the server may set a lower ceiling",
        "ForecastOptions.particles",
        ge=MIN_PARTICLES,
        le=MAX_PARTICLES,
        nullable=True,
        surfaces=frozenset({FORECAST, SUBMIT, SCREEN}),
        screening_default=_SCREENING_BUDGET.particles,
    ),
    Option(
        "seed",
        "--seed",
        int,
        _engine_default(_FO, "seed"),
        "random seed; same seed, same answer",
        "ForecastOptions.seed",
        ge=0,
        le=MAX_SEED,
        surfaces=frozenset({FORECAST, SUBMIT, SCREEN}),
    ),
    Option(
        "trails",
        "--trails",
        int,
        _engine_default(_FO, "trails"),
        "only these trails, by perihelion year (list; on the command line 1899,1932); each "
        f"at most {MAX_TRAIL_AGE_YEARS:g} years before 1800 and before the last forecast year; "
        "a year without a return of its own names the nearest return within a quarter period "
        "(the notes say so)",
        "ForecastOptions.trails",
        max_items=MAX_NAMED_TRAILS,
        nullable=True,
        metavar="YEARS",
        parse=_trail_years,
    ),
    Option(
        "max_trail_age_years",
        "--max-age",
        float,
        _engine_default(_FO, "max_trail_age_years"),
        "oldest trail followed, years before the first forecast year (yr); with no trails "
        f"named, also at most {MAX_DEFAULT_TRAIL_REVOLUTIONS} revolutions old (the notes say "
        "what either limit left out)",
        "ForecastOptions.max_trail_age_years",
        gt=0.0,
        le=MAX_TRAIL_AGE_YEARS,
        surfaces=frozenset({FORECAST, SUBMIT, SCREEN}),
    ),
    Option(
        "integrator",
        "--integrator",
        str,
        _engine_default(_FO, "integrator"),
        "REBOUND integrator",
        "ForecastOptions.integrator",
        choices=tuple(INTEGRATORS),
        surfaces=frozenset({FORECAST, SUBMIT, SCREEN}),
    ),
    Option(
        "speed_law",
        "--speed-law",
        str,
        _engine_default(_EM, "speed_law"),
        "ejection speed law",
        "EjectionModel.speed_law",
        choices=tuple(sorted(EJECTION_SPEED_LAWS)),
        surfaces=frozenset({FORECAST, SUBMIT, SCREEN}),
    ),
    Option(
        "mass_index",
        "--mass-index",
        float,
        _engine_default(_EM, "mass_index"),
        "differential mass index s (1); 1.7-2.2 is typical",
        "EjectionModel.mass_index",
        gt=1.0,
        lt=3.0,
        surfaces=frozenset({FORECAST, SUBMIT, SCREEN}),
    ),
    Option(
        "meteoroid_density_g_cm3",
        "--density",
        float,
        _engine_default(_EM, "meteoroid_density_g_cm3"),
        "meteoroid bulk density (g/cm^3)",
        "EjectionModel.meteoroid_density_g_cm3",
        ge=0.05,
        le=8.0,
        surfaces=frozenset({FORECAST, SUBMIT, SCREEN}),
    ),
    Option(
        "nucleus_radius_km",
        "--nucleus-radius",
        float,
        _engine_default(_EM, "nucleus_radius_km"),
        "nucleus radius (km)",
        "EjectionModel.nucleus_radius_km",
        ge=0.01,
        le=100.0,
        surfaces=frozenset({FORECAST, SUBMIT, SCREEN}),
    ),
    Option(
        "dust_mass_per_return_g",
        "--dust-mass",
        float,
        _engine_default(_FO, "dust_mass_per_return_g"),
        "dust mass released per return (g), for absolute ZHRs",
        "ForecastOptions.dust_mass_per_return_g",
        ge=1.0,
        le=1e20,
        nullable=True,
        metavar="GRAMS",
    ),
    Option(
        "calibration",
        "--calibrate",
        str,
        _engine_default(_FO, "calibration"),
        "a past observed outburst of this parent, ZHRs scaled to it: {year, trail_year, zhr} "
        "(on the command line YEAR:TRAIL_YEAR:ZHR, e.g. 2039:1975:350)",
        "ForecastOptions.calibration",
        nullable=True,
        metavar="YEAR:TRAIL:ZHR",
        parse=_calibration,
    ),
    Option(
        "clones",
        "--clones",
        int,
        DEFAULT_CLONES,
        "clones drawn from the orbit's covariance, when it has one (1)",
        "dynamics.uncertainty.DEFAULT_CLONES",
        ge=0,
        le=MAX_CLONES,
    ),
    Option(
        "events",
        "--event",
        str,
        None,
        "a break-up or outburst releasing the trail of its return, KIND:START[:MULT[:DAYS]]: "
        "kind fragmentation or outburst, start (date YYYY-MM-DD or JD TDB), ejection-speed "
        "multiplier (default 1), duration in days (default 5); repeatable; e.g. "
        "fragmentation:2031-05-02:8:5. The API takes these in the orbit's `ejection_events`",
        "ForecastOptions.events",
        metavar="KIND:START[:MULT[:DAYS]]",
        api=False,
        repeatable=True,
    ),
    Option(
        "workers",
        "--workers",
        int,
        None,
        "worker processes for the computation (1 = in this process); the service sets its "
        "own (TRAILCAST_WORKERS), so submit does not take it",
        "dynamics.executors.default_workers",
        ge=1,
        le=MAX_WORKERS,
        surfaces=frozenset({FORECAST, SCREEN, HINDCAST}),
        api=False,
    ),
)

BY_NAME = {o.name: o for o in OPTIONS}
BY_FLAG = {o.flag: o for o in OPTIONS}
#: Fields of a forecast request's ``options``, in order.
API_OPTIONS = tuple(o for o in OPTIONS if o.api)
#: Fields of a screening request's ``options``: the model options a screening runs with.
SCREENING_OPTIONS = tuple(o for o in API_OPTIONS if SCREEN in o.surfaces)


# --- command line --------------------------------------------------------------------------------


def add_arguments(parser, surface: str) -> None:
    """Add the flags of every option ``surface`` takes, with the table's help and defaults."""
    for o in OPTIONS:
        if surface not in o.surfaces:
            continue
        kwargs = {"dest": o.name, "help": o.cli_help(surface)}
        if o.repeatable:
            kwargs["action"] = "append"
        else:
            kwargs["default"] = o.default_for(surface)
        if o.parse is None and not o.repeatable:
            kwargs["type"] = o.type
        if o.choices:
            kwargs["choices"] = o.choices
        if not o.choices:
            kwargs["metavar"] = o.metavar or ("N" if o.type is int else "X")
        parser.add_argument(o.flag, **kwargs)


def values_from_args(args, surface: str) -> dict:
    """The API-shaped ``options`` of the parsed arguments (API fields only), not yet checked.

    Raises
    ------
    ValueError
        ``"--flag: message"`` when a text value cannot be read.
    """
    out = {}
    for o in API_OPTIONS:
        if surface not in o.surfaces:
            continue
        value = getattr(args, o.name)
        if o.parse is not None and isinstance(value, str):
            try:
                value = o.parse(value)
            except ValueError as exc:
                raise ValueError(f"{o.flag} {exc}") from None
        out[o.name] = value
    return out


def resolve_workers(workers: int | None) -> int:
    """``--workers`` as every command means it: worker processes, default one per core.

    Raises
    ------
    ValueError
        Outside the table's limits.
    """
    from dynamics.executors import default_workers

    o = BY_NAME["workers"]
    n = default_workers() if workers is None else workers
    if not o.ge <= n <= o.le:
        raise ValueError(f"{o.flag} must be between {o.ge:g} and {o.le:g}, got {n}")
    return n


# --- engine options ------------------------------------------------------------------------------


def ejection_model(o: dict) -> EjectionModel:
    """The EjectionModel a request's checked ``options`` describe (forecasts and screenings)."""
    return dataclasses.replace(
        EjectionModel(),
        speed_law=o["speed_law"],
        mass_index=o["mass_index"],
        meteoroid_density_g_cm3=o["meteoroid_density_g_cm3"],
        nucleus_radius_km=o["nucleus_radius_km"],
    )


def forecast_options(
    first_year: int, last_year: int, o: dict, workers: int, events: tuple = ()
) -> ForecastOptions:
    """The engine's ForecastOptions for a forecast request's checked ``options`` (a job's
    canonical options, or the command line's after the same checks)."""
    from dynamics.forecast import Calibration

    return ForecastOptions(
        first_year=int(first_year),
        last_year=int(last_year),
        particles=o["particles"],
        seed=o["seed"],
        trails=tuple(o["trails"]) if o["trails"] is not None else None,
        max_trail_age_years=o["max_trail_age_years"],
        integrator=o["integrator"],
        workers=workers,
        ejection=ejection_model(o),
        events=tuple(events),
        dust_mass_per_return_g=o.get("dust_mass_per_return_g"),
        calibration=Calibration(**o["calibration"]) if o.get("calibration") else None,
    )


def screening_options(first_year: int, last_year: int, o: dict, **extra) -> ForecastOptions:
    """The forecast each screening candidate runs, for a screening's checked ``options``."""
    return screening_forecast_options(
        first_year,
        last_year,
        particles=o["particles"],
        seed=o["seed"],
        max_trail_age_years=o["max_trail_age_years"],
        integrator=o["integrator"],
        ejection=ejection_model(o),
        **extra,
    )


# --- documentation -------------------------------------------------------------------------------


def markdown_table() -> str:
    """The README's option table (between its ``options-table`` markers)."""
    rows = [
        "| API field (`options.`) | flag | commands | default | limits | what (unit) |",
        "|---|---|---|---|---|---|",
    ]
    order = (FORECAST, SUBMIT, SCREEN, HINDCAST)
    for o in OPTIONS:
        default = o.default_text()
        if o.screening_default is not None:
            default += f" (screen: {o.default_text(SCREEN)})"
        rows.append(
            f"| {('`' + o.name + '`') if o.api else '-'} | `{o.flag}` | "
            f"{', '.join(s for s in order if s in o.surfaces)} | {default} | "
            f"{o.limits_text() or '-'} | {o.help.replace('|', '/')} |"
        )
    return "\n".join(rows)
