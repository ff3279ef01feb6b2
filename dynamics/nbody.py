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
in au/day. General relativity acts on every body through REBOUNDx ``gr`` with the Sun as its
source (Anderson et al. 1975): without it Mercury drifts from DE423 by ~5e4 km and Venus by ~9e3
km per century (measured in ``tests/``).

Planets held to a track. In a meteoroid integration the planets are put back every
:data:`PLANET_HOLD_DAYS` on a track computed once per start state (:func:`planet_track`): DE423
inside its span, outside it a planets-only integration with ``gr``; integrated freely for a
century they drifted up to 9,200 km from DE423 (the Earth-Moon barycentre), held they stay
within a few km. The meteoroids keep ``gr`` (~35 % of their steps): without it a century moves
Leonid-like meteoroids ~1e-4 au along their orbits (periods ~1e-6 different) and the default
1999 forecast's encounters by 0-4 s, but the 7-revolution passage of the 1767 trail in 2001 was
reached in 22 of 32 seeds without it against 15 of 16 with it and held planets, 31 of 32 with
it and integrated planets (measured; cause not found), and reach comes first.

The parent comet's own integration (:class:`ParentSimulation`, IAS15 with optional Marsden
non-gravitational forces) is here too, so that no other module touches REBOUND.
"""

import math
import warnings
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .constants import C_AU_DAY, GM_SUN_AU3_D2
from .ephemeris import barycentric_states, gm_au3_d2
from .errors import TrailcastError
from .orbits import distance_after

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


#: Order of WHFast's symplectic corrector (REBOUND offers 3, 5, 7, 11, 17; 0: none).
WHFAST_CORRECTOR_ORDER = 3


def _new_simulation(bodies: MassiveBodies, integrator: str, dt_days: float):
    """A REBOUND simulation of the massive bodies (G = 1, masses as GM), no forces attached."""
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
    _set_integrator(sim, integrator, dt_days)
    return sim


def _set_integrator(sim, integrator: str, dt_days: float) -> None:
    """Select and configure the integrator. Selecting it again after particle states were set
    from outside makes it start from those states (measured: WHFast otherwise keeps stepping its
    own internal coordinates and ignores them)."""
    if integrator == "whfast":
        sim.integrator = "whfast"
        sim.integrator.coordinates = "democraticheliocentric"
        # Unsynchronised stepping: the closing half drift of one step and the opening half
        # drift of the next merge (Rein & Tamayo 2015, MNRAS 452, 376). Callers synchronise
        # before reading or adding particles (integrate_particles does); measured here:
        # 0.7x the time of safe mode, final positions equal to 1e-11 au.
        sim.integrator.safe_mode = 0
        # Symplectic corrector (Wisdom, Holman & Touma 1996; Rein & Tamayo 2015), applied only
        # when synchronising (at releases and outputs). Measured here on 120 meteoroids over
        # 67 years: the median distance from IAS15 falls from 7e-6 au to 1.5e-8 au with order 3
        # (1.2e-8 with orders 5-11); the 90th percentile, set by close planetary encounters,
        # from 6e-5 to 2e-5 au. Cost with 164 release times and 40 outputs: +2.5 % (order 3),
        # +4.5 % (5), +12 % (11).
        sim.integrator.corrector = WHFAST_CORRECTOR_ORDER
        sim.dt = float(dt_days)
    else:
        sim.integrator = "ias15"
        sim.integrator.epsilon = IAS15_EPSILON
        sim.dt = float(dt_days)


def _attach_forces(sim, radiation: bool, relativity: bool = True):
    """REBOUNDx forces with the Sun as source: general relativity (``gr``, all bodies) and
    radiation pressure + Poynting-Robertson drag (``radiation_forces``, particles with a beta).

    Returns the Extras object (keep it alive while the simulation runs), or None.
    """
    if not (radiation or relativity):
        return None
    import reboundx

    rebx = reboundx.Extras(sim)
    if relativity:
        gr = rebx.load_force("gr")
        rebx.add_force(gr)
        gr.params["c"] = C_AU_DAY
        sim.particles[0].params["gr_source"] = 1
    if radiation:
        force = rebx.load_force("radiation_forces")
        rebx.add_force(force)
        force.params["c"] = C_AU_DAY
        sim.particles[0].params["radiation_source"] = 1
    return rebx


#: How often the planets of a meteoroid integration are put back on their track (days).
#: Holding every 10 days instead moved Leonid-like meteoroids by 2e-9 au (median) over a
#: century and cost 1.7x the time; holding every 100 days costs ~5 % over none (measured here,
#: 200 meteoroids).
PLANET_HOLD_DAYS = 100.0
#: Planet tracks kept per process (a worker meets the same trail's start in every round; a
#: default forecast follows ~20 returns; a 500-year track takes ~1 MB).
_TRACK_CACHE_SIZE = 32
_TRACKS: "OrderedDict[tuple, PlanetTrack]" = OrderedDict()


@dataclass(frozen=True)
class PlanetTrack:
    """Barycentric states of the massive bodies at hold times (ecliptic J2000).

    ``r_au`` and ``v_au_d`` have shape (n_times, n_bodies, 3). ``source`` says, per time,
    ``"de423"`` or ``"integrated"`` (outside DE423's span: WHFast with ``gr`` from the start
    state, at the meteoroids' step).
    """

    t_tdb_jd: np.ndarray
    r_au: np.ndarray
    v_au_d: np.ndarray
    source: tuple[str, ...]


def planet_track(
    bodies: MassiveBodies,
    t_end_tdb_jd: float,
    dt_days: float,
    every_days: float = PLANET_HOLD_DAYS,
) -> PlanetTrack:
    """The planets' states every ``every_days`` (a whole number of steps) after ``bodies.t``
    up to ``t_end_tdb_jd``: DE423 (Folkner 2010) inside its span, where no integration can do
    better; outside it, the planets integrated with WHFast and REBOUNDx ``gr`` from ``bodies``
    (the meteoroid integration's own start state, e.g. a parent history's planets before 1800).

    Kept in a per-process cache by start state: every chunk of a trail starts from the same
    state, and a track computed further serves every shorter need.
    """
    from .ephemeris import EPHEMERIS_SPAN_TDB_JD

    step = max(1, int(round(every_days / dt_days))) * dt_days
    t0 = bodies.t_tdb_jd
    n = int(math.floor((t_end_tdb_jd - t0) / step + 1e-9))
    key = (t0, bodies.r_au.tobytes(), bodies.v_au_d.tobytes(), dt_days, step)
    hit = _TRACKS.get(key)
    if hit is not None and len(hit.t_tdb_jd) >= n:  # a longer track serves a shorter need
        _TRACKS.move_to_end(key)
        k = max(n, 0)
        return PlanetTrack(hit.t_tdb_jd[:k], hit.r_au[:k], hit.v_au_d[:k], hit.source[:k])
    times = t0 + step * np.arange(1, max(n, 0) + 1)
    r = np.empty((len(times), len(bodies.names), 3))
    v = np.empty_like(r)
    inside = (times >= EPHEMERIS_SPAN_TDB_JD[0]) & (times <= EPHEMERIS_SPAN_TDB_JD[1])
    if inside.any():
        rr, vv = barycentric_states(bodies.names, times[inside], stacked=True)
        r[inside] = np.swapaxes(rr, 0, 1)
        v[inside] = np.swapaxes(vv, 0, 1)
    outside = np.flatnonzero(~inside)  # before 1800 (or, never in a forecast, after 2200)
    if len(outside):
        sim = _new_simulation(bodies, "whfast", dt_days)
        with warnings.catch_warnings():
            # gr is velocity dependent: under WHFast its error is of the order of the force
            # itself times the step (checked against IAS15 in tests/test_nbody.py: < 1 km).
            warnings.filterwarnings("ignore", message=".*velocity-dependent force.*")
            rebx = _attach_forces(sim, radiation=False, relativity=True)
            xyz = np.empty((sim.N, 3))
            vel = np.empty((sim.N, 3))
            for i in outside:
                _advance(sim, times[i], t0, dt_days, True)
                sim.synchronize()
                sim.serialize_particle_data(xyz=xyz, vxvyvz=vel)
                r[i], v[i] = xyz, vel
            del rebx
    source = tuple("de423" if k else "integrated" for k in inside)
    track = PlanetTrack(times, r, v, source)
    _TRACKS[key] = track
    while len(_TRACKS) > _TRACK_CACHE_SIZE:
        _TRACKS.popitem(last=False)
    return track


def _hold_planets(sim, integrator: str, dt_days: float, r_au, v_au_d) -> None:
    """Put the massive bodies on (r_au, v_au_d) (barycentric) and move every test particle with
    the Sun, so that heliocentric states, the ones that matter for meteoroids, are unchanged.
    The simulation must be synchronised."""
    n_active = sim.N_active
    xyz = np.empty((sim.N, 3))
    vel = np.empty((sim.N, 3))
    sim.serialize_particle_data(xyz=xyz, vxvyvz=vel)
    xyz[n_active:] += r_au[0] - xyz[0]
    vel[n_active:] += v_au_d[0] - vel[0]
    xyz[:n_active] = r_au
    vel[:n_active] = v_au_d
    sim.set_serialized_particle_data(xyz=xyz, vxvyvz=vel)
    _set_integrator(sim, integrator, dt_days)


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
    an output time has NaN there. ``bodies_r_au`` (n_times, n_bodies, 3): the massive bodies'
    barycentric positions in the simulation at those times (to check them against DE423).
    """

    t_tdb_jd: np.ndarray
    r_au: np.ndarray
    v_au_d: np.ndarray
    bodies_r_au: np.ndarray | None = None


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
    planets: str = "held",
    relativity: bool = True,
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
    planets : {"held", "integrated"}
        ``"held"`` (default): the planets are put back on :func:`planet_track` every
        :data:`PLANET_HOLD_DAYS`. ``"integrated"``: they move only by this integration.
    relativity : bool
        REBOUNDx ``gr`` (Sun as source) on every body, meteoroids included.

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
    if planets not in ("held", "integrated"):
        raise ValueError(f"planets must be 'held' or 'integrated', not {planets!r}")
    order = np.argsort(release, kind="stable")
    sim = _new_simulation(bodies, integrator, dt_days)
    n_active = sim.N_active
    fixed_step = integrator == "whfast"
    held = planets == "held" and m > 0
    track = planet_track(bodies, float(out_t[-1]), dt_days) if held else None

    snaps_r = np.full((m, n, 3), np.nan)
    snaps_v = np.full((m, n, 3), np.nan)
    snaps_bodies = np.empty((m, n_active, 3))
    # Events in time order: holds (kind -1), then releases (kind 0), then outputs (kind 1) at
    # the same instant.
    holds = [] if track is None else [(t, -1, j) for j, t in enumerate(track.t_tdb_jd)]
    events = sorted(
        holds + [(release[i], 0, i) for i in order] + [(out_t[j], 1, j) for j in range(m)],
        key=lambda ev: (ev[0], ev[1]),
    )
    added: list[int] = []  # particle index of each simulation slot
    rebx = _attach_forces(sim, bool(radiation and np.any(beta > 0)), relativity)
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
            if fixed_step:  # WHFast steps unsynchronised: the states are needed now
                sim.synchronize()
            for _, kind, j in batch:
                if kind == -1:
                    _hold_planets(sim, integrator, dt_days, track.r_au[j], track.v_au_d[j])
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
                    rh, vh, snaps_bodies[j], _ = _read_states(sim, n_active)
                    idx = np.asarray(added, dtype=int)
                    snaps_r[j, idx] = rh
                    snaps_v[j, idx] = vh
    del rebx  # keep the REBOUNDx extras alive until the integration is over
    return Snapshots(out_t, snaps_r, snaps_v, snaps_bodies)


class ParentSimulation:
    """The parent comet as a test particle among the Sun and planets, integrated with IAS15.

    Parameters
    ----------
    bodies : MassiveBodies
        Sun and planets at the start (barycentric, ecliptic J2000).
    r_helio_au, v_helio_au_d : array (3,)
        The parent's heliocentric state at ``bodies.t_tdb_jd``.
    nongrav : tuple, optional
        ``(a1, a2, a3, g)`` or ``(a1, a2, a3, g, dt)``: the Marsden coefficients (au/day^2),
        the g(r) law and the asymmetric model's offset dt (days; Yeomans & Chodas 1989: g is
        taken at the distance of ``t - dt`` on the osculating orbit); the acceleration
        ``g (A1 R + A2 T + A3 N)`` is applied through a Python callback on this one particle.
        General relativity (REBOUNDx) is used only without non-gravitational forces: a Python
        force callback and REBOUNDx cannot share one simulation.
    """

    def __init__(self, bodies: MassiveBodies, r_helio_au, v_helio_au_d, nongrav=None):
        self._nongrav = nongrav
        self._build(bodies, r_helio_au, v_helio_au_d)

    def _build(self, bodies: MassiveBodies, r_helio_au, v_helio_au_d) -> None:
        nongrav = self._nongrav
        sim = _new_simulation(bodies, "ias15", 1.0)
        sun_r, sun_v = bodies.r_au[0], bodies.v_au_d[0]
        pos = np.asarray(r_helio_au, dtype=float) + sun_r
        vel = np.asarray(v_helio_au_d, dtype=float) + sun_v
        sim.add(m=0.0, x=pos[0], y=pos[1], z=pos[2], vx=vel[0], vy=vel[1], vz=vel[2])
        self._sim = sim
        self._keep = None
        self.relativity = False
        if nongrav is not None and any(nongrav[:3]):
            self._keep = _nongrav_callback(sim, sim.N - 1, *nongrav)
        else:
            self._keep = _attach_forces(sim, radiation=False, relativity=True)
            self.relativity = True

    @property
    def t_tdb_jd(self) -> float:
        return float(self._sim.t)

    def integrate(self, t_tdb_jd: float) -> None:
        """Advance (or go back) exactly to ``t_tdb_jd``."""
        import rebound

        try:
            self._sim.integrate(float(t_tdb_jd), exact_finish_time=1)
        except rebound.GenericError as exc:  # pragma: no cover - depends on REBOUND internals
            raise IntegrationFailed(f"REBOUND stopped at t = {self._sim.t}: {exc}") from exc

    def set_parent_state(self, r_helio_au, v_helio_au_d) -> None:
        """Put the parent at another heliocentric state now; the Sun and planets stay.

        A new REBOUND simulation is built from the bodies as they are now: IAS15 predicts each
        step from the last one, and that memory must not carry across a jump of the parent.
        """
        self._build(self.massive_bodies(), r_helio_au, v_helio_au_d)

    def parent_state(self):
        """Heliocentric position (au) and velocity (au/day) of the parent."""
        ps = self._sim.particles
        sun, p = ps[0], ps[self._sim.N - 1]
        r = np.array([p.x - sun.x, p.y - sun.y, p.z - sun.z])
        v = np.array([p.vx - sun.vx, p.vy - sun.vy, p.vz - sun.vz])
        return r, v

    def massive_bodies(self) -> MassiveBodies:
        """Sun and planets now (barycentric)."""
        sim = self._sim
        n_active = sim.N_active
        xyz = np.empty((sim.N, 3))
        vel = np.empty((sim.N, 3))
        sim.serialize_particle_data(xyz=xyz, vxvyvz=vel)
        gm = np.array([sim.particles[i].m for i in range(n_active)])
        return MassiveBodies(
            float(sim.t), MASSIVE_BODIES, gm, xyz[:n_active].copy(), vel[:n_active].copy()
        )

    def barycentric_inverse_a(self) -> float:
        """1/a of the parent's barycentric orbit about the total mass (1/au): the 'original'
        orbit of a long-period comet when taken far from the planets."""
        sim = self._sim
        xyz = np.empty((sim.N, 3))
        vel = np.empty((sim.N, 3))
        sim.serialize_particle_data(xyz=xyz, vxvyvz=vel)
        gm_total = sum(sim.particles[i].m for i in range(sim.N_active))
        r = np.linalg.norm(xyz[-1])  # the simulation frame is the DE423 barycentre
        return 2.0 / r - float(np.dot(vel[-1], vel[-1])) / gm_total


def _nongrav_callback(
    sim, index: int, a1: float, a2: float, a3: float, g_of_r: Callable, dt_days: float = 0.0
):
    """Python force callback for one particle (only the parent: its cost is one particle)."""

    def force(sim_pointer):
        # the C particle array directly: REBOUND's `particles` mapping checks and wraps every
        # index (~5 us each; with two per call that was a third of a parent history's time)
        ps = sim_pointer.contents._particles
        sun, p = ps[0], ps[index]
        x, y, z = p.x - sun.x, p.y - sun.y, p.z - sun.z
        vx, vy, vz = p.vx - sun.vx, p.vy - sun.vy, p.vz - sun.vz
        r = math.sqrt(x * x + y * y + z * z)
        hx, hy, hz = y * vz - z * vy, z * vx - x * vz, x * vy - y * vx
        h = math.sqrt(hx * hx + hy * hy + hz * hz)
        rx, ry, rz = x / r, y / r, z / r
        nx, ny, nz = hx / h, hy / h, hz / h
        tx, ty, tz = ny * rz - nz * ry, nz * rx - nx * rz, nx * ry - ny * rx
        if dt_days:
            r_g = distance_after((x, y, z), (vx, vy, vz), -dt_days, GM_SUN_AU3_D2)
        else:
            r_g = r
        g = float(g_of_r(r_g))
        p.ax += g * (a1 * rx + a2 * tx + a3 * nx)
        p.ay += g * (a1 * ry + a2 * ty + a3 * ny)
        p.az += g * (a1 * rz + a2 * tz + a3 * nz)

    sim.additional_forces = force
    sim.force_is_velocity_dependent = 1
    return force


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
        "whfast_corrector_order": WHFAST_CORRECTOR_ORDER if integrator == "whfast" else None,
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
