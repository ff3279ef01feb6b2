"""The one narrow door to REBOUND: planets from DE423, test particles, integrators.

Every simulation is new for its task (never shared between threads or requests), uses the unit
system au, day and G = 1 with masses given as GM in au^3/day^2 (so that DE423's GM values enter
exactly), and is built from plain arrays. Results come back as numpy arrays in the heliocentric
ecliptic J2000 frame. Nothing here imports the web layer, and REBOUND never fetches anything.

Integrators (:data:`INTEGRATORS`): ``"ias15"`` (adaptive, the accuracy reference; Rein & Spiegel
2015) and ``"whfast"`` (Wisdom-Holman, democratic heliocentric coordinates; Rein & Tamayo 2015),
which the dust-trail engine uses by default after the measurement in ``benchmarks/``.

Radiation pressure and Poynting-Robertson drag act per particle through REBOUNDx
``radiation_forces`` (Tamayo et al. 2020; Burns, Lamy & Soter 1979), with the speed of light set
in au/day.
"""

import warnings
from dataclasses import dataclass

import numpy as np

from .constants import C_AU_DAY
from .ephemeris import barycentric_states, gm_au3_d2
from .errors import TrailcastError

#: Massive bodies of every trailcast simulation: Sun, 8 planets, Earth and Moon as their
#: barycentre (the Moon's effect on trails is a few 1e-6 au; domain notes).
MASSIVE_BODIES = (
    "sun",
    "mercury",
    "venus",
    "earthmoon",
    "mars",
    "jupiter",
    "saturn",
    "uranus",
    "neptune",
)
#: Integrators trailcast can use, by lowercase name.
INTEGRATORS = ("whfast", "ias15")
#: Default IAS15 tolerance (REBOUND's own default epsilon).
IAS15_EPSILON = 1e-9


class IntegrationFailed(TrailcastError):
    """REBOUND stopped before reaching the requested time (e.g. a collision or a NaN state).

    Retry with the IAS15 integrator or a smaller step; report the parent and options if it
    persists.
    """


@dataclass(frozen=True)
class MassiveBodies:
    """Barycentric states of the massive bodies at one instant (ecliptic J2000).

    Attributes
    ----------
    t_tdb_jd : float
    names : tuple of str
    gm_au3_d2 : ndarray (n,)
    r_au, v_au_d : ndarray (n, 3)
    """

    t_tdb_jd: float
    names: tuple[str, ...]
    gm_au3_d2: np.ndarray
    r_au: np.ndarray
    v_au_d: np.ndarray


def massive_bodies_from_ephemeris(t_tdb_jd: float, names=MASSIVE_BODIES) -> MassiveBodies:
    """Sun and planets at ``t_tdb_jd`` from DE423 (raises OutsideTimeSpan outside 1800-2200)."""
    states = barycentric_states(names, float(t_tdb_jd))
    r = np.array([states[n][0] for n in names])
    v = np.array([states[n][1] for n in names])
    gm = np.array([gm_au3_d2(n) for n in names])
    return MassiveBodies(float(t_tdb_jd), tuple(names), gm, r, v)


def _new_simulation(bodies: MassiveBodies, integrator: str, dt_days: float):
    import rebound

    if integrator not in INTEGRATORS:
        raise ValueError(
            f"unknown integrator {integrator!r}; choose one of {', '.join(INTEGRATORS)}"
        )
    sim = rebound.Simulation()
    sim.G = 1.0  # masses are GM in au^3/day^2
    sim.t = bodies.t_tdb_jd
    for gm, r, v in zip(bodies.gm_au3_d2, bodies.r_au, bodies.v_au_d, strict=True):
        sim.add(m=float(gm), x=r[0], y=r[1], z=r[2], vx=v[0], vy=v[1], vz=v[2])
    sim.N_active = len(bodies.names)
    sim.testparticle_type = 0  # test particles feel the planets, never the reverse
    if integrator == "whfast":
        sim.integrator = "whfast"
        sim.integrator.coordinates = "democraticheliocentric"
        sim.dt = float(dt_days)
    else:
        sim.integrator = "ias15"
        sim.integrator.epsilon = IAS15_EPSILON
        sim.dt = float(dt_days)
    return sim


