"""Where meteoroids cross Earth's path: closest approaches, miss distances, radiants.

For each simulated meteoroid near a target time trailcast takes its heliocentric osculating orbit
(under the reduced solar gravity mu (1 - beta) that radiation pressure leaves) from the output
snapshot nearest to its passage of the chosen node, and from that orbit finds, in three
dimensions, where the meteoroid's path crosses the plane of the path of Earth's centre (DE423
Earth, not the Earth-Moon barycentre) and the point of Earth's path closest to that crossing
(:func:`closest_approaches`; the node is only the first guess: Earth is up to ~700 km off the
J2000 ecliptic, which matters most for low-inclination streams):

- the time ``t_cross`` the meteoroid crosses, and the crossing's heliocentric distance and
  longitude;
- the time ``t_earth`` at which Earth is closest to the crossing, and the signed **miss
  distance**: the 3-D distance between them, positive when the meteoroid passes outside
  Earth's path (farther from the Sun);
- its geocentric velocity v_g = v_meteoroid - v_earth at that moment, the **radiant** (the
  direction opposite to v_g, RA/Dec J2000), Vg and V_inf = sqrt(Vg^2 + v_esc^2).

Earth's gravity is neglected in the geometry (it changes a meteoroid's path by far less than the
width of a trail over the hours of an encounter) and in Vg, which is therefore the geocentric
speed before gravitational acceleration, as meteor catalogues quote it.
"""

from dataclasses import dataclass

import numpy as np

from .constants import EARTH_ESCAPE_KM_S, GM_SUN_AU3_D2, KM_S_PER_AU_DAY
from .ephemeris import heliocentric_state
from .frames import ecliptic_to_radec
from .orbits import state_from_true_anomaly, state_to_elements
from .solar_longitude import earth_heliocentric_longitude_deg, solar_longitude_deg

NODES = ("ascending", "descending")


@dataclass(frozen=True)
class Crossings:
    """Node crossings of meteoroids and Earth's passage of the same longitudes (arrays (n,)).

    Times are TDB JD; ``solar_longitude_deg`` is the geometric J2000 solar longitude at
    ``t_earth_tdb_jd``. NaN where a particle has no state (not released, or unbound).
    """

    t_cross_tdb_jd: np.ndarray
    t_earth_tdb_jd: np.ndarray
    node_longitude_deg: np.ndarray
    r_node_au: np.ndarray
    miss_distance_au: np.ndarray
    solar_longitude_deg: np.ndarray
    ra_deg: np.ndarray
    dec_deg: np.ndarray
    vg_km_s: np.ndarray
    vinf_km_s: np.ndarray
    vz_au_d: np.ndarray  # meteoroid speed across the crossing plane (au/day), see below

    def take(self, idx) -> "Crossings":
        """The crossings of the meteoroids ``idx`` (indices or a boolean mask)."""
        return Crossings(*(getattr(self, f)[idx] for f in self.__dataclass_fields__))


# The crossing plane is the osculating plane of Earth's path at Earth's closest point (it holds
# Earth's path exactly, as the J2000 ecliptic does only approximately). ``vz_au_d`` is the
# meteoroid's heliocentric speed through it: the flux of meteoroids through the plane, divided
# by it, is their number density (dynamics.activity).

#: Convention string for output metadata.
MISS_DISTANCE_CONVENTION = (
    "signed 3-D distance (au) from the point where the meteoroid's osculating path crosses the "
    "plane of Earth's path (osculating plane of Earth's centre, DE423) to the closest point of "
    "Earth's path; positive = outside Earth's path (farther from the Sun); Earth's time is when "
    "its centre is at that closest point"
)
#: Newton iterations of the crossing search (converges to < 1 m in 3-4 from the node; 6 for
#: margin).
CLOSEST_APPROACH_ITERATIONS = 6
#: Largest Gauss-Newton step in Earth's time (days) and the meteoroid's true anomaly (deg): keeps
#: paths that are nearly parallel near Earth (low-inclination, tangent orbits) from jumping to a
#: far minimum; numerical safeguard, no source.
MAX_STEP_DAYS = 2.0
MAX_STEP_DEG = 2.0
#: Snapshot-particle pairs converted to elements in one vectorised call by
#: :func:`predicted_crossings` (bounds the temporary arrays to a few tens of MB; no source).
CROSSING_BLOCK_PAIRS = 100_000


