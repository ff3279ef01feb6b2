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

from dataclasses import dataclass, field, replace

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
    #: Fraction of natural draws each stands for: 1 for a natural draw; for a draw targeted on
    #: a period window (:func:`draw_candidates` with ``period_window_days``), the probability
    #: that the natural speed draw falls in that window.
    sample_weight: np.ndarray | None = None
    #: The parent's heliocentric osculating period at each release (days): it varies along the
    #: active arc (the Sun's reflex motion about the barycentre moves a long-period comet's
    #: heliocentric 1/a by ~1e-3 /au), so period offsets are only meaningful against it.
    parent_period_days: np.ndarray | None = None

    def __post_init__(self):
        n = len(self.release_t_tdb_jd)
        if self.sample_weight is None:
            object.__setattr__(self, "sample_weight", np.ones(n))
        if self.parent_period_days is None:
            object.__setattr__(self, "parent_period_days", np.full(n, np.nan))

    def take(self, idx) -> "Candidates":
        return Candidates(*(getattr(self, f)[idx] for f in self.__dataclass_fields__))

    def __len__(self) -> int:
        return len(self.release_t_tdb_jd)


def model_for_event(model: EjectionModel, event: EjectionEvent | None) -> EjectionModel:
    """The ejection model of a trail: the event's size range where it gives one."""
    if event is None:
        return model
    return replace(
        model,
        mass_min_g=event.mass_min_g or model.mass_min_g,
        mass_max_g=event.mass_max_g or model.mass_max_g,
    )


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
    inverse_a_window: tuple[float, float] | None = None,
) -> Candidates:
    """Draw ``n`` release conditions over the active arc of one parent return.

    Release times are the parent's one-day arc samples, chosen with probability proportional to
    the activity law; with an ``event``, the samples within its release span, chosen uniformly,
    with its speed multiplier and size range. Unbound meteoroids (too large beta or speed) are
    dropped, so the result may hold fewer than ``n``.

    With ``inverse_a_window = (lo, hi)`` (1/au) the draw is *targeted*: for each release time,
    mass and direction, the speed fraction u (natural law: uniform on [0, 1]) is drawn only
    where the meteoroid's 1/a offset from the parent's at the same point (as an equivalent
    period under mu (1 - beta)) falls in [lo, hi] (solved exactly: the squared speed after
    release is quadratic in u), and the candidate's ``sample_weight`` is the probability of
    that u range under the natural law. Candidates whose window is empty are
    dropped. This is how one-revolution dust of long-period parents, which a natural draw
    spreads over centuries of arrival times, is sampled at Earth's passage (importance
    sampling; the estimate stays unbiased).
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
        model = model_for_event(model, event)
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
    if model.speed_spread not in ("uniform", "fixed"):
        raise ValueError(f"unknown speed_spread {model.speed_spread!r}; use 'uniform' or 'fixed'")
    dirs = sunward_directions(-r / rn[:, None], rng, law=model.direction_law)
    sample_weight = np.ones(n)
    t = ret.arc_t_tdb_jd[ia]
    # the parent's osculating period and perihelion time at each release: computed once per
    # arc sample (hundreds) and indexed, not once per candidate (hundreds of thousands)
    el_arc = state_to_elements(ret.arc_r_au, ret.arc_v_au_d, ret.arc_t_tdb_jd, GM_SUN_AU3_D2)
    per_c = np.asarray(el_arc.period_days, dtype=float).reshape(-1)[ia]
    tp_c = np.asarray(el_arc.tp_tdb_jd, dtype=float).reshape(-1)[ia]
    if inverse_a_window is not None and model.speed_spread == "uniform":
        kp = 2.0 * np.pi / np.sqrt(GM_SUN_AU3_D2)
        inv_a_c = (per_c / kp) ** (-2.0 / 3.0)
        lo_inv, hi_inv = inv_a_c + inverse_a_window[0], inv_a_c + inverse_a_window[1]
        window = (
            kp * np.where(hi_inv > 0, hi_inv, np.nan) ** -1.5,  # larger 1/a: shorter period
            kp * np.where(lo_inv > 0, lo_inv, np.inf) ** -1.5,
        )
        u_lo, u_hi = _speed_fraction_window(
            r, v_parent, ejection_velocities_au_d(speed, dirs), beta, window
        )
        sample_weight = np.clip(u_hi - u_lo, 0.0, 1.0)
        speed = speed * (u_lo + (u_hi - u_lo) * rng.random(n))
    elif model.speed_spread == "uniform":
        speed = speed * rng.random(n)
    v = v_parent + ejection_velocities_au_d(speed, dirs)
    el_p, tp_p, per_p = elements_under_radiation(r, v, t, beta)
    bound = (np.asarray(el_p.e) < 1.0) & np.isfinite(per_p) & (sample_weight > 0)
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
        dperiod_days=per_p - per_c,
        dtp_days=tp_p - tp_c,
        sample_weight=sample_weight,
        parent_period_days=per_c,
    )
    return cand.take(np.flatnonzero(bound))


def _speed_fraction_window(r, v_parent, dv_full, beta, period_window_days):
    """Range [u_lo, u_hi] within [0, 1] of speed fractions u for which the period of a
    meteoroid released at r with velocity v_parent + u dv_full, under mu (1 - beta), lies in
    the window. Where two disjoint ranges exist (u on both sides of the period's extremum),
    the wider is kept (its weight is its own width: still unbiased for what it covers).
    Empty ranges come back with u_lo = u_hi."""
    lo_p, hi_p = period_window_days
    mu = GM_SUN_AU3_D2 * (1.0 - beta)
    rn = np.linalg.norm(r, axis=-1)

    def v2_for_period(p_days):  # |v|^2 that gives period p under mu (1 - beta)
        a = (p_days * np.sqrt(mu) / (2.0 * np.pi)) ** (2.0 / 3.0)
        return mu * (2.0 / rn - 1.0 / a)

    # |v_p + u dv|^2 = A u^2 + 2 B u + C; the period grows with |v|
    A = np.sum(dv_full * dv_full, axis=-1)
    B = np.sum(v_parent * dv_full, axis=-1)
    C = np.sum(v_parent * v_parent, axis=-1)
    w_lo, w_hi = v2_for_period(lo_p), v2_for_period(hi_p)  # |v|^2 window (w_lo < w_hi)

    def roots(w):  # u with A u^2 + 2 B u + C = w (NaN where none)
        disc = B * B - A * (C - w)
        sq = np.sqrt(np.where(disc >= 0, disc, np.nan))
        safe_a = np.where(A > 0, A, np.nan)
        return (-B - sq) / safe_a, (-B + sq) / safe_a

    lo1, hi1 = roots(w_lo)  # |v|^2 <= w_lo between these
    lo2, hi2 = roots(w_hi)  # |v|^2 <= w_hi between these
    # the set {w_lo <= |v|^2 <= w_hi} is [lo2, lo1] U [hi1, hi2] (or [lo2, hi2] if no lo roots)
    no_inner = np.isnan(lo1)
    left = (np.where(no_inner, lo2, lo2), np.where(no_inner, hi2, lo1))
    right = (np.where(no_inner, hi2, hi1), np.where(no_inner, hi2, hi2))

    def clip(seg):
        a, b = np.clip(seg[0], 0.0, 1.0), np.clip(seg[1], 0.0, 1.0)
        a = np.where(np.isnan(a), 0.0, a)
        b = np.where(np.isnan(b), 0.0, b)
        return a, np.maximum(a, b)

    (la, lb), (ra, rb) = clip(left), clip(right)
    take_left = (lb - la) >= (rb - ra)
    return np.where(take_left, la, ra), np.where(take_left, lb, rb)


def _empty() -> Candidates:
    z = np.zeros(0)
    return Candidates(z, np.zeros((0, 3)), np.zeros((0, 3)), z, z, z, z, z, z, z, z, z)
