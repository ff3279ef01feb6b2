"""The dust-trail forecast pipeline: parent history -> release -> targeting -> N-body -> crossings.

:func:`forecast` is the Python API the CLI and the service call. It returns a
:class:`ForecastResult` whose :meth:`~ForecastResult.to_json` gives the documented JSON.

Reproducibility: every random draw comes from ``numpy.random.SeedSequence([seed, trail])``, and
particles are split into chunks of a fixed size in a fixed order, so the result does not depend
on how many worker processes ran the chunks (meteoroids are test particles: none affects
another).
"""

import concurrent.futures as cf
import multiprocessing
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from . import __version__
from .activity import (
    DEFAULT_DUST_MASS_RANGE_G,
    DEFAULT_DUST_TO_GAS,
    DEFAULT_EROSION_M_PER_RETURN,
    MODEL_UNCERTAINTY_FACTOR,
    Profile,
    default_dust_mass_per_return_g,
    limiting_mass_g,
    meteoroids_per_particle,
    trail_activity,
)
from .constants import DAYS_PER_JULIAN_YEAR
from .ejection import population_index_from_mass_index
from .encounters import Crossings, circular_median_radec, node_crossings
from .ephemeris import ephemeris_info, heliocentric_state
from .errors import TrailcastError
from .history import FirstPassage, ParentHistory, ParentReturn, parent_history
from .nbody import integrate_particles, provenance, step_grid
from .orbit_input import OrbitInput
from .solar_longitude import solar_longitude_deg, times_of_solar_longitude_tdb
from .timescales import TIME_SCALE_NOTES, calendar_year_tdb_jd, format_iso, format_utc
from .trails import (
    Candidates,
    EjectionModel,
    draw_candidates,
    nodes_near_earth,
    parent_node_time,
)

#: |median miss distance| below which a trail crossing can be an encounter (au).
#: Common practice, no source: trails passing within ~0.005 au have given outbursts.
ENCOUNTER_MAX_MISS_AU = 0.005
#: ... and Earth's path must lie within this many standard deviations of the trail's
#: cross-section (the 16-84 % half-range of its meteoroids' miss distances) plus Earth's radius.
ENCOUNTER_SIGMAS = 3.0
EARTH_RADIUS_AU = 6371.0 / 149_597_870.7  # mean Earth radius (IUGG), in au
#: Trails crossing farther than this are not reported at all (au).
NEAR_MISS_MAX_AU = 0.05
#: Extra selection rounds for a trail whose meteoroids mostly missed Earth's passage: each
#: re-maps predicted to real arrivals with everything integrated so far (old, strongly perturbed
#: trails need them).
REFINEMENT_ROUNDS = 3
#: A parent node farther than this from Earth's orbit is not followed (au).
NODE_MAX_DISTANCE_AU = 0.25


class CalibrationFailed(TrailcastError):
    """The calibration outburst's trail gives no modelled activity in its year: check the year
    and the trail's perihelion year, or use absolute mode."""


CAUTIONS = (
    "Predictions are model estimates with real uncertainty; timings are typically good to tens "
    "of minutes for well-observed parents, intensities to a factor of several at best.",
    "Spacecraft operators: defer to the responsible agencies' meteoroid environment assessments.",
    "Observers: follow the usual night-time and outdoor safety practice.",
)


@dataclass(frozen=True)
class Calibration:
    """A past observed outburst of the same parent, used to scale the ZHR.

    Attributes
    ----------
    year : int
        Year of the observed outburst.
    trail_year : int
        Perihelion year of the trail it is attributed to.
    zhr : float
        Observed peak ZHR.
    """

    year: int
    trail_year: int
    zhr: float


@dataclass(frozen=True)
class ForecastOptions:
    """Choices of one forecast. Every field has a documented default.

    Attributes
    ----------
    first_year, last_year : int
        Calendar years (UTC) to forecast, inclusive.
    particles : int
        Meteoroids integrated per trail and Earth passage after targeting.
    pilot_particles : int
        Meteoroids integrated per trail and passage to calibrate the targeting.
    seed : int
        Random seed; the same seed gives the same result.
    trails : tuple of int or None
        Perihelion years whose trails to include (None: all within ``max_trail_age_years``).
    max_trail_age_years : float
        Oldest trail followed for short-period parents (years before ``first_year``).
    window_days : float
        A meteoroid counts for an Earth passage when it crosses the node within this many days
        of Earth passing the same longitude.
    pilot_window_days : float
        Half-width of the arrival window the pilot set spans.
    integrator, dt_days : str, float
        REBOUND integrator and WHFast step (see the README's comparison with IAS15).
    workers : int
        Worker processes for the chunks (1 = in this process).
    chunk_size : int
        Meteoroids per simulation chunk.
    candidates : int
        Release conditions drawn per trail for the targeting.
    ejection : EjectionModel
    """

    first_year: int
    last_year: int
    particles: int = 300
    pilot_particles: int = 40
    seed: int = 1
    trails: tuple[int, ...] | None = None
    max_trail_age_years: float = 500.0
    window_days: float = 20.0
    pilot_window_days: float = 150.0
    integrator: str = "whfast"
    dt_days: float = 0.5
    workers: int = 1
    chunk_size: int = 250
    candidates: int = 200_000
    ejection: EjectionModel = field(default_factory=EjectionModel)
    dust_mass_per_return_g: float | None = None
    calibration: Calibration | None = None
    zhr_scale: float = 1.0  # set by the calibration; 1 in absolute mode

    def describe(self) -> dict:
        return {
            "years": [self.first_year, self.last_year],
            "particles_per_trail": self.particles,
            "pilot_particles": self.pilot_particles,
            "seed": self.seed,
            "trails": list(self.trails) if self.trails is not None else None,
            "max_trail_age_years": self.max_trail_age_years,
            "window_days": self.window_days,
            "integrator": self.integrator,
            "dt_days": self.dt_days,
            "chunk_size": self.chunk_size,
            "dust_mass_per_return_g": self.dust_mass(),
            "dust_mass_rule": None
            if self.dust_mass_per_return_g is not None
            else (
                f"default: {DEFAULT_EROSION_M_PER_RETURN} m of the surface of a "
                f"{self.ejection.nucleus_radius_km} km nucleus of density "
                f"{self.ejection.nucleus_density_g_cm3} g/cm^3 per return, dust/gas "
                f"{DEFAULT_DUST_TO_GAS}, spread over {DEFAULT_DUST_MASS_RANGE_G[0]:g}-"
                f"{DEFAULT_DUST_MASS_RANGE_G[1]:g} g (common practice, no source)"
            ),
        }

    def dust_mass(self) -> float:
        """Dust mass released per return (g), stated or by the default rule."""
        if self.dust_mass_per_return_g is not None:
            return float(self.dust_mass_per_return_g)
        return default_dust_mass_per_return_g(
            self.ejection.nucleus_radius_km, self.ejection.nucleus_density_g_cm3
        )


