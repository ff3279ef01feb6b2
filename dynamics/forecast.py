"""The dust-trail forecast pipeline, stage by stage: the conductor that calls them.

scope (:mod:`~dynamics.scope`) -> history (:mod:`~dynamics.history`) -> targets
(:mod:`~dynamics.targeting`) -> release (:mod:`~dynamics.release`) -> which meteoroids, in
rounds (:mod:`~dynamics.sampling`) -> integration (:mod:`~dynamics.executors`,
:mod:`~dynamics.nbody`) -> crossings (:mod:`~dynamics.crossings`) -> activity and summaries
(:mod:`~dynamics.activity`, :mod:`~dynamics.summaries`) -> outcomes
(:mod:`~dynamics.outcomes`). This module holds no stage logic of its own.

:func:`forecast` is the Python API the CLI and the service call. It returns a
:class:`ForecastResult` whose :meth:`~ForecastResult.to_json` gives the documented JSON. Every
trail in scope ends with a stated outcome (``trails`` in the JSON): encounter, negligible,
near miss, distant crossing, or not reached, with the closest approach found and what was tried.

A crossing is named by its predicted activity at Earth, not by its distance alone
(:func:`dynamics.activity.classify_crossing`): an *encounter* gives a predicted peak ZHR at or
above :data:`~dynamics.activity.ENCOUNTER_MIN_ZHR`; a trail that passes close (the distance test
of :data:`~dynamics.outcomes.ENCOUNTER_MAX_MISS_AU` and :data:`~dynamics.outcomes.ENCOUNTER_SIGMAS`)
but gives less is *negligible*, a farther one within :data:`~dynamics.outcomes.NEAR_MISS_MAX_AU`
a *near miss*. The level is that minimum only: the
forecast knows no annual shower's ZHR (neither its options nor the built-in shower table carry
one), so the rule's "or the annual shower's ZHR" never applies here.

Reproducibility: every random draw comes from ``numpy.random.SeedSequence([seed, trail])``, and
particles keep a fixed order; how they are split into chunks (a multiple of the workers) does
not change the result beyond round-off, since meteoroids are test particles: none affects
another.
"""

from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from . import __version__
from .activity import (
    DEFAULT_DUST_MASS_RANGE_G,
    DEFAULT_DUST_TO_GAS,
    DEFAULT_EROSION_M_PER_RETURN,
    default_dust_mass_per_return_g,
)
from .constants import DAYS_PER_JULIAN_YEAR
from .crossings import MISS_DISTANCE_CONVENTION
from .ephemeris import ephemeris_info
from .errors import TrailcastError
from .executors import default_workers, make_executor
from .history import FirstPassage, ParentHistory, cached_parent_history
from .nbody import provenance
from .orbit_input import OrbitInput
from .outcomes import (
    CLASSIFICATION_RULE,
    classified,
    nothing_found_note,
    one_row_per_passage,
    outcome,
)
from .release import (
    EjectionEvent,
    EjectionModel,
    draw_candidates,
    event_of_return,
    model_for_event,
)
from .sampling import (
    Trail,
    concat_crossings,
    main_rounds,
    pilot,
    seed_for,
    targeted_pools,
)
from .scope import (
    TRAIL_YEAR_MATCH_FRACTION,
    default_trail_start,
    no_target_note,
    trails_in_scope,
    with_dust_production,
)
from .summaries import TrailEncounter, round_sig, summarise, year_of
from .targeting import (
    BETA_CLASSES,
    ArrivalMap,
    beta_class_edges,
    beta_classes,
    find_targets,
)
from .timescales import TIME_SCALE_NOTES, calendar_year_tdb_jd, format_iso


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
        Oldest trail followed for short-period parents (years before ``first_year``). The
        parent's two most recent returns before ``first_year`` are always in scope, however old
        (for a long-period parent, its previous return); what the limit left out is said in the
        notes.
    window_days : float
        A meteoroid counts for an Earth passage when it crosses the node within this many days
        of Earth passing the same longitude.
    pilot_window_days : float
        Half-width of the arrival window the pilot set spans.
    integrator, dt_days : str, float
        REBOUND integrator and WHFast step (see the README's comparison with IAS15).
    workers : int
        Worker processes for the chunks (1 = in this process; default: one per core).
    chunk_size : int
        Meteoroids per simulation chunk.
    candidates : int
        Release conditions drawn per trail for the targeting.
    ejection : EjectionModel
    events : tuple of EjectionEvent
        Break-ups or outbursts: the return whose active arc holds an event releases its dust
        as the event says (see :class:`dynamics.release.EjectionEvent`).
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
    workers: int = field(default_factory=default_workers)
    chunk_size: int = 250
    candidates: int = 200_000
    ejection: EjectionModel = field(default_factory=EjectionModel)
    events: tuple[EjectionEvent, ...] = ()
    dust_mass_per_return_g: float | None = None
    dust_mass_basis: str | None = None  # how a production the engine derived was obtained
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
            "events": [e.describe() for e in self.events],
            "dust_mass_per_return_g": self.dust_mass(),
            "dust_mass_rule": self.dust_mass_basis
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
class ForecastResult:
    """What a forecast found, in the order of the JSON.

    ``encounters`` are the crossings classified ``encounter`` (predicted peak ZHR at or above the
    level); ``near_misses`` every other reported crossing: ``negligible`` ones (close to Earth's
    path, too little activity) and ``near miss`` ones (farther, below the level). Each carries its
    :class:`~dynamics.activity.Classification` (``classification`` in the JSON: label, level and
    the reason with the numbers). ``trails`` holds one stated outcome per trail passage with the
    same labels.
    """

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
    trails: tuple[dict, ...] = ()

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
                "parent_history": {
                    "original_inverse_a_per_au": self.history.original_inverse_a_per_au,
                    "notes": list(self.history.notes),
                },
                "zhr_method": "per mass decade, a Gaussian tube (median, 16-84 % half-range) "
                "along and across Earth's path fitted to the simulated meteoroids above the "
                "+6.5 mag mass limit after removing their drift with arrival time; flux "
                "Q = n Vg (1 + v_esc^2/Vg^2); ZHR = Q x 37200 km^2 / c(r) (Koschack & Rendtel "
                "1990); box_count_estimate: weighted meteoroids in a space-time box around Earth "
                "(after Vaubaillon et al. 2005), estimators_disagree beyond a factor 3; low/high: "
                "bootstrap 16-84 % widened by the model factor of the mode; direct_hit: the "
                "peak ZHR if Earth's path ran along the densest line of those tubes (miss_au: "
                "where that line lies), the trail's dust apart from its modelled position",
            },
            "conventions": {
                "times": "UTC, ISO 8601",
                "solar_longitude": "geometric, equinox J2000",
                "radiant": "RA/Dec, equinox J2000, geocentric, without zenith attraction",
                "miss_distance": MISS_DISTANCE_CONVENTION,
                "peak": "time of the highest modelled ZHR, from the meteoroids that give visual "
                "meteors (mass of a +6.5 mag meteor or more at their speed), each decade of mass "
                "taken at zero arrival lag and weighted by its density at Earth's path; "
                "trail_centre_utc: Earth's closest-point times of those meteoroids, median per "
                "decade of mass, combined weighted by the real meteoroids of each decade (the "
                "peak when the modelled ZHR is 0)",
                "time_scale_notes": list(TIME_SCALE_NOTES),
                "classification": CLASSIFICATION_RULE,
            },
            "encounters": [e.to_json() for e in self.encounters],
            "near_misses": [e.to_json() for e in self.near_misses],
            "trails": list(self.trails),
            "notes": list(self.notes),
            "cautions": list(CAUTIONS),
        }