def _attach_radiation(sim):
    """Radiation pressure + Poynting-Robertson drag (REBOUNDx radiation_forces), Sun as source."""
    import reboundx

    rebx = reboundx.Extras(sim)
    force = rebx.load_force("radiation_forces")
    rebx.add_force(force)
    force.params["c"] = C_AU_DAY
    sim.particles[0].params["radiation_source"] = 1
    return rebx


def _read_states(sim, n_active: int):
    n = sim.N
    xyz = np.empty((n, 3))
    vel = np.empty((n, 3))
    sim.serialize_particle_data(xyz=xyz, vxvyvz=vel)
    return (
        xyz[n_active:] - xyz[0],
        vel[n_active:] - vel[0],
        xyz[:n_active].copy(),
        vel[:n_active].copy(),
    )


@dataclass(frozen=True)
class Snapshots:
    """Heliocentric states of test particles at output times (ecliptic J2000).

    ``r_au`` and ``v_au_d`` have shape (n_times, n_particles, 3); a particle not yet released at
    an output time has NaN there.
    """

    t_tdb_jd: np.ndarray
    r_au: np.ndarray
    v_au_d: np.ndarray


def integrate_particles(
    bodies: MassiveBodies,
    release_t_tdb_jd,
    r_helio_au,
    v_helio_au_d,
    beta,
    output_t_tdb_jd,
    *,
    integrator: str = "whfast",
    dt_days: float = 0.5,
    radiation: bool = True,
) -> Snapshots:
    """Integrate test particles released at given times with the Sun and planets.

    Parameters
    ----------
    bodies : MassiveBodies
        Massive bodies at the start time (must not be after the first release).
    release_t_tdb_jd : array (n,)
        When each particle enters the simulation (TDB JD). With WHFast, releases happen on the
        step grid ``bodies.t + k dt``: pass times on that grid (see :func:`step_grid`).
    r_helio_au, v_helio_au_d : array (n, 3)
        Heliocentric states at release (ecliptic J2000).
    beta : array (n,)
        Radiation-pressure parameter of each particle (0 for pure gravity).
    output_t_tdb_jd : array (m,)
        Increasing output times (TDB JD), on the step grid for WHFast.
    integrator : {"whfast", "ias15"}
    dt_days : float
        WHFast step (days); IAS15's initial step.
    radiation : bool
        Apply REBOUNDx radiation forces when any beta > 0.

    Returns
    -------
    Snapshots

    Notes
    -----
    Test particles do not act on each other or on the planets, so a particle's trajectory does
    not depend on which other particles share its simulation: results are independent of how
    particles are split into chunks.
    """
    release = np.asarray(release_t_tdb_jd, dtype=float)
    r0 = np.asarray(r_helio_au, dtype=float).reshape(-1, 3)
    v0 = np.asarray(v_helio_au_d, dtype=float).reshape(-1, 3)
    beta = np.asarray(beta, dtype=float).reshape(-1)
    out_t = np.asarray(output_t_tdb_jd, dtype=float).reshape(-1)
    n, m = len(release), len(out_t)
    if n and release.min() < bodies.t_tdb_jd - 1e-9:
        raise ValueError("a particle is released before the simulation starts")
    order = np.argsort(release, kind="stable")
    sim = _new_simulation(bodies, integrator, dt_days)
    n_active = sim.N_active
    fixed_step = integrator == "whfast"

    snaps_r = np.full((m, n, 3), np.nan)
    snaps_v = np.full((m, n, 3), np.nan)
    # Events in time order: releases (kind 0) before outputs (kind 1) at the same instant.
    events = sorted(
        [(release[i], 0, i) for i in order] + [(out_t[j], 1, j) for j in range(m)],
        key=lambda ev: (ev[0], ev[1]),
    )
    added: list[int] = []  # particle index of each simulation slot
    rebx = _attach_radiation(sim) if radiation and np.any(beta > 0) else None
    with warnings.catch_warnings():
        # REBOUNDx warns that P-R drag is velocity dependent under WHFast: its error is of the
        # order of the drag itself (tiny for mm grains over centuries; see the README's
        # integrator comparison).
        warnings.filterwarnings("ignore", message=".*velocity-dependent force.*")
        k = 0
        while k < len(events):
            t_ev = events[k][0]
            _advance(sim, t_ev, bodies.t_tdb_jd, dt_days, fixed_step)
            batch = []
            while k < len(events) and events[k][0] == t_ev:
                batch.append(events[k])
                k += 1
            releases = [i for (_, kind, i) in batch if kind == 0]
            if releases:
                sun = sim.particles[0]
                sx, sy, sz, svx, svy, svz = sun.x, sun.y, sun.z, sun.vx, sun.vy, sun.vz
                for i in releases:
                    r, v = r0[i], v0[i]
                    sim.add(
                        m=0.0,
                        x=r[0] + sx,
                        y=r[1] + sy,
                        z=r[2] + sz,
                        vx=v[0] + svx,
                        vy=v[1] + svy,
                        vz=v[2] + svz,
                    )
                    if rebx is not None and beta[i] > 0:
                        sim.particles[sim.N - 1].params["beta"] = float(beta[i])
                    added.append(i)
            for _, kind, j in batch:
                if kind == 1:
                    rh, vh, _, _ = _read_states(sim, n_active)
                    idx = np.asarray(added, dtype=int)
                    snaps_r[j, idx] = rh
                    snaps_v[j, idx] = vh
    del rebx  # keep the REBOUNDx extras alive until the integration is over
    return Snapshots(out_t, snaps_r, snaps_v)


