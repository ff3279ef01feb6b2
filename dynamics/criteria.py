"""Orbit-similarity criteria ("D criteria") between meteoroid and parent-body orbits.

Three published distance functions in the five-dimensional space of orbit shape and
orientation (q, e, i, Omega, omega), all in the ecliptic and equinox J2000:

- :func:`d_sh`, Southworth & Hawkins (1963);
- :func:`d_d`, Drummond (1981);
- :func:`d_h`, Jopek (1993), the "hybrid" of the two.

Each function takes two orbits. An orbit is any object with the attributes ``q_au``, ``e``,
``incl_deg``, ``node_deg`` and ``peri_deg`` (an :class:`OrbitShape`, a
:class:`dynamics.showers.Shower`, ...) or a mapping with those keys. Each attribute may be a
scalar or an array; the two orbits broadcast against each other with the usual numpy rules, so one
call compares one orbit with many, or many pairs element by element.

The perihelion time, epoch and period do not enter any of the criteria: they compare where and how
an orbit lies, not where the body is on it.

Limits of validity (all three): the criteria are heuristics for grouping orbits, not metrics
with a probabilistic meaning; their thresholds depend on the sample size and on the criterion
(Lindblad 1971; Jopek 1993). Near-circular (e -> 0) or near-ecliptic (i -> 0 or 180 deg)
orbits have ill-defined omega or Omega; the criteria stay finite there but weigh an angle that
carries no information.

References
----------
Southworth, R. B. & Hawkins, G. S. (1963), Statistics of meteor streams, Smithson. Contrib.
Astrophys. 7, 261.
Drummond, J. D. (1981), A test of comet and meteor shower associations, Icarus 45, 545.
Jopek, T. J. (1993), Remarks on the meteor orbital similarity D-criterion, Icarus 106, 603.
"""

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InvalidOrbit

__all__ = ["OrbitShape", "d_d", "d_h", "d_sh"]

_FIELDS = ("q_au", "e", "incl_deg", "node_deg", "peri_deg")
#: cos(I21/2) below which two orbital planes count as exactly opposite (no mutual node); 1e-12
#: is 10^4 times the rounding of cos(pi/2) in double precision (about 6e-17), i.e. I21 within
#: 2e-12 rad of 180 deg.
_DEGENERATE_PLANES = 1e-12


@dataclass(frozen=True)
class OrbitShape:
    """Size, shape and orientation of a heliocentric orbit (no position on it).

    Attributes
    ----------
    q_au : float or array_like
        Perihelion distance (au), > 0.
    e : float or array_like
        Eccentricity, >= 0 (hyperbolic orbits allowed).
    incl_deg : float or array_like
        Inclination to the ecliptic J2000 (deg), in [0, 180].
    node_deg : float or array_like
        Longitude of the ascending node, equinox J2000 (deg); any real value (used modulo 360).
    peri_deg : float or array_like
        Argument of perihelion (deg); any real value (used modulo 360).
    """

    q_au: ArrayLike
    e: ArrayLike
    incl_deg: ArrayLike
    node_deg: ArrayLike
    peri_deg: ArrayLike


def _orbit_arrays(orbit, name: str) -> tuple[NDArray[np.float64], ...]:
    """Read (q_au, e, incl_deg, node_deg, peri_deg) from an object or mapping as float arrays."""
    try:
        if isinstance(orbit, Mapping):
            values = [orbit[f] for f in _FIELDS]
        else:
            values = [getattr(orbit, f) for f in _FIELDS]
    except (KeyError, AttributeError) as exc:
        raise InvalidOrbit(name, f"needs {', '.join(_FIELDS)} ({exc})") from None
    q, e, i, node, peri = (np.asarray(v, dtype=float) for v in values)
    if np.any(~(q > 0.0)):
        raise InvalidOrbit(f"{name}.q_au", "perihelion distance must be > 0 au")
    if np.any(~(e >= 0.0)):
        raise InvalidOrbit(f"{name}.e", "eccentricity must be >= 0")
    if np.any(~((i >= 0.0) & (i <= 180.0))):
        raise InvalidOrbit(f"{name}.incl_deg", "inclination must be in [0, 180] deg")
    return q, e, np.deg2rad(i), np.deg2rad(node), np.deg2rad(peri)


