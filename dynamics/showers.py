"""A small built-in table of established annual meteor showers, with mean orbits derived from
their radiants.

The table (``dynamics/data/showers.json``) holds only observed quantities, each row with its
source: IAU code and number, name, parent body, peak solar longitude (J2000), mean radiant (RA,
Dec J2000) and geocentric speed Vg. :func:`load_showers` derives each shower's mean heliocentric
orbit from them once per process ("radiant-to-orbit" reduction, see :func:`_orbit_from_radiant`)
and :func:`similar_showers` ranks the showers by orbital similarity to a given orbit.

Method of the orbit derivation
------------------------------
1. Earth's heliocentric state at the shower's solar longitude lambda: the date near the year
   2000 (first solution after J2000.0) at which the geometric solar longitude, i.e. the
   ecliptic-J2000 longitude of minus Earth's heliocentric position, equals lambda, found by
   Newton iteration on ``erfa.epv00`` (heliocentric Earth, BCRS equatorial, au and au/day),
   rotated to ecliptic J2000 with :mod:`dynamics.frames`.
2. The meteoroid's geocentric velocity: Vg along the direction *away from* the radiant (the
   radiant is where the meteoroids come from).
3. Its heliocentric state: Earth's position, and Earth's velocity plus the geocentric velocity.
4. Osculating two-body elements about the Sun with mu = GM_SUN_AU3_D2 (angular momentum, node
   vector and eccentricity vector; q = h^2 / (mu (1 + e))).

Approximations, all small next to the rounding of the tabulated radiants (about 1 deg) and
speeds (1-2 km/s): Earth's gravity is ignored (the tabulated Vg and radiant are taken as already
corrected for it and for zenith attraction, as catalogue values are); the meteoroid is placed at
Earth's centre, not at the Earth-Moon barycentre or at the edge of Earth's sphere of influence;
the Sun is treated as the only attractor (no planetary perturbation, heliocentric not barycentric
elements); the orbit is the one of the single mean radiant at the peak, not a mean of individual
meteoroid orbits. By construction the derived orbit has its node at Earth's position, so its
ascending node lies at lambda + 180 deg (meteoroid moving north at Earth) or lambda (moving south).

References
----------
The reduction of a geocentric radiant and speed to a heliocentric orbit is the standard one of
meteor astronomy (citations from memory): Porter, J. G. (1952), Comets and Meteor Streams
(Chapman & Hall); Ceplecha, Z. (1987), Bull. Astron. Inst. Czechosl. 38, 222, whose further
corrections (Earth's rotation and gravity, reducing observed to geocentric values) are not
needed here because the table already holds geocentric values.
"""

import json
from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import NamedTuple

import erfa
import numpy as np

from .constants import GM_SUN_AU3_D2, JD_J2000, KM_S_PER_AU_DAY
from .criteria import OrbitShape, d_d, d_h, d_sh
from .errors import InvalidOrbit
from .frames import equatorial_to_ecliptic, spherical_to_cartesian

__all__ = [
    "D_SH_MAX_DEFAULT",
    "Shower",
    "ShowerMatch",
    "load_showers",
    "similar_showers",
]

#: Default D_SH cut-off for calling an orbit "similar" to a shower's mean orbit.
#: Southworth & Hawkins (1963, Smithson. Contrib. Astrophys. 7, 261) grouped photographic meteor
#: orbits with D_SH < 0.2; Lindblad (1971, Smithson. Contrib. Astrophys. 12, 1) showed the useful
#: cut-off shrinks with sample size and used about 0.2 for a few hundred orbits (from memory). For
#: parent-shower associations 0.2-0.25 is common practice; we take the looser 0.25 because the
#: mean orbits here come from rounded radiants and speeds.
D_SH_MAX_DEFAULT = 0.25

