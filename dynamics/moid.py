"""Minimum orbit intersection distance (MOID) between two heliocentric conic orbits.

The MOID is the smallest distance between any point of one orbit and any point of the other,
whatever the bodies' positions along them: a purely geometric quantity that needs only the shape
and orientation elements (q, e, i, node, argument of perihelion), no time. It is the first filter
of meteor-shower screening: dust released near a parent whose orbit passes within a few hundredths
of an au of Earth's orbit can meet Earth.

Method
------
The squared distance ``f(nu1, nu2) = |r1(nu1) - r2(nu2)|**2`` is a smooth function of the two true
anomalies. Its local minima are found in three steps:

1. Each orbit is sampled at ``2 n`` anomalies: ``n`` uniform in true anomaly (fine near
   perihelion) merged with ``n`` uniform in eccentric anomaly for ellipses, or in the parabolic
   variable ``tan(nu / 2)`` for parabolas and hyperbolas (finer at large distances). ``f`` is
   evaluated on the whole grid at once.
2. Every grid point lower than its eight neighbours (periodic wrap for closed orbits; ties broken
   by grid index, so a flat valley gives one start, not many) starts a refinement.
3. Each start is refined by a damped Newton iteration (Levenberg-Marquardt with a shift that keeps
   the matrix positive definite, so it only descends) using analytic first and second derivatives
   of ``f``; starts that do not converge are handed to :func:`scipy.optimize.minimize`. Points
   where the Hessian is not positive semi-definite, or that stick to the edge of an open orbit's
   domain, are discarded; the rest are merged when they coincide, and sorted by distance.

This is a careful numerical search in the spirit of the grid-plus-local-refinement methods; the
complete algebraic alternative is Gronchi (2005). A sampled grid cannot prove that no extremely
narrow basin was missed: the test suite compares the global MOID with an independent brute-force
oracle over hundreds of random orbits.

Limits of validity
------------------
- Elliptic, parabolic and hyperbolic orbits. For ``e >= 1`` only true anomalies with heliocentric
  distance ``r <= max(OPEN_ORBIT_R_CUT_AU, 10 q)`` are searched (the branch beyond is out of any
  meteor-relevant region); a minimum beyond that cut is not reported.
- Exactly degenerate geometries (coplanar concentric circles, identical orbits) have
  non-isolated minima; one representative point of each flat valley is returned.
- Distances are as accurate as double-precision positions allow, about 1e-12 au for orbits of a
  few au.

References
----------
Gronchi, G. F. (2005), "An algebraic method to compute the critical points of the distance
function between two Keplerian orbits", Celest. Mech. Dyn. Astr. 93, 295-329.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import minimize

from .errors import InvalidOrbit

__all__ = ["MoidPoint", "moid", "moid_many", "OPEN_ORBIT_R_CUT_AU"]

#: Largest heliocentric distance (au) searched on a parabolic or hyperbolic orbit (the actual cut
#: is ``max(OPEN_ORBIT_R_CUT_AU, 10 q)``). Meteor-relevant geometry lies well inside.
OPEN_ORBIT_R_CUT_AU = 100.0

# Grid half-sizes (each orbit gets 2 n samples). Chosen by comparing with a dense brute-force
# oracle on random orbits against an Earth-like orbit (tests/test_moid.py).
_N_GRID = 48
# Newton iterations before handing a start to scipy.
_MAX_NEWTON_ITER = 40
# Step size (rad) below which a Newton iteration counts as converged.
_STEP_TOL_RAD = 1e-12
# Two minima closer than this in both positions (relative to the distance scale, au) are one.
_MERGE_TOL_REL = 1e-7
# Relative tolerance on the smallest Hessian eigenvalue when accepting a minimum.
_HESS_TOL_REL = 1e-9


@dataclass(frozen=True)
class MoidPoint:
    """One local minimum of the distance between two orbits.

    Attributes
    ----------
    distance_au : float
        Distance between the two closest points, au.
    nu1_deg, nu2_deg : float
        True anomalies of the points on orbit 1 and orbit 2, degrees in (-180, 180].
    r1_au, r2_au : ndarray, shape (3,)
        Heliocentric positions of the points, ecliptic and equinox J2000, au.
    lon1_deg, lon2_deg : float
        Heliocentric ecliptic longitudes of the points, degrees in [0, 360).
    """

    distance_au: float
    nu1_deg: float
    nu2_deg: float
    r1_au: np.ndarray = field(compare=False)
    r2_au: np.ndarray = field(compare=False)
    lon1_deg: float
    lon2_deg: float


# --------------------------------------------------------------------------------------------
# Orbit geometry (vectorised over a leading batch axis)
# --------------------------------------------------------------------------------------------


@dataclass
class _Orbits:
    """Batch of conic orbits: semi-latus rectum, eccentricity, perifocal unit vectors, domain."""

    p_au: np.ndarray  # (M,)
    e: np.ndarray  # (M,)
    pvec: np.ndarray  # (M, 3) unit vector towards perihelion
    qvec: np.ndarray  # (M, 3) unit vector at nu = +90 deg
    closed: np.ndarray  # (M,) bool, e < 1
    nu_max_rad: np.ndarray  # (M,) half-width of the searched anomaly range (pi if closed)

    def take(self, idx):
        return _Orbits(
            self.p_au[idx],
            self.e[idx],
            self.pvec[idx],
            self.qvec[idx],
            self.closed[idx],
            self.nu_max_rad[idx],
        )


def _check_elements(name, q_au, e, incl_deg):
    if not np.all(np.isfinite(q_au)) or np.any(q_au <= 0.0):
        raise InvalidOrbit(f"{name}q_au", "perihelion distance must be finite and > 0 au")
    if not np.all(np.isfinite(e)) or np.any(e < 0.0):
        raise InvalidOrbit(f"{name}e", "eccentricity must be finite and >= 0")
    if not np.all(np.isfinite(incl_deg)) or np.any((incl_deg < 0.0) | (incl_deg > 180.0)):
        raise InvalidOrbit(f"{name}incl_deg", "inclination must lie in [0, 180] deg")


def _make_orbits(q_au, e, incl_deg, node_deg, peri_deg) -> _Orbits:
    q_au, e, incl_deg, node_deg, peri_deg = (
        np.atleast_1d(np.asarray(a, dtype=float))
        for a in np.broadcast_arrays(q_au, e, incl_deg, node_deg, peri_deg)
    )
    if not (np.all(np.isfinite(node_deg)) and np.all(np.isfinite(peri_deg))):
        raise InvalidOrbit("node_deg", "node and argument of perihelion must be finite")
    i, om, w = np.deg2rad(incl_deg), np.deg2rad(node_deg), np.deg2rad(peri_deg)
    ci, si, co, so, cw, sw = np.cos(i), np.sin(i), np.cos(om), np.sin(om), np.cos(w), np.sin(w)
    pvec = np.stack([cw * co - sw * so * ci, cw * so + sw * co * ci, sw * si], axis=-1)
    qvec = np.stack([-sw * co - cw * so * ci, -sw * so + cw * co * ci, cw * si], axis=-1)
    p_au = q_au * (1.0 + e)
    closed = e < 1.0
    r_cut = np.maximum(OPEN_ORBIT_R_CUT_AU, 10.0 * q_au)
    with np.errstate(divide="ignore", invalid="ignore"):
        cos_cut = np.clip((p_au / r_cut - 1.0) / np.where(e > 0, e, 1.0), -1.0, 1.0)
    nu_max = np.where(closed, np.pi, np.arccos(cos_cut))
    return _Orbits(p_au, e, pvec, qvec, closed, nu_max)


def _perifocal(p, e, nu):
    """Perifocal x, y and their first and second derivatives with respect to nu."""
    c, s = np.cos(nu), np.sin(nu)
    w = 1.0 / (1.0 + e * c)
    x = p * c * w
    y = p * s * w
    w2 = w * w
    dx = -p * s * w2
    dy = p * (c + e) * w2
    w3 = w2 * w
    ddx = -p * (c * (1.0 + e * c) + 2.0 * e * s * s) * w3
    ddy = p * s * (2.0 * e * e + e * c - 1.0) * w3
    return x, y, dx, dy, ddx, ddy


def _positions(orb: _Orbits, nu):
    """Heliocentric positions, shape nu.shape + (3,), for nu of shape (M, ...)."""
    extra = (slice(None),) + (None,) * (nu.ndim - 1)
    p, e = orb.p_au[extra], orb.e[extra]
    c, s = np.cos(nu), np.sin(nu)
    rho = p / (1.0 + e * c)
    pv = orb.pvec[extra]
    qv = orb.qvec[extra]
    return (rho * c)[..., None] * pv + (rho * s)[..., None] * qv


def _grid(orb: _Orbits, n: int):
    """Sorted sample anomalies, shape (M, 2 n): uniform in nu merged with uniform in E (e < 1)
    or in tan(nu/2) (e >= 1)."""
    e = orb.e[:, None]
    k = np.arange(n)
    # closed: nu uniform on [-pi, pi), E uniform shifted by half a step
    nu_a = -np.pi + 2.0 * np.pi * k / n
    ecc = -np.pi + 2.0 * np.pi * (k + 0.5) / n
    sq = np.sqrt(np.clip((1.0 + e) / np.where(e < 1.0, 1.0 - e, 1.0), 0.0, None))
    nu_b_closed = 2.0 * np.arctan(sq * np.tan(ecc / 2.0))
    # open: nu uniform on [-nu_max, nu_max], tan(nu/2) uniform inside
    num = orb.nu_max_rad[:, None]
    nu_a_open = num * (-1.0 + 2.0 * k / (n - 1))
    dmax = np.tan(num / 2.0)
    nu_b_open = 2.0 * np.arctan(dmax * (-1.0 + 2.0 * (k + 0.5) / n))
    closed = orb.closed[:, None]
    nu = np.concatenate(
        [np.where(closed, nu_a, nu_a_open), np.where(closed, nu_b_closed, nu_b_open)], axis=1
    )
    return np.sort(nu, axis=1)


def _grid_minima(f, closed1, closed2):
    """Indices (m, i, j) of grid points lower than all 8 neighbours.

    f has shape (M, N1, N2). Ties are broken by flat grid index; neighbours across the ends of an
    open orbit's range do not count.
    """
    m_, n1, n2 = f.shape
    # Quantise to single precision so that rounding noise in a flat valley makes ties, which the
    # index tie-break then resolves to one start per valley.
    fq = f.astype(np.float32)
    idx = np.arange(n1 * n2).reshape(1, n1, n2)
    is_min = np.ones(f.shape, dtype=bool)
    ii = np.arange(n1)[None, :, None]
    jj = np.arange(n2)[None, None, :]
    open1 = ~closed1[:, None, None]
    open2 = ~closed2[:, None, None]
    for di in (-1, 0, 1):
        for dj in (-1, 0, 1):
            if di == 0 and dj == 0:
                continue
            fn = np.roll(fq, (-di, -dj), axis=(1, 2))
            idn = np.roll(idx, (-di, -dj), axis=(1, 2))
            lower = (fn < fq) | ((fn == fq) & (idn < idx))
            # wrapped neighbours of an open orbit do not exist
            wrap1 = ((ii + di) < 0) | ((ii + di) >= n1)
            wrap2 = ((jj + dj) < 0) | ((jj + dj) >= n2)
            lower &= ~((wrap1 & open1) | (wrap2 & open2))
            is_min &= ~lower
    return np.nonzero(is_min)


def _fgh(o1: _Orbits, o2: _Orbits, u, v):
    """Squared distance, gradient and Hessian w.r.t. (nu1, nu2); o1, o2 are per-start batches."""
    x1, y1, dx1, dy1, ddx1, ddy1 = _perifocal(o1.p_au, o1.e, u)
    x2, y2, dx2, dy2, ddx2, ddy2 = _perifocal(o2.p_au, o2.e, v)
    P1, Q1, P2, Q2 = o1.pvec, o1.qvec, o2.pvec, o2.qvec
    d = x1[:, None] * P1 + y1[:, None] * Q1 - x2[:, None] * P2 - y2[:, None] * Q2
    t1 = dx1[:, None] * P1 + dy1[:, None] * Q1
    t2 = dx2[:, None] * P2 + dy2[:, None] * Q2
    a1 = ddx1[:, None] * P1 + ddy1[:, None] * Q1
    a2 = ddx2[:, None] * P2 + ddy2[:, None] * Q2
    f = np.einsum("ij,ij->i", d, d)
    gu = 2.0 * np.einsum("ij,ij->i", d, t1)
    gv = -2.0 * np.einsum("ij,ij->i", d, t2)
    huu = 2.0 * (np.einsum("ij,ij->i", t1, t1) + np.einsum("ij,ij->i", d, a1))
    hvv = 2.0 * (np.einsum("ij,ij->i", t2, t2) - np.einsum("ij,ij->i", d, a2))
    huv = -2.0 * np.einsum("ij,ij->i", t1, t2)
    return f, gu, gv, huu, huv, hvv


def _f_only(o1: _Orbits, o2: _Orbits, u, v):
    """Squared distance; +inf outside an open orbit's searched range."""
    x1, y1 = _perifocal(o1.p_au, o1.e, u)[:2]
    x2, y2 = _perifocal(o2.p_au, o2.e, v)[:2]
    d = x1[:, None] * o1.pvec + y1[:, None] * o1.qvec - x2[:, None] * o2.pvec
    d -= y2[:, None] * o2.qvec
    f = np.einsum("ij,ij->i", d, d)
    bad = (~o1.closed & (np.abs(u) > o1.nu_max_rad)) | (~o2.closed & (np.abs(v) > o2.nu_max_rad))
    return np.where(bad, np.inf, f)


