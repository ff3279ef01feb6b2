"""Request models of the API, in one place: each checks its input (types, units, physical
ranges with their reasons in the OpenAPI schema) and turns it into the domain's objects with
``to_domain()``; routers only call that and hand the result on.

- :mod:`.orbit`: the orbit object every route takes, as a real schema;
- :mod:`.forecast`: ``POST /v1/forecasts`` (options, calibration);
- :mod:`.screening`: ``POST /v1/screenings`` (rule, options);
- :mod:`.common`: the base class (no NaN or Infinity anywhere, unknown keys refused), years,
  and :class:`~.common.LimitExceeded` for the server's own limits.
"""

from .common import LimitExceeded, RequestModel
from .forecast import CalibrationIn, ForecastIn, ForecastOptionsIn
from .orbit import OrbitIn
from .screening import ScreeningIn, ScreeningOptionsIn, ScreeningRuleIn

__all__ = [
    "CalibrationIn",
    "ForecastIn",
    "ForecastOptionsIn",
    "LimitExceeded",
    "OrbitIn",
    "RequestModel",
    "ScreeningIn",
    "ScreeningOptionsIn",
    "ScreeningRuleIn",
]
