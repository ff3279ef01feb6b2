"""Time scales, Julian dates and ISO 8601 for trailcast.

Inside trailcast every instant is a Julian date in TDB (``t_tdb_jd``, a float: its resolution of
about 40 microseconds is far below anything a meteor forecast resolves). At the edges, times are
ISO 8601 strings: UTC with a ``Z``, or another scale named after a space
(``1998-02-28T02:24:00 TDB``).

Conversions use pyerfa (the ERFA implementation of the IAU SOFA routines): UTC -> TAI (leap
seconds, including the 1960-1972 rate offsets) -> TT -> TDB (Fairhead & Bretagnon series,
``erfa.dtdb``, geocentre).

Two conventions the user must know, also stated in every forecast's metadata
(:data:`TIME_SCALE_NOTES`):

- Before 1960 January 1 there is no UTC. trailcast then reads and writes *Universal Time* (UT,
  effectively UT1) and relates it to TT by the Delta T model of Espenak & Meeus (2006), valid
  from -1999 to +3000.
- After the last leap second in ERFA's table, trailcast assumes no new leap seconds
  (TAI - UTC stays at its last value).
"""

import re
import warnings
from dataclasses import dataclass

import erfa
import numpy as np

from .constants import DAY_S, DAYS_PER_JULIAN_YEAR, JD_J2000
from .errors import InvalidTime, OutsideTimeSpan

#: Start of UTC: 1960 January 1.0 UTC (JD). Earlier civil times are UT via Delta T.
UTC_START_JD = 2_436_934.5
#: Years covered by the Espenak & Meeus (2006) Delta T polynomials.
DELTA_T_SPAN_YEARS = (-1999.0, 3000.0)
#: Span of Julian dates trailcast converts (the Delta T model's span, TT).
TIME_SPAN_JD = (
    float(sum(erfa.cal2jd(-1999, 1, 1))),
    float(sum(erfa.cal2jd(3000, 12, 31))),
)
#: Scales accepted in ISO strings. ``UT`` is UTC from 1960 on and UT (Delta T) before.
SCALES = ("UTC", "UT", "TAI", "TT", "TDB")
#: TT - TAI in seconds (exact by definition; IAU 1991 Resolution A4).
TT_MINUS_TAI_S = 32.184

TIME_SCALE_NOTES = (
    "Internal times are TDB Julian dates; outputs are UTC (ISO 8601, Z).",
    "Before 1960 there is no UTC: times are Universal Time related to TT by the Delta T model "
    "of Espenak & Meeus (2006).",
    "Future dates assume no leap seconds after the last one in ERFA's table.",
)

_ISO_RE = re.compile(
    r"^\s*(?P<year>[+-]?\d{4,5})-(?P<month>\d{2})-(?P<day>\d{2})"
    r"(?:[T ](?P<hour>\d{2}):(?P<minute>\d{2})(?::(?P<second>\d{2}(?:\.\d+)?))?)?"
    r"\s*(?P<scale>Z|[A-Za-z]{2,3})?\s*$"
)


@dataclass(frozen=True)
class ParsedTime:
    """An ISO 8601 instant split into a two-part Julian date in its own scale."""

    jd1: float
    jd2: float
    scale: str

    @property
    def jd(self) -> float:
        return self.jd1 + self.jd2


# --- Delta T ---------------------------------------------------------------------------------