def _min_eig(huu, huv, hvv):
    half_tr = 0.5 * (huu + hvv)
    return half_tr - np.hypot(0.5 * (huu - hvv), huv)


def _newton(o1: _Orbits, o2: _Orbits, u, v):
    """Damped Newton descent on f from starts (u, v). Returns u, v, converged flags."""
    k = u.shape[0]
    lam = np.zeros(k)  # relative Levenberg-Marquardt damping
    converged = np.zeros(k, dtype=bool)
    f, gu, gv, huu, huv, hvv = _fgh(o1, o2, u, v)
    for _ in range(_MAX_NEWTON_ITER):
        act = ~converged
        if not act.any():
            break
        scale = np.abs(huu) + np.abs(hvv) + 1e-300
        mu = lam * scale + np.maximum(0.0, -1.5 * _min_eig(huu, huv, hvv))
        a, b, c = huu + mu, huv, hvv + mu
        det = a * c - b * b
        det = np.where(det > 0.0, det, 1e-300)
        du = -(c * gu - b * gv) / det
        dv = -(a * gv - b * gu) / det
        step = np.hypot(du, dv)
        # trust cap: never jump more than half a radian at once
        cap = np.minimum(1.0, 0.5 / np.maximum(step, 1e-300))
        du, dv, step = du * cap, dv * cap, step * cap
        un, vn = u + du, v + dv
        fn = _f_only(o1, o2, un, vn)
        ok = act & (fn <= f)
        tiny = step < _STEP_TOL_RAD
        u = np.where(ok, un, u)
        v = np.where(ok, vn, v)
        lam = np.where(ok, lam * 0.1, np.maximum(lam * 10.0, 1e-6))
        lam = np.where(lam < 1e-12, 0.0, lam)
        converged |= act & tiny
        if ok.any():
            f2, gu2, gv2, huu2, huv2, hvv2 = _fgh(o1.take(ok), o2.take(ok), u[ok], v[ok])
            f[ok], gu[ok], gv[ok], huu[ok], huv[ok], hvv[ok] = f2, gu2, gv2, huu2, huv2, hvv2
    return u, v, converged