def elements_under_radiation(r_au, v_au_d, t_tdb_jd, beta):
    """Osculating heliocentric elements of particles moving under mu (1 - beta).

    Uses the exact scaling v -> v / sqrt(1 - beta): the conic's shape and orientation under
    mu (1 - beta) with velocity v equal those under mu with that scaled velocity, and times from
    perihelion stretch by 1 / sqrt(1 - beta). Returns (q, e, incl, node, peri, tp) arrays.
    """
    s = np.sqrt(1.0 - np.asarray(beta, dtype=float))
    el = state_to_elements(r_au, np.asarray(v_au_d) / s[..., None], t_tdb_jd, GM_SUN_AU3_D2)
    t = np.asarray(t_tdb_jd, dtype=float)
    tp = t - (t - np.asarray(el.tp_tdb_jd)) / s
    period = np.asarray(el.period_days) / s
    return el, tp, period


def _time_from_perihelion(q, e, incl, node, peri, nu_deg, scale):
    """Time from perihelion to true anomaly nu (days), for mu (1 - beta) = mu scale^2."""
    r, v = state_from_true_anomaly(q, e, incl, node, peri, nu_deg, GM_SUN_AU3_D2)
    el = state_to_elements(r, v, 0.0, GM_SUN_AU3_D2)
    return -np.asarray(el.tp_tdb_jd) / scale, r, v * scale[..., None]


def earth_passage_tdb(longitude_deg, t_guess_tdb_jd, iterations=4):
    """When Earth's heliocentric ecliptic longitude (geometric, J2000) equals ``longitude_deg``,
    near ``t_guess`` (Newton iteration on DE423; converges to < 0.01 s in 3 steps)."""
    t = np.array(t_guess_tdb_jd, dtype=float, copy=True)
    lon = np.asarray(longitude_deg, dtype=float)
    for _ in range(iterations):
        d = (lon - earth_heliocentric_longitude_deg(t) + 180.0) % 360.0 - 180.0
        t = t + d / 0.9856  # deg/day; Earth's mean motion; converges since rate varies < 4 %
    return t


