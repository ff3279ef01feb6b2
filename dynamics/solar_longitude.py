"""Solar longitude: the Sun's geocentric ecliptic longitude, equinox J2000, and its inverse.

Meteor astronomy times showers by the solar longitude lambda_sun, the Sun's geocentric ecliptic
longitude referred to the *fixed* mean ecliptic and equinox of J2000.0 (so it repeats with the
sidereal year, not the tropical year). trailcast computes it from DE423 (:mod:`dynamics.ephemeris`)
for the centre of the Earth, not the Earth-Moon barycentre (the two give lambda_sun differing by
up to about 6 arcsec, i.e. a couple of minutes of time).

Two conventions are offered, and outputs must say which one they use:

``"geometric"``
    The instantaneous geometric direction from Earth to Sun at time t (no light time, no
    aberration). This is the natural one for dynamics: it says where Earth is on its orbit
    (Earth's heliocentric longitude is lambda_sun + 180 deg).
``"apparent"``
    The direction in which the Sun is seen from the (geocentric) Earth: the Sun's position at the
    time light left it (light time about 499 s) displaced by annual aberration with Earth's
    barycentric velocity. It is smaller than the geometric value by about 20.5 arcsec (the
    constant of aberration), about 8 minutes of time. No nutation is applied: the equinox remains
    the mean equinox of J2000.

Both neglect the ICRF/J2000 frame bias (about 0.02 arcsec), as :mod:`dynamics.frames` does.
"""

from __future__ import annotations

import numpy as np

from .constants import C_AU_DAY
from .ephemeris import EPHEMERIS_SPAN_TDB_ISO, EPHEMERIS_SPAN_TDB_JD, barycentric_states
from .errors import OutsideTimeSpan

_KINDS = ("geometric", "apparent")

# Step of the coarse scan that brackets the roots of lambda_sun(t) = lambda (days). lambda_sun
# advances by 0.95-1.02 deg/day, so one step moves it by about 5 deg: far below the 180 deg at
# which unwrapping would become ambiguous, and short enough that Newton's method started from
# linear interpolation inside a bracket converges in a few iterations.
_SCAN_STEP_DAYS = 5.0
# Newton iterations stop once the correction is below this (days; about 0.9 ms). Roots are then
# good to the resolution of a float64 Julian date (about 4e-5 s).
_NEWTON_TOL_DAYS = 1e-8
_NEWTON_MAX_ITER = 12


def _check_kind(kind: str) -> str:
    if kind not in _KINDS:
        raise ValueError(f"unknown kind {kind!r}; valid kinds are: {', '.join(_KINDS)}")
    return kind


def _earth_to_sun(t_tdb_jd, kind: str):
    """Vector Earth -> Sun (au, ecliptic J2000) and its rate (au/day) at TDB JDs ``t_tdb_jd``.

    For ``kind="apparent"`` the vector is the apparent direction (light time and annual
    aberration applied), scaled to the geometric distance; the rate is always geometric.
    """
    states = barycentric_states(["earth", "sun"], t_tdb_jd)
    (r_e, v_e), (r_s, v_s) = states["earth"], states["sun"]
    p = r_s - r_e
    dp = v_s - v_e
    if kind == "geometric":
        return p, dp
    # Light time: the Sun's barycentric position when the light left it. It moves by about
    # 13 m/s, so one linear step (using its velocity) is exact to far below a micro-arcsecond.
    dist = np.linalg.norm(p, axis=-1, keepdims=True)
    tau_d = dist / C_AU_DAY
    q = (r_s - v_s * tau_d) - r_e
    # Annual aberration with Earth's barycentric velocity, in the classical (first order in v/c)
    # form u' ~ u + v/c, renormalised; the neglected terms are of order (v/c)^2 ~ 1e-8 rad.
    u = q / np.linalg.norm(q, axis=-1, keepdims=True)
    u_app = u + v_e / C_AU_DAY
    u_app /= np.linalg.norm(u_app, axis=-1, keepdims=True)
    return u_app * dist, dp