def delta_t_seconds(year):
    """Delta T = TT - UT in seconds, by the polynomials of Espenak & Meeus (2006).

    Parameters
    ----------
    year : float or array_like
        Decimal year, ``y = year + (month - 0.5) / 12`` in the authors' convention.

    Returns
    -------
    ndarray or float
        Delta T (s).

    Raises
    ------
    OutsideTimeSpan
        Outside -1999 ... +3000, where the polynomials are not defined.

    References
    ----------
    F. Espenak & J. Meeus (2006), *Five Millennium Canon of Solar Eclipses: -1999 to +3000*,
    TP-2006-214141, section "Polynomial expressions for Delta T". Their stated uncertainty
    grows from under a second in the 20th century to ~20 s in 1800, ~4 min in 1000 and hours
    before -500.

    Examples
    --------
    >>> round(float(delta_t_seconds(1900.0)), 2)   # the 1900-1920 polynomial's constant term
    -2.79
    """
    y = np.asarray(year, dtype=float)
    if (
        np.any(~np.isfinite(y))
        or np.any(y < DELTA_T_SPAN_YEARS[0])
        or np.any(y > DELTA_T_SPAN_YEARS[1])
    ):
        raise OutsideTimeSpan(
            "Delta T (Espenak & Meeus 2006) is defined from -1999 to +3000 only",
            span=DELTA_T_SPAN_YEARS,
        )
    out = np.empty_like(y)
    u_long = (y - 1820.0) / 100.0
    pieces = [
        (y < -500, lambda: -20.0 + 32.0 * u_long**2),
        (
            (y >= -500) & (y < 500),
            lambda: _poly(
                y / 100.0,
                [10583.6, -1014.41, 33.78311, -5.952053, -0.1798452, 0.022174192, 0.0090316521],
            ),
        ),
        (
            (y >= 500) & (y < 1600),
            lambda: _poly(
                (y - 1000.0) / 100.0,
                [1574.2, -556.01, 71.23472, 0.319781, -0.8503463, -0.005050998, 0.0083572073],
            ),
        ),
        (
            (y >= 1600) & (y < 1700),
            lambda: _poly(y - 1600.0, [120.0, -0.9808, -0.01532, 1.0 / 7129.0]),
        ),
        (
            (y >= 1700) & (y < 1800),
            lambda: _poly(y - 1700.0, [8.83, 0.1603, -0.0059285, 0.00013336, -1.0 / 1174000.0]),
        ),
        (
            (y >= 1800) & (y < 1860),
            lambda: _poly(
                y - 1800.0,
                [
                    13.72,
                    -0.332447,
                    0.0068612,
                    0.0041116,
                    -0.00037436,
                    0.0000121272,
                    -0.0000001699,
                    0.000000000875,
                ],
            ),
        ),
        (
            (y >= 1860) & (y < 1900),
            lambda: _poly(
                y - 1860.0, [7.62, 0.5737, -0.251754, 0.01680668, -0.0004473624, 1.0 / 233174.0]
            ),
        ),
        (
            (y >= 1900) & (y < 1920),
            lambda: _poly(y - 1900.0, [-2.79, 1.494119, -0.0598939, 0.0061966, -0.000197]),
        ),
        (
            (y >= 1920) & (y < 1941),
            lambda: _poly(y - 1920.0, [21.20, 0.84493, -0.076100, 0.0020936]),
        ),
        (
            (y >= 1941) & (y < 1961),
            lambda: _poly(y - 1950.0, [29.07, 0.407, -1.0 / 233.0, 1.0 / 2547.0]),
        ),
        (
            (y >= 1961) & (y < 1986),
            lambda: _poly(y - 1975.0, [45.45, 1.067, -1.0 / 260.0, -1.0 / 718.0]),
        ),
        (
            (y >= 1986) & (y < 2005),
            lambda: _poly(
                y - 2000.0, [63.86, 0.3345, -0.060374, 0.0017275, 0.000651814, 0.00002373599]
            ),
        ),
        ((y >= 2005) & (y < 2050), lambda: _poly(y - 2000.0, [62.92, 0.32217, 0.005589])),
        ((y >= 2050) & (y < 2150), lambda: -20.0 + 32.0 * u_long**2 - 0.5628 * (2150.0 - y)),
        (y >= 2150, lambda: -20.0 + 32.0 * u_long**2),
    ]
    for mask, fn in pieces:
        if np.any(mask):
            out[mask] = np.broadcast_to(fn(), y.shape)[mask]
    return out if out.ndim else float(out)


def _poly(x, coeffs):
    """Evaluate sum(c_k x^k) (coefficients in increasing order)."""
    return np.polynomial.polynomial.polyval(x, coeffs)


