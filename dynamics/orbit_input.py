"""The parent-orbit input shared by every trailcast command and endpoint.

JSON form (keys kept stable; units fixed)::

    {"name": "C/2031 Q7 (invented)",
     "epoch": 2472000.5,                 # JD TDB, or ISO 8601 text with a scale
     "q": 0.9921, "e": 0.9873,           # perihelion distance (au), eccentricity
     "i": 71.4, "node": 141.2, "peri": 196.8,   # deg, ecliptic and equinox J2000
     "tp": "2031-09-14T06:00:00 TDB",   # perihelion time, JD TDB or ISO 8601 with a scale
     "nongrav": {"a1": 1e-9, "a2": 1e-10, "a3": 0.0},   # optional, au/day^2 (Marsden et al. 1973)
                                         # optional "dt": days, the asymmetric model's offset
                                         # of peak outgassing from perihelion (Yeomans &
                                         # Chodas 1989), as orbit solutions list it
     "m1": 11.5, "k1": 10.0,             # optional total absolute magnitude m = M1 + 5 log D
                                         # + K1 log r (K1 defaults to 10): sets the dust production
     "covariance": [[...6 x 6...]],      # optional, over (q, e, i, node, peri, tp) in
                                         # (au, 1, deg, deg, deg, day)
     "observed_perihelia": [             # optional: perihelion times of earlier returns
         {"tp": 2461234.5, "source": "..."}],   # observed or fitted at the time (JD TDB or
                                         # ISO 8601); the parent history passes through them
     "solutions": [{...}, ...]}          # optional alternative orbit fits, same keys

A bound orbit may instead be placed by ``"a"`` (semi-major axis, au) and ``"mean_anomaly"``
(deg, at ``epoch``), with ``"n"`` (mean motion, deg/day) as an optional check, in place of
``q`` and ``tp``: the element set orbit catalogues give for asteroids (a parent such as a
dormant comet) and many periodic comets. It is converted on reading (q = a (1 - e), tp the
perihelion nearest the epoch); the result and :meth:`OrbitInput.to_json` carry q and tp.

Elements are heliocentric osculating elements at ``epoch``. :func:`parse_orbit` validates a
mapping and returns an :class:`OrbitInput`; every failure raises
:class:`~dynamics.errors.InvalidOrbit` naming the field (dotted path for nested ones).
"""

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from .constants import GM_SUN_AU3_D2, SOLAR_RADIUS_AU
from .errors import InvalidOrbit, InvalidTime, OutsideTimeSpan
from .timescales import parse_time_tdb_jd

#: Keys an orbit object may carry.
ORBIT_KEYS = (
    "name",
    "epoch",
    "q",
    "e",
    "i",
    "node",
    "peri",
    "tp",
    "nongrav",
    "m1",
    "k1",
    "covariance",
    "solutions",
    "ejection_events",
    "observed_perihelia",
    "a",
    "mean_anomaly",
    "n",
)
#: Keys of the second way to place a bound orbit: semi-major axis (au) and mean anomaly at the
#: epoch (deg), with the mean motion (deg/day) optionally given as a check, as orbit catalogues
#: list asteroids and many periodic comets. They replace ``q`` and ``tp``.
MEAN_ANOMALY_KEYS = ("a", "mean_anomaly", "n")
#: Largest relative difference accepted between a given mean motion and the one the
#: semi-major axis implies (Kepler's third law with the Sun's GM). Catalogues print a and n to
#: 7-9 significant digits, so their own rounding stays below 1e-6; a typing error in either
#: does not (no source).
MEAN_MOTION_TOLERANCE = 1e-5
#: Order of the covariance matrix rows and columns, with their units.
COVARIANCE_ORDER = (
    ("q", "au"),
    ("e", "1"),
    ("i", "deg"),
    ("node", "deg"),
    ("peri", "deg"),
    ("tp", "day"),
)
#: Largest |dt| of the asymmetric non-gravitational model accepted (days): published fits lie
#: within about +-100 d of perihelion (Yeomans & Chodas 1989; the bound is common practice,
#: no source, and wide).
MAX_NONGRAV_DT_DAYS = 365.0
#: Upper limit on eccentricity accepted (interstellar objects so far have e < 7).
MAX_ECCENTRICITY = 100.0
#: Smallest perihelion distance accepted (au): the Sun's radius (IAU 2015 Resolution B3). An
#: orbit with q at or below it plunges into the Sun: no return, no trail.
MIN_PERIHELION_AU = SOLAR_RADIUS_AU
#: Largest perihelion distance accepted (au). No source: no known small body has q above about
#: 80 au, and dust from a parent that stays beyond 1000 au cannot reach Earth's orbit; the bound
#: keeps the numerical searches (MOID, node distances) finite.
MAX_PERIHELION_AU = 1000.0
#: Epochs a forecast accepts (TDB JD): the span of the DE423 ephemeris (Folkner 2010; its header
#: values), inside which the parent is integrated from its epoch. Same values as
#: :data:`dynamics.ephemeris.EPHEMERIS_SPAN_TDB_JD` (not imported: this module stays light).
EPOCH_SPAN_TDB_JD = (2_378_480.5, 2_524_624.5)
#: Longest name accepted.
MAX_NAME_LENGTH = 200
#: Total absolute magnitudes accepted (mag): the brightest comets on record reach M1 of about
#: -2, the faintest catalogued nuclei about 20 (no source; a wide guard against typing errors).
MAGNITUDE_RANGE = (-5.0, 25.0)
#: K1 of the total-magnitude law m = M1 + 5 log10 Delta + K1 log10 r when not given (the usual
#: n = 4, K1 = 2.5 n; common practice, no source).
DEFAULT_K1 = 10.0
#: Largest K1 accepted (2.5 n with n up to 20; catalogued values rarely exceed 30; no source).
MAX_K1 = 50.0
#: Most alternative solutions accepted in one input.
MAX_SOLUTIONS = 64
#: Most observed perihelion times accepted in one input (a comet seen at every return since
#: antiquity has about 30; no source).
MAX_OBSERVED_PERIHELIA = 100


