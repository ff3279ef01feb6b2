"""Quick-look geometry of a parent orbit: MOID, nodes, theoretical radiant, similar showers.

The cheap first look a screener takes before any dust-trail simulation: how close the parent's
orbit comes to Earth's orbit (every local minimum of the distance, see :mod:`dynamics.moid`), where
its nodes lie relative to Earth's orbit and when Earth passes them, from which radiant and at what
speed meteoroids moving on the parent's orbit would arrive, and which established showers have a
similar orbit. Everything is two-body geometry: no integration, no ejection model.

Conventions (also written into :meth:`GeometryResult.to_json` under ``"conventions"``)
-------------------------------------------------------------------------------------
- Frame: heliocentric ecliptic and equinox J2000; radiants as RA, Dec equatorial J2000.
- Units: au, km/s, degrees; times UTC (ISO 8601, ``Z``) at the edges, TDB inside.
- Solar longitude: geometric (no aberration), equinox J2000, for Earth's centre; Earth's
  heliocentric longitude is lambda_sun + 180 deg.
- **Earth's orbit** is the osculating heliocentric two-body ellipse of the *Earth-Moon barycentre*
  (EMB) at the parent's epoch, from DE423 (:mod:`dynamics.ephemeris`), with
  mu = GM_sun + GM_EMB (DE423 values). The barycentre, not Earth itself: Earth circles the
  barycentre at about 12.5 m/s, which changes its *osculating* semi-major axis by about
  8e-4 au, so Earth's own osculating ellipse strays from the path Earth actually follows by up
  to ~1e-3 au half an orbit away (for 55P/Tempel-Tuttle the MOID moves by 4e-4 au); the
  barycentre's osculating ellipse stays within the lunar wobble (3e-5 au) of Earth's path over
  the months that matter. Published Earth MOIDs are normally computed with the barycentre's
  orbit too. The same ellipse is used for the MOID, the node miss distances and Earth's velocity
  in the radiant.
- Parent epochs outside DE423 (1799-12-16 to 2200-02-01 TDB): Earth's orbit falls back to the
  mean J2000 elements of the Earth-Moon barycentre (:data:`EARTH_MEAN_J2000`), and a note says
  so; Earth's perihelion then drifts by about 0.3 deg per century from the true one, moving a
  MOID by up to ~1e-3 au per millennium from J2000.

Theoretical radiant: the MOID-point translation method
------------------------------------------------------
A meteoroid moving exactly on the parent's orbit meets Earth only if the MOID is zero. To get a
radiant for a non-intersecting orbit the meteoroid's orbit must be changed so that it meets
Earth's; published procedures for this (changing q, changing omega, rotating the orbit about its
line of apsides, ...) are compared by Neslušan, Svoreň & Porubčan (1998, A&A 331, 411; citation
from memory). The procedures that move a node onto Earth's orbit fail when the closest approach
lies far from a node (the two showers of 1P/Halley: the Orionids peak about 30 deg of solar
longitude from the node). trailcast therefore works at each local minimum of the orbit distance
(each can be a shower branch) with the following construction, whose name, *MOID-point
translation*, is ours:

1. Take the closest pair of points (parent's orbit at true anomaly nu1, Earth's orbit at nu2).
2. Move the meteoroid from the parent's point to Earth's point, keeping the *direction* of the
   parent's heliocentric velocity at nu1 and the parent's semi-major axis: its speed at Earth's
   heliocentric distance r_E follows from the vis-viva equation v^2 = GM_sun (2/r_E - 1/a).
3. Geocentric velocity v_g = v_meteoroid - v_Earth (Earth's velocity on its osculating ellipse at
   nu2); the radiant is the direction of -v_g in RA, Dec J2000, Vg = |v_g| (outside Earth's
   gravity, no zenith attraction) and V_inf = sqrt(Vg^2 + v_esc^2), v_esc = 11.2 km/s.

We do not claim that this is identical to any one procedure of that paper. Its limits: the
translation is a shift of up to the MOID (it is meant for MOIDs of a few hundredths of an au);
along Earth's path the distance to the parent's orbit varies slowly where the two orbits run
nearly parallel in projection, so for MOIDs of ~0.1 au the solar longitude of the closest point
is uncertain by several degrees (the Orionids from 1P/Halley come out 4 deg late); a parent
whose orbit cannot reach Earth's distance with its semi-major axis (2/r_E < 1/a) has no
radiant here. The planets, radiation pressure and ejection velocities, which make real streams
differ from their parent's orbit, are ignored.

References
----------
Neslušan, L., Svoreň, J. & Porubčan, V. (1998), A&A 331, 411 (methods for theoretical radiants;
from memory). Southworth & Hawkins (1963), Drummond (1981), Jopek (1993): see
:mod:`dynamics.criteria`. Vis-viva: e.g. Vallado (2013), Fundamentals of Astrodynamics and
Applications, 4th ed., eq. 1-31.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .constants import EARTH_ESCAPE_KM_S, GM_SUN_AU3_D2, KM_S_PER_AU_DAY
from .ephemeris import EPHEMERIS_SPAN_TDB_ISO, EPHEMERIS_SPAN_TDB_JD, gm_au3_d2, heliocentric_state
from .errors import OutsideTimeSpan
from .frames import ecliptic_to_radec
from .moid import MoidPoint, moid, moid_many
from .orbit_input import OrbitInput
from .orbits import state_from_true_anomaly, state_to_elements
from .showers import D_SH_MAX_DEFAULT, similar_showers
from .solar_longitude import times_of_solar_longitude_tdb
from .timescales import calendar_year_tdb_jd, format_utc

__all__ = [
    "EARTH_MEAN_J2000",
    "RADIANT_METHOD",
    "TRAIL_SIMULATION_MOID_AU",
    "EarthOrbit",
    "GeometryResult",
    "MoidBranch",
    "NodePassage",
    "Radiant",
    "ShowerSimilarity",
    "earth_orbit_at",
    "moid_many_vs_earth",
    "nodes_many",
    "quick_look",
]

#: Name of the theoretical-radiant method (see the module docstring), written into the output.
RADIANT_METHOD = "moid-point translation (vis-viva speed at Earth's distance)"

#: MOID below which a parent deserves a full dust-trail simulation (au). Rule of thumb: common
#: practice, no source. (Our reasoning, not a measurement: ejection speeds and planetary
#: perturbations move trails by up to a few hundredths of an au from the parent's orbit.)
TRAIL_SIMULATION_MOID_AU = 0.05

#: Mean J2000 elements of the Earth-Moon barycentre (q_au, e, incl_deg, node_deg, peri_deg), used
#: only when the parent's epoch lies outside DE423: a = 1.00000261 au, e = 0.01671123,
#: longitude of perihelion 102.93768193 deg, i ~ 0 (Standish, Keplerian elements for approximate
#: positions of the major planets, valid 1800-2050, Explanatory Supplement; from memory). With
#: i = 0 the node is undefined: node = 0 and peri = the longitude of perihelion.
EARTH_MEAN_J2000 = (1.00000261 * (1.0 - 0.01671123), 0.01671123, 0.0, 0.0, 102.93768193)

#: sin(i) below which a parent's orbit counts as lying in the ecliptic (no defined nodes).
_IN_ECLIPTIC_SIN_I = 1e-9

_CAUTIONS = (
    "Predictions are model estimates with real uncertainty; this quick look is two-body "
    "geometry of the parent's orbit only, not a forecast of activity.",
    "Spacecraft operators: defer to the responsible agencies' meteoroid environment assessments.",
)

_CONVENTIONS = {
    "frame": "heliocentric ecliptic and equinox J2000; radiants RA/Dec equatorial J2000",
    "solar_longitude": "geometric (no aberration), equinox J2000, Earth's centre",
    "time": "UTC, ISO 8601 with Z (future dates assume no new leap seconds)",
    "units": "au, km/s, deg",
    "earth_orbit": (
        "osculating two-body ellipse of the Earth-Moon barycentre at the parent's epoch "
        "(DE423, mu = GM_sun + GM_EMB); the same ellipse for MOID, node miss distances and "
        "Earth's velocity"
    ),
    "miss_distance": (
        "parent's heliocentric distance at the node minus Earth's orbit radius at the same "
        "heliocentric longitude (au); positive: node outside Earth's orbit"
    ),
    "node_solar_longitude": "node heliocentric longitude - 180 deg",
    "vg": "geocentric speed outside Earth's gravity (no zenith attraction)",
    "vinf": f"sqrt(vg^2 + {EARTH_ESCAPE_KM_S}^2) km/s, speed at the top of the atmosphere",
}


# --------------------------------------------------------------------------------------------
# Result types
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class EarthOrbit:
    """Earth's orbit used for the quick look: heliocentric elements, ecliptic J2000.

    Attributes
    ----------
    q_au, e, incl_deg, node_deg, peri_deg : float
        Perihelion distance (au), eccentricity, inclination, node, argument of perihelion (deg).
    epoch_tdb_jd : float
        Epoch of osculation (JD TDB): the parent's epoch.
    mu_au3_d2 : float
        Gravitational parameter of the two-body orbit (au^3/day^2).
    model : str
        ``"DE423 Earth-Moon barycentre, osculating"`` or ``"mean J2000 elements"``.
    """

    q_au: float
    e: float
    incl_deg: float
    node_deg: float
    peri_deg: float
    epoch_tdb_jd: float
    mu_au3_d2: float
    model: str

    @property
    def elements(self) -> tuple[float, float, float, float, float]:
        return (self.q_au, self.e, self.incl_deg, self.node_deg, self.peri_deg)


@dataclass(frozen=True)
class Radiant:
    """Theoretical geocentric radiant of meteoroids on the parent's orbit (see module docstring).

    Attributes
    ----------
    ra_deg, dec_deg : float
        Radiant, equatorial J2000 (deg).
    vg_km_s : float
        Geocentric speed outside Earth's gravity (km/s).
    vinf_km_s : float
        Speed at the top of the atmosphere, sqrt(Vg^2 + 11.2^2) (km/s).
    solar_longitude_deg : float
        Geometric solar longitude (J2000) at which Earth is at its closest point (deg).
    method : str
        :data:`RADIANT_METHOD`.
    """

    ra_deg: float
    dec_deg: float
    vg_km_s: float
    vinf_km_s: float
    solar_longitude_deg: float
    method: str = RADIANT_METHOD


@dataclass(frozen=True)
class MoidBranch:
    """One local minimum of the distance between the parent's orbit and Earth's.

    Attributes
    ----------
    distance_au : float
        Distance between the two closest points (au).
    parent_true_anomaly_deg, earth_true_anomaly_deg : float
        True anomalies of the points (deg, (-180, 180]).
    parent_longitude_deg, earth_longitude_deg : float
        Heliocentric ecliptic longitudes of the points (deg, J2000).
    parent_r_au, earth_r_au : float
        Heliocentric distances of the points (au).
    solar_longitude_deg : float
        Geometric solar longitude (J2000) when Earth is at its point: earth_longitude - 180.
    radiant : Radiant or None
        Theoretical radiant at this branch; None when the parent's semi-major axis cannot
        reach Earth's distance.
    earth_passages_utc : tuple of str
        With a ``year``: when Earth passes its point in that year (UTC).
    """

    distance_au: float
    parent_true_anomaly_deg: float
    earth_true_anomaly_deg: float
    parent_longitude_deg: float
    earth_longitude_deg: float
    parent_r_au: float
    earth_r_au: float
    solar_longitude_deg: float
    radiant: Radiant | None
    earth_passages_utc: tuple[str, ...] = ()


@dataclass(frozen=True)
class NodePassage:
    """The parent orbit's ascending or descending node relative to Earth's orbit.

    Attributes
    ----------
    kind : str
        ``"ascending"`` or ``"descending"``.
    longitude_deg : float or None
        Heliocentric ecliptic longitude of the node (deg, J2000); None for an orbit in the
        ecliptic.
    r_au : float or None
        Parent's heliocentric distance at the node (au); None if the node is not on the orbit
        (beyond a hyperbola's asymptote) or undefined.
    miss_distance_au : float or None
        r_au minus the radius of Earth's orbit at the same heliocentric longitude (au).
    solar_longitude_deg : float or None
        Geometric solar longitude (J2000) when Earth passes the node's longitude (deg).
    earth_passages_utc : tuple of str
        With a ``year``: when Earth passes that longitude in that year (UTC).
    """

    kind: str
    longitude_deg: float | None
    r_au: float | None
    miss_distance_au: float | None
    solar_longitude_deg: float | None
    earth_passages_utc: tuple[str, ...] = ()


@dataclass(frozen=True)
class ShowerSimilarity:
    """An established shower whose mean orbit resembles the parent's (D_SH below the cut)."""

    name: str
    code: str
    parent: str
    d_sh: float
    d_d: float
    d_h: float
    source: str


@dataclass(frozen=True)
class GeometryResult:
    """Everything :func:`quick_look` finds; :meth:`to_json` gives the JSON the CLI and API show.

    Attributes
    ----------
    name : str
        The parent's designation.
    year : int or None
        Calendar year (UTC) for the Earth passage times, if asked.
    earth_orbit : EarthOrbit
        Earth's orbit used.
    moid_au : float or None
        Earth MOID (au); None if no minimum was found (open orbits far from Earth).
    moid_points : tuple of MoidBranch
        Every local minimum, closest first.
    nodes : tuple of NodePassage
        Ascending, then descending node.
    radiant : Radiant or None
        Theoretical radiant at the global MOID point.
    similar_showers : tuple of ShowerSimilarity
        Sorted by D_SH.
    d_sh_max : float
        D_SH cut-off used for ``similar_showers``.
    verdict : str
        One plain-language line for a screener.
    notes : tuple of str
        Anything the reader must know about this particular result.
    """

    name: str
    year: int | None
    earth_orbit: EarthOrbit
    moid_au: float | None
    moid_points: tuple[MoidBranch, ...]
    nodes: tuple[NodePassage, ...]
    radiant: Radiant | None
    similar_showers: tuple[ShowerSimilarity, ...]
    d_sh_max: float
    verdict: str
    notes: tuple[str, ...] = ()

    def to_json(self) -> dict:
        """The result as plain JSON types (dict, list, str, float, int, None)."""
        eo = self.earth_orbit
        return {
            "name": self.name,
            "year": self.year,
            "moid_au": self.moid_au,
            "moid_points": [
                {
                    "distance_au": b.distance_au,
                    "parent_true_anomaly_deg": b.parent_true_anomaly_deg,
                    "earth_true_anomaly_deg": b.earth_true_anomaly_deg,
                    "parent_longitude_deg": b.parent_longitude_deg,
                    "earth_longitude_deg": b.earth_longitude_deg,
                    "parent_r_au": b.parent_r_au,
                    "earth_r_au": b.earth_r_au,
                    "solar_longitude_deg": b.solar_longitude_deg,
                    "earth_passage_utc": b.earth_passages_utc[0] if b.earth_passages_utc else None,
                    "radiant": _radiant_json(b.radiant),
                }
                for b in self.moid_points
            ],
            "nodes": [
                {
                    "kind": n.kind,
                    "longitude_deg": n.longitude_deg,
                    "r_au": n.r_au,
                    "miss_distance_au": n.miss_distance_au,
                    "solar_longitude_deg": n.solar_longitude_deg,
                    "earth_passage_utc": n.earth_passages_utc[0] if n.earth_passages_utc else None,
                    "earth_passages_utc": list(n.earth_passages_utc),
                }
                for n in self.nodes
            ],
            "radiant": _radiant_json(self.radiant),
            "similar_showers": [
                {
                    "name": s.name,
                    "code": s.code,
                    "parent": s.parent,
                    "d_sh": s.d_sh,
                    "d_d": s.d_d,
                    "d_h": s.d_h,
                    "source": s.source,
                }
                for s in self.similar_showers
            ],
            "similar_showers_rule": {
                "criterion": "D_SH (Southworth & Hawkins 1963)",
                "max": self.d_sh_max,
                "also_reported": "D_D (Drummond 1981), D_H (Jopek 1993)",
            },
            "verdict": self.verdict,
            "screening_rule": {
                "moid_threshold_au": TRAIL_SIMULATION_MOID_AU,
                "source": "rule of thumb: common practice, no source",
            },
            "earth_orbit": {
                "model": eo.model,
                "epoch_tdb_jd": eo.epoch_tdb_jd,
                "q_au": eo.q_au,
                "e": eo.e,
                "incl_deg": eo.incl_deg,
                "node_deg": eo.node_deg,
                "peri_deg": eo.peri_deg,
            },
            "conventions": dict(_CONVENTIONS),
            "notes": list(self.notes),
            "cautions": list(_CAUTIONS),
        }


def _radiant_json(r: Radiant | None):
    if r is None:
        return None
    return {
        "ra_deg": r.ra_deg,
        "dec_deg": r.dec_deg,
        "vg_km_s": r.vg_km_s,
        "vinf_km_s": r.vinf_km_s,
        "solar_longitude_deg": r.solar_longitude_deg,
        "method": r.method,
    }


# --------------------------------------------------------------------------------------------
# Earth's orbit
# --------------------------------------------------------------------------------------------


def earth_orbit_at(epoch_tdb_jd: float) -> tuple[EarthOrbit, tuple[str, ...]]:
    """Earth's orbit for the quick look at ``epoch_tdb_jd``, and notes about it.

    Parameters
    ----------
    epoch_tdb_jd : float
        Epoch (JD TDB), normally the parent's epoch of osculation.

    Returns
    -------
    EarthOrbit
        The osculating heliocentric ellipse of the Earth-Moon barycentre from DE423 (ecliptic
        J2000, mu = GM_sun + GM_EMB), or outside DE423's span the mean J2000 elements
        :data:`EARTH_MEAN_J2000` (mu = GM_sun).
    tuple of str
        Notes (empty inside DE423's span).

    Examples
    --------
    >>> eo, notes = earth_orbit_at(2451545.0)
    >>> round(eo.q_au, 3), round(eo.e, 4), notes
    (0.983, 0.0167, ())
    """
    first, last = EPHEMERIS_SPAN_TDB_JD
    if not first <= epoch_tdb_jd <= last:
        note = (
            f"The parent's epoch (JD {epoch_tdb_jd:.1f} TDB) lies outside DE423 "
            f"({EPHEMERIS_SPAN_TDB_ISO[0]} to {EPHEMERIS_SPAN_TDB_ISO[1]}): Earth's orbit is "
            "the mean J2000 ellipse of the Earth-Moon barycentre, which may put the MOID off by "
            "about 1e-3 au per millennium from 2000."
        )
        return (
            EarthOrbit(*EARTH_MEAN_J2000, epoch_tdb_jd, GM_SUN_AU3_D2, "mean J2000 elements"),
            (note,),
        )
    mu = gm_au3_d2("sun") + gm_au3_d2("earthmoon")
    r_au, v_au_d = heliocentric_state("earthmoon", epoch_tdb_jd)
    el = state_to_elements(r_au, v_au_d, epoch_tdb_jd, mu=mu)
    return (
        EarthOrbit(
            float(el.q_au),
            float(el.e),
            float(el.incl_deg),
            float(el.node_deg),
            float(el.peri_deg),
            float(epoch_tdb_jd),
            mu,
            "DE423 Earth-Moon barycentre, osculating",
        ),
        (),
    )


def _earth_radius_at_longitude_au(earth: EarthOrbit, lon_deg):
    """Radius of Earth's orbit (au) at heliocentric ecliptic longitude ``lon_deg`` (vectorised).

    The argument of latitude u of the point whose longitude is lon follows from
    tan(lon - node) = cos i tan u (exact for any inclination below 90 deg).
    """
    q, e, i, node, peri = earth.elements
    dl = np.deg2rad(np.asarray(lon_deg, dtype=float) - node)
    u = np.arctan2(np.sin(dl), math.cos(math.radians(i)) * np.cos(dl))
    nu = u - math.radians(peri)
    return q * (1.0 + e) / (1.0 + e * np.cos(nu))


# --------------------------------------------------------------------------------------------
# Nodes (vectorised)
# --------------------------------------------------------------------------------------------


def nodes_many(q_au, e, incl_deg, node_deg, peri_deg, earth: EarthOrbit):
    """Distances of the ascending and descending nodes of many orbits from Earth's orbit.

    Parameters
    ----------
    q_au, e, incl_deg, node_deg, peri_deg : array_like
        Heliocentric elements (au, 1, deg, deg, deg), ecliptic J2000, broadcastable.
    earth : EarthOrbit
        Earth's orbit (see :func:`earth_orbit_at`).

    Returns
    -------
    dict of str to ndarray
        For ``k`` in ``("ascending", "descending")``: ``k + "_r_au"`` (parent's heliocentric
        distance at the node, NaN where the node is not on the orbit: beyond a hyperbola's
        asymptote, or orbits in the ecliptic), ``k + "_miss_distance_au"`` (r minus the radius
        of Earth's orbit at the node's longitude, NaN likewise), ``k + "_longitude_deg"``
        (heliocentric longitude of the node) and ``k + "_solar_longitude_deg"`` (longitude -
        180 deg), all in [0, 360).

    Notes
    -----
    The ascending node lies at true anomaly -omega, the descending one at 180 deg - omega; the
    conic equation r = q (1 + e) / (1 + e cos nu) gives the distance, with 1 + e cos nu written as
    2 cos^2(nu/2) + (e - 1) cos nu so that it stays accurate for e close to 1.

    Examples
    --------
    A circle of radius 1.2 au tilted by 10 deg against a circular Earth orbit of 1 au:

    >>> eo = EarthOrbit(1.0, 0.0, 0.0, 0.0, 0.0, 2451545.0, 2.959e-4, "circle")
    >>> out = nodes_many(1.2, 0.0, 10.0, 30.0, 0.0, eo)
    >>> round(float(out["ascending_miss_distance_au"]), 12), float(out["descending_longitude_deg"])
    (0.2, 210.0)
    """
    q, e, i, o, w = np.broadcast_arrays(
        *(np.asarray(a, dtype=float) for a in (q_au, e, incl_deg, node_deg, peri_deg))
    )
    in_plane = np.abs(np.sin(np.deg2rad(i))) < _IN_ECLIPTIC_SIN_I
    out = {}
    for kind, shift in (("ascending", 0.0), ("descending", 180.0)):
        nu = np.deg2rad(shift - w)
        den = 2.0 * np.cos(0.5 * nu) ** 2 + (e - 1.0) * np.cos(nu)
        ok = (den > 0.0) & ~in_plane
        with np.errstate(divide="ignore", invalid="ignore"):
            r = np.where(ok, q * (1.0 + e) / np.where(ok, den, 1.0), np.nan)
        lon = np.mod(o + shift, 360.0)
        miss = r - _earth_radius_at_longitude_au(earth, lon)
        out[f"{kind}_r_au"] = r
        out[f"{kind}_miss_distance_au"] = np.where(ok, miss, np.nan)
        out[f"{kind}_longitude_deg"] = lon
        out[f"{kind}_solar_longitude_deg"] = np.mod(lon - 180.0, 360.0)
    return out


# --------------------------------------------------------------------------------------------
# Radiant
# --------------------------------------------------------------------------------------------


def _radiant_at(orbit_el, earth: EarthOrbit, point: MoidPoint) -> Radiant | None:
    """Theoretical radiant by MOID-point translation (module docstring) at one MOID point."""
    q, e = orbit_el[0], orbit_el[1]
    _, v_parent = state_from_true_anomaly(*orbit_el, point.nu1_deg)
    r_earth, v_earth = state_from_true_anomaly(*earth.elements, point.nu2_deg, mu=earth.mu_au3_d2)
    r_e_au = float(np.linalg.norm(r_earth))
    inv_a = (1.0 - e) / q
    v2 = GM_SUN_AU3_D2 * (2.0 / r_e_au - inv_a)
    if not v2 > 0.0:
        return None
    v_meteoroid = v_parent / np.linalg.norm(v_parent) * math.sqrt(v2)
    v_g = v_meteoroid - v_earth
    ra, dec = ecliptic_to_radec(-v_g)
    vg_km_s = float(np.linalg.norm(v_g)) * KM_S_PER_AU_DAY
    return Radiant(
        ra_deg=float(ra),
        dec_deg=float(dec),
        vg_km_s=vg_km_s,
        vinf_km_s=math.hypot(vg_km_s, EARTH_ESCAPE_KM_S),
        solar_longitude_deg=float(np.mod(point.lon2_deg - 180.0, 360.0)),
    )


# --------------------------------------------------------------------------------------------
# Quick look
# --------------------------------------------------------------------------------------------


def _passages_utc(solar_longitude_deg: float | None, window) -> tuple[str, ...]:
    if window is None or solar_longitude_deg is None:
        return ()
    times = times_of_solar_longitude_tdb(solar_longitude_deg, *window)
    return tuple(format_utc(float(t)) for t in np.atleast_1d(times))


def _year_window(year: int | None):
    if year is None:
        return None
    first, last = EPHEMERIS_SPAN_TDB_JD
    start, end = calendar_year_tdb_jd(year)
    if start < first or end > last:
        raise OutsideTimeSpan(
            f"year {year}: Earth passage times need DE423, which covers whole years 1800 to 2199",
            span=(1800, 2199),
        )
    return start, end


def _verdict(moid_au: float | None, open_orbit: bool = True) -> str:
    if moid_au is None:
        where = "the searched part of this open orbit" if open_orbit else "this orbit"
        return (
            f"No closest approach to Earth's orbit found within {where}: "
            "no Earth encounter; no trail simulation needed."
        )
    rule = "(rule of thumb: common practice, no source)"
    if moid_au < TRAIL_SIMULATION_MOID_AU:
        return (
            f"MOID {moid_au:.5f} au < {TRAIL_SIMULATION_MOID_AU} au: dust from this parent can "
            f"reach Earth; run a trail simulation {rule}."
        )
    return (
        f"MOID {moid_au:.5f} au >= {TRAIL_SIMULATION_MOID_AU} au: Earth is unlikely to meet "
        f"this parent's recent dust trails; a trail simulation is not a priority {rule}. Old, "
        "dispersed dust can still give an annual shower (see similar_showers)."
    )


def quick_look(orbit: OrbitInput, year: int | None = None) -> GeometryResult:
    """Quick-look geometry of a parent orbit against Earth's orbit.

    Parameters
    ----------
    orbit : OrbitInput
        The parent's heliocentric osculating elements, ecliptic J2000 (see
        :mod:`dynamics.orbit_input`). Only q, e, i, node, peri and the epoch are used
        (alternative ``solutions``, covariance and non-gravitational terms are ignored).
    year : int, optional
        Calendar year (UTC, 1800 to 2199) in which to give the instants Earth passes the nodes
        and the MOID points.

    Returns
    -------
    GeometryResult
        MOID and every local minimum with its theoretical radiant, both nodes with miss
        distances and solar longitudes, the radiant at the global MOID point, similar
        established showers and a one-line verdict. Conventions are in the module docstring.

    Raises
    ------
    OutsideTimeSpan
        If ``year`` lies outside DE423's whole years (1800 to 2199).
    InvalidOrbit
        For impossible elements (as :func:`dynamics.moid.moid`).

    References
    ----------
    See the module docstring (MOID-point translation; Neslušan, Svoreň & Porubčan 1998 for the
    family of methods, from memory).

    Examples
    --------
    Both nodes of this orbit lie at r = q (1 + e) = 1 au, near Earth's orbit:

    >>> from dynamics.orbit_input import parse_orbit
    >>> o = parse_orbit({"name": "demo", "epoch": 2460000.5, "q": 0.8, "e": 0.25, "i": 10.0,
    ...                  "node": 20.0, "peri": 90.0, "tp": 2460000.5})
    >>> res = quick_look(o)
    >>> [(n.kind, round(n.r_au, 9)) for n in res.nodes]
    [('ascending', 1.0), ('descending', 1.0)]
    >>> res.moid_au < TRAIL_SIMULATION_MOID_AU
    True
    """
    window = _year_window(year)
    earth, notes = earth_orbit_at(orbit.epoch_tdb_jd)
    el = (orbit.q_au, orbit.e, orbit.incl_deg, orbit.node_deg, orbit.peri_deg)

    points = moid(*el, *earth.elements)
    branches = []
    for p in points:
        lam = float(np.mod(p.lon2_deg - 180.0, 360.0))
        branches.append(
            MoidBranch(
                distance_au=p.distance_au,
                parent_true_anomaly_deg=p.nu1_deg,
                earth_true_anomaly_deg=p.nu2_deg,
                parent_longitude_deg=p.lon1_deg,
                earth_longitude_deg=p.lon2_deg,
                parent_r_au=float(np.linalg.norm(p.r1_au)),
                earth_r_au=float(np.linalg.norm(p.r2_au)),
                solar_longitude_deg=lam,
                radiant=_radiant_at(el, earth, p),
                earth_passages_utc=_passages_utc(lam, window),
            )
        )
    moid_au = branches[0].distance_au if branches else None

    nd = nodes_many(*el, earth)
    nodes = []
    in_plane = abs(math.sin(math.radians(orbit.incl_deg))) < _IN_ECLIPTIC_SIN_I
    for kind in ("ascending", "descending"):
        r = float(nd[f"{kind}_r_au"])
        lam = None if in_plane else float(nd[f"{kind}_solar_longitude_deg"])
        nodes.append(
            NodePassage(
                kind=kind,
                longitude_deg=None if in_plane else float(nd[f"{kind}_longitude_deg"]),
                r_au=None if math.isnan(r) else r,
                miss_distance_au=None if math.isnan(r) else float(nd[f"{kind}_miss_distance_au"]),
                solar_longitude_deg=lam,
                earth_passages_utc=_passages_utc(lam, window),
            )
        )
    if in_plane:
        notes += ("The orbit lies in the ecliptic: its nodes are undefined.",)
    elif any(n.r_au is None for n in nodes):
        notes += ("A node lies beyond the asymptote of this hyperbolic orbit (r_au null).",)

    matches = similar_showers(*el, d_sh_max=D_SH_MAX_DEFAULT)
    shower_rows = tuple(
        ShowerSimilarity(
            name=m.shower.name,
            code=m.shower.code,
            parent=m.shower.parent,
            d_sh=m.d_sh,
            d_d=m.d_d,
            d_h=m.d_h,
            source=m.shower.source,
        )
        for m in matches
    )
    if branches and branches[0].radiant is None:
        notes += (
            "No theoretical radiant: with its semi-major axis the parent's orbit cannot reach "
            "Earth's distance.",
        )
    return GeometryResult(
        name=orbit.name,
        year=year,
        earth_orbit=earth,
        moid_au=moid_au,
        moid_points=tuple(branches),
        nodes=tuple(nodes),
        radiant=branches[0].radiant if branches else None,
        similar_showers=shower_rows,
        d_sh_max=D_SH_MAX_DEFAULT,
        verdict=_verdict(moid_au, open_orbit=orbit.e >= 1.0),
        notes=notes,
    )


def moid_many_vs_earth(q_au, e, incl_deg, node_deg, peri_deg, earth: EarthOrbit):
    """Global Earth MOID of many orbits at once (au): :func:`dynamics.moid.moid_many` against
    ``earth``'s ellipse (see :func:`earth_orbit_at`). Elements as in :func:`nodes_many`."""
    return moid_many(q_au, e, incl_deg, node_deg, peri_deg, *earth.elements)