def _scipy_refine(o1: _Orbits, o2: _Orbits, u0, v0):
    """Fallback refinement of one start with scipy's bounded quasi-Newton method."""

    def fun(x):
        f, gu, gv = _fgh(o1, o2, np.array([x[0]]), np.array([x[1]]))[:3]
        return f[0], np.array([gu[0], gv[0]])

    b1 = None if o1.closed[0] else (-o1.nu_max_rad[0], o1.nu_max_rad[0])
    b2 = None if o2.closed[0] else (-o2.nu_max_rad[0], o2.nu_max_rad[0])
    res = minimize(
        fun,
        np.array([u0, v0]),
        jac=True,
        method="L-BFGS-B",
        bounds=[b1 or (None, None), b2 or (None, None)],
        options={"ftol": 1e-15, "gtol": 1e-13, "maxiter": 500},
    )
    return res.x[0], res.x[1]


def _wrap(nu):
    return np.pi - np.mod(np.pi - nu, 2.0 * np.pi)  # into (-pi, pi]


def _local_minima(o1: _Orbits, o2: _Orbits, n1: int, n2: int):
    """All refined local minima for a batch of orbit pairs (o2 batch size 1 or M).

    Returns pair index, nu1, nu2 (rad), squared distance, and minimum Hessian eigenvalue
    relative to its trace (for the flat-valley test), one entry per start that ended at a
    genuine local minimum inside the searched domain.
    """
    m = o1.p_au.shape[0]
    g1, g2 = _grid(o1, n1), _grid(o2, n2)
    r1 = _positions(o1, g1)  # (M, N1, 3)
    r2 = _positions(o2, g2)  # (M2, N2, 3)
    f = (
        np.einsum("mik,mik->mi", r1, r1)[:, :, None]
        + np.einsum("mjk,mjk->mj", r2, r2)[:, None, :]
        - 2.0 * np.matmul(r1, np.swapaxes(r2, 1, 2))
    )
    closed2 = np.broadcast_to(o2.closed, (m,))
    mi, ii, jj = _grid_minima(f, o1.closed, closed2)
    if o2.p_au.shape[0] == 1:
        o2 = o2.take(np.zeros(m, dtype=int))
        g2 = np.broadcast_to(g2, (m, g2.shape[1]))
    s1, s2 = o1.take(mi), o2.take(mi)
    u, v, conv = _newton(s1, s2, g1[mi, ii], g2[mi, jj])
    for k in np.nonzero(~conv)[0]:
        u[k], v[k] = _scipy_refine(s1.take([k]), s2.take([k]), u[k], v[k])
    f, gu, gv, huu, huv, hvv = _fgh(s1, s2, u, v)
    scale = np.abs(huu) + np.abs(hvv) + 1e-300
    eig_rel = _min_eig(huu, huv, hvv) / scale
    keep = eig_rel > -_HESS_TOL_REL
    # open orbits: drop points pinned to the edge of the searched range
    edge_tol = 1e-7
    keep &= s1.closed | (np.abs(u) < s1.nu_max_rad - edge_tol)
    keep &= s2.closed | (np.abs(v) < s2.nu_max_rad - edge_tol)
    u = np.where(s1.closed, _wrap(u), u)
    v = np.where(s2.closed, _wrap(v), v)
    return mi[keep], u[keep], v[keep], f[keep], eig_rel[keep], s1.take(keep), s2.take(keep)