def _wrap_pi(angle_rad):
    """Reduce angles (rad) to [-pi, pi)."""
    return np.mod(angle_rad + np.pi, 2.0 * np.pi) - np.pi


def _plane_chord_sq(i1, i2, dnode):
    """(2 sin(I21/2))^2, with I21 the angle between the two orbital planes (radians in).

    Southworth & Hawkins (1963), the I21 term of their D:
    (2 sin(I21/2))^2 = (2 sin((i2 - i1)/2))^2 + sin i1 sin i2 (2 sin((Omega2 - Omega1)/2))^2,
    which equals 2 - 2 cos I21 with cos I21 = cos i1 cos i2 + sin i1 sin i2 cos(Omega2 - Omega1).
    """
    return (2.0 * np.sin(0.5 * (i2 - i1))) ** 2 + np.sin(i1) * np.sin(i2) * (
        2.0 * np.sin(0.5 * dnode)
    ) ** 2


def _pi21_sh(i1, i2, dnode, dperi):
    """Southworth & Hawkins' Pi21: difference of the longitudes of perihelion measured from the
    mutual node of the two orbits (rad).

    Pi21 = omega2 - omega1 + 2 arcsin[cos((i2 + i1)/2) sin((Omega2 - Omega1)/2) sec(I21/2)].

    ``dnode`` must already be reduced to [-pi, pi): that is the usual convention of reversing the
    sign of the arcsin term when |Omega2 - Omega1| > 180 deg (for nodes in [0, 360) deg), since
    sin((dOmega - 2 pi)/2) = -sin(dOmega/2).

    The arcsin is evaluated as an arctangent, which keeps full precision where the arcsin
    argument nears +-1. With S = (i1 + i2)/2, D = (i2 - i1)/2 and sin i1 sin i2 =
    cos^2 D - cos^2 S, the I21 formula gives cos^2(I21/2) = cos^2 D cos^2(dOmega/2)
    + cos^2 S sin^2(dOmega/2), hence
    arcsin[cos S sin(dOmega/2) / cos(I21/2)] = arctan2(cos S sin(dOmega/2), cos D cos(dOmega/2))
    for |dOmega| <= pi (where cos D cos(dOmega/2) >= 0). The only undefined case is two
    coplanar orbits moving in opposite senses (I21 = 180 deg), where both arguments vanish and
    there is no mutual node: the term is then 0, and D jumps by up to the Pi21 term when
    crossing that configuration.
    """
    half_dnode = 0.5 * dnode
    y = np.cos(0.5 * (i2 + i1)) * np.sin(half_dnode)
    x = np.cos(0.5 * (i2 - i1)) * np.cos(half_dnode)
    # Both vanish (up to rounding of cos(pi/2) ~ 6e-17) only at I21 = 180 deg.
    term = np.where(np.hypot(x, y) > _DEGENERATE_PLANES, np.arctan2(y, x), 0.0)
    return dperi + 2.0 * term


