"""Meteoroid release at past perihelia: the candidates that targeting chooses from.

A dust trail is the meteoroids one perihelion passage of the parent released. trailcast draws
many candidate release conditions per trail analytically (release time on the active arc
weighted by activity r^-k, mass log-uniform with power-law weights, beta from Burns, Lamy &
Soter 1979, speed from the chosen ejection-speed law, sunward direction) and computes the
period offset dP and perihelion-time offset of each under the reduced solar gravity
mu (1 - beta). :mod:`dynamics.targeting` then picks the few whose arrival meets Earth.

A parent that split or had an outburst releases dust differently on that return: an
:class:`EjectionEvent` replaces the return's normal release by release around the event's date,
at a multiple of the speed law's speeds, over its own size range.

Every candidate keeps its importance weight (mass distribution), and the number drawn per
return is recorded, so that the activity stage can turn the integrated few back into numbers
of real meteoroids (:func:`dynamics.activity.meteoroids_per_particle`).
"""

from dataclasses import dataclass, field

import numpy as np

from .constants import GM_SUN_AU3_D2
from .crossings import elements_under_radiation
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
from .history import ParentReturn
from .orbits import state_to_elements

#: Kinds of ejection event trailcast knows.
EVENT_KINDS = ("fragmentation", "outburst")


@dataclass(frozen=True)
class EjectionEvent:
    """Dust released by a break-up or an outburst of the parent, instead of normal activity.

    Attributes
    ----------
    kind : {"fragmentation", "outburst"}
    t_tdb_jd : float
        Start of the release (TDB JD); it must fall within an active arc of the parent (the
        return it belongs to is the trail it makes).
    duration_days : float
        Release is spread uniformly over this many days from ``t_tdb_jd``.
    speed_multiplier : float
        Ejection speeds are the model's speed law times this factor. Break-ups release dust at
        several times the gas-drag speeds of normal activity: e.g. ~10x was used to model the
        dust of a comet that split in 1995 (Wiegert et al. 2005, MNRAS 361, 638, from memory).
    mass_min_g, mass_max_g : float or None
        Size range of the event's dust (None: the model's).
    source : str
        Where the event's numbers come from (shown in the output).
    """

    kind: str
    t_tdb_jd: float
    duration_days: float = 5.0
    speed_multiplier: float = 1.0
    mass_min_g: float | None = None
    mass_max_g: float | None = None
    source: str = ""

    def __post_init__(self):
        if self.kind not in EVENT_KINDS:
            raise ValueError(f"unknown ejection event {self.kind!r}; use one of {EVENT_KINDS}")
        if not (self.duration_days > 0 and self.speed_multiplier > 0):
            raise ValueError("an ejection event needs duration_days > 0 and speed_multiplier > 0")

    def describe(self) -> dict:
        from .timescales import format_iso

        return {
            "kind": self.kind,
            "start_tdb": format_iso(self.t_tdb_jd, "TDB"),
            "duration_days": self.duration_days,
            "speed_multiplier": self.speed_multiplier,
            "mass_range_g": [self.mass_min_g, self.mass_max_g],
            "source": self.source,
        }


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


def event_of_return(ret: ParentReturn, events) -> "EjectionEvent | None":
    """The ejection event whose start falls within this return's active arc, if any."""
    if len(ret.arc_t_tdb_jd) == 0:
        return None
    for ev in events:
        if ret.arc_t_tdb_jd[0] - 0.5 <= ev.t_tdb_jd <= ret.arc_t_tdb_jd[-1] + 0.5:
            return ev
    return None


def draw_candidates(
    ret: ParentReturn,
    model: EjectionModel,
    n: int,
    rng: np.random.Generator,
    event: EjectionEvent | None = None,
) -> Candidates:
    """Draw ``n`` release conditions over the active arc of one parent return.

    Release times are the parent's one-day arc samples, chosen with probability proportional to
    the activity law; with an ``event``, the samples within its release span, chosen uniformly,
    with its speed multiplier and size range. Unbound meteoroids (too large beta or speed) are
    dropped, so the result may hold fewer than ``n``.
    """
    k_arc = len(ret.arc_t_tdb_jd)
    if k_arc == 0 or n <= 0:
        return _empty()
    r_arc = np.linalg.norm(ret.arc_r_au, axis=-1)
    if event is None:
        w_arc = activity_weights(r_arc, model.activity_exponent)
    else:
        t_arc = ret.arc_t_tdb_jd
        w_arc = (
            (t_arc >= event.t_tdb_jd - 0.5) & (t_arc <= event.t_tdb_jd + event.duration_days)
        ).astype(float)
        if not w_arc.any():  # shorter than the arc's one-day grid: the nearest sample
            w_arc[int(np.argmin(np.abs(t_arc - event.t_tdb_jd)))] = 1.0
        model = EjectionModel(
            **{
                **model.__dict__,
                "mass_min_g": event.mass_min_g or model.mass_min_g,
                "mass_max_g": event.mass_max_g or model.mass_max_g,
            }
        )
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
    if event is not None:
        speed = speed * event.speed_multiplier
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