@dataclass(frozen=True)
class ObservedPerihelion:
    """The perihelion time of an earlier return, from that apparition's own observations.

    An orbit solution fixes the comet's motion over its data arc; integrated back over many
    revolutions, unmodelled or changing non-gravitational forces make its returns drift (days
    per century for active Jupiter-family comets). Perihelion times determined at the time, as
    orbit catalogues list them, are how back integrations are held to the real comet (the
    practice of linking apparitions; e.g. Yeomans & Kiang 1981, MNRAS 197, 633, for a comet
    followed over two millennia; from memory).
    """

    tp_tdb_jd: float
    source: str = ""


@dataclass(frozen=True)
class NonGravParams:
    """Marsden, Sekanina & Yeomans (1973) non-gravitational parameters (au/day^2).

    The acceleration is ``(A1 R + A2 T + A3 N) g(r)`` with the standard water-ice g(r) law
    (see :mod:`dynamics.history`); R radial, T transverse, N normal. With ``dt_days`` != 0 the
    law is the asymmetric one of Yeomans & Chodas (1989, AJ 98, 1083): g is taken at the
    heliocentric distance the comet has at ``t - dt`` on its osculating orbit, so outgassing
    peaks ``dt`` days after perihelion (before it when negative).
    """

    a1_au_d2: float = 0.0
    a2_au_d2: float = 0.0
    a3_au_d2: float = 0.0
    dt_days: float = 0.0