def _decimal_year(jd):
    return 2000.0 + (np.asarray(jd, dtype=float) - JD_J2000) / DAYS_PER_JULIAN_YEAR


# --- Scale conversions -------------------------------------------------------------------------


def _check_span(jd):
    jd = np.asarray(jd, dtype=float)
    if np.any(~np.isfinite(jd)) or np.any(jd < TIME_SPAN_JD[0]) or np.any(jd > TIME_SPAN_JD[1]):
        raise OutsideTimeSpan(
            "time outside the supported span -1999-01-01 to 3000-12-31 (Delta T model of "
            "Espenak & Meeus 2006)",
            span=TIME_SPAN_JD,
        )


def _tt_to_tdb(tt1, tt2):
    dtr = erfa.dtdb(tt1, tt2, 0.0, 0.0, 0.0, 0.0)  # geocentre: TDB - TT, seconds
    return erfa.tttdb(tt1, tt2, dtr)


def _tdb_to_tt(tdb1, tdb2):
    dtr = erfa.dtdb(tdb1, tdb2, 0.0, 0.0, 0.0, 0.0)  # TDB-TT differs from its TT value by ns
    return erfa.tdbtt(tdb1, tdb2, dtr)


def _utc_to_tt(utc1, utc2):
    """UTC (or UT before 1960) two-part JD -> TT two-part JD."""
    utc1, utc2 = np.broadcast_arrays(np.asarray(utc1, float), np.asarray(utc2, float))
    tt1 = np.array(utc1, dtype=float, copy=True)
    tt2 = np.array(utc2, dtype=float, copy=True)
    modern = (utc1 + utc2) >= UTC_START_JD
    if np.any(modern):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", erfa.ErfaWarning)  # "dubious year" for the future
            tai1, tai2 = erfa.utctai(utc1[modern], utc2[modern])
            tt1[modern], tt2[modern] = erfa.taitt(tai1, tai2)
    old = ~modern
    if np.any(old):
        tt2[old] = utc2[old] + delta_t_seconds(_decimal_year(utc1[old] + utc2[old])) / DAY_S
    return tt1, tt2


def _tt_to_utc(tt1, tt2):
    """TT two-part JD -> UTC (UT before 1960) two-part JD."""
    tt1, tt2 = np.broadcast_arrays(np.asarray(tt1, float), np.asarray(tt2, float))
    u1 = np.array(tt1, dtype=float, copy=True)
    u2 = np.array(tt2, dtype=float, copy=True)
    # TT - UTC is 32.184 s + (TAI-UTC) <= 70 s here; the 1960 switch is decided on UT ~ TT-40 s.
    modern = (tt1 + tt2 - 40.0 / DAY_S) >= UTC_START_JD
    if np.any(modern):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", erfa.ErfaWarning)
            tai1, tai2 = erfa.tttai(tt1[modern], tt2[modern])
            u1[modern], u2[modern] = erfa.taiutc(tai1, tai2)
    old = ~modern
    if np.any(old):
        # UT = TT - Delta T(UT); Delta T changes by < 1 s/yr, so one refinement is exact to us.
        jd = tt1[old] + tt2[old]
        dt = delta_t_seconds(_decimal_year(jd)) / DAY_S
        dt = delta_t_seconds(_decimal_year(jd - dt)) / DAY_S
        u2[old] = tt2[old] - dt
    return u1, u2