@dataclass(frozen=True)
class TrailEncounter:
    """One trail's crossing of Earth's path at one Earth passage."""

    year: int
    trail_perihelion_tdb_jd: float
    revolutions: int
    node: str
    peak_tdb_jd: float
    solar_longitude_deg: float
    miss_distance_au: float
    miss_distance_spread_au: float
    fwhm_hours: float
    ra_deg: float
    dec_deg: float
    vg_km_s: float
    vinf_km_s: float
    particles: int
    dilution: float
    earth_passage_tdb_jd: float
    crossings: Crossings = field(repr=False)
    weights: np.ndarray = field(repr=False)
    meteoroids: Candidates = field(repr=False)  # release time, mass, size, beta of each one
    profile: Profile | None = field(default=None, repr=False)
    population_index: float = float("nan")
    zhr_estimate: float = 0.0
    zhr_low: float = 0.0
    zhr_high: float = 0.0
    zhr_mode: str = "absolute"

    def to_json(self) -> dict:
        return {
            "year": self.year,
            "trail": {
                "perihelion_tdb": format_iso(self.trail_perihelion_tdb_jd, "TDB"),
                "perihelion_year": _year_of(self.trail_perihelion_tdb_jd),
                "revolutions": self.revolutions,
            },
            "node": self.node,
            "peak_utc": format_utc(self.peak_tdb_jd),
            "solar_longitude_deg": round(self.solar_longitude_deg, 4),
            "miss_distance_au": round(self.miss_distance_au, 6),
            "miss_distance_spread_au": round(self.miss_distance_spread_au, 6),
            "fwhm_hours": round(self.fwhm_hours, 2),
            "radiant": {"ra_deg": round(self.ra_deg, 2), "dec_deg": round(self.dec_deg, 2)},
            "vg_km_s": round(self.vg_km_s, 2),
            "vinf_km_s": round(self.vinf_km_s, 2),
            "particles": self.particles,
            "dilution": round(self.dilution, 4),
            "population_index": round(self.population_index, 3),
            "zhr": {
                "estimate": _zhr(self.zhr_estimate),
                "low": _zhr(self.zhr_low),
                "high": _zhr(self.zhr_high),
                "mode": self.zhr_mode,
                "box_count_estimate": None if self.profile is None else _zhr(self.profile.box_zhr),
                "estimators_disagree": None
                if self.profile is None
                else self.profile.estimators_disagree,
            },
            "window": None
            if self.profile is None or self.profile.window_tdb_jd is None
            else {
                "start_utc": format_utc(self.profile.window_tdb_jd[0]),
                "end_utc": format_utc(self.profile.window_tdb_jd[1]),
            },
            "profile": [] if self.profile is None else _profile_json(self.profile),
        }