_MU = GM_SUN_AU3_D2
#: Mean motion of the Sun in longitude (deg/day), only the first guess of the Newton iteration;
#: 360 deg / 365.2422 days (tropical year; common practice).
_SUN_RATE_DEG_PER_DAY = 360.0 / 365.2422
#: Geometric solar longitude at J2000.0 (deg), first guess only (Meeus, Astronomical Algorithms,
#: 2nd ed., ch. 25, L0 = 280.46646 deg; from memory).
_SUN_LONGITUDE_AT_J2000_DEG = 280.46646
_NEWTON_ITERATIONS = 8  # converges to < 1e-10 deg in 3-4; fixed count keeps it vectorised


@dataclass(frozen=True)
class Shower:
    """One established annual shower: observed mean values and the orbit derived from them.

    Attributes
    ----------
    code : str
        IAU three-letter code (e.g. ``"LEO"``).
    iau_number : int
        IAU Meteor Data Center number.
    name, parent : str
        Shower name and designation of its parent body.
    solar_longitude_deg : float
        Solar longitude of the peak, geometric, equinox J2000 (deg).
    ra_deg, dec_deg : float
        Mean radiant at the peak, equatorial J2000 (deg).
    vg_km_s : float
        Geocentric speed (km/s), outside Earth's gravity.
    source : str
        Where the observed values come from (and whether from memory).
    q_au, e, incl_deg, node_deg, peri_deg : float
        Heliocentric osculating orbit derived from the above (au, -, deg, deg, deg; ecliptic and
        equinox J2000), see the module docstring for the method.
    """

    code: str
    iau_number: int
    name: str
    parent: str
    solar_longitude_deg: float
    ra_deg: float
    dec_deg: float
    vg_km_s: float
    source: str
    q_au: float
    e: float
    incl_deg: float
    node_deg: float
    peri_deg: float

    @property
    def orbit(self) -> OrbitShape:
        """The derived orbit as an :class:`~dynamics.criteria.OrbitShape`."""
        return OrbitShape(self.q_au, self.e, self.incl_deg, self.node_deg, self.peri_deg)


class ShowerMatch(NamedTuple):
    """A shower and the three D criteria between its mean orbit and a given orbit."""

    shower: Shower
    d_sh: float
    d_d: float
    d_h: float


def _earth_state_at_solar_longitude(solar_longitude_deg):
    """Earth's heliocentric state, ecliptic J2000, when the geometric solar longitude is lambda.

    Parameters
    ----------
    solar_longitude_deg : array_like
        Geometric solar longitude, equinox J2000 (deg).

    Returns
    -------
    t_tdb_jd : ndarray
        TDB Julian date of the first such instant after J2000.0 (2000 Jan 1.5 to 2001 Jan 1).
    r_au, v_au_d : ndarray, shape (..., 3)
        Earth's heliocentric position (au) and velocity (au/day), ecliptic J2000.

    Notes
    -----
    ``erfa.epv00`` (Bretagnon & Francou VSOP87-based series; a few km from 1900 to 2100) gives the
    Earth itself, not the Earth-Moon barycentre. Newton iteration on the longitude, with the
    angular rate from the state itself.
    """
    target = np.asarray(solar_longitude_deg, dtype=float)
    dt_days = np.mod(target - _SUN_LONGITUDE_AT_J2000_DEG, 360.0) / _SUN_RATE_DEG_PER_DAY
    for _ in range(_NEWTON_ITERATIONS):
        r, v = _earth_heliocentric_ecliptic(dt_days)
        lon_deg = np.rad2deg(np.arctan2(-r[..., 1], -r[..., 0]))
        err_deg = np.mod(lon_deg - target + 180.0, 360.0) - 180.0
        rate_deg_d = np.rad2deg(
            (r[..., 0] * v[..., 1] - r[..., 1] * v[..., 0]) / (r[..., 0] ** 2 + r[..., 1] ** 2)
        )
        dt_days = dt_days - err_deg / rate_deg_d
    r, v = _earth_heliocentric_ecliptic(dt_days)
    return JD_J2000 + dt_days, r, v