@dataclass(frozen=True)
class OrbitInput:
    """A validated parent orbit: heliocentric osculating elements, ecliptic J2000.

    Attributes carry their units in their names. ``solutions`` holds alternative fits (each an
    :class:`OrbitInput` without solutions of its own); ``covariance`` is a 6 x 6 array over
    :data:`COVARIANCE_ORDER` or None.
    """

    name: str
    epoch_tdb_jd: float
    q_au: float
    e: float
    incl_deg: float
    node_deg: float
    peri_deg: float
    tp_tdb_jd: float
    nongrav: NonGravParams | None = None
    covariance: np.ndarray | None = field(default=None, compare=False)
    solutions: tuple["OrbitInput", ...] = ()
    ejection_events: tuple = ()  # dynamics.release.EjectionEvent: break-ups, outbursts
    m1: float | None = None  # total absolute magnitude (mag), None when not given
    k1: float = DEFAULT_K1  # its heliocentric slope: m = M1 + 5 log10 Delta + K1 log10 r
    observed_perihelia: tuple[ObservedPerihelion, ...] = ()  # earlier returns, oldest first

    @property
    def a_au(self) -> float:
        """Semi-major axis (au): negative for hyperbolic orbits, infinite for a parabola."""
        return math.inf if self.e == 1.0 else self.q_au / (1.0 - self.e)

    @property
    def period_days(self) -> float:
        """Keplerian (heliocentric two-body) period in days; infinite when e >= 1."""
        if self.e >= 1.0:
            return math.inf
        return 2.0 * math.pi * self.a_au**1.5 / math.sqrt(GM_SUN_AU3_D2)

    @property
    def aphelion_au(self) -> float:
        return math.inf if self.e >= 1.0 else self.q_au * (1.0 + self.e) / (1.0 - self.e)

    def to_json(self) -> dict:
        """The orbit as its JSON input object (times as JD TDB numbers)."""
        out = {
            "name": self.name,
            "epoch": self.epoch_tdb_jd,
            "q": self.q_au,
            "e": self.e,
            "i": self.incl_deg,
            "node": self.node_deg,
            "peri": self.peri_deg,
            "tp": self.tp_tdb_jd,
        }
        if self.nongrav is not None:
            out["nongrav"] = {
                "a1": self.nongrav.a1_au_d2,
                "a2": self.nongrav.a2_au_d2,
                "a3": self.nongrav.a3_au_d2,
            }
            if self.nongrav.dt_days:
                out["nongrav"]["dt"] = self.nongrav.dt_days
        if self.m1 is not None:
            out["m1"] = self.m1
            out["k1"] = self.k1
        if self.covariance is not None:
            out["covariance"] = self.covariance.tolist()
        if self.solutions:
            out["solutions"] = [s.to_json() for s in self.solutions]
        if self.ejection_events:
            out["ejection_events"] = [
                {
                    "kind": ev.kind,
                    "start": ev.t_tdb_jd,
                    "duration_days": ev.duration_days,
                    "speed_multiplier": ev.speed_multiplier,
                    "source": ev.source,
                }
                | (
                    {}
                    if ev.mass_min_g is None
                    else {"mass_range_g": [ev.mass_min_g, ev.mass_max_g]}
                )
                for ev in self.ejection_events
            ]
        if self.observed_perihelia:
            out["observed_perihelia"] = [
                {"tp": p.tp_tdb_jd} | ({"source": p.source} if p.source else {})
                for p in self.observed_perihelia
            ]
        return out