@dataclass(frozen=True)
class ForecastResult:
    parent: OrbitInput
    options: ForecastOptions
    encounters: tuple[TrailEncounter, ...]
    near_misses: tuple[TrailEncounter, ...]
    particles_integrated: int
    particles_contributing: int
    candidates_drawn: int
    history: ParentHistory = field(repr=False)
    notes: tuple[str, ...] = ()
    calibration: dict | None = None

    def to_json(self) -> dict:
        return {
            "parent": self.parent.to_json(),
            "model": {
                "version": __version__,
                "ejection_model": self.options.ejection.describe(),
                "integrator": provenance(self.options.integrator, self.options.dt_days),
                "particles_integrated": self.particles_integrated,
                "particles_contributing": self.particles_contributing,
                "candidates_drawn": self.candidates_drawn,
                "seed": self.options.seed,
                "options": self.options.describe(),
                "ephemeris": ephemeris_info(),
                "parent_returns_tdb": [
                    format_iso(r.tp_tdb_jd, "TDB") for r in self.history.returns
                ],
                "zhr_mode": "calibrated" if self.calibration else "absolute",
                "calibration": self.calibration,
                "dust_mass_per_return_g": self.options.dust_mass(),
                "zhr_method": "per mass decade, a Gaussian tube (median, 16-84 % half-range) "
                "along and across Earth's path fitted to the simulated meteoroids above the "
                "+6.5 mag mass limit after removing their drift with arrival time; flux "
                "Q = n Vg (1 + v_esc^2/Vg^2); ZHR = Q x 37200 km^2 / c(r) (Koschack & Rendtel "
                "1990); box_count_estimate: weighted meteoroids in a space-time box around Earth "
                "(after Vaubaillon et al. 2005), estimators_disagree beyond a factor 3; low/high: "
                "bootstrap 16-84 % widened by the model factor of the mode",
            },
            "conventions": {
                "times": "UTC, ISO 8601",
                "solar_longitude": "geometric, equinox J2000",
                "radiant": "RA/Dec, equinox J2000, geocentric, without zenith attraction",
                "miss_distance": "meteoroid node distance minus Earth's heliocentric distance at "
                "the same longitude (au); positive = trail outside Earth's orbit",
                "time_scale_notes": list(TIME_SCALE_NOTES),
            },
            "encounters": [e.to_json() for e in self.encounters],
            "near_misses": [e.to_json() for e in self.near_misses],
            "notes": list(self.notes),
            "cautions": list(CAUTIONS),
        }


# --- tasks (top-level so that worker processes can run them) -------------------------------------


@dataclass(frozen=True)
class _Task:
    key: tuple
    bodies: object
    release_t: np.ndarray
    r: np.ndarray
    v: np.ndarray
    beta: np.ndarray
    out_t: np.ndarray
    integrator: str
    dt_days: float


def _run_task(task: _Task):
    return integrate_particles(
        task.bodies,
        task.release_t,
        task.r,
        task.v,
        task.beta,
        task.out_t,
        integrator=task.integrator,
        dt_days=task.dt_days,
    )


def _run_all(tasks, workers: int, executor=None, on_done=None):
    """Run integration tasks, in order of submission; ``on_done(k, n)`` after each one.

    An exception raised by ``on_done`` (e.g. a cancelled job) stops the run: tasks not yet
    started are cancelled.
    """
    n = len(tasks)
    report = on_done or (lambda k, total: None)
    if executor is None and (workers <= 1 or n <= 1):
        out = []
        for k, t in enumerate(tasks):
            out.append(_run_task(t))
            report(k + 1, n)
        return out
    own = executor is None
    if own:
        ctx = multiprocessing.get_context("spawn")  # safe under a threaded web server
        executor = cf.ProcessPoolExecutor(max_workers=workers, mp_context=ctx)
    futures = [executor.submit(_run_task, t) for t in tasks]
    try:
        for k, _ in enumerate(cf.as_completed(futures)):
            report(k + 1, n)
        return [f.result() for f in futures]
    except BaseException:
        for f in futures:
            f.cancel()
        raise
    finally:
        if own:
            executor.shutdown(wait=True, cancel_futures=True)


# --- the pipeline ------------------------------------------------------------------------------


@dataclass
class _Target:
    """One trail, one Earth passage of one node, one number of revolutions."""

    trail: int
    year: int
    node: str
    t_earth: float
    revolutions: int
    t_parent_node: float
    fit: tuple = (0.0, 1.0)
    x_seen: np.ndarray = field(default_factory=lambda: np.zeros(0))  # predicted offsets (days)
    y_seen: np.ndarray = field(default_factory=lambda: np.zeros(0))  # actual offsets (days)
    selection: Candidates | None = None
    selection_scale: float = 1.0  # weight of all candidates in the window / of those integrated


#: ZHR values below this are reported as 0 (far below anything an observer could notice).
ZHR_REPORT_FLOOR = 0.01


def _round_sig(x: float, digits: int = 3) -> float:
    if not np.isfinite(x) or x == 0:
        return 0.0 if x == 0 else float(x)
    return float(f"{x:.{digits}g}")


def _zhr(x: float) -> float:
    return 0.0 if x < ZHR_REPORT_FLOOR else _round_sig(x)


def _profile_json(p: Profile, n: int = 61) -> list:
    idx = np.unique(np.linspace(0, len(p.t_tdb_jd) - 1, n).round().astype(int))
    times = format_utc(p.t_tdb_jd[idx])
    return [
        {"time_utc": t, "zhr": _round_sig(float(z))} for t, z in zip(times, p.zhr[idx], strict=True)
    ]


def _year_of(t_tdb_jd: float) -> int:
    """Calendar year (TDB, astronomical numbering) of a TDB Julian date."""
    text = format_iso(t_tdb_jd, "TDB")
    return int(text[:5]) if text.startswith("-") else int(text[:4])


def forecast(
    orbit: OrbitInput,
    options: ForecastOptions,
    *,
    progress: Callable[[float, str], None] | None = None,
    executor=None,
) -> ForecastResult:
    """Forecast the parent's dust-trail encounters with Earth in the requested years.

    Parameters
    ----------
    orbit : OrbitInput
        The parent's orbit (epoch within DE423's span).
    options : ForecastOptions
    progress : callable, optional
        Called as ``progress(fraction, stage)`` while the forecast runs.
    executor : concurrent.futures.Executor, optional
        Runs the integration chunks (a Dask client's executor works too); default: a local
        process pool with ``options.workers`` processes.

    Returns
    -------
    ForecastResult

    Raises
    ------
    dynamics.history.FirstPassage
        When the parent is on its first passage (no earlier returns: no trails).
    """
    if executor is None and options.workers > 1:
        # one pool for the pilot and the main stage: worker start-up is paid once
        ctx = multiprocessing.get_context("spawn")  # safe under a threaded web server
        with cf.ProcessPoolExecutor(max_workers=options.workers, mp_context=ctx) as pool:
            return _forecast(orbit, options, progress=progress, executor=pool)
    return _forecast(orbit, options, progress=progress, executor=executor)