def _perihelion_angle(i1, i2, node1, node2, peri1, peri2):
    """Angle theta21 between the perihelion directions of the two orbits (rad).

    Drummond (1981): the perihelion points have ecliptic latitude beta = arcsin(sin i sin omega)
    and longitude lambda = Omega + arctan(cos i tan omega) (plus 180 deg when cos omega < 0), and
    cos theta21 = sin b1 sin b2 + cos b1 cos b2 cos(l2 - l1). We evaluate the same angle by the
    haversine form, which keeps full precision for nearly equal orbits.
    """
    b1 = np.arcsin(np.clip(np.sin(i1) * np.sin(peri1), -1.0, 1.0))
    b2 = np.arcsin(np.clip(np.sin(i2) * np.sin(peri2), -1.0, 1.0))
    l1 = node1 + np.arctan2(np.cos(i1) * np.sin(peri1), np.cos(peri1))
    l2 = node2 + np.arctan2(np.cos(i2) * np.sin(peri2), np.cos(peri2))
    hav = np.sin(0.5 * (b2 - b1)) ** 2 + np.cos(b1) * np.cos(b2) * np.sin(0.5 * (l2 - l1)) ** 2
    return 2.0 * np.arcsin(np.sqrt(np.clip(hav, 0.0, 1.0)))


def d_sh(orbit1, orbit2):
    """Southworth & Hawkins (1963) orbit-similarity criterion D_SH (dimensionless).

    D_SH^2 = (e2 - e1)^2 + (q2 - q1)^2 + (2 sin(I21/2))^2
             + ((e1 + e2)/2)^2 (2 sin(Pi21/2))^2,

    with q in au, I21 the angle between the orbital planes,
    (2 sin(I21/2))^2 = (2 sin((i2 - i1)/2))^2 + sin i1 sin i2 (2 sin((Omega2 - Omega1)/2))^2,
    and Pi21 = omega2 - omega1 + 2 arcsin[cos((i2 + i1)/2) sin((Omega2 - Omega1)/2) sec(I21/2)],
    where the arcsin term changes sign when |Omega2 - Omega1| > 180 deg (done here by reducing
    Omega2 - Omega1 to [-180, 180) deg).

    Parameters
    ----------
    orbit1, orbit2 : OrbitShape or object or mapping
        Orbits with ``q_au`` (au), ``e``, ``incl_deg``, ``node_deg``, ``peri_deg`` (deg, ecliptic
        and equinox J2000), scalars or arrays broadcasting against each other.

    Returns
    -------
    numpy.float64 or ndarray
        D_SH, >= 0, with the broadcast shape of the inputs.

    Raises
    ------
    InvalidOrbit
        A field is missing, or q <= 0, e < 0, or the inclination is outside [0, 180] deg.

    Notes
    -----
    The q term carries the unit au: D_SH is meant for orbits with q of order 1 au (Earth-crossing
    meteoroids). It is symmetric in the two orbits and depends on the nodes only through their
    difference. The arcsin of Pi21 is evaluated in an exactly equivalent arctangent form that
    keeps full precision when its argument nears +-1. For two coplanar orbits moving in opposite
    senses (I21 = 180 deg) there is no mutual node: the arcsin term is then taken as 0, and D_SH
    is discontinuous there (the same holds for :func:`d_h`).

    References
    ----------
    Southworth & Hawkins (1963), Smithson. Contrib. Astrophys. 7, 261: their equations for D,
    I21 and Pi21; the sign convention of the arcsin term as restated by Jopek (1993), Icarus
    106, 603.

    Examples
    --------
    Two orbits differing only in q by 0.1 au are 0.1 apart:

    >>> a = OrbitShape(1.0, 0.9, 160.0, 235.0, 170.0)
    >>> b = OrbitShape(1.1, 0.9, 160.0, 235.0, 170.0)
    >>> round(float(d_sh(a, b)), 12)
    0.1
    """
    q1, e1, i1, n1, w1 = _orbit_arrays(orbit1, "orbit1")
    q2, e2, i2, n2, w2 = _orbit_arrays(orbit2, "orbit2")
    dnode = _wrap_pi(n2 - n1)
    chord_sq = _plane_chord_sq(i1, i2, dnode)
    pi21 = _pi21_sh(i1, i2, dnode, w2 - w1)
    d2 = (
        (e2 - e1) ** 2
        + (q2 - q1) ** 2
        + chord_sq
        + (0.5 * (e1 + e2)) ** 2 * (2.0 * np.sin(0.5 * pi21)) ** 2
    )
    return np.sqrt(d2)