def moid(
    q1_au, e1, incl1_deg, node1_deg, peri1_deg, q2_au, e2, incl2_deg, node2_deg, peri2_deg
) -> list[MoidPoint]:
    """All local minima of the distance between two heliocentric orbits, closest first.

    Parameters
    ----------
    q1_au, q2_au : float
        Perihelion distances of orbit 1 and orbit 2, au (> 0).
    e1, e2 : float
        Eccentricities (>= 0; elliptic, parabolic or hyperbolic).
    incl1_deg, incl2_deg : float
        Inclinations to the ecliptic J2000, degrees in [0, 180].
    node1_deg, node2_deg : float
        Longitudes of the ascending node, ecliptic and equinox J2000, degrees.
    peri1_deg, peri2_deg : float
        Arguments of perihelion, degrees. For ``incl = 0`` put the longitude of perihelion in
        ``peri`` and 0 in ``node`` (only their sum matters).

    Returns
    -------
    list of MoidPoint
        Every local minimum found, sorted by distance; the first is the MOID. Minima that
        coincide (within about 1e-7 of the orbit size) are reported once, and so is each flat
        valley of a degenerate pair (coplanar concentric circles). Empty only if no minimum
        lies inside the searched range of an open orbit (e.g. two hyperbolas whose closest
        approach is beyond the distance cut).

    Raises
    ------
    InvalidOrbit
        If ``q <= 0``, ``e < 0``, an inclination outside [0, 180] deg or a non-finite angle.

    Notes
    -----
    Grid search plus damped Newton refinement with analytic derivatives; see the module
    docstring for the method and its limits. On open orbits only ``r <= max(100 au, 10 q)``
    is searched.

    References
    ----------
    Gronchi (2005), Celest. Mech. Dyn. Astr. 93, 295 (the complete algebraic method; this
    function is a numerical search for the same minima).

    Examples
    --------
    Two coplanar circles of radii 1 and 1.5 au are 0.5 au apart everywhere:

    >>> pts = moid(1.0, 0.0, 0.0, 0.0, 0.0, 1.5, 0.0, 0.0, 0.0, 0.0)
    >>> round(pts[0].distance_au, 12)
    0.5

    A circle tilted by 30 deg meets a circle of the same radius at both nodes:

    >>> pts = moid(1.0, 0.0, 30.0, 40.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0)
    >>> len(pts), [round(p.distance_au, 12) for p in pts]
    (2, [0.0, 0.0])
    >>> sorted(round(p.lon1_deg, 6) for p in pts)
    [40.0, 220.0]
    """
    _check_elements("orbit1.", q1_au, e1, incl1_deg)
    _check_elements("orbit2.", q2_au, e2, incl2_deg)
    o1 = _make_orbits(q1_au, e1, incl1_deg, node1_deg, peri1_deg)
    o2 = _make_orbits(q2_au, e2, incl2_deg, node2_deg, peri2_deg)
    if o1.p_au.shape != (1,) or o2.p_au.shape != (1,):
        raise InvalidOrbit("orbit1", "moid() takes scalar elements; use moid_many() for arrays")
    _, u, v, f, eig_rel, s1, s2 = _local_minima(o1, o2, _N_GRID, _N_GRID)
    order = np.argsort(f, kind="stable")
    r1 = _positions(s1, u[:, None])[:, 0, :]
    r2 = _positions(s2, v[:, None])[:, 0, :]
    size_au = max(float(np.max(np.linalg.norm(r1, axis=1), initial=0.0)), 1.0)
    merge_au = _MERGE_TOL_REL * size_au
    kept: list[int] = []
    for k in order:
        dist = np.sqrt(max(f[k], 0.0))
        dup = False
        for j in kept:
            same_points = (
                np.linalg.norm(r1[k] - r1[j]) < merge_au
                and np.linalg.norm(r2[k] - r2[j]) < merge_au
            )
            # a flat valley (singular Hessian) at the same distance is one non-isolated minimum
            same_valley = (
                eig_rel[k] < 1e-6
                and eig_rel[j] < 1e-6
                and abs(dist - np.sqrt(max(f[j], 0.0))) < merge_au
            )
            if same_points or same_valley:
                dup = True
                break
        if not dup:
            kept.append(k)
    out = []
    for k in kept:
        lon1 = float(np.mod(np.degrees(np.arctan2(r1[k, 1], r1[k, 0])), 360.0))
        lon2 = float(np.mod(np.degrees(np.arctan2(r2[k, 1], r2[k, 0])), 360.0))
        out.append(
            MoidPoint(
                distance_au=float(np.sqrt(max(f[k], 0.0))),
                nu1_deg=float(np.degrees(u[k])),
                nu2_deg=float(np.degrees(v[k])),
                r1_au=r1[k].copy(),
                r2_au=r2[k].copy(),
                lon1_deg=lon1,
                lon2_deg=lon2,
            )
        )
    return out