def _forecast(
    orbit: OrbitInput,
    options: ForecastOptions,
    *,
    progress: Callable[[float, str], None] | None = None,
    executor=None,
) -> ForecastResult:
    """See :func:`forecast`."""
    report = progress or (lambda f, s: None)
    reached = [0.0]

    def say(fraction: float, stage: str) -> None:
        reached[0] = max(reached[0], min(fraction, 1.0))  # progress never goes back
        report(reached[0], stage)

    if options.last_year < options.first_year:
        raise ValueError("last_year must not precede first_year")
    calibration = None
    if options.calibration is not None:
        calibration, options = _calibrate(orbit, options, executor)
    y_start, _ = calendar_year_tdb_jd(options.first_year)
    _, y_end = calendar_year_tdb_jd(options.last_year)
    say(0.0, "parent history")
    t_min = y_start - options.max_trail_age_years * DAYS_PER_JULIAN_YEAR
    if options.trails:  # only the named trails: no need to go further back than the oldest
        t_min = calendar_year_tdb_jd(min(options.trails))[0] - 400.0
    period = orbit.period_days if np.isfinite(orbit.period_days) else 0.0
    t_max = y_end + min(1.3 * period, 300 * DAYS_PER_JULIAN_YEAR) + 60.0
    try:
        history = parent_history(
            orbit, t_min, t_max, active_r_max_au=options.ejection.active_r_max_au
        )
    except FirstPassage as exc:  # a result, not an error: no earlier returns, no trails
        history = ParentHistory((), orbit.epoch_tdb_jd, None, (str(exc),))
    returns = history.returns
    notes = list(history.notes)

    # Which trails: returns before the forecast span, with an active arc.
    trail_ids = []
    for k, ret in enumerate(returns):
        if ret.tp_tdb_jd >= y_end or len(ret.arc_t_tdb_jd) == 0:
            continue
        if options.trails is not None:
            if _year_of(ret.tp_tdb_jd) not in options.trails:
                continue
        elif ret.tp_tdb_jd < t_min and k != _last_before(returns, y_start):
            continue
        trail_ids.append(k)
    if not trail_ids:
        notes.append("no parent return in the requested span has an active arc: no trails")

    say(0.05, "targeting")
    targets = _targets(returns, trail_ids, options)
    if trail_ids and not targets:
        notes.append(
            "no trail can reach Earth's path in the requested years with the ejection model"
        )

    # Candidates per trail (deterministic per trail).
    pools: dict[int, Candidates] = {}
    rngs: dict[int, np.random.Generator] = {}
    drawn = 0
    for k in sorted({t.trail for t in targets}):
        rngs[k] = np.random.default_rng(
            np.random.SeedSequence([options.seed, int(round(returns[k].tp_tdb_jd))])
        )
        pools[k] = draw_candidates(returns[k], options.ejection, options.candidates, rngs[k])
        drawn += options.candidates

    # Pilot: integrate a spread of candidates per target, fit real vs predicted arrival.
    pilot_tasks, pilot_meta = [], []
    for ti, tg in enumerate(targets):
        pool = pools[tg.trail]
        x = _predicted_offset(pool, tg)
        inside = np.flatnonzero(np.abs(x) <= _pilot_window(options, tg))
        if len(inside) == 0:
            continue
        order = inside[np.argsort(x[inside])]
        pick = order[
            np.unique(np.linspace(0, len(order) - 1, options.pilot_particles).round().astype(int))
        ]
        sel = pool.take(pick)
        out_t = _output_times(
            returns[tg.trail], tg.t_earth, _pilot_window(options, tg) + 40.0, 5.0, options.dt_days
        )
        pilot_tasks.append(_make_task(("pilot", ti), returns[tg.trail], sel, out_t, options))
        pilot_meta.append((ti, sel, x[pick]))
    say(0.1, "pilot integration")
    pilot_results = _run_all(
        pilot_tasks,
        options.workers,
        executor,
        lambda k, n: say(0.1 + 0.2 * k / n, "pilot integration"),
    )
    integrated = sum(len(t.beta) for t in pilot_tasks)
    for (ti, sel, x_pred), snaps in zip(pilot_meta, pilot_results, strict=True):
        tg = targets[ti]
        cr = node_crossings(snaps, sel.beta, tg.node)
        tg.x_seen = np.asarray(x_pred, dtype=float)
        tg.y_seen = cr.t_cross_tdb_jd - tg.t_earth
        tg.fit = _robust_line(tg.x_seen, tg.y_seen)
        if not (0.2 <= tg.fit[1] <= 5.0):  # no sensible calibration: fall back to the prediction
            tg.fit = (0.0, 1.0)

    # Main integration, then up to REFINEMENT_ROUNDS rounds for targets where most meteoroids
    # missed: the arrivals of everything integrated so far map the prediction to the real one.
    per_target: dict[int, list] = {}
    used: dict[int, np.ndarray] = {}
    for round_ in range(1 + REFINEMENT_ROUNDS):
        # progress: selection 0.30, main integration 0.35-0.75, each refinement round 0.05 more
        lo, span = (0.35, 0.4) if round_ == 0 else (0.75 + 0.05 * (round_ - 1), 0.05)
        say(0.3 if round_ == 0 else lo, "selection" if round_ == 0 else "refinement")
        main_tasks, main_meta = [], []
        for ti, tg in enumerate(targets):
            if round_ > 0 and not _needs_refinement(tg, per_target.get(ti, []), options):
                continue
            pool = pools[tg.trail]
            x_all = _predicted_offset(pool, tg)
            ok = np.abs(_arrival_model(tg)(x_all)) <= options.window_days
            taken = used.get(ti, np.zeros(len(pool), dtype=bool))
            idx = np.flatnonzero(ok & ~taken)[: options.particles]
            if len(idx) == 0:
                continue
            taken = taken.copy()
            taken[idx] = True
            used[ti] = taken
            new = pool.take(idx)
            tg.selection = new if tg.selection is None else _concat_candidates(tg.selection, new)
            tg.selection_scale = float(pool.weight[ok].sum() / pool.weight[taken].sum())
            out_t = _output_times(
                returns[tg.trail], tg.t_earth, options.window_days + 30.0, 2.0, options.dt_days
            )
            for start in range(0, len(idx), options.chunk_size):
                chunk = new.take(np.arange(start, min(start + options.chunk_size, len(idx))))
                main_tasks.append(
                    _make_task(
                        ("main", round_, ti, start), returns[tg.trail], chunk, out_t, options
                    )
                )
                main_meta.append((ti, x_all[idx[start : start + options.chunk_size]]))
        results = _run_all(
            main_tasks,
            options.workers,
            executor,
            lambda k, n, lo=lo, span=span: say(lo + span * k / n, "integration"),
        )
        integrated += sum(len(t.beta) for t in main_tasks)
        for (ti, x_chunk), task, snaps in zip(main_meta, main_tasks, results, strict=True):
            cr = node_crossings(snaps, task.beta, targets[ti].node)
            per_target.setdefault(ti, []).append(cr)
            tg = targets[ti]
            tg.x_seen = np.concatenate([tg.x_seen, x_chunk])
            tg.y_seen = np.concatenate([tg.y_seen, cr.t_cross_tdb_jd - tg.t_earth])

    # Assemble per target.
    say(0.9, "encounters")
    encounters, near = [], []
    contributing = 0
    for ti, parts in per_target.items():
        tg = targets[ti]
        cr = _concat_crossings(parts)
        w = tg.selection.weight
        summary = _summarise(tg, returns[tg.trail], cr, w, options)
        if summary is None:
            notes.append(
                f"{_year_of(returns[tg.trail].tp_tdb_jd)} trail ({tg.revolutions} rev) in {tg.year}: "
                "the targeting could not place meteoroids at Earth's passage; whether this trail "
                "comes near Earth then is unresolved, not ruled out"
            )
            continue
        contributing += summary.particles
        reach = ENCOUNTER_SIGMAS * summary.miss_distance_spread_au + EARTH_RADIUS_AU
        if abs(summary.miss_distance_au) <= min(ENCOUNTER_MAX_MISS_AU, reach):
            encounters.append(summary)
        elif abs(summary.miss_distance_au) <= NEAR_MISS_MAX_AU:
            near.append(summary)
    encounters.sort(key=lambda e: e.peak_tdb_jd)
    near.sort(key=lambda e: e.peak_tdb_jd)
    say(1.0, "done")
    return ForecastResult(
        parent=orbit,
        options=options,
        encounters=tuple(encounters),
        near_misses=tuple(near),
        particles_integrated=integrated,
        particles_contributing=contributing,
        candidates_drawn=drawn,
        history=history,
        notes=tuple(notes),
        calibration=calibration,
    )