def d_d(orbit1, orbit2):
    """Drummond (1981) orbit-similarity criterion D_D (dimensionless).

    D_D^2 = ((e2 - e1)/(e2 + e1))^2 + ((q2 - q1)/(q2 + q1))^2 + (I21/180 deg)^2
            + ((e1 + e2)/2)^2 (theta21/180 deg)^2,

    with I21 the angle between the orbital planes and theta21 the angle between the perihelion
    directions (both in degrees here, so the last two terms are in units of half-turns).

    Parameters
    ----------
    orbit1, orbit2 : OrbitShape or object or mapping
        As for :func:`d_sh`.

    Returns
    -------
    numpy.float64 or ndarray
        D_D, >= 0.

    Raises
    ------
    InvalidOrbit
        As for :func:`d_sh`.

    Notes
    -----
    The eccentricity and q terms are relative differences, so D_D is scale-free; the e term is
    taken as 0 when both orbits are circular (e1 = e2 = 0). Drummond's cut-off for an
    association is much smaller than D_SH's (about 0.105 in his paper, from memory).

    References
    ----------
    Drummond (1981), Icarus 45, 545: his D' and the definitions of I21 and theta21 with it.
    """
    q1, e1, i1, n1, w1 = _orbit_arrays(orbit1, "orbit1")
    q2, e2, i2, n2, w2 = _orbit_arrays(orbit2, "orbit2")
    dnode = _wrap_pi(n2 - n1)
    chord_sq = _plane_chord_sq(i1, i2, dnode)
    i21 = 2.0 * np.arcsin(np.sqrt(np.clip(0.25 * chord_sq, 0.0, 1.0)))
    theta21 = _perihelion_angle(i1, i2, n1, n2, w1, w2)
    e_sum = e1 + e2
    e_rel = np.divide(e2 - e1, e_sum, out=np.zeros(np.broadcast(e1, e2).shape), where=e_sum > 0.0)
    d2 = (
        e_rel**2
        + ((q2 - q1) / (q2 + q1)) ** 2
        + (i21 / np.pi) ** 2
        + (0.5 * e_sum) ** 2 * (theta21 / np.pi) ** 2
    )
    return np.sqrt(d2)


def d_h(orbit1, orbit2):
    """Jopek (1993) hybrid orbit-similarity criterion D_H (dimensionless).

    D_H^2 = (e2 - e1)^2 + ((q2 - q1)/(q2 + q1))^2 + (2 sin(I21/2))^2
            + ((e1 + e2)/2)^2 (2 sin(Pi21/2))^2:

    Southworth & Hawkins' D with their q term replaced by Drummond's relative one; I21 and Pi21
    (with its sign convention) exactly as in :func:`d_sh`.

    Parameters
    ----------
    orbit1, orbit2 : OrbitShape or object or mapping
        As for :func:`d_sh`.

    Returns
    -------
    numpy.float64 or ndarray
        D_H, >= 0.

    Raises
    ------
    InvalidOrbit
        As for :func:`d_sh`.

    References
    ----------
    Jopek (1993), Icarus 106, 603: the hybrid criterion D_H.
    """
    q1, e1, i1, n1, w1 = _orbit_arrays(orbit1, "orbit1")
    q2, e2, i2, n2, w2 = _orbit_arrays(orbit2, "orbit2")
    dnode = _wrap_pi(n2 - n1)
    chord_sq = _plane_chord_sq(i1, i2, dnode)
    pi21 = _pi21_sh(i1, i2, dnode, w2 - w1)
    d2 = (
        (e2 - e1) ** 2
        + ((q2 - q1) / (q2 + q1)) ** 2
        + chord_sq
        + (0.5 * (e1 + e2)) ** 2 * (2.0 * np.sin(0.5 * pi21)) ** 2
    )
    return np.sqrt(d2)
