"""Meteoroid release at past perihelia and targeted sampling of the ones that meet Earth.

A dust trail is the meteoroids one perihelion passage of the parent released. After N
revolutions a meteoroid reaches its node at a time set mostly by its orbital period, i.e. by the
period offset dP from the parent's that its release gave it (McNaught & Asher 1999, WGN 27, 85,
in spirit). trailcast therefore:

1. draws many candidate release conditions per trail analytically (release time on the active
   arc weighted by activity r^-k, mass log-uniform with power-law weights, beta from Burns, Lamy &
   Soter 1979, speed from the chosen ejection-speed law, sunward direction) and computes dP and
   the perihelion-time offset of each under the reduced solar gravity mu (1 - beta);
2. predicts each candidate's node arrival after N revolutions as the parent's own node passage
   N returns later plus N dP plus the perihelion-time offset;
3. integrates a small *pilot* set spread over a wide window around Earth's passage of the node,
   fits the real arrival time against the prediction (planetary perturbations shift and stretch
   it), and
4. keeps for the full integration only candidates whose corrected arrival falls within
   +- ``window_days`` of Earth's passage.

Every candidate keeps its importance weight (mass distribution), and the number drawn per
return is recorded, so that the activity stage can turn the integrated few back into numbers
of real meteoroids (:func:`dynamics.activity.meteoroids_per_particle`).
"""

from dataclasses import dataclass, field

import numpy as np

from .constants import GM_SUN_AU3_D2
from .ejection import (
    DEFAULT_ACTIVITY_EXPONENT,
    DEFAULT_EJECTION_SPEED_LAW,
    activity_weights,
    beta_burns,
    ejection_speed_law,
    ejection_velocities_au_d,
    mass_distribution_weights,
    radius_cm_from_mass,
    sample_log_uniform_masses_g,
    sunward_directions,
)
from .encounters import elements_under_radiation, node_of_orbit
from .history import ParentReturn
from .orbits import state_to_elements


@dataclass(frozen=True)
class EjectionModel:
    """How meteoroids leave the parent. Every field is a documented model choice.

    Attributes
    ----------
    speed_law : str
        Name in :data:`dynamics.ejection.EJECTION_SPEED_LAWS` (default Whipple 1951).
    speed_spread : {"uniform", "fixed"}
        "uniform": speed = law speed x U(0, 1), standing for the spread of emission angles and
        positions on the nucleus (common practice, no source); "fixed": the law's speed.
    direction_law : {"cosine", "uniform", "isotropic"}
        Directions about the Sun direction (sunward hemisphere for the first two).
    mass_min_g, mass_max_g : float
        Mass range simulated (g); the default spans meteoroids that give visual meteors
        (about +6.5 mag to fireballs at 30-70 km/s; common practice, no source).
    mass_index : float
        Differential mass index s (dN ~ m^-s dm); 2.0 (common practice for cometary streams).
    meteoroid_density_g_cm3, nucleus_radius_km, nucleus_density_g_cm3 : float
        Bulk density of meteoroids (g/cm^3), radius (km) and density of the nucleus.
    q_pr : float
        Radiation-pressure efficiency (1 for large absorbing grains; Burns et al. 1979).
    active_r_max_au : float
        Release only where the parent is closer to the Sun than this (au).
    activity_exponent : float
        Release rate ~ r^-k along the active arc.
    """

    speed_law: str = DEFAULT_EJECTION_SPEED_LAW
    speed_spread: str = "uniform"
    direction_law: str = "cosine"
    mass_min_g: float = 1e-5
    mass_max_g: float = 1e-1
    mass_index: float = 2.0
    meteoroid_density_g_cm3: float = 1.0
    nucleus_radius_km: float = 2.0
    nucleus_density_g_cm3: float = 1.0
    q_pr: float = 1.0
    active_r_max_au: float = 3.0
    activity_exponent: float = DEFAULT_ACTIVITY_EXPONENT

    def describe(self) -> dict:
        return {
            "speed_law": self.speed_law,
            "speed_spread": self.speed_spread,
            "direction_law": self.direction_law,
            "mass_range_g": [self.mass_min_g, self.mass_max_g],
            "mass_index": self.mass_index,
            "meteoroid_density_g_cm3": self.meteoroid_density_g_cm3,
            "nucleus_radius_km": self.nucleus_radius_km,
            "nucleus_density_g_cm3": self.nucleus_density_g_cm3,
            "q_pr": self.q_pr,
            "active_r_max_au": self.active_r_max_au,
            "activity_exponent": self.activity_exponent,
            "beta_law": "Burns, Lamy & Soter (1979): beta = 5.7e-5 Q_pr / (rho[g/cm^3] s[cm])",
        }


@dataclass(frozen=True)
class Candidates:
    """Release conditions of simulated meteoroids from one parent return (arrays (n,))."""

    release_t_tdb_jd: np.ndarray
    r_au: np.ndarray = field(repr=False)
    v_au_d: np.ndarray = field(repr=False)
    mass_g: np.ndarray
    radius_cm: np.ndarray
    beta: np.ndarray
    speed_m_s: np.ndarray
    weight: np.ndarray
    dperiod_days: np.ndarray
    dtp_days: np.ndarray

    def take(self, idx) -> "Candidates":
        return Candidates(*(getattr(self, f)[idx] for f in self.__dataclass_fields__))

    def __len__(self) -> int:
        return len(self.release_t_tdb_jd)