def _calibrate(orbit, options, executor):
    """Scale factor from a past observed outburst: observed ZHR / modelled ZHR for that trail."""
    cal = options.calibration
    probe = replace(
        options,
        first_year=cal.year,
        last_year=cal.year,
        trails=(cal.trail_year,),
        calibration=None,
        zhr_scale=1.0,
    )
    res = forecast(orbit, probe, executor=executor)
    rows = [
        e
        for e in res.encounters + res.near_misses
        if _year_of(e.trail_perihelion_tdb_jd) == cal.trail_year
    ]
    if not rows or rows[0].zhr_estimate <= 0:
        raise CalibrationFailed(
            f"the {cal.trail_year} trail gives no modelled activity in {cal.year}: cannot calibrate on it"
        )
    model_zhr = max(e.zhr_estimate for e in rows)
    factor = cal.zhr / model_zhr
    info = {
        "input": {"year": cal.year, "trail_year": cal.trail_year, "observed_zhr": cal.zhr},
        "modelled_zhr": _round_sig(model_zhr),
        "factor": _round_sig(factor, 4),
    }
    return info, replace(options, zhr_scale=factor)


def _last_before(returns, t):
    ks = [k for k, r in enumerate(returns) if r.tp_tdb_jd < t]
    return ks[-1] if ks else -1