def _earth_heliocentric_ecliptic(dt_days):
    """Earth's heliocentric position (au) and velocity (au/day), ecliptic J2000, at TDB
    JD_J2000 + dt_days (``erfa.epv00``)."""
    pvh, _ = erfa.epv00(JD_J2000, dt_days)
    return equatorial_to_ecliptic(pvh["p"]), equatorial_to_ecliptic(pvh["v"])


def _elements_from_state(r_au, v_au_d, mu_au3_d2=_MU):
    """Heliocentric two-body elements from a Cartesian state (ecliptic frame).

    Standard relations (e.g. Vallado, Fundamentals of Astrodynamics and Applications, 4th ed.,
    algorithm RV2COE): h = r x v, n = z x h, e_vec = (v x h)/mu - r/|r|, q = h^2 / (mu (1 + e)).

    Returns (q_au, e, incl_deg, node_deg, peri_deg), node and peri in [0, 360). Not valid for
    exactly equatorial (i = 0 or 180) or circular orbits, where node or peri is undefined.
    """
    r = np.asarray(r_au, dtype=float)
    v = np.asarray(v_au_d, dtype=float)
    h = np.cross(r, v)
    h_norm = np.linalg.norm(h, axis=-1)
    node_vec = np.stack([-h[..., 1], h[..., 0], np.zeros_like(h[..., 0])], axis=-1)
    e_vec = np.cross(v, h) / mu_au3_d2 - r / np.linalg.norm(r, axis=-1)[..., None]
    ecc = np.linalg.norm(e_vec, axis=-1)
    q = h_norm**2 / (mu_au3_d2 * (1.0 + ecc))
    incl = np.rad2deg(np.arccos(np.clip(h[..., 2] / h_norm, -1.0, 1.0)))
    node = np.mod(np.rad2deg(np.arctan2(h[..., 0], -h[..., 1])), 360.0)
    n_hat = node_vec / np.linalg.norm(node_vec, axis=-1)[..., None]
    h_hat = h / h_norm[..., None]
    sin_w = np.sum(np.cross(n_hat, e_vec) * h_hat, axis=-1)
    cos_w = np.sum(n_hat * e_vec, axis=-1)
    peri = np.mod(np.rad2deg(np.arctan2(sin_w, cos_w)), 360.0)
    return q, ecc, incl, node, peri


def _orbit_from_radiant(solar_longitude_deg, ra_deg, dec_deg, vg_km_s):
    """Mean heliocentric orbit of a shower from its radiant, Vg and solar longitude.

    Parameters
    ----------
    solar_longitude_deg : array_like
        Geometric solar longitude of the observation, equinox J2000 (deg).
    ra_deg, dec_deg : array_like
        Geocentric radiant, equatorial J2000 (deg).
    vg_km_s : array_like
        Geocentric speed (km/s), outside Earth's gravity.

    Returns
    -------
    q_au, e, incl_deg, node_deg, peri_deg : ndarray
        Heliocentric osculating elements, ecliptic and equinox J2000, broadcast shape.

    Notes
    -----
    The method and its approximations are in the module docstring.
    """
    _, r_earth, v_earth = _earth_state_at_solar_longitude(solar_longitude_deg)
    toward_radiant_ecl = equatorial_to_ecliptic(spherical_to_cartesian(ra_deg, dec_deg))
    vg_au_d = np.asarray(vg_km_s, dtype=float)[..., None] / KM_S_PER_AU_DAY
    v_helio = v_earth - vg_au_d * toward_radiant_ecl
    return _elements_from_state(r_earth, v_helio)