def parse_orbit(
    data, *, path: str = "", allow_solutions: bool = True, _inherit: dict | None = None
) -> OrbitInput:
    """Validate an orbit mapping (parsed JSON) and return an :class:`OrbitInput`.

    Parameters
    ----------
    data : Mapping
        The orbit object, keys as in the module docstring.
    path : str
        Prefix for field names in error messages (used for nested solutions).
    allow_solutions : bool
        False for the members of ``solutions`` (they may not nest).

    Raises
    ------
    InvalidOrbit
        Naming the first offending field: a missing key, an unknown key, a value that is not a
        finite number, e < 0, q <= 0, angles out of range, a malformed time, a covariance that is
        not a symmetric positive semi-definite 6 x 6 matrix.

    Examples
    --------
    >>> o = parse_orbit({"name": "demo", "epoch": 2460000.5, "q": 1.0, "e": 0.5, "i": 10,
    ...                  "node": 20, "peri": 30, "tp": "2023-02-25T00:00:00 TDB"})
    >>> round(o.a_au, 6), o.tp_tdb_jd
    (2.0, 2460000.5)
    >>> parse_orbit({"name": "x", "epoch": 2460000.5, "q": -1, "e": 0.5, "i": 10,
    ...              "node": 20, "peri": 30, "tp": 2460000.5})
    Traceback (most recent call last):
    ...
    dynamics.errors.InvalidOrbit: q: perihelion distance must be > 0 au, got -1.0
    """
    if not isinstance(data, Mapping):
        raise InvalidOrbit(
            path.rstrip(".") or "orbit", "expected a JSON object with the orbit's keys"
        )
    unknown = sorted(set(data) - set(ORBIT_KEYS))
    if unknown:
        raise InvalidOrbit(
            path + unknown[0], f"unknown key; expected some of {', '.join(ORBIT_KEYS)}"
        )
    by_mean_anomaly = any(data.get(k) is not None for k in MEAN_ANOMALY_KEYS)
    placed = ("a", "mean_anomaly") if by_mean_anomaly else ("q", "tp")
    if by_mean_anomaly:
        both = [k for k in ("q", "tp") if data.get(k) is not None]
        if both:
            raise InvalidOrbit(
                path + both[0],
                "give either q and tp, or a and mean_anomaly (with n as a check), not both",
            )
    for key in ("name", "epoch", placed[0], "e", "i", "node", "peri", placed[1]):
        if key not in data or data[key] is None:
            raise InvalidOrbit(path + key, "missing (required)")

    name = data["name"]
    if not isinstance(name, str) or not name.strip():
        raise InvalidOrbit(path + "name", "must be a non-empty string")
    if len(name) > MAX_NAME_LENGTH:
        raise InvalidOrbit(path + "name", f"longer than {MAX_NAME_LENGTH} characters")
    if any(0xD800 <= ord(c) <= 0xDFFF for c in name):
        raise InvalidOrbit(path + "name", "holds a lone surrogate (not a Unicode character)")
    if any(ord(c) < 0x20 or 0x7F <= ord(c) < 0xA0 or c in "\u2028\u2029" for c in name):
        raise InvalidOrbit(path + "name", "holds a control character or line break")

    e = _number(data, "e", path)
    q = a = _number(data, placed[0], path)  # with the mean anomaly: a, turned into q below
    incl = _number(data, "i", path)
    node = _number(data, "node", path)
    peri = _number(data, "peri", path)
    if by_mean_anomaly:
        if not 0.0 <= e < 1.0:
            raise InvalidOrbit(
                path + "a",
                f"a semi-major axis and mean anomaly place a bound orbit (0 <= e < 1, got e = "
                f"{e!r}); give q and tp for parabolic and hyperbolic orbits",
            )
        if a <= 0.0:
            raise InvalidOrbit(path + "a", f"semi-major axis must be > 0 au, got {a!r}")
        q = a * (1.0 - e)
    q_field = path + placed[0]  # with a: the perihelion distance a (1 - e) it implies
    if q <= 0.0:
        raise InvalidOrbit(q_field, f"perihelion distance must be > 0 au, got {q!r}")
    if q <= MIN_PERIHELION_AU:
        raise InvalidOrbit(
            q_field,
            f"perihelion distance {q!r} au lies inside the Sun (radius {MIN_PERIHELION_AU:.5f} "
            "au): the parent would not survive its perihelion",
        )
    if q > MAX_PERIHELION_AU:
        raise InvalidOrbit(
            q_field,
            f"perihelion distance {q!r} au is above {MAX_PERIHELION_AU:g} au: dust from such a "
            "parent cannot reach Earth's orbit",
        )
    if e < 0.0:
        raise InvalidOrbit(path + "e", f"eccentricity must be >= 0, got {e!r}")
    if e > MAX_ECCENTRICITY:
        raise InvalidOrbit(
            path + "e", f"eccentricity above {MAX_ECCENTRICITY} is not a comet orbit"
        )
    if not 0.0 <= incl <= 180.0:
        raise InvalidOrbit(path + "i", f"inclination must be in [0, 180] deg, got {incl!r}")
    if not 0.0 <= node < 360.0:
        raise InvalidOrbit(
            path + "node", f"longitude of the ascending node must be in [0, 360) deg, got {node!r}"
        )
    if not 0.0 <= peri < 360.0:
        raise InvalidOrbit(
            path + "peri", f"argument of perihelion must be in [0, 360) deg, got {peri!r}"
        )

    epoch = _time(data, "epoch", path)
    if by_mean_anomaly:
        tp = _tp_from_mean_anomaly(data, path, epoch, a)
    else:
        tp = _time(data, "tp", path)

    nongrav = None
    if data.get("nongrav") is not None:
        ng = data["nongrav"]
        if not isinstance(ng, Mapping):
            raise InvalidOrbit(
                path + "nongrav",
                'expected an object {"a1", "a2", "a3"} in au/day^2 (and "dt" in days)',
            )
        extra = sorted(set(ng) - {"a1", "a2", "a3", "dt"})
        if extra:
            raise InvalidOrbit(
                f"{path}nongrav.{extra[0]}",
                "unknown key; expected a1, a2, a3 (au/day^2) and dt (days)",
            )
        vals = [_number(ng, k, f"{path}nongrav.", default=0.0) for k in ("a1", "a2", "a3")]
        for k, v in zip(("a1", "a2", "a3"), vals, strict=True):
            if abs(v) > 1e-5:  # 1e-5 au/d^2 at 1 au is ~3e-2 of solar gravity: not a comet fit
                raise InvalidOrbit(
                    f"{path}nongrav.{k}", f"|{k}| = {abs(v)!r} au/day^2 is implausibly large"
                )
        dt = _number(ng, "dt", f"{path}nongrav.", default=0.0)
        if abs(dt) > MAX_NONGRAV_DT_DAYS:
            raise InvalidOrbit(
                f"{path}nongrav.dt",
                f"|dt| = {abs(dt)!r} days: the peak of outgassing more than "
                f"{MAX_NONGRAV_DT_DAYS:g} days from perihelion is not an orbit fit",
            )
        nongrav = NonGravParams(*vals, dt_days=dt)

    inherit = _inherit or {}
    m1, k1 = inherit.get("m1"), inherit.get("k1", DEFAULT_K1)
    observed = inherit.get("observed_perihelia", ())
    if data.get("observed_perihelia") is not None:
        observed = _observed_perihelia(
            data["observed_perihelia"], path + "observed_perihelia", q, e, tp
        )
    if data.get("m1") is not None:
        m1 = _number(data, "m1", path)
        if not MAGNITUDE_RANGE[0] <= m1 <= MAGNITUDE_RANGE[1]:
            raise InvalidOrbit(
                path + "m1",
                f"total absolute magnitude {m1!r} is outside {MAGNITUDE_RANGE[0]:g} to "
                f"{MAGNITUDE_RANGE[1]:g}",
            )
    if data.get("k1") is not None:
        k1 = _number(data, "k1", path)
        if not 0.0 <= k1 <= MAX_K1:
            raise InvalidOrbit(path + "k1", f"K1 must be in [0, {MAX_K1:g}], got {k1!r}")

    covariance = None
    if data.get("covariance") is not None:
        covariance = _covariance(data["covariance"], path + "covariance")

    solutions: tuple[OrbitInput, ...] = ()
    if data.get("solutions") is not None:
        if not allow_solutions:
            raise InvalidOrbit(path + "solutions", "alternative solutions cannot nest")
        sols = data["solutions"]
        if not isinstance(sols, list | tuple) or not sols:
            raise InvalidOrbit(path + "solutions", "expected a non-empty list of orbit objects")
        if len(sols) > MAX_SOLUTIONS:
            raise InvalidOrbit(path + "solutions", f"at most {MAX_SOLUTIONS} alternative solutions")
        solutions = tuple(  # a solution without its own magnitudes shares the parent's
            parse_orbit(
                s,
                path=f"{path}solutions.{k}.",
                allow_solutions=False,
                _inherit={"m1": m1, "k1": k1, "observed_perihelia": observed},
            )
            for k, s in enumerate(sols)
        )

    events = ()
    if data.get("ejection_events") is not None:
        events = _events(data["ejection_events"], path + "ejection_events")

    return OrbitInput(
        name=name.strip(),
        epoch_tdb_jd=epoch,
        q_au=q,
        e=e,
        incl_deg=incl,
        node_deg=node,
        peri_deg=peri,
        tp_tdb_jd=tp,
        nongrav=nongrav,
        covariance=covariance,
        solutions=solutions,
        ejection_events=events,
        m1=m1,
        k1=k1,
        observed_perihelia=observed,
    )