def predicted_crossings(snapshots, beta, node: str) -> dict:
    """Each particle's node crossing as predicted by its osculating orbit (under mu (1 - beta))
    at the snapshot nearest that prediction (the earliest of equally near ones).

    Returns arrays (n,) keyed ``q``, ``e``, ``i``, ``node``, ``peri`` (that snapshot's
    elements), ``tc`` (the predicted crossing, TDB JD) and ``P`` (period, days); NaN for a
    particle never present.
    """
    beta = np.asarray(beta, dtype=float)
    t_out = snapshots.t_tdb_jd
    m, n = len(t_out), len(beta)
    # All (snapshot, particle) pairs at once, in blocks of snapshots: one vectorised call per
    # block, not one per snapshot (numpy's per-call cost dominated the search before).
    scale = np.sqrt(1.0 - beta)
    nan = np.full(n, np.nan)
    best_gap = np.full(n, np.inf)
    best = {k: nan.copy() for k in ("q", "e", "i", "node", "peri", "tc", "P")}
    step = max(1, CROSSING_BLOCK_PAIRS // max(n, 1))
    for j0 in range(0, m, step):
        r, v = snapshots.r_au[j0 : j0 + step], snapshots.v_au_d[j0 : j0 + step]
        jj, ii = np.nonzero(np.all(np.isfinite(r), axis=-1))
        if len(jj) == 0:
            continue
        t_j = t_out[j0 + jj]
        el, tp, period = elements_under_radiation(r[jj, ii], v[jj, ii], t_j, beta[ii])
        bound = np.asarray(el.e) < 1.0
        nu_node = (
            -np.asarray(el.peri_deg) if node == "ascending" else 180.0 - np.asarray(el.peri_deg)
        )
        dt_node, _, _ = _time_from_perihelion(
            np.asarray(el.q_au),
            np.asarray(el.e),
            np.asarray(el.incl_deg),
            np.asarray(el.node_deg),
            np.asarray(el.peri_deg),
            nu_node,
            scale[ii],
        )
        tc = tp + dt_node
        # the crossing of this revolution nearest the snapshot
        tc = np.where(bound, tc - period * np.round((tc - t_j) / np.where(bound, period, 1.0)), tc)
        gap = np.abs(tc - t_j)
        gap = np.where(np.isnan(gap), np.inf, gap)
        # per particle, its nearest pair in this block (pairs come in snapshot order, so a
        # stable sort on the gap keeps the earliest of equal ones first)
        order = np.lexsort((jj, gap, ii))
        first = order[np.r_[True, ii[order][1:] != ii[order][:-1]]]
        better = gap[first] < best_gap[ii[first]]
        pick = first[better]
        sel = ii[pick]
        best_gap[sel] = gap[pick]
        for key, val in (
            ("q", el.q_au),
            ("e", el.e),
            ("i", el.incl_deg),
            ("node", el.node_deg),
            ("peri", el.peri_deg),
            ("tc", tc),
            ("P", period),
        ):
            best[key][sel] = np.asarray(val)[pick]
    return best


def node_crossings(snapshots, beta, node: str) -> Crossings:
    """Node crossings of particles from their output snapshots.

    Parameters
    ----------
    snapshots : dynamics.nbody.Snapshots
        Heliocentric states at output times (m, n, 3).
    beta : array (n,)
        Radiation-pressure parameter of each particle.
    node : {"ascending", "descending"}
        Which node of each meteoroid orbit to use (the one near Earth's orbit).

    Returns
    -------
    Crossings
    """
    if node not in NODES:
        raise ValueError(f"node must be one of {NODES}")
    beta = np.asarray(beta, dtype=float)
    t_out = snapshots.t_tdb_jd
    m, n = len(t_out), len(beta)
    nan = np.full(n, np.nan)
    if n == 0 or m == 0:
        return Crossings(*(nan.copy() for _ in range(11)))

    scale = np.sqrt(1.0 - beta)
    best = predicted_crossings(snapshots, beta, node)
    have = np.isfinite(best["tc"])
    out = {
        k: nan.copy()
        for k in ("tc", "te", "lon", "rn", "miss", "sl", "ra", "dec", "vg", "vinf", "vz")
    }
    keys = ("tc", "te", "lon", "rn", "miss", "sl", "ra", "dec", "vg", "vinf", "vz")
    if not np.any(have):
        return Crossings(*(out[k] for k in keys))
    q, e, i, om, w = (best[k][have] for k in ("q", "e", "i", "node", "peri"))
    nu_node = -w if node == "ascending" else 180.0 - w
    ca = closest_approaches(q, e, i, om, w, nu_node, scale[have], best["tc"][have])
    r_m, v_m, te, tc, r_e, v_e, miss, n_plane = ca
    lon = np.mod(np.rad2deg(np.arctan2(r_m[:, 1], r_m[:, 0])), 360.0)
    vg = (v_m - v_e) * KM_S_PER_AU_DAY
    ra, dec = ecliptic_to_radec(-vg)
    vg_mag = np.linalg.norm(vg, axis=-1)
    out["tc"][have] = tc
    out["te"][have] = te
    out["lon"][have] = lon
    out["rn"][have] = np.linalg.norm(r_m, axis=-1)
    out["miss"][have] = miss
    out["sl"][have] = solar_longitude_deg(te)
    out["ra"][have] = ra
    out["dec"][have] = dec
    out["vg"][have] = vg_mag
    out["vinf"][have] = np.sqrt(vg_mag**2 + EARTH_ESCAPE_KM_S**2)
    out["vz"][have] = np.abs(np.sum(v_m * n_plane, axis=-1))
    return Crossings(*(out[k] for k in keys))


def closest_approaches(q, e, incl, node, peri, nu0_deg, scale, t_nu0_tdb_jd):
    """Where meteoroid paths cross the plane of Earth's path, and Earth's closest point to that.

    The plane of Earth's path is the osculating plane of Earth's centre (DE423) at the moment,
    spanned by its heliocentric position and velocity: Earth lies in it exactly, which the J2000
    ecliptic (z = 0) does not (up to ~700 km). Newton iteration on (true anomaly of the
    meteoroid, time of Earth) from the node guess (``nu0_deg``; Earth at the node's longitude)
    solves: the meteoroid's point lies in Earth's plane, and Earth is at the point of its path
    closest to it. The distance between the two is then a 3-D distance, in that plane.

    Why the crossing point and not the closest approach of the two paths as lines: over the
    few hours of an encounter meteoroids of a thin trail cross at positions and times that are
    uncorrelated across it (domain notes, section 6b); the density Earth meets is that of the
    crossings near its own path, so the peak is when Earth passes them. Closest points of lines
    would shift every meteoroid by an amount proportional to its own miss distance (35 min for
    a Leonid meteoroid 0.0007 au outside Earth's path) and bias the peak by the trail's offset.

    Parameters
    ----------
    q, e, incl, node, peri : arrays (n,)
        Osculating elements (au, deg) of the scaled-velocity conic.
    nu0_deg : array (n,)
        True anomaly of the first guess (the node).
    scale : array (n,)
        sqrt(1 - beta): velocities scale by it, times from perihelion by its inverse.
    t_nu0_tdb_jd : array (n,)
        When each meteoroid passes ``nu0`` (TDB JD).

    Returns
    -------
    r_m, v_m : arrays (n, 3)
        Meteoroid's heliocentric position and velocity where it crosses Earth's plane.
    t_earth, t_cross : arrays (n,)
        When Earth's centre is closest to that point, and when the meteoroid is there (TDB JD).
    r_e, v_e : arrays (n, 3)
        Earth's heliocentric state at ``t_earth``.
    miss_au : array (n,)
        Signed distance from Earth's path (positive: outside Earth's, farther from the Sun).
    normal : array (n, 3)
        Unit normal of Earth's plane at ``t_earth``.
    """
    nu = np.asarray(nu0_deg, dtype=float).copy()
    r0, _ = state_from_true_anomaly(q, e, incl, node, peri, nu, GM_SUN_AU3_D2)
    lon0 = np.rad2deg(np.arctan2(r0[:, 1], r0[:, 0]))
    t = earth_passage_tdb(lon0, t_nu0_tdb_jd)
    for _ in range(CLOSEST_APPROACH_ITERATIONS):
        r_m, v_m = state_from_true_anomaly(q, e, incl, node, peri, nu, GM_SUN_AU3_D2)
        r_e, v_e = heliocentric_state("earth", t)
        n = _unit(np.cross(r_e, v_e))
        d = r_m - r_e
        speed = np.linalg.norm(v_m, axis=-1)
        u = v_m / speed[:, None]
        # move along the meteoroid's path into Earth's plane: n.(d + u ds) = 0
        nu_dot = np.sum(n * u, axis=-1)
        ok = np.abs(nu_dot) > 1e-6  # paths (nearly) within Earth's plane: keep the node
        ds = np.where(ok, -np.sum(n * d, axis=-1) / np.where(ok, nu_dot, 1.0), 0.0)
        # then move Earth to the point of its path closest to the new crossing point
        vv = np.sum(v_e * v_e, axis=-1)
        dt = np.sum((d + u * ds[:, None]) * v_e, axis=-1) / vv
        # arc length -> true anomaly: d(nu)/ds = h / (r^2 |v|) (two-body, same conic)
        h = np.linalg.norm(np.cross(r_m, v_m), axis=-1)
        rn = np.linalg.norm(r_m, axis=-1)
        nu = nu + np.clip(np.rad2deg(ds * h / (rn * rn * speed)), -MAX_STEP_DEG, MAX_STEP_DEG)
        t = t + np.clip(dt, -MAX_STEP_DAYS, MAX_STEP_DAYS)
    r_m, v_m = state_from_true_anomaly(q, e, incl, node, peri, nu, GM_SUN_AU3_D2)
    r_e, v_e = heliocentric_state("earth", t)
    d = r_m - r_e
    sign = np.sign(np.sum(d * r_e, axis=-1))
    miss = np.linalg.norm(d, axis=-1) * np.where(sign == 0, 1.0, sign)
    s = np.asarray(scale, dtype=float)
    dt_nu, _, _ = _time_from_perihelion(q, e, incl, node, peri, nu, s)
    dt_nu0, _, _ = _time_from_perihelion(q, e, incl, node, peri, np.asarray(nu0_deg), s)
    t_cross = np.asarray(t_nu0_tdb_jd) + (dt_nu - dt_nu0)
    return r_m, v_m * s[:, None], t, t_cross, r_e, v_e, miss, _unit(np.cross(r_e, v_e))


def _unit(v):
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def node_of_orbit(q_au, e, incl_deg, node_deg, peri_deg, which: str):
    """Heliocentric distance (au) and longitude (deg) of an orbit's ascending/descending node
    (NaN distance where an open orbit has no such node)."""
    w = np.deg2rad(peri_deg)
    cos_nu = np.cos(-w) if which == "ascending" else np.cos(np.pi - w)
    denom = 1.0 + e * cos_nu
    r = np.where(denom > 0, q_au * (1.0 + e) / np.where(denom > 0, denom, 1.0), np.nan)
    lon = np.mod(node_deg + (0.0 if which == "ascending" else 180.0), 360.0)
    return r, lon


def circular_median_radec(ra_deg, dec_deg):
    """Mean direction of a set of radiants (deg): normalised vector mean (robust for tight sets)."""
    ra, dec = np.deg2rad(ra_deg), np.deg2rad(dec_deg)
    v = np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)], -1)
    m = np.nanmean(v, axis=0)
    return float(np.mod(np.rad2deg(np.arctan2(m[1], m[0])), 360.0)), float(
        np.rad2deg(np.arcsin(m[2] / np.linalg.norm(m)))
    )