def solar_longitude_deg(t_tdb_jd, kind: str = "geometric"):
    """Solar longitude: the Sun's geocentric ecliptic longitude, mean equinox J2000.

    Parameters
    ----------
    t_tdb_jd : float or array_like
        Julian dates, TDB, inside DE423's span (1799-12-16 to 2200-02-01).
    kind : {"geometric", "apparent"}
        ``"geometric"`` (default): instantaneous geometric direction Earth -> Sun.
        ``"apparent"``: corrected for light time and annual aberration (about -20.5 arcsec);
        no nutation, the equinox stays the mean equinox of J2000.

    Returns
    -------
    ndarray or float
        lambda_sun in degrees, in [0, 360), same shape as ``t_tdb_jd``. Referred to the mean
        ecliptic and equinox of J2000.0 for Earth's centre (not the Earth-Moon barycentre).

    Raises
    ------
    OutsideTimeSpan
        If a time lies outside the ephemeris span.
    ValueError
        For an unknown ``kind``.

    Notes
    -----
    Accuracy is that of DE423 (well below 0.001 arcsec for the Sun's direction from Earth) for the
    geometric value; the apparent value neglects second-order aberration (about 0.002 arcsec)
    and the frame bias (0.02 arcsec).

    References
    ----------
    Folkner (2010), IOM 343R-10-001 (DE423). Aberration: e.g. Meeus, *Astronomical
    Algorithms*, 2nd ed. (1998), chapter 23 (constant of aberration 20.49552 arcsec, IAU 1976).

    Examples
    --------
    At J2000.0 (2000 Jan 1.5 TDB) the Sun stands a little past longitude 280 deg:

    >>> round(float(solar_longitude_deg(2451545.0)), 3)
    280.378
    """
    _check_kind(kind)
    p, _ = _earth_to_sun(t_tdb_jd, kind)
    lam_deg = np.mod(np.degrees(np.arctan2(p[..., 1], p[..., 0])), 360.0)
    # np.mod can return exactly 360.0 for tiny negative angles.
    return np.where(lam_deg >= 360.0, 0.0, lam_deg)[()]


def earth_heliocentric_longitude_deg(t_tdb_jd, kind: str = "geometric"):
    """Earth's heliocentric ecliptic longitude, mean equinox J2000: lambda_sun + 180 (mod 360).

    Same parameters, units (degrees, [0, 360)) and exceptions as :func:`solar_longitude_deg`.
    """
    return np.mod(solar_longitude_deg(t_tdb_jd, kind) + 180.0, 360.0)[()]


def solar_longitude_rate_deg_per_day(t_tdb_jd):
    """Rate of change of the (geometric) solar longitude, degrees per day.

    Computed analytically from Earth's and the Sun's DE423 velocities: for the Earth -> Sun vector
    p = (x, y, z) in ecliptic J2000, d(lambda)/dt = (x dy/dt - y dx/dt) / (x^2 + y^2).

    Parameters
    ----------
    t_tdb_jd : float or array_like
        Julian dates, TDB, inside DE423's span.

    Returns
    -------
    ndarray or float
        d(lambda_sun)/dt in deg/day (about 0.953 near aphelion in early July to 1.019 near
        perihelion in early January), same shape as ``t_tdb_jd``. The apparent longitude's rate
        differs from it by less than 1e-6 relative.

    Raises
    ------
    OutsideTimeSpan
        If a time lies outside the ephemeris span.
    """
    p, dp = _earth_to_sun(t_tdb_jd, "geometric")
    x, y = p[..., 0], p[..., 1]
    rate_rad_d = (x * dp[..., 1] - y * dp[..., 0]) / (x * x + y * y)
    return np.degrees(rate_rad_d)[()]


def _wrap180(angle_deg):
    return np.mod(np.asarray(angle_deg) + 180.0, 360.0) - 180.0