def _targets(returns, trail_ids, options) -> list[_Target]:
    """Every (trail, Earth passage, node, revolutions) combination worth a pilot."""
    if not trail_ids:
        return []
    out = []
    for year in range(options.first_year, options.last_year + 1):
        y0, y1 = calendar_year_tdb_jd(year)
        # node geometry from the parent return nearest this year
        ref = min(returns, key=lambda r: abs(r.tp_tdb_jd - 0.5 * (y0 + y1)))
        for node, _r_node, lon in nodes_near_earth(ref, NODE_MAX_DISTANCE_AU):
            for t_e in np.atleast_1d(times_of_solar_longitude_tdb((lon - 180.0) % 360.0, y0, y1)):
                for k in trail_ids:
                    for j in range(k, len(returns)):
                        t_node = parent_node_time(returns[j], node)
                        if t_node > t_e + 0.75 * returns[j].period_days:
                            break
                        if t_node < returns[k].tp_tdb_jd - 200.0:
                            continue
                        out.append(_Target(k, year, node, float(t_e), j - k, t_node))
    return out


def _predicted_offset(pool: Candidates, tg: _Target) -> np.ndarray:
    """Predicted node arrival minus Earth's passage (days), zeroth order in perturbations."""
    return tg.t_parent_node + tg.revolutions * pool.dperiod_days + pool.dtp_days - tg.t_earth


def _pilot_window(options, tg) -> float:
    """Half-width (days) of the pilot's span of predicted arrivals; older trails scatter more."""
    return max(options.pilot_window_days, 30.0 * tg.revolutions)


def _arrival_model(tg):
    """Map a candidate's zeroth-order predicted arrival offset to its expected real one (days).

    Inside the range of integrated meteoroids: piecewise-linear interpolation of their real
    offsets against their predictions (planetary perturbations make the relation bend, and for
    old trails fold); outside it: the robust straight line.
    """
    a, b = tg.fit
    good = np.isfinite(tg.x_seen) & np.isfinite(tg.y_seen)
    xs, ys = tg.x_seen[good], tg.y_seen[good]
    order = np.argsort(xs, kind="stable")
    xs, ys = xs[order], ys[order]
    keep = np.concatenate([[True], np.diff(xs) > 0]) if len(xs) else np.zeros(0, dtype=bool)
    xs, ys = xs[keep], ys[keep]

    def predict(x):
        x = np.asarray(x, dtype=float)
        out = a + b * x
        if len(xs) >= 5:
            inside = (x >= xs[0]) & (x <= xs[-1])
            out[inside] = np.interp(x[inside], xs, ys)
            # beyond either end: the secant from the end cluster (meteoroids within 15 days of
            # it, averaged) to the first ones at least 30 days farther in
            for sign, sel in ((1.0, x < xs[0]), (-1.0, x > xs[-1])):
                if not np.any(sel):
                    continue
                dist = sign * (xs - (xs[0] if sign > 0 else xs[-1]))
                near, far = dist <= 15.0, dist >= 30.0
                if not np.any(far):
                    continue
                x0, y0 = xs[near].mean(), ys[near].mean()
                k = np.flatnonzero(far)[0 if sign > 0 else -1]
                slope = (ys[k] - y0) / (xs[k] - x0)
                if slope > 0.05:  # a usable local relation; else keep the global line
                    out[sel] = y0 + slope * (x[sel] - x0)
        return out

    return predict


def _needs_refinement(tg, parts, options) -> bool:
    """True when fewer than half the meteoroids integrated for a target met Earth's passage."""
    if tg.selection is None or not parts:
        return False
    lag = np.concatenate([p.t_cross_tdb_jd - p.t_earth_tdb_jd for p in parts])
    hit = np.isfinite(lag) & (np.abs(lag) <= options.window_days)
    return hit.sum() < 0.5 * min(len(lag), options.particles)


def _concat_candidates(a: Candidates, b: Candidates) -> Candidates:
    return Candidates(
        *(np.concatenate([getattr(a, f), getattr(b, f)]) for f in Candidates.__dataclass_fields__)
    )


def _robust_line(x, y):
    """Fit y = a + b x, dropping outliers (planetary close encounters) beyond 3 robust sigmas."""
    good = np.isfinite(x) & np.isfinite(y)
    x, y = x[good], y[good]
    if len(x) < 5:
        return (float(np.median(y - x)) if len(x) else 0.0, 1.0)
    for _ in range(3):
        b, a = np.polyfit(x, y, 1)
        res = y - (a + b * x)
        mad = 1.4826 * np.median(np.abs(res - np.median(res))) + 1e-6
        keep = np.abs(res) <= 3.0 * mad
        if keep.all() or keep.sum() < 5:
            break
        x, y = x[keep], y[keep]
    b, a = np.polyfit(x, y, 1)
    return float(a), float(b)


def _output_times(ret: ParentReturn, t_center, half_width, step, dt_days):
    t0 = ret.bodies_at_arc_start.t_tdb_jd
    raw = np.arange(t_center - half_width, t_center + half_width + step, step)
    return np.unique(step_grid(t0, raw, dt_days))


def _make_task(key, ret: ParentReturn, sel: Candidates, out_t, options) -> _Task:
    t0 = ret.bodies_at_arc_start.t_tdb_jd
    return _Task(
        key=key,
        bodies=ret.bodies_at_arc_start,
        release_t=step_grid(t0, sel.release_t_tdb_jd, options.dt_days),
        r=sel.r_au,
        v=sel.v_au_d,
        beta=sel.beta,
        out_t=out_t,
        integrator=options.integrator,
        dt_days=options.dt_days,
    )