def step_grid(t0_tdb_jd: float, t_tdb_jd, dt_days: float):
    """Round times to the WHFast step grid ``t0 + k dt`` (nearest step)."""
    k = np.rint((np.asarray(t_tdb_jd, dtype=float) - t0_tdb_jd) / dt_days)
    return t0_tdb_jd + k * dt_days


def _advance(sim, t_target: float, t0: float, dt_days: float, fixed_step: bool):
    import rebound

    try:
        if fixed_step:
            n_steps = int(round((t_target - t0) / dt_days)) - int(round((sim.t - t0) / dt_days))
            if n_steps > 0:
                sim.steps(n_steps)
        elif t_target != sim.t:
            sim.integrate(t_target, exact_finish_time=1)
    except rebound.GenericError as exc:  # pragma: no cover - depends on REBOUND internals
        raise IntegrationFailed(f"REBOUND stopped at t = {sim.t}: {exc}") from exc


def provenance(integrator: str, dt_days: float) -> dict:
    """What ran: library versions, integrator settings, units and papers to cite."""
    import rebound
    import reboundx

    return {
        "library": f"REBOUND {rebound.__version__}, REBOUNDx {reboundx.__version__}",
        "integrator": integrator,
        "coordinates": "democratic heliocentric" if integrator == "whfast" else "barycentric",
        "dt_days": dt_days if integrator == "whfast" else None,
        "ias15_epsilon": IAS15_EPSILON if integrator == "ias15" else None,
        "units": "au, day, G = 1 with masses as GM (au^3/day^2)",
        "massive_bodies": list(MASSIVE_BODIES),
        "radiation": "REBOUNDx radiation_forces (radiation pressure and Poynting-Robertson drag)",
        "cite": [
            "Rein & Liu (2012), A&A 537, A128 (REBOUND)",
            "Rein & Tamayo (2015), MNRAS 452, 376 (WHFast)"
            if integrator == "whfast"
            else "Rein & Spiegel (2015), MNRAS 446, 1424 (IAS15)",
            "Tamayo et al. (2020), MNRAS 491, 2885 (REBOUNDx)",
        ],
    }