def _observed_perihelia(value, field_name, q, e, tp) -> tuple[ObservedPerihelion, ...]:
    """Observed perihelion times of earlier returns, validated; oldest first.

    Each must lie at least half a period before the orbit's own perihelion (that return is the
    orbit solution's own), and two may not fall within half a period of each other (they
    would name the same return).
    """
    if not isinstance(value, list | tuple) or len(value) > MAX_OBSERVED_PERIHELIA:
        raise InvalidOrbit(
            field_name,
            f'expected a list of at most {MAX_OBSERVED_PERIHELIA} objects {{"tp", "source"}}',
        )
    half = (
        0.5 * 2.0 * math.pi * (q / (1.0 - e)) ** 1.5 / math.sqrt(GM_SUN_AU3_D2)
        if e < 1.0
        else 365.25
    )
    out = []
    for k, item in enumerate(value):
        p = f"{field_name}.{k}."
        if not isinstance(item, Mapping):
            raise InvalidOrbit(p[:-1], 'expected an object {"tp", "source"}')
        extra = sorted(set(item) - {"tp", "source"})
        if extra:
            raise InvalidOrbit(p + extra[0], "unknown key; expected tp and source")
        if "tp" not in item:
            raise InvalidOrbit(p + "tp", "missing (required): the observed perihelion time")
        t = _time(item, "tp", p)
        if t > tp - half:
            raise InvalidOrbit(
                p + "tp",
                "must lie at least half a period before the orbit's own perihelion (that "
                "return is fixed by the orbit solution itself)",
            )
        source = item.get("source", "")
        if not isinstance(source, str) or len(source) > 500:
            raise InvalidOrbit(p + "source", "expected a string of at most 500 characters")
        out.append(ObservedPerihelion(t, source))
    out.sort(key=lambda o: o.tp_tdb_jd)
    for a, b in zip(out, out[1:], strict=False):
        if b.tp_tdb_jd - a.tp_tdb_jd < half:
            raise InvalidOrbit(
                field_name,
                f"two perihelion times within half a period of each other (JD {a.tp_tdb_jd:.2f} "
                f"and {b.tp_tdb_jd:.2f}): they would name the same return",
            )
    return tuple(out)