def to_tdb_jd(jd1, jd2=0.0, scale="TDB"):
    """Convert a (two-part) Julian date in ``scale`` to a TDB Julian date.

    Parameters
    ----------
    jd1, jd2 : float or array_like
        Two-part Julian date in ``scale`` (``jd1 + jd2``; put the large part in ``jd1``).
    scale : {"UTC", "UT", "TAI", "TT", "TDB"}
        Time scale of the input. ``UTC`` before 1960 is read as UT (see module notes).

    Returns
    -------
    float or ndarray
        TDB Julian date.
    """
    scale = scale.upper()
    if scale not in SCALES:
        raise InvalidTime(f"unknown time scale {scale!r}; use one of {', '.join(SCALES)}")
    _check_span(np.asarray(jd1, float) + np.asarray(jd2, float))
    if scale == "TDB":
        out = np.asarray(jd1, float) + np.asarray(jd2, float)
        return out if out.ndim else float(out)
    if scale in ("UTC", "UT"):
        tt1, tt2 = _utc_to_tt(jd1, jd2)
    elif scale == "TAI":
        tt1, tt2 = erfa.taitt(jd1, jd2)
    else:
        tt1, tt2 = np.asarray(jd1, float), np.asarray(jd2, float)
    d1, d2 = _tt_to_tdb(tt1, tt2)
    out = np.asarray(d1 + d2)
    return out if out.ndim else float(out)


def from_tdb_jd(t_tdb_jd, scale="UTC"):
    """Convert TDB Julian dates to a two-part Julian date ``(jd1, jd2)`` in ``scale``."""
    scale = scale.upper()
    if scale not in SCALES:
        raise InvalidTime(f"unknown time scale {scale!r}; use one of {', '.join(SCALES)}")
    t = np.asarray(t_tdb_jd, dtype=float)
    _check_span(t)
    d1 = np.floor(t - 0.5) + 0.5  # split at midnight keeps erfa's leap-second logic exact
    d2 = t - d1
    if scale == "TDB":
        return d1, d2
    tt1, tt2 = _tdb_to_tt(d1, d2)
    if scale == "TT":
        return tt1, tt2
    if scale == "TAI":
        return erfa.tttai(tt1, tt2)
    return _tt_to_utc(tt1, tt2)


def utc_to_tdb_jd(utc_jd1, utc_jd2=0.0):
    """UTC (UT before 1960) Julian date -> TDB Julian date. See :func:`to_tdb_jd`."""
    return to_tdb_jd(utc_jd1, utc_jd2, "UTC")


def tdb_to_utc_jd(t_tdb_jd):
    """TDB Julian date -> UTC (UT before 1960) Julian date as one float (ms precision)."""
    u1, u2 = from_tdb_jd(t_tdb_jd, "UTC")
    out = np.asarray(u1 + u2)
    return out if out.ndim else float(out)


# --- ISO 8601 ----------------------------------------------------------------------------------


def parse_iso(text, default_scale=None) -> ParsedTime:
    """Read an ISO 8601 date-time with its time scale.

    Accepted forms: ``YYYY-MM-DD``, ``YYYY-MM-DDTHH:MM``, ``YYYY-MM-DDTHH:MM:SS(.fff)``, followed
    by ``Z`` (UTC) or a space and one of ``UTC``, ``UT``, ``TAI``, ``TT``, ``TDB``. Years may
    carry a sign (astronomical numbering: year 0 = 1 BC). A leap second (``:60``) is accepted on
    the UTC days that have one.

    Raises
    ------
    InvalidTime
        Malformed text, an impossible date or no scale (and ``default_scale`` not given).

    Examples
    --------
    >>> p = parse_iso("2000-01-01T12:00:00 TT")
    >>> p.jd, p.scale
    (2451545.0, 'TT')
    """
    if not isinstance(text, str):
        raise InvalidTime(f"expected an ISO 8601 string, got {type(text).__name__}")
    m = _ISO_RE.match(text)
    if not m:
        raise InvalidTime(
            f"cannot read {text!r} as ISO 8601; write e.g. '1999-11-18T02:04:00Z' or "
            "'1998-02-28T02:24:00 TDB'"
        )
    scale = m["scale"]
    if scale is None:
        if default_scale is None:
            raise InvalidTime(
                f"{text!r} has no time scale; end it with Z (UTC) or ' TDB', ' TT', ' TAI'"
            )
        scale = default_scale
    scale = "UTC" if scale.upper() == "Z" else scale.upper()
    if scale not in SCALES:
        raise InvalidTime(
            f"unknown time scale {m['scale']!r} in {text!r}; use Z, UTC, UT, TAI, TT or TDB"
        )
    year, month, day = int(m["year"]), int(m["month"]), int(m["day"])
    hour = int(m["hour"] or 0)
    minute = int(m["minute"] or 0)
    second = float(m["second"] or 0.0)
    if not (1 <= month <= 12 and 1 <= day <= 31 and hour <= 23 and minute <= 59 and second < 61):
        raise InvalidTime(f"{text!r} is not a valid date and time")
    jd0 = _calendar_jd(year, month, day, text)
    if jd0 + 1 < TIME_SPAN_JD[0] or jd0 > TIME_SPAN_JD[1]:
        raise OutsideTimeSpan(
            f"{text!r} is outside -1999 ... 3000, the supported span", span=TIME_SPAN_JD
        )
    if scale in ("UTC", "UT") and jd0 >= UTC_START_JD:
        if second >= 60.0 and not (hour == 23 and minute == 59 and _is_leap_second_day(jd0)):
            raise InvalidTime(f"{text!r}: no leap second was inserted at that time")
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", erfa.ErfaWarning)
                jd1, jd2 = erfa.dtf2d("UTC", year, month, day, hour, minute, second)
        except erfa.ErfaError as exc:
            raise InvalidTime(f"{text!r} is not a valid UTC time ({exc})") from None
        return ParsedTime(float(jd1), float(jd2), "UTC")
    if second >= 60.0:
        raise InvalidTime(f"{text!r}: a 60th second exists only on UTC leap-second days")
    frac = (hour + (minute + second / 60.0) / 60.0) / 24.0
    return ParsedTime(jd0, frac, "UT" if scale == "UTC" else scale)