def _concat_crossings(parts) -> Crossings:
    return Crossings(
        *(np.concatenate([getattr(p, f) for p in parts]) for f in Crossings.__dataclass_fields__)
    )


def _summarise(
    tg: _Target, ret: ParentReturn, cr: Crossings, weights, options
) -> TrailEncounter | None:
    """Trail-level numbers from the particles that meet Earth's passage window."""
    lag = cr.t_cross_tdb_jd - cr.t_earth_tdb_jd
    # at the node within the window of Earth's passage, and Earth's passage is this target's
    same_passage = np.abs(cr.t_earth_tdb_jd - tg.t_earth) <= 30.0
    keep = np.isfinite(lag) & (np.abs(lag) <= options.window_days) & same_passage
    n = int(keep.sum())
    if n < 3:
        return None
    te = cr.t_earth_tdb_jd[keep]
    miss = cr.miss_distance_au[keep]
    peak = float(np.median(te))
    q16, q84 = np.percentile(miss, [16, 84])
    sigma_t = 1.4826 * float(np.median(np.abs(te - peak)))
    ra, dec = circular_median_radec(cr.ra_deg[keep], cr.dec_deg[keep])
    a, b = tg.fit
    dilution = 1.0 / max(1.0, abs(b) * tg.revolutions)
    sub = Crossings(*(getattr(cr, f)[keep] for f in Crossings.__dataclass_fields__))
    met = tg.selection.take(np.flatnonzero(keep))
    model = options.ejection
    r_pop = float(population_index_from_mass_index(model.mass_index))
    counts = (
        meteoroids_per_particle(
            met.mass_g,
            model.mass_index,
            model.mass_min_g,
            model.mass_max_g,
            options.candidates,
            options.dust_mass(),
        )
        * tg.selection_scale
        * options.zhr_scale
    )
    counts = np.where(met.mass_g >= limiting_mass_g(sub.vinf_km_s), counts, 0.0)
    _, v_e = heliocentric_state("earth", peak)
    prof = trail_activity(
        sub.t_earth_tdb_jd,
        sub.miss_distance_au,
        lag[keep],
        met.mass_g,
        counts,
        sub.vg_km_s,
        sub.vz_au_d,
        earth_speed_au_d=float(np.linalg.norm(v_e)),
        population_index=r_pop,
        window_days=options.window_days,
        rng=options.seed,
    )
    mode = "calibrated" if options.calibration is not None else "absolute"
    factor = MODEL_UNCERTAINTY_FACTOR[mode]
    b16, b84 = np.percentile(prof.boot_peak_zhr, [16, 84])
    return TrailEncounter(
        year=tg.year,
        trail_perihelion_tdb_jd=ret.tp_tdb_jd,
        revolutions=tg.revolutions,
        node=tg.node,
        peak_tdb_jd=peak,
        solar_longitude_deg=float(solar_longitude_deg(peak)),
        miss_distance_au=float(np.median(miss)),
        miss_distance_spread_au=float(0.5 * (q84 - q16)),
        fwhm_hours=prof.fwhm_hours if prof.peak_zhr > 0 else 2.3548 * sigma_t * 24.0,
        ra_deg=ra,
        dec_deg=dec,
        vg_km_s=float(np.median(cr.vg_km_s[keep])),
        vinf_km_s=float(np.median(cr.vinf_km_s[keep])),
        particles=n,
        dilution=dilution,
        earth_passage_tdb_jd=tg.t_earth,
        crossings=sub,
        weights=np.asarray(weights)[keep],
        meteoroids=met,
        profile=prof,
        population_index=r_pop,
        zhr_estimate=prof.peak_zhr,
        zhr_low=min(b16, prof.peak_zhr) / factor,
        zhr_high=max(b84, prof.peak_zhr) * factor,
        zhr_mode=mode,
    )


__all__ = [
    "Calibration",
    "CalibrationFailed",
    "ForecastOptions",
    "ForecastResult",
    "SolutionsResult",
    "TrailEncounter",
    "forecast",
    "forecast_solutions",
    "orbit_solutions",
]


# --- orbit uncertainty: alternative solutions and covariance clones ------------------------------

#: Clones drawn from a covariance when the caller does not say how many.
DEFAULT_CLONES = 5
_ELEMENT_FIELDS = ("q_au", "e", "incl_deg", "node_deg", "peri_deg", "tp_tdb_jd")