#: Keys of one ejection event in the orbit file.
EVENT_KEYS = ("kind", "start", "duration_days", "speed_multiplier", "mass_range_g", "source")
MAX_EVENTS = 10
#: Speed multipliers beyond this are not a dust release (no source; published break-up dust
#: needs several times, not hundreds of times, the gas-drag speeds).
MAX_SPEED_MULTIPLIER = 100.0


def _events(value, field_name) -> tuple:
    """Ejection events (break-ups, outbursts) of the orbit file, validated field by field."""
    from .release import EVENT_KINDS, EjectionEvent

    if not isinstance(value, list | tuple) or len(value) > MAX_EVENTS:
        raise InvalidOrbit(field_name, f"expected a list of at most {MAX_EVENTS} event objects")
    out = []
    for k, ev in enumerate(value):
        p = f"{field_name}.{k}."
        if not isinstance(ev, Mapping):
            raise InvalidOrbit(p[:-1], "expected an object with kind and start")
        extra = sorted(set(ev) - set(EVENT_KEYS))
        if extra:
            raise InvalidOrbit(
                p + extra[0], f"unknown key; expected some of {', '.join(EVENT_KEYS)}"
            )
        if ev.get("kind") not in EVENT_KINDS:
            raise InvalidOrbit(p + "kind", f"expected one of {', '.join(EVENT_KINDS)}")
        if "start" not in ev:
            raise InvalidOrbit(p + "start", "missing (required): when the release began")
        start = _time(ev, "start", p)
        duration = _number(ev, "duration_days", p, default=5.0)
        mult = _number(ev, "speed_multiplier", p, default=1.0)
        if not 0.0 < duration <= 365.0:
            raise InvalidOrbit(p + "duration_days", "must be in (0, 365] days")
        if not 0.0 < mult <= MAX_SPEED_MULTIPLIER:
            raise InvalidOrbit(p + "speed_multiplier", f"must be in (0, {MAX_SPEED_MULTIPLIER:g}]")
        lo = hi = None
        if ev.get("mass_range_g") is not None:
            mr = ev["mass_range_g"]
            if not isinstance(mr, list | tuple) or len(mr) != 2:
                raise InvalidOrbit(p + "mass_range_g", "expected [min, max] in grams")
            lo = _number({"m": mr[0]}, "m", p + "mass_range_g.")
            hi = _number({"m": mr[1]}, "m", p + "mass_range_g.")
            if not 0.0 < lo < hi:
                raise InvalidOrbit(p + "mass_range_g", "expected 0 < min < max (grams)")
        source = ev.get("source", "")
        if not isinstance(source, str) or len(source) > 500:
            raise InvalidOrbit(p + "source", "expected a string of at most 500 characters")
        out.append(EjectionEvent(ev["kind"], start, duration, mult, lo, hi, source))
    return tuple(out)