def draw_candidates(
    ret: ParentReturn, model: EjectionModel, n: int, rng: np.random.Generator
) -> Candidates:
    """Draw ``n`` release conditions over the active arc of one parent return.

    Release times are the parent's one-day arc samples, chosen with probability proportional to
    the activity law. Unbound meteoroids (too large beta or speed) are dropped, so the result may
    hold fewer than ``n``.
    """
    k_arc = len(ret.arc_t_tdb_jd)
    if k_arc == 0 or n <= 0:
        return _empty()
    r_arc = np.linalg.norm(ret.arc_r_au, axis=-1)
    w_arc = activity_weights(r_arc, model.activity_exponent)
    p = w_arc / w_arc.sum()
    ia = rng.choice(k_arc, size=n, p=p)
    r = ret.arc_r_au[ia]
    v_parent = ret.arc_v_au_d[ia]
    rn = r_arc[ia]
    mass = sample_log_uniform_masses_g(n, model.mass_min_g, model.mass_max_g, rng)
    radius = radius_cm_from_mass(mass, model.meteoroid_density_g_cm3)
    beta = beta_burns(radius, model.meteoroid_density_g_cm3, model.q_pr)
    law = ejection_speed_law(model.speed_law)
    speed = law(
        mass,
        rn,
        nucleus_radius_km=model.nucleus_radius_km,
        nucleus_density_g_cm3=model.nucleus_density_g_cm3,
        meteoroid_density_g_cm3=model.meteoroid_density_g_cm3,
    )
    if model.speed_spread == "uniform":
        speed = speed * rng.random(n)
    elif model.speed_spread != "fixed":
        raise ValueError(f"unknown speed_spread {model.speed_spread!r}; use 'uniform' or 'fixed'")
    dirs = sunward_directions(-r / rn[:, None], rng, law=model.direction_law)
    v = v_parent + ejection_velocities_au_d(speed, dirs)
    t = ret.arc_t_tdb_jd[ia]

    el_p, tp_p, per_p = elements_under_radiation(r, v, t, beta)
    el_c = state_to_elements(r, v_parent, t, GM_SUN_AU3_D2)
    bound = (np.asarray(el_p.e) < 1.0) & np.isfinite(per_p)
    weight = mass_distribution_weights(mass, model.mass_index, model.mass_min_g)
    cand = Candidates(
        release_t_tdb_jd=t,
        r_au=r,
        v_au_d=v,
        mass_g=mass,
        radius_cm=radius,
        beta=beta,
        speed_m_s=speed,
        weight=weight,
        dperiod_days=per_p - np.asarray(el_c.period_days),
        dtp_days=tp_p - np.asarray(el_c.tp_tdb_jd),
    )
    return cand.take(np.flatnonzero(bound))


def _empty() -> Candidates:
    z = np.zeros(0)
    return Candidates(z, np.zeros((0, 3)), np.zeros((0, 3)), z, z, z, z, z, z, z)


def parent_node_time(ret: ParentReturn, node: str) -> float:
    """Time (TDB JD) the parent passes ``node`` on the revolution of return ``ret`` (two-body
    from its perihelion elements; the node nearest perihelion in time)."""
    from .encounters import _time_from_perihelion

    el = ret.elements
    nu = -float(el.peri_deg) if node == "ascending" else 180.0 - float(el.peri_deg)
    dt, _, _ = _time_from_perihelion(
        np.array([float(el.q_au)]),
        np.array([float(el.e)]),
        np.array([float(el.incl_deg)]),
        np.array([float(el.node_deg)]),
        np.array([float(el.peri_deg)]),
        np.array([nu]),
        np.array([1.0]),
    )
    return ret.tp_tdb_jd + float(dt[0])


def nodes_near_earth(ret: ParentReturn, max_distance_au: float):
    """The parent's nodes (on return ``ret``) within ``max_distance_au`` of Earth's orbit.

    Earth's distance is DE423's at the time Earth passes the node's longitude nearest the
    return (clipped into DE423's span). Returns a list of (node, r_node_au, node_longitude_deg).
    """
    from .encounters import earth_passage_tdb
    from .ephemeris import EPHEMERIS_SPAN_TDB_JD, heliocentric_state

    el = ret.elements
    out = []
    for which in ("ascending", "descending"):
        r, lon = node_of_orbit(
            float(el.q_au),
            float(el.e),
            float(el.incl_deg),
            float(el.node_deg),
            float(el.peri_deg),
            which,
        )
        if not np.isfinite(r):
            continue
        t = float(
            np.clip(ret.tp_tdb_jd, EPHEMERIS_SPAN_TDB_JD[0] + 400, EPHEMERIS_SPAN_TDB_JD[1] - 400)
        )
        te = earth_passage_tdb(lon, t)
        r_e = float(np.linalg.norm(heliocentric_state("earth", te)[0]))
        if abs(float(r) - r_e) <= max_distance_au:
            out.append((which, float(r), float(lon)))
    return out