# --- the pipeline ------------------------------------------------------------------------------


def forecast(
    orbit: OrbitInput,
    options: ForecastOptions,
    *,
    progress: Callable[[float, str], None] | None = None,
    executor=None,
    should_stop: Callable[[], bool] | None = None,
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
        process pool with ``options.workers`` processes (:func:`dynamics.executors.make_executor`).
    should_stop : callable, optional
        Asked between the parent-history integration steps; True stops the forecast with
        :class:`~dynamics.errors.ComputationStopped` (``progress`` may raise for the same end
        between the later stages).

    Returns
    -------
    ForecastResult
    """
    if executor is None and options.workers > 1:
        with make_executor(options.workers) as pool:  # one pool for every stage
            return _forecast(
                orbit, options, progress=progress, executor=pool, should_stop=should_stop
            )
    return _forecast(orbit, options, progress=progress, executor=executor, should_stop=should_stop)


def _forecast(
    orbit: OrbitInput,
    options: ForecastOptions,
    *,
    progress: Callable[[float, str], None] | None = None,
    executor=None,
    should_stop: Callable[[], bool] | None = None,
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
    if orbit.ejection_events:  # events of the orbit file join those of the options
        extra = tuple(ev for ev in orbit.ejection_events if ev not in options.events)
        options = replace(options, events=tuple(options.events) + extra)
    options = with_dust_production(orbit, options)
    if options.calibration is not None:
        calibration, options = _calibrate(orbit, options, executor)
    y_start, _ = calendar_year_tdb_jd(options.first_year)
    _, y_end = calendar_year_tdb_jd(options.last_year)
    say(0.0, "parent history")
    period = orbit.period_days if np.isfinite(orbit.period_days) else 0.0
    limit_words = None
    if options.trails:  # only the named trails: no need to go further back than the oldest
        # (and the return it may stand for: up to a quarter of a period before it). The
        # backward integration is the same whatever its end, so the returns it finds after
        # this point are those a longer history has: only the years before it are not paid for
        reach = TRAIL_YEAR_MATCH_FRACTION * min(period, 300 * DAYS_PER_JULIAN_YEAR) + 400.0
        t_min = calendar_year_tdb_jd(min(options.trails))[0] - reach
    else:  # the default scope: the age limit, and at most so many revolutions
        t_min, limit_words = default_trail_start(orbit, options, y_start)
    t_max = y_end + min(1.3 * period, 300 * DAYS_PER_JULIAN_YEAR) + 60.0
    try:
        history = cached_parent_history(
            orbit,
            t_min,
            t_max,
            active_r_max_au=options.ejection.active_r_max_au,
            should_stop=should_stop,
        )
    except FirstPassage as exc:  # a result, not an error: no earlier returns, no trails
        history = ParentHistory((), orbit.epoch_tdb_jd, None, (str(exc),))
    returns = history.returns
    notes = list(history.notes)
    trail_ids, scope_notes = trails_in_scope(returns, options, t_min, y_start, y_end, limit_words)
    notes += scope_notes

    say(0.05, "targeting")
    targets = find_targets(returns, trail_ids, options.first_year, options.last_year)
    if trail_ids and not targets:
        notes.append(no_target_note(returns, trail_ids))

    trails: dict[int, Trail] = {}
    for k in sorted({t.trail for t in targets}):
        ret = returns[k]
        rng = np.random.default_rng(seed_for(options.seed, ret.tp_tdb_jd))
        event = event_of_return(ret, options.events)
        pool = draw_candidates(ret, options.ejection, options.candidates, rng, event=event)
        model = model_for_event(options.ejection, event)
        edges = beta_class_edges(pool.beta)
        trails[k] = Trail(
            ret, pool, model, options.candidates, event, beta_classes(pool.beta, edges), edges
        )
    for ev in options.events:
        if not any(t.event is ev for t in trails.values()):
            notes.append(
                f"the {ev.kind} of {format_iso(ev.t_tdb_jd, 'TDB')[:10]} falls in no followed "
                "trail's active arc: it was not used"
            )

    integrated = pilot(targets, trails, options, executor, say)
    targeted_pools(targets, trails, options)
    drawn = sum(tr.n_drawn for tr in trails.values()) + sum(
        tg.n_drawn for tg in targets if tg.targeted_pool
    )
    per_target, picked, integrated = main_rounds(
        targets, trails, options, executor, say, integrated
    )

    say(0.9, "encounters")
    encounters, near, outcomes = [], [], []
    contributing = 0
    for ti, tg in enumerate(targets):
        tr = trails[tg.trail]
        parts = per_target.get(ti, [])
        enc = None
        slope = float("nan")
        if parts:
            cr = concat_crossings(parts)
            idx = np.concatenate(picked[ti])
            x = tg.x_pool
            amap = ArrivalMap(tg.x_seen, tg.y_seen, tg.c_seen, BETA_CLASSES)
            lag = cr.t_cross_tdb_jd - tg.t_earth
            hit = np.isfinite(lag) & (np.abs(lag) <= options.window_days)
            if hit.any():
                slope = float(np.nanmedian(amap.local_slope(x[idx[hit]], tg.cls[idx[hit]])))
            enc = summarise(
                tg,
                tr.ret.tp_tdb_jd,
                cr,
                tg.pool.take(idx),
                1.0 - tg.keep_prob[idx],
                options,
                tr.model,
                tg.n_drawn,
                slope,
                event=None if tr.event is None else tr.event.kind,
            )
        if enc is not None:
            enc = classified(enc)
        outcomes.append(outcome(tg, tr, enc, options))
        if enc is None:
            continue
        contributing += enc.particles
        label = None if enc.classification is None else enc.classification.label
        if label == "encounter":
            encounters.append(enc)
        elif label in ("negligible", "near miss"):  # reported with their number, not dropped
            near.append(enc)
    outcomes = one_row_per_passage(outcomes, targets)
    if trail_ids and targets and not encounters:
        notes.append(nothing_found_note(outcomes))
    encounters.sort(key=lambda e: e.peak_tdb_jd)
    near.sort(key=lambda e: e.peak_tdb_jd)
    outcomes.sort(key=lambda o: (o["year"], o["trail"]["perihelion_year"], o["revolutions"]))
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
        trails=tuple(outcomes),
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
        if year_of(e.trail_perihelion_tdb_jd) == cal.trail_year
    ]
    if not rows or rows[0].zhr_estimate <= 0:
        raise CalibrationFailed(
            f"the {cal.trail_year} trail gives no modelled activity in {cal.year}: cannot calibrate on it"
        )
    model_zhr = max(e.zhr_estimate for e in rows)
    factor = cal.zhr / model_zhr
    info = {
        "input": {"year": cal.year, "trail_year": cal.trail_year, "observed_zhr": cal.zhr},
        "modelled_zhr": round_sig(model_zhr),
        "factor": round_sig(factor, 4),
    }
    return info, replace(options, zhr_scale=factor)


__all__ = [
    "CAUTIONS",
    "Calibration",
    "CalibrationFailed",
    "EjectionEvent",
    "EjectionModel",
    "ForecastOptions",
    "ForecastResult",
    "TrailEncounter",
    "forecast",
]