def require_epoch_in_ephemeris(orbit: OrbitInput, path: str = "") -> None:
    """Refuse an orbit (and alternative solutions) whose epoch lies outside DE423's span.

    A forecast integrates the parent from its epoch with DE423 planets, so it needs the epoch
    inside the span; the quick-look geometry does not (it falls back to mean elements), which
    is why :func:`parse_orbit` itself accepts such epochs.

    Raises
    ------
    InvalidOrbit
        Naming ``epoch`` (with ``path`` in front).
    """
    for k, o in enumerate((orbit, *orbit.solutions)):
        where = path if k == 0 else f"{path}solutions.{k - 1}."
        if not EPOCH_SPAN_TDB_JD[0] <= o.epoch_tdb_jd <= EPOCH_SPAN_TDB_JD[1]:
            raise InvalidOrbit(
                where + "epoch",
                f"epoch JD {o.epoch_tdb_jd!r} (TDB) lies outside the DE423 ephemeris span "
                f"({EPOCH_SPAN_TDB_JD[0]}-{EPOCH_SPAN_TDB_JD[1]}, 1799-12-16 to 2200-02-01): a "
                "forecast integrates the parent from its epoch; give the elements at an epoch "
                "inside it",
            )


def _tp_from_mean_anomaly(data, path, epoch_tdb_jd, a_au) -> float:
    """Perihelion time (TDB JD) from the mean anomaly at the epoch: tp = epoch - M / n.

    The nearest perihelion to the epoch (M taken in (-180, 180] deg), with n from Kepler's
    third law, sqrt(GM_sun / a^3); a given ``n`` (deg/day) must agree with it to
    :data:`MEAN_MOTION_TOLERANCE`.

    >>> round(_tp_from_mean_anomaly({"mean_anomaly": 350.0}, "", 2460000.5, 1.0), 3)
    2460010.646
    """
    m_deg = _number(data, "mean_anomaly", path)
    n_rad_d = math.sqrt(GM_SUN_AU3_D2 / a_au**3)
    if data.get("n") is not None:
        n_given = _number(data, "n", path)
        n_deg_d = math.degrees(n_rad_d)
        if not abs(n_given - n_deg_d) <= MEAN_MOTION_TOLERANCE * n_deg_d:
            raise InvalidOrbit(
                path + "n",
                f"mean motion {n_given!r} deg/day disagrees with the semi-major axis "
                f"{a_au!r} au, which gives {n_deg_d:.9f} deg/day (Kepler's third law); check "
                "both",
            )
    m_wrapped = -(((-m_deg + 180.0) % 360.0) - 180.0)  # in (-180, 180]
    return epoch_tdb_jd - math.radians(m_wrapped) / n_rad_d


def _number(data, key, path, default=None) -> float:
    if key not in data or data[key] is None:
        if default is not None:
            return default
        raise InvalidOrbit(path + key, "missing (required)")
    v = data[key]
    if isinstance(v, bool) or not isinstance(v, int | float | np.integer | np.floating):
        raise InvalidOrbit(path + key, f"expected a number, got {type(v).__name__}")
    try:
        v = float(v)
    except OverflowError:  # an integer with hundreds of digits
        raise InvalidOrbit(path + key, "number too large to be a float") from None
    if not math.isfinite(v):
        raise InvalidOrbit(path + key, "must be a finite number")
    return v


def _time(data, key, path) -> float:
    try:
        return parse_time_tdb_jd(data[key], field=key)
    except (InvalidTime, OutsideTimeSpan) as exc:
        raise InvalidOrbit(path + key, str(exc)) from None


def _covariance(value, field_name) -> np.ndarray:
    try:
        c = np.array(value, dtype=float)
    except (TypeError, ValueError):
        raise InvalidOrbit(field_name, "expected a 6 x 6 array of numbers") from None
    if c.shape != (6, 6):
        raise InvalidOrbit(
            field_name, f"expected 6 x 6 over (q, e, i, node, peri, tp), got shape {c.shape}"
        )
    if not np.all(np.isfinite(c)):
        raise InvalidOrbit(field_name, "must hold finite numbers only")
    scale = np.sqrt(np.abs(np.diag(c))) + 1e-300
    corr = c / np.outer(scale, scale)
    if not np.allclose(corr, corr.T, rtol=0.0, atol=1e-9):
        raise InvalidOrbit(field_name, "must be symmetric")
    if np.any(np.diag(c) < 0.0) or np.min(np.linalg.eigvalsh(0.5 * (corr + corr.T))) < -1e-9:
        raise InvalidOrbit(field_name, "must be positive semi-definite (a covariance)")
    c.setflags(write=False)
    return c