@cache
def load_showers() -> tuple[Shower, ...]:
    """The built-in table of established annual showers, with derived mean orbits.

    Read once per process from the package data ``dynamics/data/showers.json``; the orbits are
    derived from each row's solar longitude, radiant and Vg as described in the module
    docstring.

    Returns
    -------
    tuple of Shower
        In the order of the table.

    Examples
    --------
    >>> leo = next(s for s in load_showers() if s.code == "LEO")
    >>> leo.parent, leo.incl_deg > 90.0
    ('55P/Tempel-Tuttle', True)
    """
    text = resources.files("dynamics").joinpath("data/showers.json").read_text(encoding="utf-8")
    rows = json.loads(text)["showers"]
    lam = np.array([r["solar_longitude_deg"] for r in rows], dtype=float)
    ra = np.array([r["ra_deg"] for r in rows], dtype=float)
    dec = np.array([r["dec_deg"] for r in rows], dtype=float)
    vg = np.array([r["vg_km_s"] for r in rows], dtype=float)
    q, e, incl, node, peri = _orbit_from_radiant(lam, ra, dec, vg)
    return tuple(
        Shower(
            code=row["iau_code"],
            iau_number=int(row["iau_number"]),
            name=row["name"],
            parent=row["parent"],
            solar_longitude_deg=float(lam[k]),
            ra_deg=float(ra[k]),
            dec_deg=float(dec[k]),
            vg_km_s=float(vg[k]),
            source=row["source"],
            q_au=float(q[k]),
            e=float(e[k]),
            incl_deg=float(incl[k]),
            node_deg=float(node[k]),
            peri_deg=float(peri[k]),
        )
        for k, row in enumerate(rows)
    )


def similar_showers(
    q_au: float,
    e: float,
    incl_deg: float,
    node_deg: float,
    peri_deg: float,
    d_sh_max: float = D_SH_MAX_DEFAULT,
) -> list[ShowerMatch]:
    """Built-in showers whose mean orbit lies within D_SH < ``d_sh_max`` of the given orbit.

    Parameters
    ----------
    q_au : float
        Perihelion distance (au).
    e : float
        Eccentricity.
    incl_deg, node_deg, peri_deg : float
        Inclination, longitude of the ascending node and argument of perihelion (deg), ecliptic
        and equinox J2000.
    d_sh_max : float, optional
        Cut-off on the Southworth & Hawkins D (default :data:`D_SH_MAX_DEFAULT` = 0.25; see its
        comment for the source).

    Returns
    -------
    list of ShowerMatch
        ``(shower, d_sh, d_d, d_h)`` tuples with ``d_sh < d_sh_max``, sorted by increasing D_SH.

    Raises
    ------
    InvalidOrbit
        If the orbit is impossible (q <= 0, e < 0, inclination outside [0, 180] deg) or
        ``d_sh_max`` is negative.

    Notes
    -----
    The showers' orbits are single mean orbits derived from rounded radiants (module
    docstring): a parent comet's orbit typically lies at D_SH 0.05-0.2 from its shower, more for
    old streams whose parent's node has moved away from Earth's orbit (1P/Halley).

    Examples
    --------
    The osculating orbit of 55P/Tempel-Tuttle (1998; see tests/test_showers.py for its source):

    >>> [m.shower.code for m in similar_showers(0.9764, 0.9056, 162.49, 235.27, 172.50)]
    ['LEO']
    """
    if not d_sh_max >= 0.0:
        raise InvalidOrbit("d_sh_max", "the D_SH cut-off must be >= 0")
    showers = load_showers()
    table = OrbitShape(
        *(np.array([getattr(s, f) for s in showers]) for f in OrbitShape.__dataclass_fields__)
    )
    given = OrbitShape(q_au, e, incl_deg, node_deg, peri_deg)
    dsh, dd, dh = d_sh(given, table), d_d(given, table), d_h(given, table)
    matches = [
        ShowerMatch(s, float(dsh[k]), float(dd[k]), float(dh[k]))
        for k, s in enumerate(showers)
        if dsh[k] < d_sh_max
    ]
    return sorted(matches, key=lambda m: m.d_sh)
