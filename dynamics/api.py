"""The curated front door of trailcast's numerical core.

>>> from dynamics.api import parse_orbit, format_utc
>>> orbit = parse_orbit({"name": "invented", "epoch": 2461000.5, "q": 0.9, "e": 0.5, "i": 10,
...                      "node": 20, "peri": 30, "tp": 2461000.5})
>>> format_utc(orbit.tp_tdb_jd)
'2025-11-20T23:58:51Z'

Everything here is also importable from its topic module; this list is what callers (the CLI,
the service, notebooks) are expected to need.
"""

from .activity import zhr_from_flux
from .errors import InvalidOrbit, InvalidTime, OutsideTimeSpan, TrailcastError
from .forecast import Calibration, ForecastOptions, ForecastResult, forecast
from .geometry import quick_look
from .history import FirstPassage, parent_history
from .moid import moid
from .observing import Site, expected_hourly_rate, site_view, world_view
from .orbit_input import OrbitInput, parse_orbit
from .release import EjectionEvent, EjectionModel
from .solar_longitude import solar_longitude_deg, times_of_solar_longitude_tdb
from .summaries import TrailEncounter
from .timescales import format_utc, iso_to_tdb_jd
from .uncertainty import SolutionsResult, forecast_solutions

__all__ = [
    "Calibration",
    "EjectionEvent",
    "EjectionModel",
    "FirstPassage",
    "ForecastOptions",
    "ForecastResult",
    "InvalidOrbit",
    "InvalidTime",
    "OrbitInput",
    "OutsideTimeSpan",
    "Site",
    "SolutionsResult",
    "TrailEncounter",
    "TrailcastError",
    "expected_hourly_rate",
    "forecast",
    "forecast_solutions",
    "format_utc",
    "iso_to_tdb_jd",
    "moid",
    "parent_history",
    "parse_orbit",
    "quick_look",
    "site_view",
    "solar_longitude_deg",
    "times_of_solar_longitude_tdb",
    "world_view",
    "zhr_from_flux",
]