def times_of_solar_longitude_tdb(lambda_deg, t_start_tdb_jd, t_end_tdb_jd, kind="geometric"):
    """Every time in [t_start, t_end) at which the solar longitude equals ``lambda_deg``.

    Parameters
    ----------
    lambda_deg : float
        Target solar longitude, degrees, mean equinox J2000 (any value; taken modulo 360).
    t_start_tdb_jd, t_end_tdb_jd : float
        Window, Julian dates TDB, start included, end excluded; both inside DE423's span.
    kind : {"geometric", "apparent"}
        Convention of ``lambda_deg`` (see :func:`solar_longitude_deg`).

    Returns
    -------
    ndarray
        Sorted TDB Julian dates of the solutions (empty if none). A window of one year holds 0, 1
        or 2 of them (two when it starts just before and ends just after the same date, e.g.
        lambda_deg = 280 for a window from Jan 1 to Jan 1).

    Raises
    ------
    OutsideTimeSpan
        If the window reaches outside the ephemeris span.
    ValueError
        If ``t_end_tdb_jd < t_start_tdb_jd`` or ``kind`` is unknown.

    Notes
    -----
    The solar longitude increases monotonically. It is scanned every 5 days and unwrapped; each
    crossing of lambda_deg + 360 k is then refined by Newton's method with the analytic rate
    (:func:`solar_longitude_rate_deg_per_day`), all roots at once, to the resolution of a float64
    Julian date (about 4e-5 s; well below the 0.01 s aimed at).

    Examples
    --------
    >>> t = times_of_solar_longitude_tdb(0.0, 2451545.0, 2451545.0 + 366.0)
    >>> len(t)
    1
    >>> round(float(solar_longitude_deg(t[0])), 9) % 360.0
    0.0
    """
    _check_kind(kind)
    t0, t1 = float(t_start_tdb_jd), float(t_end_tdb_jd)
    if not (np.isfinite(t0) and np.isfinite(t1)):
        raise ValueError("window ends must be finite")
    if t1 < t0:
        raise ValueError(f"t_end_tdb_jd ({t1}) is before t_start_tdb_jd ({t0})")
    first, last = EPHEMERIS_SPAN_TDB_JD
    if t0 < first or t1 > last:
        raise OutsideTimeSpan(
            f"DE423 covers {EPHEMERIS_SPAN_TDB_ISO[0]} to {EPHEMERIS_SPAN_TDB_ISO[1]} TDB "
            f"(JD {first} to {last}); the window JD {t0} to {t1} (TDB) reaches outside it.",
            span=EPHEMERIS_SPAN_TDB_JD,
        )
    if t1 == t0:
        return np.empty(0)

    n_steps = max(1, int(np.ceil((t1 - t0) / _SCAN_STEP_DAYS)))
    grid = np.linspace(t0, t1, n_steps + 1)
    lam_unwrapped = np.degrees(np.unwrap(np.radians(solar_longitude_deg(grid, kind))))
    target = float(np.mod(lambda_deg, 360.0))
    # Every target + 360 k in [lam(t0), lam(t1)) is crossed exactly once (lambda is monotonic).
    k_first = np.ceil((lam_unwrapped[0] - target) / 360.0)
    k_last = np.ceil((lam_unwrapped[-1] - target) / 360.0) - 1
    if k_last < k_first:
        return np.empty(0)
    goals = target + 360.0 * np.arange(k_first, k_last + 1)
    i = np.clip(np.searchsorted(lam_unwrapped, goals, side="right") - 1, 0, n_steps - 1)
    lo, hi = grid[i], grid[i + 1]
    frac = (goals - lam_unwrapped[i]) / (lam_unwrapped[i + 1] - lam_unwrapped[i])
    t = lo + frac * (hi - lo)
    for _ in range(_NEWTON_MAX_ITER):
        resid_deg = _wrap180(solar_longitude_deg(t, kind) - target)
        dt = -resid_deg / solar_longitude_rate_deg_per_day(t)
        t = np.clip(t + dt, lo, hi)
        if np.all(np.abs(dt) < _NEWTON_TOL_DAYS):
            break
    t = t[(t >= t0) & (t < t1)]
    return np.sort(t)