def moid_many(
    q1_au, e1, incl1_deg, node1_deg, peri1_deg, q2_au, e2, incl2_deg, node2_deg, peri2_deg
):
    """Global MOID of many orbits (arrays) against one orbit 2 (scalars), vectorised.

    Parameters
    ----------
    q1_au, e1, incl1_deg, node1_deg, peri1_deg : array_like, broadcastable to shape (M,)
        Elements of the orbits 1, units and frame as in :func:`moid`.
    q2_au, e2, incl2_deg, node2_deg, peri2_deg : float
        Elements of the single orbit 2 (typically Earth's osculating orbit).

    Returns
    -------
    ndarray, shape (M,)
        The MOID of each orbit 1 with orbit 2, au; the same value :func:`moid` gives as the
        distance of its first point (``inf`` where :func:`moid` would return an empty list).

    Raises
    ------
    InvalidOrbit
        As :func:`moid`.

    Notes
    -----
    Works in chunks so that memory stays below a few tens of MB whatever M is.
    """
    _check_elements("orbit1.", np.asarray(q1_au), np.asarray(e1), np.asarray(incl1_deg))
    _check_elements("orbit2.", q2_au, e2, incl2_deg)
    o1 = _make_orbits(q1_au, e1, incl1_deg, node1_deg, peri1_deg)
    o2 = _make_orbits(q2_au, e2, incl2_deg, node2_deg, peri2_deg)
    if o2.p_au.shape != (1,):
        raise InvalidOrbit("orbit2", "moid_many() takes one orbit 2 (scalar elements)")
    m = o1.p_au.shape[0]
    out = np.full(m, np.inf)
    chunk = max(1, 400_000 // (4 * _N_GRID * _N_GRID))
    for start in range(0, m, chunk):
        sel = np.arange(start, min(m, start + chunk))
        mi, _, _, f, _, _, _ = _local_minima(o1.take(sel), o2, _N_GRID, _N_GRID)
        best = np.full(sel.size, np.inf)
        np.minimum.at(best, mi, f)
        out[sel] = np.sqrt(np.maximum(best, 0.0))
    return out
