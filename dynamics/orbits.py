"""Two-body (Keplerian) orbits: elements, states, propagation.

Frame and units: heliocentric ecliptic and equinox J2000, au and days (TDB), with
``mu = GM_SUN_AU3_D2`` by default. Every function takes ``mu`` so that any consistent unit
system works (e.g. km and s with the Earth's GM): lengths then follow the unit of ``mu`` and times
(``t_tdb_jd``, ``tp_tdb_jd``) are in its time unit.

Orbital elements are perihelion-based so that ellipses, parabolas and hyperbolas are one family:
perihelion distance ``q_au``, eccentricity ``e``, inclination ``incl_deg``, longitude of the
ascending node ``node_deg``, argument of perihelion ``peri_deg`` and time of perihelion passage
``tp_tdb_jd``.

Method
------
Motion is computed in universal variables referred to perihelion (Battin 1999, ch. 4; Vallado
2013, sec. 2.3 and Algorithm 8; Danby 1988, ch. 6). With ``alpha = 1/a = (1 - e)/q`` (never a
division by ``1 - e``), the universal anomaly ``chi`` obeys the universal Kepler equation from
perihelion

    sqrt(mu) * (t - tp) = e * chi**3 * S(alpha chi**2) + q * chi,

where ``C`` and ``S`` are Stumpff's functions, evaluated by their power series for small argument.
The right-hand side increases monotonically with ``chi`` (its derivative is the heliocentric
distance ``r = q + e chi**2 C``), so a safeguarded Newton iteration inside a guaranteed bracket
always converges. No formula divides by ``1 - e`` or ``e - 1`` near ``e = 1``, so near-parabolic
orbits (including ``e = 1`` exactly) lose no precision.

Conventions for degenerate geometry (used by :func:`state_to_elements`):

- ``i`` = 0 or 180 deg (sin i < 1e-13): the node is undefined; ``node_deg = 0`` and the argument of
  perihelion is measured from the x axis (the equinox) in the direction of motion.
- ``e`` < 1e-12: the perihelion is undefined; ``peri_deg = 0`` (perihelion placed at the
  ascending node) and the true anomaly is the argument of latitude.

References
----------
Battin, R. H. (1999), An Introduction to the Mathematics and Methods of Astrodynamics, rev. ed.,
AIAA, ch. 4.
Danby, J. M. A. (1988), Fundamentals of Celestial Mechanics, 2nd ed., Willmann-Bell, ch. 6.
Vallado, D. A. (2013), Fundamentals of Astrodynamics and Applications, 4th ed., Microcosm,
sec. 2.2-2.3 (Kepler's equation, universal variables, RV2COE, COE2RV).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .constants import GM_SUN_AU3_D2
from .errors import InvalidOrbit

__all__ = [
    "Elements",
    "distance_after",
    "elements_to_state",
    "mean_anomaly_deg",
    "orbit_basis",
    "perihelion_time_from_mean_anomaly",
    "period_days",
    "position_on_orbit",
    "propagate",
    "semimajor_axis_au",
    "solve_kepler",
    "state_from_true_anomaly",
    "state_to_elements",
]

# Stumpff functions use their power series for |z| below this limit (|sqrt z| < 2 rad), where the
# closed forms lose digits to cancellation; 12 terms reach 4**12 / 27! < 1e-18 there.
_STUMPFF_SERIES_LIMIT = 4.0
_STUMPFF_TERMS = 12
# Their coefficients 1/(2k+2)! (C) and 1/(2k+3)! (S), k = _STUMPFF_TERMS .. 0 (Horner order).
_STUMPFF_C_COEF = tuple(1.0 / math.factorial(2 * k + 2) for k in range(_STUMPFF_TERMS, -1, -1))
_STUMPFF_S_COEF = tuple(1.0 / math.factorial(2 * k + 3) for k in range(_STUMPFF_TERMS, -1, -1))
# G(x) = atan(sqrt x)/sqrt x uses its series for |x| below this; 20 terms give 0.1**20/41 < 1e-21.
_G_SERIES_LIMIT = 0.1
_G_TERMS = 20
# Newton iteration on the universal Kepler equation stops when the step is below this fraction of
# chi: the error after that last step is then of order its square, far below double precision.
_NEWTON_REL_STEP = 1e-13
_NEWTON_MAX_ITER = 200
# Degenerate-geometry thresholds (see the module docstring).
_EQUATORIAL_SIN_I = 1e-13
_CIRCULAR_E = 1e-12


# --------------------------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------------------------
def _arr(x) -> np.ndarray:
    return np.asarray(x, dtype=float)


def _out(x):
    """Return 0-d arrays as numpy scalars, larger arrays unchanged."""
    x = np.asarray(x)
    return x[()] if x.ndim == 0 else x


def _check_conic(q_au, e) -> None:
    if not np.all(np.isfinite(q_au) & (q_au > 0.0)):
        raise InvalidOrbit("q_au", "perihelion distance must be positive and finite")
    if not np.all(np.isfinite(e) & (e >= 0.0)):
        raise InvalidOrbit("e", "eccentricity must be finite and >= 0")


def _wrap_pi(x_rad):
    """Wrap angles to [-pi, pi)."""
    return np.mod(x_rad + np.pi, 2.0 * np.pi) - np.pi


def _stumpff_cs(z):
    """Stumpff functions C(z) and S(z) (Battin 1999, sec. 4.5), any real z.

    C(z) = (1 - cos sqrt z)/z, S(z) = (sqrt z - sin sqrt z)/sqrt(z)**3 for z > 0, the hyperbolic
    forms for z < 0, and C(0) = 1/2, S(0) = 1/6. Power series for |z| < 4.
    """
    z = _arr(z)
    c = np.empty_like(z)
    s = np.empty_like(z)
    small = np.abs(z) < _STUMPFF_SERIES_LIMIT
    if np.any(small):
        zs = z[small]
        # C = sum (-z)^k/(2k+2)!, S = sum (-z)^k/(2k+3)!, by Horner's rule from the last term.
        cc = np.full_like(zs, _STUMPFF_C_COEF[0])
        ss = np.full_like(zs, _STUMPFF_S_COEF[0])
        for c_k, s_k in zip(_STUMPFF_C_COEF[1:], _STUMPFF_S_COEF[1:], strict=True):
            cc = c_k - zs * cc
            ss = s_k - zs * ss
        c[small] = cc
        s[small] = ss
    pos = (~small) & (z > 0.0)
    if np.any(pos):
        zp = z[pos]
        x = np.sqrt(zp)
        c[pos] = 2.0 * np.sin(0.5 * x) ** 2 / zp
        s[pos] = (x - np.sin(x)) / (zp * x)
    neg = (~small) & (z < 0.0)
    if np.any(neg):
        zn = -z[neg]
        x = np.sqrt(zn)
        c[neg] = 2.0 * np.sinh(0.5 * x) ** 2 / zn
        s[neg] = (np.sinh(x) - x) / (zn * x)
    return c, s


def _g_atan(x):
    """G(x) = atan(sqrt x)/sqrt x for x >= 0, atanh(sqrt(-x))/sqrt(-x) for -1 < x < 0."""
    x = _arr(x)
    g = np.empty_like(x)
    small = np.abs(x) < _G_SERIES_LIMIT
    if np.any(small):
        xs = x[small]
        acc = np.full_like(xs, 1.0 / (2 * _G_TERMS + 1))
        for k in range(_G_TERMS - 1, -1, -1):
            acc = 1.0 / (2 * k + 1) - xs * acc
        g[small] = acc
    pos = (~small) & (x > 0.0)
    if np.any(pos):
        y = np.sqrt(x[pos])
        g[pos] = np.arctan(y) / y
    neg = (~small) & (x < 0.0)
    if np.any(neg):
        y = np.sqrt(-x[neg])
        g[neg] = np.arctanh(y) / y
    return g


def _solve_universal(q, e, alpha, s):
    """Solve e chi^3 S(alpha chi^2) + q chi = s for chi (flat arrays; s = sqrt(mu) dt).

    For elliptic orbits ``s`` must already be reduced to within half a period of perihelion.
    """
    sign = np.where(s < 0.0, -1.0, 1.0)
    s = np.abs(s)
    # Upper bound of the root: S >= 0 gives chi <= s/q. Ellipse: |E| <= pi. Hyperbola: from
    # e sinh H - H >= (e - 1) sinh H, H <= asinh(M/(e - 1)), i.e. chi <= asinh(w)/sqrt(-alpha).
    hi = s / q
    ell = alpha > 0.0
    hyp = alpha < 0.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        hi = np.where(ell, np.minimum(hi, np.pi / np.sqrt(np.where(ell, alpha, 1.0))), hi)
        sq = np.sqrt(np.where(hyp, -alpha, 1.0))
        hi = np.where(hyp, np.minimum(hi, np.arcsinh(s * sq / q) / sq), hi)
    hi = hi * (1.0 + 1e-14)  # keep the root inside despite rounding of the bound
    lo = np.zeros_like(hi)
    # Starting value: root of the parabolic (Barker) cubic e chi^3/6 + q chi = s in its
    # trigonometric form, a lower bound for ellipses and an upper bound for hyperbolas.
    e_safe = np.maximum(e, 1e-300)
    k = np.sqrt(2.0 * q / e_safe)
    chi = 2.0 * k * np.sinh(np.arcsinh(1.5 * s / (q * k)) / 3.0)
    chi = np.clip(chi, lo, hi)

    active = np.ones(chi.shape, dtype=bool)
    for _ in range(_NEWTON_MAX_ITER):
        idx = np.nonzero(active)[0]
        if idx.size == 0:
            break
        x, qa, ea, aa = chi[idx], q[idx], e[idx], alpha[idx]
        c, st = _stumpff_cs(aa * x * x)
        f = ea * x**3 * st + qa * x - s[idx]
        df = qa + ea * x * x * c  # = r > 0
        lo_a = np.where(f < 0.0, x, lo[idx])
        hi_a = np.where(f > 0.0, x, hi[idx])
        step = f / df
        new = x - step
        done = (np.abs(step) <= _NEWTON_REL_STEP * x) | (f == 0.0)
        outside = ~done & ((new <= lo_a) | (new >= hi_a))
        new = np.where(outside, 0.5 * (lo_a + hi_a), new)
        done |= (hi_a - lo_a) <= 4e-16 * hi_a
        chi[idx], lo[idx], hi[idx] = new, lo_a, hi_a
        active[idx[done]] = False
    return sign * chi


def _reduced_universal_time(q, e, alpha, dt, mu):
    """sqrt(mu) * dt, with dt reduced into [-P/2, P/2) for elliptic orbits."""
    ell = alpha > 0.0
    p = 2.0 * np.pi / (np.sqrt(mu) * np.where(ell, alpha, 1.0) ** 1.5)  # 2 pi/sqrt(mu) if not ell
    dt_red = np.where(ell, dt - p * np.floor(dt / p + 0.5), dt)
    return np.sqrt(mu) * dt_red


def _perifocal_state(q, e, alpha, chi, mu):
    """Perifocal (P, Q) components of position and velocity at universal anomaly chi."""
    z = alpha * chi * chi
    c, s = _stumpff_cs(z)
    chi2c = chi * chi * c
    one_m_zs = 1.0 - z * s
    r = q + e * chi2c
    x = q - chi2c
    y = np.sqrt(q * (1.0 + e)) * chi * one_m_zs
    vx = -np.sqrt(mu) * chi * one_m_zs / r
    vy = np.sqrt(mu * (1.0 + e) / q) * (q - (1.0 - e) * chi2c) / r
    return x, y, vx, vy


def _chi_from_true_anomaly(q, e, nu_rad):
    """Universal anomaly from the true anomaly (flat arrays), well conditioned at e = 1.

    chi = 2 sqrt(q/(1+e)) tan(nu/2) G(x), x = (1-e)/(1+e) tan^2(nu/2); for x >= 0.1 the closed
    elliptic form chi = E/sqrt(alpha) with E from the half-angle formula (exact at nu = 180 deg).
    """
    half = 0.5 * nu_rad
    tau = np.tan(half)
    x = (1.0 - e) / (1.0 + e) * tau * tau
    chi = np.empty_like(x)
    ell_far = x >= _G_SERIES_LIMIT
    rest = ~ell_far
    if np.any(rest):
        chi[rest] = 2.0 * np.sqrt(q[rest] / (1.0 + e[rest])) * tau[rest] * _g_atan(x[rest])
    if np.any(ell_far):
        ef, qf, hf = e[ell_far], q[ell_far], half[ell_far]
        ecc_anom = 2.0 * np.arctan2(np.sqrt(1.0 - ef) * np.sin(hf), np.sqrt(1.0 + ef) * np.cos(hf))
        chi[ell_far] = ecc_anom * np.sqrt(qf / (1.0 - ef))
    return chi


# --------------------------------------------------------------------------------------------
# Public API
# --------------------------------------------------------------------------------------------
def semimajor_axis_au(q_au, e):
    """Semi-major axis a = q/(1 - e).

    Parameters
    ----------
    q_au : array_like
        Perihelion distance (au, or any length unit).
    e : array_like
        Eccentricity, >= 0.

    Returns
    -------
    ndarray or float
        a in the unit of ``q_au``: positive for ellipses, ``inf`` for a parabola, negative for
        hyperbolas. Near e = 1 prefer ``1/a = (1 - e)/q``, which stays finite.
    """
    q, e = _arr(q_au), _arr(e)
    with np.errstate(divide="ignore"):
        return _out(q / (1.0 - e))


def period_days(q_au, e, mu=GM_SUN_AU3_D2):
    """Orbital period P = 2 pi sqrt(a^3/mu) (Kepler's third law); ``inf`` for e >= 1.

    Parameters
    ----------
    q_au : array_like
        Perihelion distance (au).
    e : array_like
        Eccentricity.
    mu : float, optional
        Gravitational parameter (au^3/day^2 by default; time unit of the result follows it).

    Returns
    -------
    ndarray or float
        Period in days (time unit of ``mu``).

    Examples
    --------
    >>> round(float(period_days(1.0, 0.0)), 4)  # Gaussian year, k = 0.01720209895
    365.2569
    """
    q, e = _arr(q_au), _arr(e)
    alpha = (1.0 - e) / q
    ell = alpha > 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        p = 2.0 * np.pi / (np.sqrt(mu) * np.where(ell, alpha, 1.0) ** 1.5)
    return _out(np.where(ell, p, np.inf))


def orbit_basis(incl_deg, node_deg, peri_deg):
    """Perifocal unit vectors P (to perihelion), Q (P rotated 90 deg in the direction of
    motion) and W (orbit normal, along the angular momentum).

    The rotation is R_z(node) R_x(incl) R_z(peri) (Vallado 2013, eq. 2-98 / Algorithm 10).

    Parameters
    ----------
    incl_deg, node_deg, peri_deg : array_like
        Inclination, longitude of the ascending node and argument of perihelion (deg), referred
        to the frame of the result (ecliptic J2000 in trailcast).

    Returns
    -------
    P, Q, W : ndarray, shape (..., 3)
        Unit vectors in that frame.
    """
    i, o, w = (np.deg2rad(_arr(a)) for a in (incl_deg, node_deg, peri_deg))
    i, o, w = np.broadcast_arrays(i, o, w)
    ci, si, co, so, cw, sw = np.cos(i), np.sin(i), np.cos(o), np.sin(o), np.cos(w), np.sin(w)
    p = np.stack([co * cw - so * sw * ci, so * cw + co * sw * ci, sw * si], axis=-1)
    q = np.stack([-co * sw - so * cw * ci, -so * sw + co * cw * ci, cw * si], axis=-1)
    wv = np.stack([so * si, -co * si, ci], axis=-1)
    return p, q, wv


def _conic_radius(q, e, nu_rad):
    """r = q(1+e)/(1 + e cos nu), with 1 + e cos nu = 2 cos^2(nu/2) + (e - 1) cos nu."""
    den = 2.0 * np.cos(0.5 * nu_rad) ** 2 + (e - 1.0) * np.cos(nu_rad)
    if not np.all(den > 0.0):
        raise InvalidOrbit(
            "true_anomaly_deg", "true anomaly at or beyond the asymptote of the hyperbola"
        )
    return q * (1.0 + e) / den


def position_on_orbit(q_au, e, incl_deg, node_deg, peri_deg, true_anomaly_deg):
    """Heliocentric position at a given true anomaly (conic equation, no time involved).

    Parameters
    ----------
    q_au : array_like
        Perihelion distance (au).
    e : array_like
        Eccentricity (any conic).
    incl_deg, node_deg, peri_deg : array_like
        Angular elements (deg), ecliptic J2000.
    true_anomaly_deg : array_like
        True anomaly (deg). For e >= 1 it must satisfy 1 + e cos(nu) > 0.

    Returns
    -------
    ndarray, shape (..., 3)
        Position (au), ecliptic J2000.

    Raises
    ------
    InvalidOrbit
        For a non-positive q, negative e, or a true anomaly beyond a hyperbola's asymptote.
    """
    q, e, nu = _arr(q_au), _arr(e), np.deg2rad(_arr(true_anomaly_deg))
    _check_conic(q, e)
    p, qv, _ = orbit_basis(incl_deg, node_deg, peri_deg)
    r = _conic_radius(q, e, nu)
    x, y = r * np.cos(nu), r * np.sin(nu)
    return x[..., None] * p + y[..., None] * qv


def state_from_true_anomaly(
    q_au, e, incl_deg, node_deg, peri_deg, true_anomaly_deg, mu=GM_SUN_AU3_D2
):
    """Position and velocity at a given true anomaly.

    Uses r = p/(1 + e cos nu) and v = sqrt(mu/p) (-sin nu P + (e + cos nu) Q), p = q(1 + e)
    (Vallado 2013, Algorithm 10, COE2RV), valid for every conic; 1 + e cos nu and e + cos nu
    are evaluated as 2 cos^2(nu/2) + (e - 1) (cos nu or 1), which stay accurate near aphelion
    of orbits with e close to 1.

    Parameters
    ----------
    q_au, e, incl_deg, node_deg, peri_deg, true_anomaly_deg : array_like
        Elements as in :func:`position_on_orbit`.
    mu : float, optional
        Gravitational parameter (au^3/day^2 by default).

    Returns
    -------
    r_au, v_au_d : ndarray, shape (..., 3)
        Position (au) and velocity (au/day), ecliptic J2000.
    """
    q, e, nu = _arr(q_au), _arr(e), np.deg2rad(_arr(true_anomaly_deg))
    _check_conic(q, e)
    p, qv, _ = orbit_basis(incl_deg, node_deg, peri_deg)
    r = _conic_radius(q, e, nu)
    cn, sn = np.cos(nu), np.sin(nu)
    vscale = np.sqrt(mu / (q * (1.0 + e)))
    e_plus_cos = (e - 1.0) + 2.0 * np.cos(0.5 * nu) ** 2  # no cancellation near aphelion, e ~ 1
    r_vec = (r * cn)[..., None] * p + (r * sn)[..., None] * qv
    v_vec = (-vscale * sn)[..., None] * p + (vscale * e_plus_cos)[..., None] * qv
    return np.broadcast_arrays(r_vec, v_vec)


def elements_to_state(q_au, e, incl_deg, node_deg, peri_deg, tp_tdb_jd, t_tdb_jd, mu=GM_SUN_AU3_D2):
    """Heliocentric position and velocity at time ``t_tdb_jd`` from perihelion elements.

    Solves the universal Kepler equation from perihelion (see the module docstring), so the
    same code serves ellipses, parabolas (e = 1 exactly) and hyperbolas without loss of
    precision near e = 1.

    Parameters
    ----------
    q_au : array_like
        Perihelion distance (au), > 0.
    e : array_like
        Eccentricity, >= 0 (tested up to e = 5).
    incl_deg, node_deg, peri_deg : array_like
        Inclination, longitude of the ascending node, argument of perihelion (deg), ecliptic and
        equinox J2000.
    tp_tdb_jd : array_like
        Time of perihelion passage (JD, TDB).
    t_tdb_jd : array_like
        Time of the state (JD, TDB).
    mu : float, optional
        Gravitational parameter, au^3/day^2 (default: Gaussian k^2).

    Returns
    -------
    r_au, v_au_d : ndarray, shape (..., 3)
        Position (au) and velocity (au/day), heliocentric ecliptic J2000; ``...`` is the
        broadcast shape of the inputs.

    Raises
    ------
    InvalidOrbit
        If q <= 0 or e < 0 (or not finite).

    Notes
    -----
    Limits of validity: pure two-body motion. For ellipses, t - tp is first reduced modulo
    the period, which costs absolute precision of order 1e-16 |t - tp| days.

    Examples
    --------
    A circular orbit of 1 au a quarter of a period after "perihelion":

    >>> import numpy as np
    >>> r, v = elements_to_state(1.0, 0.0, 0.0, 0.0, 0.0, 0.0, period_days(1.0, 0.0) / 4)
    >>> print(np.round(r, 12) + 0.0)
    [0. 1. 0.]
    """
    q, e, i, o, w, tp, t = np.broadcast_arrays(
        *(_arr(a) for a in (q_au, e, incl_deg, node_deg, peri_deg, tp_tdb_jd, t_tdb_jd))
    )
    _check_conic(q, e)
    shape = q.shape
    qf, ef = q.ravel(), e.ravel()
    alpha = (1.0 - ef) / qf
    s = _reduced_universal_time(qf, ef, alpha, (t - tp).ravel(), mu)
    chi = _solve_universal(qf, ef, alpha, s)
    x, y, vx, vy = (a.reshape(shape) for a in _perifocal_state(qf, ef, alpha, chi, mu))
    p, qv, _ = orbit_basis(i, o, w)
    r_vec = x[..., None] * p + y[..., None] * qv
    v_vec = vx[..., None] * p + vy[..., None] * qv
    return r_vec, v_vec


@dataclass(frozen=True)
class Elements:
    """Osculating two-body elements at ``epoch_tdb_jd`` (heliocentric ecliptic J2000).

    Attributes
    ----------
    q_au : ndarray or float
        Perihelion distance (au).
    e : ndarray or float
        Eccentricity.
    incl_deg : ndarray or float
        Inclination, [0, 180] deg.
    node_deg : ndarray or float
        Longitude of the ascending node, [0, 360) deg (0 by convention when i = 0 or 180).
    peri_deg : ndarray or float
        Argument of perihelion, [0, 360) deg (0 by convention when e = 0).
    tp_tdb_jd : ndarray or float
        Time of perihelion passage (JD TDB); for ellipses the passage nearest to the epoch.
    true_anomaly_deg : ndarray or float
        True anomaly at the epoch, in [-180, 180] deg.
    epoch_tdb_jd : ndarray or float
        Epoch of osculation (JD TDB).
    mu : float
        Gravitational parameter the elements refer to (au^3/day^2 by default).
    """

    q_au: np.ndarray | float
    e: np.ndarray | float
    incl_deg: np.ndarray | float
    node_deg: np.ndarray | float
    peri_deg: np.ndarray | float
    tp_tdb_jd: np.ndarray | float
    true_anomaly_deg: np.ndarray | float
    epoch_tdb_jd: np.ndarray | float
    mu: float = GM_SUN_AU3_D2

    @property
    def a_au(self):
        """Semi-major axis (au): ``inf`` for a parabola, negative for hyperbolas."""
        return semimajor_axis_au(self.q_au, self.e)

    @property
    def inverse_a_per_au(self):
        """1/a = (1 - e)/q (1/au), finite for every conic; the quantity to quote near e = 1."""
        return _out((1.0 - _arr(self.e)) / _arr(self.q_au))

    @property
    def period_days(self):
        """Period (days); ``inf`` for e >= 1."""
        return period_days(self.q_au, self.e, self.mu)

    @property
    def mean_motion_deg_d(self):
        """Mean motion sqrt(mu |1/a|^3) in deg/day (the hyperbolic mean motion for e > 1,
        0 for a parabola)."""
        alpha = np.abs((1.0 - _arr(self.e)) / _arr(self.q_au))
        return _out(np.rad2deg(np.sqrt(self.mu * alpha**3)))

    def state_at(self, t_tdb_jd):
        """Two-body position (au) and velocity (au/day) at ``t_tdb_jd``, ecliptic J2000."""
        return elements_to_state(
            self.q_au,
            self.e,
            self.incl_deg,
            self.node_deg,
            self.peri_deg,
            self.tp_tdb_jd,
            t_tdb_jd,
            self.mu,
        )


def state_to_elements(r_au, v_au_d, t_tdb_jd, mu=GM_SUN_AU3_D2) -> Elements:
    """Osculating perihelion elements from a heliocentric state (Vallado 2013, Algorithm 9,
    RV2COE, recast for perihelion-based elements and universal variables).

    Parameters
    ----------
    r_au : array_like, shape (..., 3)
        Heliocentric position (au), ecliptic J2000.
    v_au_d : array_like, shape (..., 3)
        Heliocentric velocity (au/day), ecliptic J2000.
    t_tdb_jd : array_like
        Time of the state (JD TDB), broadcast against ``r_au[..., 0]``.
    mu : float, optional
        Gravitational parameter (au^3/day^2 by default).

    Returns
    -------
    Elements
        q from q = h^2/(mu (1 + e)); angles from the angular momentum, node and eccentricity
        vectors (see the module docstring for i = 0/180 and e = 0); tp from the universal time
        equation, for ellipses the perihelion passage nearest to ``t_tdb_jd``.

    Raises
    ------
    InvalidOrbit
        For r = 0 or a rectilinear orbit (r parallel to v, zero angular momentum).

    Notes
    -----
    Precision: q, e and the angles come from h = r x v, which cancels when r is nearly parallel
    to v (far along a hyperbola): relative error ~1e-16 |r||v|/|h|. Storing e (not 1 - e) as a
    double limits how well the elements reproduce a state far from perihelion of an orbit with
    e ~ 1: relative position error ~1e-16 r/q (1e-7 at aphelion of e = 1 - 1e-9; 1e-12 for
    e = 0.9999).

    Examples
    --------
    >>> import numpy as np
    >>> from dynamics.constants import GAUSSIAN_K
    >>> el = state_to_elements([1.0, 0.0, 0.0], [0.0, 1.1 * GAUSSIAN_K, 0.0], 2451545.0)
    >>> round(float(el.q_au), 12), round(float(el.e), 12), float(el.tp_tdb_jd)
    (1.0, 0.21, 2451545.0)
    """
    r, v = np.broadcast_arrays(_arr(r_au), _arr(v_au_d))
    t = np.broadcast_to(_arr(t_tdb_jd), r.shape[:-1])
    shape = r.shape[:-1]
    r = r.reshape(-1, 3)
    v = v.reshape(-1, 3)
    t = t.ravel()
    rmag = np.linalg.norm(r, axis=-1)
    h = np.cross(r, v)
    hmag = np.linalg.norm(h, axis=-1)
    if not np.all(rmag > 0.0):
        raise InvalidOrbit("r_au", "position at the centre of attraction")
    if not np.all(hmag > 0.0):
        raise InvalidOrbit("v_au_d", "rectilinear orbit (zero angular momentum)")
    ecc = np.cross(v, h) / mu - r / rmag[:, None]
    e = np.linalg.norm(ecc, axis=-1)
    q = hmag * hmag / (mu * (1.0 + e))

    n_xy = np.hypot(h[:, 0], h[:, 1])
    incl = np.arctan2(n_xy, h[:, 2])
    equatorial = n_xy <= _EQUATORIAL_SIN_I * hmag
    node = np.where(equatorial, 0.0, np.arctan2(h[:, 0], -h[:, 1]))
    n_hat = np.stack([np.cos(node), np.sin(node), np.zeros_like(node)], axis=-1)
    w_hat = h / hmag[:, None]
    m_hat = np.cross(w_hat, n_hat)  # in the orbit plane, 90 deg ahead of the node

    u = np.arctan2(np.sum(r * m_hat, -1), np.sum(r * n_hat, -1))  # argument of latitude
    circular = e <= _CIRCULAR_E
    peri = np.where(circular, 0.0, np.arctan2(np.sum(ecc * m_hat, -1), np.sum(ecc * n_hat, -1)))
    nu = _wrap_pi(u - peri)

    alpha = (1.0 - e) / q
    chi = _chi_from_true_anomaly(q, e, nu)
    # Far from the parabola on a hyperbola use sinh H = (r.v)/(e sqrt(mu |a|)), which stays well
    # conditioned near the asymptote, where tan(nu/2) -> sqrt((e+1)/(e-1)).
    tau = np.tan(0.5 * nu)
    hyp_far = (1.0 - e) / (1.0 + e) * tau * tau <= -_G_SERIES_LIMIT
    if np.any(hyp_far):
        sq = np.sqrt(-alpha[hyp_far])
        sigma = np.sum(r[hyp_far] * v[hyp_far], -1) / np.sqrt(mu)
        chi[hyp_far] = np.arcsinh(sigma * sq / e[hyp_far]) / sq
    c, s = _stumpff_cs(alpha * chi * chi)
    dt = (e * chi**3 * s + q * chi) / np.sqrt(mu)
    tp = t - dt

    def _shape(a):
        return _out(a.reshape(shape))

    return Elements(
        q_au=_shape(q),
        e=_shape(e),
        incl_deg=_shape(np.rad2deg(incl)),
        node_deg=_shape(np.mod(np.rad2deg(node), 360.0)),
        peri_deg=_shape(np.mod(np.rad2deg(peri), 360.0)),
        tp_tdb_jd=_shape(tp),
        true_anomaly_deg=_shape(np.rad2deg(nu)),
        epoch_tdb_jd=_shape(t),
        mu=mu,
    )


def propagate(r_au, v_au_d, t0_tdb_jd, t_tdb_jd, mu=GM_SUN_AU3_D2):
    """Two-body propagation of a heliocentric state from ``t0_tdb_jd`` to ``t_tdb_jd``.

    Converts to perihelion elements (:func:`state_to_elements`) and back
    (:func:`elements_to_state`); every conic, including e = 1, is handled.

    Parameters
    ----------
    r_au, v_au_d : array_like, shape (..., 3)
        State at ``t0_tdb_jd`` (au, au/day), heliocentric ecliptic J2000.
    t0_tdb_jd, t_tdb_jd : array_like
        Initial and final times (JD TDB), broadcast against ``r_au[..., 0]``.
    mu : float, optional
        Gravitational parameter (au^3/day^2 by default).

    Returns
    -------
    r_au, v_au_d : ndarray, shape (..., 3)
        State at ``t_tdb_jd``.
    """
    el = state_to_elements(r_au, v_au_d, t0_tdb_jd, mu)
    return el.state_at(t_tdb_jd)


def _stumpff_scalar(z: float) -> tuple[float, float]:
    """:func:`_stumpff_cs` for one float, without numpy (for per-step force callbacks)."""
    if abs(z) < _STUMPFF_SERIES_LIMIT:
        c = s = 0.0
        for cc, ss in zip(_STUMPFF_C_COEF, _STUMPFF_S_COEF, strict=True):
            c = cc - z * c
            s = ss - z * s
        return c, s
    if z > 0.0:
        x = math.sqrt(z)
        return 2.0 * math.sin(0.5 * x) ** 2 / z, (x - math.sin(x)) / (z * x)
    x = math.sqrt(-z)
    return 2.0 * math.sinh(0.5 * x) ** 2 / -z, (math.sinh(x) - x) / (-z * x)


def distance_after(r_au, v_au_d, dt_days: float, mu: float = GM_SUN_AU3_D2) -> float:
    """Heliocentric distance ``dt_days`` after (before, if negative) the state ``r, v``, on
    its two-body orbit: any conic, scalar and numpy-free (it runs inside force callbacks).

    Universal Kepler equation from the given state (Vallado 2013, Algorithm 8; Battin 1999,
    sec. 4.5): sqrt(mu) dt = sigma0 chi^2 C + (1 - alpha r0) chi^3 S + r0 chi, with
    sigma0 = r0.v0/sqrt(mu), z = alpha chi^2; its chi-derivative is the distance
    r = chi^2 C + sigma0 chi (1 - z S) + r0 (1 - z C) > 0: the root is bracketed by doubling
    from the first-order guess chi = sqrt(mu) dt / r0, then found by Newton steps from that
    guess that fall back to bisection when they leave the bracket or converge slowly.
    """
    x0, y0, z0 = float(r_au[0]), float(r_au[1]), float(r_au[2])
    vx, vy, vz = float(v_au_d[0]), float(v_au_d[1]), float(v_au_d[2])
    r0 = math.sqrt(x0 * x0 + y0 * y0 + z0 * z0)
    if dt_days == 0.0:
        return r0
    sqmu = math.sqrt(mu)
    sigma0 = (x0 * vx + y0 * vy + z0 * vz) / sqmu
    alpha = 2.0 / r0 - (vx * vx + vy * vy + vz * vz) / mu
    target = sqmu * dt_days

    def time_and_distance(chi):
        zz = alpha * chi * chi
        c, s = _stumpff_scalar(zz)
        t = sigma0 * chi * chi * c + (1.0 - alpha * r0) * chi**3 * s + r0 * chi
        return t - target, chi * chi * c + sigma0 * chi * (1.0 - zz * s) + r0 * (1.0 - zz * c)

    # Bracket the root (f increases with chi) from the first-order guess chi = dt sqrt(mu)/r0,
    # doubling outwards; then Newton steps from that guess, bisecting when one leaves the
    # bracket (a short |dt| needs two or three evaluations in all).
    # On a hyperbola sinh(sqrt(-alpha) chi) overflows beyond chi_max; the root lies far inside
    # it for any time shorter than the age of the Solar System.
    chi_max = 700.0 / math.sqrt(-alpha) if alpha < 0.0 else math.inf
    guess = math.copysign(min(abs(target) / r0, 0.5 * chi_max), target)
    lo, hi = (0.0, guess) if target > 0 else (guess, 0.0)
    step = guess
    while True:
        if target > 0:
            if time_and_distance(hi)[0] >= 0.0:
                break
            lo, hi = hi, min(hi + step, chi_max)
        else:
            if time_and_distance(lo)[0] <= 0.0:
                break
            hi, lo = lo, max(lo + step, -chi_max)
        step *= 2.0
    chi = guess
    dx_before, dx = math.inf, hi - lo
    for _ in range(200):
        f, r = time_and_distance(chi)
        if f > 0.0:
            hi = chi
        else:
            lo = chi
        new = chi - f / r
        if abs(new - chi) <= 1e-14 * max(1.0, abs(chi)):
            # converged: Newton's own step is at round-off. Tested before the safeguard below,
            # which would otherwise read round-off steps as slow convergence and bisect a wide
            # bracket (up to ~50 evaluations instead of ~5; measured on a Jupiter-family orbit)
            chi = new
            break
        # bisect when Newton leaves the bracket or has not halved the step of two rounds ago
        # (slow on the exponential branch of a hyperbola; Press et al. 2007, rtsafe)
        if not lo < new < hi or abs(new - chi) > 0.5 * abs(dx_before):
            new = 0.5 * (lo + hi)
        dx_before, dx = dx, new - chi
        chi = new
        if abs(dx) <= 1e-14 * max(1.0, abs(chi)) or hi - lo <= 1e-14 * max(1.0, abs(chi)):
            break
    return time_and_distance(chi)[1]


def solve_kepler(mean_anomaly_rad, e):
    """Eccentric anomaly E from Kepler's equation M = E - e sin E, for 0 <= e < 1.

    Solved as the universal Kepler equation with a = 1 (so chi = E), by safeguarded Newton
    iteration inside a guaranteed bracket with E - sin E from its series for small E: converges
    for every M and e, and keeps full relative precision up to at least e = 0.999999.

    Parameters
    ----------
    mean_anomaly_rad : array_like
        Mean anomaly (rad), any value.
    e : array_like
        Eccentricity, 0 <= e < 1.

    Returns
    -------
    ndarray or float
        Eccentric anomaly (rad), in the same revolution as M: E - M lies in [-pi, pi].

    Raises
    ------
    InvalidOrbit
        If e is outside [0, 1).

    Examples
    --------
    Meeus (1998), Astronomical Algorithms, 2nd ed., Example 30.a:

    >>> import numpy as np
    >>> round(float(np.rad2deg(solve_kepler(np.deg2rad(5.0), 0.1))), 6)
    5.554589
    """
    m, e = np.broadcast_arrays(_arr(mean_anomaly_rad), _arr(e))
    if not np.all((e >= 0.0) & (e < 1.0)):
        raise InvalidOrbit("e", "Kepler's equation in E needs 0 <= e < 1")
    shape = m.shape
    mf, ef = m.ravel(), e.ravel()
    turns = np.floor(mf / (2.0 * np.pi) + 0.5)
    m_red = mf - 2.0 * np.pi * turns
    big_e = _solve_universal(1.0 - ef, ef, np.ones_like(ef), m_red)
    return _out((big_e + 2.0 * np.pi * turns).reshape(shape))


def mean_anomaly_deg(q_au, e, tp_tdb_jd, t_tdb_jd, mu=GM_SUN_AU3_D2):
    """Mean anomaly M = n (t - tp) of an elliptic orbit, in [0, 360) deg.

    Parameters
    ----------
    q_au, e : array_like
        Perihelion distance (au) and eccentricity, 0 <= e < 1.
    tp_tdb_jd, t_tdb_jd : array_like
        Time of perihelion and time of interest (JD TDB).
    mu : float, optional
        Gravitational parameter (au^3/day^2 by default).

    Returns
    -------
    ndarray or float
        Mean anomaly (deg).

    Raises
    ------
    InvalidOrbit
        If e >= 1 (no mean anomaly in this sense) or q <= 0.
    """
    q, e, tp, t = np.broadcast_arrays(*(_arr(a) for a in (q_au, e, tp_tdb_jd, t_tdb_jd)))
    _check_conic(q, e)
    if not np.all(e < 1.0):
        raise InvalidOrbit("e", "the mean anomaly is defined here only for elliptic orbits")
    alpha = (1.0 - e) / q
    n_rad_d = np.sqrt(mu * alpha**3)
    p = 2.0 * np.pi / n_rad_d
    dt = t - tp
    dt = dt - p * np.floor(dt / p)
    return _out(np.mod(np.rad2deg(n_rad_d * dt), 360.0))


def perihelion_time_from_mean_anomaly(q_au, e, mean_anomaly_deg, t_tdb_jd, mu=GM_SUN_AU3_D2):
    """Time of perihelion passage nearest to ``t_tdb_jd`` from the mean anomaly there.

    tp = t - M/n with M first wrapped to [-180, 180) deg, so tp is the passage nearest to t
    (the convention of :func:`state_to_elements`). Add or subtract periods for another one.

    Parameters
    ----------
    q_au, e : array_like
        Perihelion distance (au) and eccentricity, 0 <= e < 1.
    mean_anomaly_deg : array_like
        Mean anomaly at ``t_tdb_jd`` (deg).
    t_tdb_jd : array_like
        Epoch of the mean anomaly (JD TDB).
    mu : float, optional
        Gravitational parameter (au^3/day^2 by default).

    Returns
    -------
    ndarray or float
        Time of perihelion passage (JD TDB).

    Raises
    ------
    InvalidOrbit
        If e >= 1 or q <= 0.
    """
    q, e, m, t = np.broadcast_arrays(*(_arr(a) for a in (q_au, e, mean_anomaly_deg, t_tdb_jd)))
    _check_conic(q, e)
    if not np.all(e < 1.0):
        raise InvalidOrbit("e", "the mean anomaly is defined here only for elliptic orbits")
    alpha = (1.0 - e) / q
    n_rad_d = np.sqrt(mu * alpha**3)
    m_rad = _wrap_pi(np.deg2rad(m))
    return _out(t - m_rad / n_rad_d)