def _is_leap_second_day(jd0):
    """True when the UTC day starting at JD ``jd0`` ends with a positive leap second."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        today = erfa.dat(*erfa.jd2cal(jd0, 0.0)[:3], 0.0)
        tomorrow = erfa.dat(*erfa.jd2cal(jd0 + 1.0, 0.0)[:3], 0.0)
    return tomorrow - today == 1.0


def _calendar_jd(year, month, day, text):
    """JD of 0h on a proleptic Gregorian date (the calendar ERFA and ISO 8601 use)."""
    leap = year % 4 == 0 and (year % 100 != 0 or year % 400 == 0)
    month_days = (31, 29 if leap else 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31)
    if day > month_days[month - 1] or year < -4799:
        raise InvalidTime(f"{text!r} is not a valid calendar date")
    d1, d2 = erfa.cal2jd(year, month, day)
    return float(d1 + d2)


def iso_to_tdb_jd(text, default_scale=None) -> float:
    """ISO 8601 text with a scale -> TDB Julian date. See :func:`parse_iso`."""
    p = parse_iso(text, default_scale)
    return to_tdb_jd(p.jd1, p.jd2, p.scale)


#: First Julian date erfa's calendar routines accept (-4799-01-01 Gregorian, 0h:
#: erfa.cal2jd(-4799, 1, 1)), with a day of margin.
_ERFA_CALENDAR_START_JD = -31737.5


def format_iso(t_tdb_jd, scale="UTC", decimals=0):
    """Write a TDB Julian date as ISO 8601 text in ``scale``.

    UTC is written with a trailing ``Z`` (Universal Time before 1960, see the module notes);
    other scales with a space and the scale name, e.g. ``1998-02-28T02:24:00 TDB``. Accepts
    arrays (returns a list of strings).

    Examples
    --------
    >>> format_iso(2451545.0, "TDB")
    '2000-01-01T12:00:00 TDB'
    >>> format_iso(2451545.0)                # TT - UTC was 64.184 s in 2000
    '2000-01-01T11:58:56Z'
    >>> format_iso(2451545.0 - 20_000 * 365.2425, "TDB")  # TDB: any date, proleptic Gregorian
    '-18000-01-01T12:00:00 TDB'
    """
    scale = scale.upper()
    t = np.asarray(t_tdb_jd, dtype=float)
    cycles = np.zeros(t.shape, dtype=int)
    if scale == "TDB":
        # TDB needs no Delta T: any date can be written. erfa's calendar starts in -4799;
        # earlier dates move by whole 400-year Gregorian cycles (146,097 days) and back.
        cycles = np.where(
            t < _ERFA_CALENDAR_START_JD, np.ceil((_ERFA_CALENDAR_START_JD - t) / 146097.0), 0
        )
        cycles = cycles.astype(int)
        shifted = t + cycles * 146097.0
        jd1 = np.floor(shifted - 0.5) + 0.5
        jd2 = shifted - jd1
    else:
        jd1, jd2 = from_tdb_jd(t, scale)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        # For UTC, erfa knows leap seconds; before 1960 the UT day has 86400 s like TT's.
        erfa_scale = "UTC" if scale == "UTC" else "TT"
        if scale == "UTC" and np.any(np.asarray(jd1 + jd2) < UTC_START_JD):
            erfa_scale = np.where(np.asarray(jd1 + jd2) < UTC_START_JD, "TT", "UTC")
        iy, im, iday, ihmsf = _d2dtf(erfa_scale, decimals, jd1, jd2)
    suffix = "Z" if scale == "UTC" else f" {scale}"
    out = []
    for y, mo, d, hmsf, c in zip(
        np.atleast_1d(iy),
        np.atleast_1d(im),
        np.atleast_1d(iday),
        np.atleast_1d(ihmsf),
        np.atleast_1d(cycles),
        strict=True,
    ):
        y = int(y) - 400 * int(c)
        h, mi, s, f = (int(v) for v in hmsf)
        sec = f"{s:02d}" + (f".{f:0{decimals}d}" if decimals > 0 else "")
        ys = f"{y:04d}" if y >= 0 else f"-{-y:04d}"
        out.append(f"{ys}-{mo:02d}-{d:02d}T{h:02d}:{mi:02d}:{sec}{suffix}")
    return out if t.ndim else out[0]


def _d2dtf(scales, decimals, jd1, jd2):
    jd1, jd2 = np.atleast_1d(jd1), np.atleast_1d(jd2)
    scales = np.broadcast_to(np.asarray(scales), jd1.shape)
    res = [erfa.d2dtf(str(s), decimals, a, b) for s, a, b in zip(scales, jd1, jd2, strict=True)]
    iy = np.array([r[0] for r in res])
    im = np.array([r[1] for r in res])
    iday = np.array([r[2] for r in res])
    ihmsf = [tuple(r[3].item()) for r in res]
    return iy, im, iday, ihmsf


def format_utc(t_tdb_jd, decimals=0):
    """TDB Julian date -> ``YYYY-MM-DDTHH:MM:SSZ`` (shorthand for ``format_iso(t, "UTC")``)."""
    return format_iso(t_tdb_jd, "UTC", decimals)


def parse_time_tdb_jd(value, field="time") -> float:
    """Read a time given as a JD (number, taken as TDB) or ISO 8601 text with a scale.

    Used for the ``epoch`` and ``tp`` of orbit inputs.
    """
    if isinstance(value, bool):
        raise InvalidTime(f"{field}: expected a Julian date (TDB) or ISO 8601 text, got a boolean")
    if isinstance(value, int | float | np.floating | np.integer):
        try:
            v = float(value)
        except OverflowError:  # an integer with hundreds of digits
            raise InvalidTime(f"{field}: number too large to be a Julian date") from None
        if not np.isfinite(v):
            raise InvalidTime(f"{field}: not a finite number")
        _check_span(v)
        return v
    return iso_to_tdb_jd(value)


def calendar_year_tdb_jd(year: int) -> tuple[float, float]:
    """TDB Julian dates of the start of ``year`` and of the next year (UTC/UT midnights)."""
    start = to_tdb_jd(*erfa.cal2jd(int(year), 1, 1), "UTC")
    end = to_tdb_jd(*erfa.cal2jd(int(year) + 1, 1, 1), "UTC")
    return start, end