@dataclass(frozen=True)
class SolutionsResult:
    """Forecasts of the same parent under several orbit solutions, with shared random draws."""

    labels: tuple[str, ...]
    orbits: tuple[OrbitInput, ...]
    results: tuple[ForecastResult, ...]

    def summary(self) -> list[dict]:
        """Per trail and year: how peak time, miss distance and ZHR vary across solutions."""
        rows: dict[tuple, dict] = {}
        for label, res in zip(self.labels, self.results, strict=True):
            for e in res.encounters + res.near_misses:
                key = (e.year, _year_of(e.trail_perihelion_tdb_jd), e.revolutions)
                rows.setdefault(key, {})[label] = e
        out = []
        for (year, trail_year, revs), by in sorted(rows.items()):
            peaks = np.array([e.peak_tdb_jd for e in by.values()])
            miss = np.array([e.miss_distance_au for e in by.values()])
            zhr = np.array([e.zhr_estimate for e in by.values()])
            missing = [lab for lab in self.labels if lab not in by]
            text = (
                f"{trail_year} trail in {year}: peak times span {np.ptp(peaks) * 1440:.1f} min, miss "
                f"distances {miss.min():+.5f} to {miss.max():+.5f} au, ZHR {_zhr(zhr.min()):.3g} to "
                f"{_zhr(zhr.max()):.3g} across {len(by)} solutions"
            )
            if missing:
                text += f"; no crossing near Earth under {', '.join(missing)}"
            out.append(
                {
                    "year": year,
                    "trail_year": trail_year,
                    "revolutions": revs,
                    "solutions": sorted(by),
                    "peak_spread_min": round(float(np.ptp(peaks) * 1440), 2),
                    "miss_distance_range_au": [
                        round(float(miss.min()), 6),
                        round(float(miss.max()), 6),
                    ],
                    "zhr_range": [_zhr(float(zhr.min())), _zhr(float(zhr.max()))],
                    "explanation": text,
                }
            )
        return out

    def parents(self) -> list[dict]:
        """What each solution implies for the parent itself: period, previous return."""
        out = []
        for label, orbit, res in zip(self.labels, self.orbits, self.results, strict=True):
            past = [r for r in res.history.returns if r.tp_tdb_jd < orbit.tp_tdb_jd - 1.0]
            prev = past[-1] if past else None
            out.append(
                {
                    "solution": label,
                    "q_au": orbit.q_au,
                    "e": orbit.e,
                    "period_years": round(orbit.period_days / DAYS_PER_JULIAN_YEAR, 2)
                    if np.isfinite(orbit.period_days)
                    else None,
                    "previous_perihelion_tdb": format_iso(prev.tp_tdb_jd, "TDB") if prev else None,
                    "previous_period_years": round(
                        (orbit.tp_tdb_jd - prev.tp_tdb_jd) / DAYS_PER_JULIAN_YEAR, 1
                    )
                    if prev
                    else None,
                    "encounters": len(res.encounters),
                    "near_misses": len(res.near_misses),
                    "notes": list(res.notes),
                }
            )
        return out

    def merged_rows(self, kind: str) -> list[tuple[int, int, dict]]:
        """Every solution's encounters (``kind="encounters"``) or near misses, in the order
        :meth:`to_json` lists them: (solution index, index within that solution, row JSON)."""
        rows = []
        for si, (label, res) in enumerate(zip(self.labels, self.results, strict=True)):
            for k, row in enumerate(res.to_json()[kind]):
                rows.append((si, k, dict(row, solution=label)))
        return sorted(rows, key=lambda r: (r[2]["peak_utc"], r[2]["solution"]))

    def to_json(self) -> dict:
        base = self.results[0].to_json()
        base["encounters"] = [row for _, _, row in self.merged_rows("encounters")]
        base["near_misses"] = [row for _, _, row in self.merged_rows("near_misses")]
        base["solutions"] = self.parents()
        base["solution_summary"] = self.summary()
        base["notes"] = sorted({n for r in self.results for n in r.notes})
        return base


def orbit_solutions(orbit: OrbitInput, clones: int = DEFAULT_CLONES, seed: int = 1):
    """The nominal orbit, its alternative solutions, and clones drawn from its covariance.

    Clones are drawn from a multivariate normal over (q, e, i, node, peri, tp) with a seeded
    generator; draws with q <= 0 or e < 0 are redrawn, angles are wrapped.
    """
    labels, orbits = ["nominal"], [replace(orbit, solutions=(), covariance=None)]
    for k, sol in enumerate(orbit.solutions, start=1):
        labels.append(f"solution-{k}")
        orbits.append(sol)
    if orbit.covariance is not None and clones > 0:
        rng = np.random.default_rng(np.random.SeedSequence([seed, 777]))
        mean = np.array([getattr(orbit, f) for f in _ELEMENT_FIELDS])
        k = 0
        while k < clones:
            x = rng.multivariate_normal(mean, orbit.covariance)
            if x[0] <= 0 or x[1] < 0:
                continue
            k += 1
            x[2] = abs(x[2]) % 360.0
            x[2] = 360.0 - x[2] if x[2] > 180.0 else x[2]
            x[3] %= 360.0
            x[4] %= 360.0
            labels.append(f"clone-{k}")
            orbits.append(
                replace(orbits[0], **dict(zip(_ELEMENT_FIELDS, map(float, x), strict=True)))
            )
    return tuple(labels), tuple(orbits)


def forecast_solutions(
    orbit: OrbitInput,
    options: ForecastOptions,
    *,
    clones: int = DEFAULT_CLONES,
    progress: Callable[[float, str], None] | None = None,
    executor=None,
) -> SolutionsResult:
    """Run :func:`forecast` for every solution of ``orbit`` with the same seed, so that the
    differences between their encounters come from the orbits, not from sampling noise."""
    labels, orbits = orbit_solutions(orbit, clones, options.seed)
    say = progress or (lambda f, s: None)
    results = []
    for k, (label, o) in enumerate(zip(labels, orbits, strict=True)):
        results.append(
            forecast(
                o,
                options,
                executor=executor,
                progress=lambda f, s, k=k, label=label: say((k + f) / len(orbits), f"{label}: {s}"),
            )
        )
    return SolutionsResult(labels, orbits, tuple(results))
