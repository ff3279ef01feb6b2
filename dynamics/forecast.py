"""The dust-trail forecast pipeline, stage by stage: the conductor that calls them.

history (:mod:`~dynamics.history`) -> targets (:mod:`~dynamics.targeting`) -> release
(:mod:`~dynamics.release`) -> integration (:mod:`~dynamics.executors`, :mod:`~dynamics.nbody`)
-> crossings (:mod:`~dynamics.crossings`) -> activity and summaries (:mod:`~dynamics.activity`,
:mod:`~dynamics.summaries`). This module holds no stage logic of its own.

:func:`forecast` is the Python API the CLI and the service call. It returns a
:class:`ForecastResult` whose :meth:`~ForecastResult.to_json` gives the documented JSON. Every
trail in scope ends with a stated outcome (``trails`` in the JSON): encounter, negligible,
near miss, distant crossing, or not reached, with the closest approach found and what was tried.

A crossing is named by its predicted activity at Earth, not by its distance alone
(:func:`dynamics.activity.classify_crossing`): an *encounter* gives a predicted peak ZHR at or
above :data:`~dynamics.activity.ENCOUNTER_MIN_ZHR`; a trail that passes close (the distance test
of :data:`ENCOUNTER_MAX_MISS_AU` and :data:`ENCOUNTER_SIGMAS`) but gives less is *negligible*, a
farther one within :data:`NEAR_MISS_MAX_AU` a *near miss*. The level is that minimum only: the
forecast knows no annual shower's ZHR (neither its options nor the built-in shower table carry
one), so the rule's "or the annual shower's ZHR" never applies here.

Reproducibility: every random draw comes from ``numpy.random.SeedSequence([seed, trail])``, and
particles keep a fixed order; how they are split into chunks (a multiple of the workers) does
not change the result, since meteoroids are test particles: none affects another.
"""

from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from . import __version__
from .activity import (
    DEFAULT_DUST_MASS_RANGE_G,
    DEFAULT_DUST_TO_GAS,
    DEFAULT_EROSION_M_PER_RETURN,
    ENCOUNTER_MIN_ZHR,
    classify_crossing,
    default_dust_mass_per_return_g,
    dust_mass_from_magnitude_g,
)
from .constants import DAYS_PER_JULIAN_YEAR, GM_SUN_AU3_D2
from .crossings import MISS_DISTANCE_CONVENTION, Crossings
from .ephemeris import ephemeris_info
from .errors import TrailcastError
from .executors import Task, default_workers, make_executor, run_tasks
from .history import FirstPassage, ParentHistory, ParentReturn, cached_parent_history
from .nbody import provenance, step_grid
from .orbit_input import OrbitInput
from .release import (
    Candidates,
    EjectionEvent,
    EjectionModel,
    draw_candidates,
    event_of_return,
    model_for_event,
)
from .summaries import MIN_PARTICLES, TrailEncounter, round_sig, summarise, year_of, zhr_value
from .targeting import (
    BETA_CLASSES,
    NODE_MAX_DISTANCE_AU,
    PILOT_EXPANSION_FACTOR,
    PILOT_EXPANSION_PARTICLES,
    PILOT_EXPANSIONS,
    ArrivalMap,
    Target,
    beta_class_edges,
    beta_classes,
    find_targets,
    parent_nodes,
    pilot_pick,
    predicted_offset,
    select_for_window,
)
from .timescales import TIME_SCALE_NOTES, calendar_year_tdb_jd, format_iso

#: |median miss distance| below which a trail crossing counts as passing close to Earth (au):
#: an encounter if its predicted ZHR reaches the level, else negligible (classify_crossing).
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
#: trails need them). No source.
REFINEMENT_ROUNDS = 3
#: Targeted candidate batches (of ``options.candidates``) drawn for a target at most, and the
#: margin (days of predicted arrival) added around the mapped window (no source).
TARGETED_BATCHES = 4
TARGETED_MARGIN_DAYS = 60.0
#: Pilot output step (days) per day of pilot half-span: arrivals far from Earth's passage are
#: extrapolated along the osculating orbit from the nearest output (no source).
PILOT_STEP_PER_SPAN = 1.0 / 40.0
#: Smallest pilot output step (days), the pilot's starting half-span per revolution (days:
#: older trails scatter more) and the margin of pilot outputs beyond its span (days). No source.
PILOT_MIN_STEP_DAYS = 5.0
PILOT_SPAN_PER_REVOLUTION_DAYS = 30.0
PILOT_OUTPUT_MARGIN_DAYS = 40.0
#: The pilot steps this many times the forecast's step (WHFast only): its arrivals only place
#: the arrival map, where days matter, not minutes. Domain notes (measured here): WHFast at
#: 1 d stays within 6e-5 au of IAS15 over 100 years, vs 1.5e-5 au at 0.5 d.
PILOT_DT_FACTOR = 2.0
#: Main integrations write states every MAIN_STEP_DAYS over the window plus this margin (days):
#: a crossing is computed from the state nearest it (no source).
MAIN_STEP_DAYS = 2.0
MAIN_OUTPUT_MARGIN_DAYS = 30.0
#: A target is refined when fewer than this fraction of its meteoroids met Earth's passage.
REFINE_BELOW_HIT_FRACTION = 0.5
#: The first selection round of every target is a probe of this fraction of its budget. After
#: it and after every later round a target stops when its meteoroids at Earth's passage (at
#: least PROBE_MIN_HITS of them) cross, on median, farther than ENCOUNTER_MAX_MISS_AU from
#: Earth's path by more than PROBE_STOP_SE standard errors of that median (it cannot be an
#: encounter) and either none of them came within NEAR_MISS_MAX_AU or the trail is compact
#: (median beyond the limit by more than PROBE_STOP_SE of its 16-84 % half-widths: a scattered
#: old trail's tail can reach Earth when its median does not), or when a uniform-fallback
#: sample has no meteoroid at Earth's passage at all.
#: Old trails that pass far away then cost a quarter of the budget instead of up to four.
#: No source: a cost rule, not a physical one.
PROBE_FRACTION = 0.25
PROBE_MIN_HITS = 10
PROBE_STOP_SE = 3.0
#: A target also stops when Earth's path lies farther from the median miss of its meteoroids
#: at Earth's passage than this many widths of the whole trail (the larger of the 16-84 %
#: half-range and the 2.5-97.5 % quarter-range of every size together, so a heavy tail or a
#: second strand widens it): a Gaussian tube gives exp(-32) ~ 1e-14 of its central density
#: there, below any ZHR level even for a storm-strength centre; more meteoroids would only
#: sharpen a negligible number. No source: a cost rule, not a physical one.
PROBE_STOP_WIDTHS = 8.0
#: Crossings farther than NEAR_MISS_MAX_AU are "distant"; no meteoroid within the window of
#: Earth's passage at all: "not reached".


CLASSIFICATION_RULE = (
    f"encounter: predicted peak ZHR at or above {ENCOUNTER_MIN_ZHR:g} (common practice, no "
    "source; no annual shower's ZHR is known to the forecast), within "
    f"{NEAR_MISS_MAX_AU:g} au; negligible: the trail passes close (within "
    f"{ENCOUNTER_MAX_MISS_AU:g} au and {ENCOUNTER_SIGMAS:g} cross-section widths plus Earth's "
    "radius) but its predicted peak ZHR is below that level; near miss: farther, within "
    f"{NEAR_MISS_MAX_AU:g} au, below the level. encounters lists the first, near_misses the "
    "other two; in absolute mode the ZHR is uncertain by a factor of several (see each "
    "reason's range)"
)


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
                "bootstrap 16-84 % widened by the model factor of the mode",
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


@dataclass
class _Trail:
    """One parent return's candidate pool and how it was made."""

    ret: ParentReturn
    pool: Candidates
    model: EjectionModel
    n_drawn: int
    event: EjectionEvent | None
    cls: np.ndarray = field(repr=False)
    edges: np.ndarray = field(repr=False, default_factory=lambda: np.zeros(0))


def _seed_for(seed: int, tp_tdb_jd: float, batch: int = 0) -> np.random.SeedSequence:
    """Seed of a trail's draws: the user's seed and the trail's perihelion day (any date, also
    before JD 0, maps to a non-negative integer), and the batch of candidates."""
    key = [int(seed), int(round(tp_tdb_jd)) % 2**32]
    return np.random.SeedSequence(key + [batch] if batch else key)


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
    t_min = y_start - options.max_trail_age_years * DAYS_PER_JULIAN_YEAR
    period = orbit.period_days if np.isfinite(orbit.period_days) else 0.0
    if options.trails:  # only the named trails: no need to go further back than the oldest
        # (and the return it may stand for: up to a quarter of a period before it)
        reach = TRAIL_YEAR_MATCH_FRACTION * min(period, 300 * DAYS_PER_JULIAN_YEAR) + 400.0
        t_min = min(t_min, calendar_year_tdb_jd(min(options.trails))[0] - reach)
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
    trail_ids, scope_notes = _trails_in_scope(returns, options, t_min, y_start, y_end)
    notes += scope_notes

    say(0.05, "targeting")
    targets = find_targets(returns, trail_ids, options.first_year, options.last_year)
    if trail_ids and not targets:
        notes.append(_no_target_note(returns, trail_ids))

    trails: dict[int, _Trail] = {}
    for k in sorted({t.trail for t in targets}):
        ret = returns[k]
        rng = np.random.default_rng(_seed_for(options.seed, ret.tp_tdb_jd))
        event = event_of_return(ret, options.events)
        pool = draw_candidates(ret, options.ejection, options.candidates, rng, event=event)
        model = model_for_event(options.ejection, event)
        edges = beta_class_edges(pool.beta)
        trails[k] = _Trail(
            ret, pool, model, options.candidates, event, beta_classes(pool.beta, edges), edges
        )
    for ev in options.events:
        if not any(t.event is ev for t in trails.values()):
            notes.append(
                f"the {ev.kind} of {format_iso(ev.t_tdb_jd, 'TDB')[:10]} falls in no followed "
                "trail's active arc: it was not used"
            )

    integrated = _pilot(targets, trails, options, executor, say)
    _targeted_pools(targets, trails, options)
    drawn = sum(tr.n_drawn for tr in trails.values()) + sum(
        tg.n_drawn for tg in targets if tg.targeted_pool
    )
    per_target, picked, integrated = _main_rounds(
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
            cr = _concat_crossings(parts)
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
            enc = _classified(enc)
        outcomes.append(_outcome(tg, tr, enc, options))
        if enc is None:
            continue
        contributing += enc.particles
        label = None if enc.classification is None else enc.classification.label
        if label == "encounter":
            encounters.append(enc)
        elif label in ("negligible", "near miss"):  # reported with their number, not dropped
            near.append(enc)
    outcomes = _one_row_per_passage(outcomes, targets)
    if trail_ids and targets and not encounters:
        notes.append(_nothing_found_note(outcomes))
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


def _trails_in_scope(returns, options, t_min, y_start, y_end):
    """Indices of the returns whose trails are followed, and notes on what was left out."""
    notes = []
    active = [k for k, r in enumerate(returns) if r.tp_tdb_jd < y_end and len(r.arc_t_tdb_jd)]
    inactive = [
        year_of(r.tp_tdb_jd) for r in returns if r.tp_tdb_jd < y_end and len(r.arc_t_tdb_jd) == 0
    ]
    if inactive:
        notes.append(
            f"returns of {', '.join(map(str, inactive))} came no closer to the Sun than "
            f"{options.ejection.active_r_max_au} au: no active arc, no trail"
        )
    if options.trails is not None:
        matched, missing, match_notes = match_trail_years(returns, active, options.trails)
        ids = sorted(set(matched.values()))
        notes += match_notes
        if missing:
            have = ", ".join(str(year_of(returns[k].tp_tdb_jd)) for k in active) or "none"
            notes.append(
                f"no active parent return in {', '.join(map(str, missing))} (returns found: {have})"
            )
    else:
        recent = [k for k in active if returns[k].tp_tdb_jd < y_start][-2:]
        ids = [k for k in active if returns[k].tp_tdb_jd >= t_min or k in recent]
        left = [k for k in active if k not in ids]
        if left:
            notes.append(
                f"{len(left)} older returns ({year_of(returns[left[0]].tp_tdb_jd)} to "
                f"{year_of(returns[left[-1]].tp_tdb_jd)}) lie beyond the trail-age limit of "
                f"{options.max_trail_age_years:g} years and were not followed"
            )
    if not ids:
        notes.append("no parent return in scope has an active arc: no trails")
    return ids, notes


#: A named trail year without a return of its own stands for the nearest return when it lies
#: within this fraction of the spacing of returns (its period) from it: clearly nearer to one
#: return than to its neighbours (3:1 or better). Published trail years come from other
#: integrations of the parent and can differ by one year (decades, thousands of years back).
#: No source.
TRAIL_YEAR_MATCH_FRACTION = 0.25


def with_dust_production(orbit: OrbitInput, options: ForecastOptions) -> ForecastOptions:
    """The options with the parent's dust production per return, when its brightness gives it.

    A stated production wins; else a parent with a total absolute magnitude M1 releases the dust
    that goes with its water production (Jorda et al. 2008, :func:`dust_mass_from_magnitude_g`)
    over its active arc on the input orbit; else the nucleus rule of
    :func:`~dynamics.activity.default_dust_mass_per_return_g` stays.
    """
    if options.dust_mass_per_return_g is not None or orbit.m1 is None:
        return options
    mass = dust_mass_from_magnitude_g(
        orbit.m1, orbit.k1, orbit.q_au, orbit.e, options.ejection.active_r_max_au
    )
    basis = (
        f"from the parent's total absolute magnitude M1 = {orbit.m1:g} (K1 = {orbit.k1:g}): "
        "water production log10 Q = 30.675 - 0.2453 m_h (Jorda, Crovisier & Green 2008) "
        f"integrated over the input orbit inside {options.ejection.active_r_max_au:g} au, "
        f"dust/gas {DEFAULT_DUST_TO_GAS}, spread over {DEFAULT_DUST_MASS_RANGE_G[0]:g}-"
        f"{DEFAULT_DUST_MASS_RANGE_G[1]:g} g"
    )
    return replace(options, dust_mass_per_return_g=mass, dust_mass_basis=basis)


def match_trail_years(returns, candidates, years):
    """Which return each named perihelion year stands for.

    Parameters
    ----------
    returns : sequence of ParentReturn
        The parent's returns in time order.
    candidates : sequence of int
        Indices of the returns that may be matched (those with an active arc).
    years : iterable of int
        Perihelion years as named by the user or a source.

    Returns
    -------
    (matched, missing, notes): ``matched`` maps each matched year to a return index (a return
    in that calendar year, else the nearest one within :data:`TRAIL_YEAR_MATCH_FRACTION` of the
    spacing of returns around it); ``missing`` lists the years matched to none; ``notes`` says
    which years were taken as a return of another year.
    """
    matched: dict[int, int] = {}
    missing: list[int] = []
    notes: list[str] = []
    cands = list(candidates)
    tps = np.array([r.tp_tdb_jd for r in returns])
    for y in sorted(set(int(v) for v in years)):
        exact = [k for k in cands if year_of(returns[k].tp_tdb_jd) == y]
        if exact:
            matched[y] = exact[0]
            continue
        if not cands:
            missing.append(y)
            continue
        a, b = calendar_year_tdb_jd(y)
        mid = 0.5 * (a + b)
        k = min(cands, key=lambda j: abs(returns[j].tp_tdb_jd - mid))
        gaps = np.abs(np.diff(tps))[max(k - 1, 0) : k + 1]
        spacing = float(gaps.min()) if len(gaps) else float(returns[k].period_days)
        if not np.isfinite(spacing):
            missing.append(y)
            continue
        off = abs(returns[k].tp_tdb_jd - mid)
        if off <= TRAIL_YEAR_MATCH_FRACTION * spacing:
            matched[y] = k
            notes.append(
                f"the {y} trail was taken as the return of "
                f"{format_iso(returns[k].tp_tdb_jd, 'TDB')[:10]} (TDB), the nearest in this "
                f"integration of the parent ({off / DAYS_PER_JULIAN_YEAR:.1f} years from mid-{y}; "
                "trail years from other integrations can differ)"
            )
        else:
            missing.append(y)
    return matched, missing, notes


def _no_target_note(returns, trail_ids) -> str:
    parts = [
        f"{which} node at {r:.3f} au" if np.isfinite(r) else f"no {which} node"
        for which, r, _ in parent_nodes(returns[trail_ids[-1]])
    ]
    return (
        f"no trail can meet Earth in the requested years: the parent's {' and '.join(parts)} "
        f"from the Sun, none within {NODE_MAX_DISTANCE_AU} au of Earth's orbit"
    )


def _pilot(targets, trails, options, executor, say) -> int:
    """Integrate pilot meteoroids per target, widening the span until arrivals bracket Earth's
    passage (at most PILOT_EXPANSIONS times). Returns the number integrated."""
    integrated = 0
    per_class = max(4, options.pilot_particles // BETA_CLASSES)
    pilot_options = options
    if options.integrator == "whfast":
        pilot_options = replace(options, dt_days=PILOT_DT_FACTOR * options.dt_days)
    todo = []
    for ti, tg in enumerate(targets):
        tr = trails[tg.trail]
        tg.span_days = max(
            options.pilot_window_days, PILOT_SPAN_PER_REVOLUTION_DAYS * tg.revolutions
        )
        tg.pool, tg.cls, tg.n_drawn = tr.pool, tr.cls, tr.n_drawn
        tg.keep_prob = np.ones(len(tr.pool))
        x = predicted_offset(tr.pool, tg)
        todo.append((ti, -tg.span_days, tg.span_days, per_class))
        tg.x_pool = x
    for round_ in range(1 + PILOT_EXPANSIONS):
        tasks, meta = [], []
        for ti, lo, hi, n_cls in todo:
            tg = targets[ti]
            tr = trails[tg.trail]
            seen = np.zeros(len(tr.pool), dtype=bool)
            seen[tg.idx_seen] = True
            pick = pilot_pick(tg.x_pool, tr.cls, lo, hi, n_cls, seen)
            if len(pick) == 0:
                continue
            tg.pilot_rounds += 1
            half = tg.span_days + PILOT_OUTPUT_MARGIN_DAYS
            step = max(PILOT_MIN_STEP_DAYS, tg.span_days * PILOT_STEP_PER_SPAN)
            out_t = _output_times(tr.ret, tg.t_earth, half, step, pilot_options.dt_days)
            _add_tasks(
                tasks,
                meta,
                ("pilot", ti, round_),
                ti,
                pick,
                tr.pool,
                tr.ret,
                out_t,
                pilot_options,
                tg.node,
            )
        if not tasks:
            break
        say(0.1 + 0.04 * round_, "pilot integration")
        results = run_tasks(tasks, executor)
        integrated += sum(len(t.beta) for t in tasks)
        for (ti, sub), cr in zip(meta, results, strict=True):  # crossings, from the workers
            _record(targets[ti], trails[targets[ti].trail], sub, cr)
        todo = []
        for ti, tg in enumerate(targets):
            if round_ >= PILOT_EXPANSIONS or len(tg.idx_seen) == 0:
                continue
            ok, side = ArrivalMap(tg.x_seen, tg.y_seen, tg.c_seen, BETA_CLASSES).brackets()
            if ok or side == 0:
                continue
            old = tg.span_days
            tg.span_days = old * PILOT_EXPANSION_FACTOR
            n_cls = max(2, PILOT_EXPANSION_PARTICLES // BETA_CLASSES)
            if side < 0:  # every meteoroid arrived late: look at earlier predicted arrivals
                todo.append((ti, -tg.span_days, float(np.nanmin(tg.x_seen)) - 1e-9, n_cls))
            else:
                todo.append((ti, float(np.nanmax(tg.x_seen)) + 1e-9, tg.span_days, n_cls))
    return integrated


def _targeted_pools(targets, trails, options) -> None:
    """Give a target its own pool of candidates drawn on the period window that reaches
    Earth's passage, when the trail's natural pool leaves fewer eligible than the budget.

    One-revolution dust of a long-period parent spreads over centuries of arrival, so only a
    few in 10,000 natural candidates land within weeks of Earth's passage. The targeted draw
    (:func:`dynamics.release.draw_candidates` with ``period_window_days``) keeps the release
    times, sizes and directions of the natural law and draws only speeds that give periods in
    the window, each candidate weighted by the natural probability of its speed range. The
    window comes from the arrival map (every predicted offset mapped within the selection
    window, widened by :data:`TARGETED_MARGIN_DAYS`), inverted through the parent's realised
    period into a window of 1/a offsets. Batches of ``options.candidates``, at most :data:`TARGETED_BATCHES`, each with its
    own seed."""
    for tg in targets:
        tr = trails[tg.trail]
        if tg.revolutions == 0 or len(tg.idx_seen) == 0:
            continue
        amap = ArrivalMap(tg.x_seen, tg.y_seen, tg.c_seen, BETA_CLASSES)
        seen = np.zeros(len(tg.pool), dtype=bool)
        seen[tg.idx_seen] = True
        _, eligible, _ = select_for_window(
            amap, tg.x_pool, tg.cls, options.window_days, seen, options.particles
        )
        if len(eligible) >= options.particles:
            continue
        xs = np.sort(tg.x_seen[np.isfinite(tg.x_seen)])
        ys = amap(xs, np.full(len(xs), -1))
        near = xs[np.abs(ys) <= options.window_days]
        # and every pilot meteoroid that itself met Earth's passage: the running median
        # smooths away structure narrower than the pilot's spacing (a resonance's plateau);
        # and the candidates the map puts in the window: a steep branch (an old trail) can
        # pass through it between two pilot points
        hit = np.isfinite(tg.y_seen) & (np.abs(tg.y_seen) <= options.window_days)
        near = np.union1d(near, tg.x_seen[hit & np.isfinite(tg.x_seen)])
        near = np.union1d(near, tg.x_pool[eligible])
        if len(near) == 0:
            continue  # no branch through Earth's passage: the uniform fallback handles it
        x_lo, x_hi = near.min() - TARGETED_MARGIN_DAYS, near.max() + TARGETED_MARGIN_DAYS
        d_a, d_b = (_inverse_a_offset_for(tg, x) for x in (x_hi, x_lo))
        if not (np.isfinite(d_a) and np.isfinite(d_b) and d_a < d_b):
            continue
        pools = []
        for batch in range(1, TARGETED_BATCHES + 1):
            rng = np.random.default_rng(_seed_for(options.seed, tr.ret.tp_tdb_jd, 1000 + batch))
            pools.append(
                draw_candidates(
                    tr.ret,
                    options.ejection,
                    options.candidates,
                    rng,
                    event=tr.event,
                    inverse_a_window=(d_a, d_b),
                )
            )
            pool = pools[0] if len(pools) == 1 else _concat_candidates(*pools)
            x = predicted_offset(pool, tg)
            cls = beta_classes(pool.beta, tr.edges)
            y = amap(x, cls)
            if np.sum(np.isfinite(y) & (np.abs(y) <= options.window_days)) >= options.particles:
                break
        tg.pool, tg.cls, tg.x_pool = pool, cls, x
        tg.n_drawn = batch * options.candidates
        tg.keep_prob = np.ones(len(pool))
        tg.targeted_pool = True


def _inverse_a_offset_for(tg: Target, x: float) -> float:
    """Inverse of :func:`dynamics.targeting.predicted_offset` at zero perihelion-time offset:
    the 1/a offset from the parent's (1/au) that arrives ``x`` days after Earth's passage."""
    k = 2.0 * np.pi / np.sqrt(GM_SUN_AU3_D2)
    p_real_dust = tg.p_real_days + (x - (tg.t_parent_node - tg.t_earth)) / tg.revolutions
    if p_real_dust <= 0:
        return float("nan")
    return float((p_real_dust / k) ** (-2 / 3) - (tg.p_real_days / k) ** (-2 / 3))


def _concat_candidates(*parts: Candidates) -> Candidates:
    return Candidates(
        *(np.concatenate([getattr(p, f) for p in parts]) for f in Candidates.__dataclass_fields__)
    )


def _record(tg: Target, tr: _Trail, idx, cr: Crossings) -> None:
    """Keep what an integration taught about a target's arrival map."""
    tg.x_seen = np.concatenate([tg.x_seen, tg.x_pool[idx]])
    tg.y_seen = np.concatenate([tg.y_seen, cr.t_cross_tdb_jd - tg.t_earth])
    tg.c_seen = np.concatenate([tg.c_seen, tg.cls[idx]])
    tg.idx_seen = np.concatenate([tg.idx_seen, idx])
    tg.miss_seen = np.concatenate([tg.miss_seen, cr.miss_distance_au])


def _main_rounds(targets, trails, options, executor, say, integrated):
    """A probe round, the targeted integration, then refinement rounds for targets whose
    meteoroids mostly missed.

    Returns per-target crossings, the pool indices behind them, and the running count of
    integrated meteoroids.
    """
    per_target: dict[int, list] = {}
    picked: dict[int, list] = {}
    taken = {ti: np.zeros(len(tg.pool), dtype=bool) for ti, tg in enumerate(targets)}
    for ti, tg in enumerate(targets):
        if not tg.targeted_pool:  # pilot meteoroids inform the map, never the activity
            taken[ti][tg.idx_seen] = True
        tg.selection_mode = "shooting"
    probe = max(PROBE_MIN_HITS, int(np.ceil(PROBE_FRACTION * options.particles)))
    probe = min(probe, options.particles)
    active = list(range(len(targets)))
    for round_ in range(2 + REFINEMENT_ROUNDS):  # 0: probe, 1: the rest of the budget
        budget = probe if round_ == 0 else options.particles - probe if round_ == 1 else None
        budget = options.particles if budget is None else budget
        if budget <= 0:  # the probe took the whole (tiny) budget: on to the refinement
            active = [ti for ti in active if _needs_refinement(per_target.get(ti, []), options)]
            continue
        lo, span = (
            (0.3, 0.1)
            if round_ == 0
            else (0.4, 0.35)
            if round_ == 1
            else (0.75 + 0.05 * (round_ - 2), 0.05)
        )
        say(lo, ("probe", "selection", "refinement")[min(round_, 2)])
        tasks, meta = [], []
        for ti in active:
            tg = targets[ti]
            tr = trails[tg.trail]
            amap = ArrivalMap(tg.x_seen, tg.y_seen, tg.c_seen, BETA_CLASSES)
            pick, eligible, frac = select_for_window(
                amap, tg.x_pool, tg.cls, options.window_days, taken[ti], budget
            )
            fallback = tg.selection_mode.startswith("uniform")
            if len(pick) == 0 and (round_ == 0 or (fallback and round_ == 1)) and len(tg.idx_seen):
                # shooting found no branch through Earth's passage: sample the whole pilot
                # span uniformly instead, so that what is reported rests on real arrivals
                inside = np.flatnonzero(
                    (np.abs(tg.x_pool) <= tg.span_days) & np.isfinite(tg.x_pool) & ~taken[ti]
                )
                eligible, pick = inside, inside[:budget]
                frac = len(pick) / max(1, len(inside))
                tg.selection_mode = (
                    "uniform fallback (shooting found no arrival at Earth's passage)"
                )
            if len(pick) == 0 and round_ >= 1:
                pick, eligible, frac = _around_hits(tg, options, taken[ti], budget)
            if len(pick) == 0:
                continue
            tg.keep_prob[eligible] *= 1.0 - frac
            taken[ti][pick] = True
            tg.rounds += 1
            out_t = _output_times(
                tr.ret,
                tg.t_earth,
                options.window_days + MAIN_OUTPUT_MARGIN_DAYS,
                MAIN_STEP_DAYS,
                options.dt_days,
            )
            _add_tasks(
                tasks,
                meta,
                ("main", round_, ti),
                ti,
                pick,
                tg.pool,
                tr.ret,
                out_t,
                options,
                tg.node,
            )
        if not tasks and round_ > 0:
            break
        results = run_tasks(
            tasks,
            executor,
            lambda k, n, lo=lo, span=span: say(lo + span * k / n, "integration"),
        )
        integrated += sum(len(t.beta) for t in tasks)
        for (ti, sub), cr in zip(meta, results, strict=True):  # crossings, from the workers
            tg = targets[ti]
            per_target.setdefault(ti, []).append(cr)
            picked.setdefault(ti, []).append(sub)
            _record(tg, trails[tg.trail], sub, cr)
        for ti in active:
            targets[ti].stopped = _enough_said(targets[ti], per_target.get(ti, []), options)
        active = [ti for ti in active if targets[ti].stopped is None]
        if round_ >= 1:
            active = [ti for ti in active if _needs_refinement(per_target.get(ti, []), options)]
    return per_target, picked, integrated


def _around_hits(tg: Target, options, taken: np.ndarray, budget: int):
    """Candidates next to the meteoroids that did meet Earth's passage, when the arrival map
    offers no new ones: (picked, eligible, fraction) as :func:`select_for_window` gives them.

    A running median through sparse pilot pairs cannot follow structure finer than their
    spacing: a mean-motion resonance holds a narrow range of periods at one arrival time (a
    plateau of the map a few pilot points wide), and old trails fold. Each meteoroid that met
    Earth's passage marks such a place; the candidates of its beta class whose predicted
    offsets lie closer to it than its nearest integrated neighbour (the unresolved gap) are
    eligible, and a random subset of them is integrated with its inclusion probability.
    """
    lag = tg.y_seen
    hits = np.flatnonzero(np.isfinite(lag) & (np.abs(lag) <= options.window_days))
    if len(hits) == 0:
        return np.zeros(0, dtype=int), np.zeros(0, dtype=int), 0.0
    xs = tg.x_seen
    near = np.zeros(len(tg.x_pool), dtype=bool)
    for h in hits:
        others = np.abs(xs - xs[h])
        others[h] = np.inf
        gap = float(np.min(others[np.isfinite(others)], initial=np.inf))
        if not np.isfinite(gap) or gap <= 0:
            continue
        near |= (np.abs(tg.x_pool - xs[h]) < gap) & (tg.cls == tg.c_seen[h])
    eligible = np.flatnonzero(near & ~taken & np.isfinite(tg.x_pool))
    if len(eligible) == 0:
        return eligible, eligible, 0.0
    pick = eligible[:budget]
    n = len(hits)
    tg.selection_mode = (
        f"shooting, then around the {n} meteoroid{'s' if n != 1 else ''} that met Earth's "
        "passage (the arrival map is unresolved there)"
    )
    return pick, eligible, len(pick) / len(eligible)


def _enough_said(tg: Target, parts, options) -> str | None:
    """Why a target needs no more meteoroids (it cannot be an encounter), or None to go on."""
    if not parts:
        return None
    cr = _concat_crossings(parts)
    lag = cr.t_cross_tdb_jd - cr.t_earth_tdb_jd
    hit = np.isfinite(lag) & (np.abs(lag) <= options.window_days)
    n, k = len(lag), int(hit.sum())
    if tg.selection_mode.startswith("uniform") and k == 0:
        return (
            f"a uniform sample of {n} meteoroids had none within {options.window_days:g} days "
            "of Earth's passage"
        )
    if k < PROBE_MIN_HITS:
        return None
    miss = cr.miss_distance_au[hit]
    m = abs(float(np.median(miss)))
    q16, q84 = np.percentile(miss, [16, 84])
    sigma = 0.5 * float(q84 - q16)
    se = np.sqrt(np.pi / 2.0) * sigma / np.sqrt(k)  # standard error of a median
    # a scattered trail (its median no farther than a few spreads) whose tail already reached
    # Earth's neighbourhood can still hold an encounter: the median says nothing of its tail
    tail_near = bool(np.any(np.abs(miss) <= NEAR_MISS_MAX_AU)) and (
        m - ENCOUNTER_MAX_MISS_AU <= PROBE_STOP_SE * sigma
    )
    if m - PROBE_STOP_SE * se > ENCOUNTER_MAX_MISS_AU and not tail_near:
        return (
            f"{k} of {n} meteoroids met Earth's passage {m:.4f} au (+-{se:.4f}) from Earth's path "
            f"on median, beyond the encounter limit of {ENCOUNTER_MAX_MISS_AU:g} au"
        )
    q2, q98 = np.percentile(miss, [2.5, 97.5])
    width = max(sigma, 0.25 * float(q98 - q2))
    if width > 0 and m > PROBE_STOP_WIDTHS * width:
        return (
            f"{k} of {n} meteoroids met Earth's passage {m:.4f} au from Earth's path on median, "
            f"{m / width:.0f} trail widths ({width:.5f} au) away: beyond "
            f"{PROBE_STOP_WIDTHS:g} widths its activity at Earth is negligible"
        )
    return None


def _needs_refinement(parts, options) -> bool:
    """True when fewer than half the meteoroids integrated for a target met Earth's passage."""
    if not parts:
        return False
    lag = np.concatenate([p.t_cross_tdb_jd - p.t_earth_tdb_jd for p in parts])
    hit = np.isfinite(lag) & (np.abs(lag) <= options.window_days)
    return hit.sum() < REFINE_BELOW_HIT_FRACTION * min(len(lag), options.particles)


def _outcome(tg: Target, tr: _Trail, enc, options) -> dict:
    """What became of one trail passage: a stated result whatever happened."""
    lag = tg.y_seen
    miss = tg.miss_seen
    inside = np.isfinite(lag) & (np.abs(lag) <= options.window_days) & np.isfinite(miss)
    tried = {
        "pilot_rounds": tg.pilot_rounds,
        "pilot_span_days": round(tg.span_days, 1),
        "selection": tg.selection_mode,
        "selection_rounds": tg.rounds,
        "meteoroids_integrated": int(len(tg.idx_seen)),
    }
    if tg.stopped:
        tried["stopped"] = tg.stopped
    row = {
        "year": tg.year,
        "trail": {
            "perihelion_year": year_of(tr.ret.tp_tdb_jd),
            "perihelion_tdb": format_iso(tr.ret.tp_tdb_jd, "TDB"),
            "event": None if tr.event is None else tr.event.kind,
        },
        "revolutions": tg.revolutions,
        "node": tg.node,
        "earth_passage_tdb": format_iso(tg.t_earth, "TDB"),
        "tried": tried,
    }
    if enc is not None:
        c = enc.classification
        row.update(
            outcome="distant" if c is None else c.label,
            miss_distance_au=round(enc.miss_distance_au, 6),
            peak_tdb=format_iso(enc.peak_tdb_jd, "TDB"),
            meteoroids_at_earth=enc.particles,
            peak_zhr=zhr_value(enc.zhr_estimate),
            zhr_range=[zhr_value(enc.zhr_low), zhr_value(enc.zhr_high)],
            zhr_level=ENCOUNTER_MIN_ZHR if c is None else c.zhr_level,
            reason=f"passes {abs(enc.miss_distance_au):.5f} au from Earth, beyond the "
            f"{NEAR_MISS_MAX_AU:g} au within which crossings are reported"
            if c is None
            else c.reason,
        )
        return row
    if inside.any():
        j = np.flatnonzero(inside)[np.argmin(np.abs(miss[inside]))]
        row.update(
            outcome="not reached",
            closest_miss_distance_au=round(float(miss[j]), 6),
            closest_lag_days=round(float(lag[j]), 2),
            reason=f"fewer than {MIN_PARTICLES} meteoroids within {options.window_days:g} days of Earth's passage",
        )
        return row
    fin = np.isfinite(lag)
    if fin.any():
        j = np.flatnonzero(fin)[np.argmin(np.abs(lag[fin]))]
        row.update(
            outcome="not reached",
            closest_miss_distance_au=None if not np.isfinite(miss[j]) else round(float(miss[j]), 6),
            closest_lag_days=round(float(lag[j]), 2),
            reason="no integrated meteoroid arrived within "
            f"{options.window_days:g} days of Earth's passage",
        )
    else:
        row.update(
            outcome="not reached",
            closest_miss_distance_au=None,
            closest_lag_days=None,
            reason="no candidate release could be integrated to this passage "
            "(none bound, or none predicted within the pilot span)",
        )
    return row


def _one_row_per_passage(outcomes, targets) -> list[dict]:
    """Drop revolution counts that no candidate could reach when another count of the same
    trail and Earth passage was integrated; if none was, keep the one whose parent node
    passage lies nearest Earth's (the trail's natural revolution count)."""
    groups: dict[tuple, list[int]] = {}
    for k, tg in enumerate(targets):
        groups.setdefault((tg.trail, tg.year, tg.node, round(tg.t_earth, 3)), []).append(k)
    keep = []
    for ks in groups.values():
        tried = [k for k in ks if outcomes[k]["tried"]["meteoroids_integrated"] > 0]
        if tried:
            keep += tried
        else:
            keep.append(min(ks, key=lambda k: abs(targets[k].t_parent_node - targets[k].t_earth)))
    return [outcomes[k] for k in sorted(keep)]


def _classified(enc: TrailEncounter) -> TrailEncounter:
    """``enc`` with its :class:`~dynamics.activity.Classification` (None: farther than
    :data:`NEAR_MISS_MAX_AU`, not reported).

    Classified on the ZHR numbers as reported (:func:`dynamics.summaries.zhr_value`), so that
    the label and the number shown beside it never disagree at the level's edge.
    """
    c = classify(
        zhr_value(enc.zhr_estimate),
        enc.miss_distance_au,
        enc.miss_distance_spread_au,
        zhr_range=(zhr_value(enc.zhr_low), zhr_value(enc.zhr_high)),
        zhr_mode=enc.zhr_mode,
    )
    return replace(enc, classification=c)


def classify(
    zhr,
    miss_distance_au,
    miss_distance_spread_au,
    *,
    zhr_range=None,
    zhr_mode=None,
    near_miss_max_au=NEAR_MISS_MAX_AU,
):
    """:func:`dynamics.activity.classify_crossing` with the engine's distance rule and level
    (the forecast and the hindcast report name crossings alike)."""
    return classify_crossing(
        zhr,
        miss_distance_au,
        miss_distance_spread_au,
        encounter_max_miss_au=ENCOUNTER_MAX_MISS_AU,
        encounter_sigmas=ENCOUNTER_SIGMAS,
        earth_radius_au=EARTH_RADIUS_AU,
        near_miss_max_au=near_miss_max_au,
        min_zhr=ENCOUNTER_MIN_ZHR,  # no annual shower's ZHR is known here (module docstring)
        zhr_range=zhr_range,
        zhr_mode=zhr_mode,
    )


def _nothing_found_note(outcomes) -> str:
    """The note of a forecast without encounters: what became of every trail passage, and the
    close passes that gave too little activity, each with its numbers."""
    counts: dict[str, int] = {}
    for o in outcomes:
        counts[o["outcome"]] = counts.get(o["outcome"], 0) + 1
    said = ", ".join(f"{v} {k}" for k, v in sorted(counts.items()))
    closest = [
        abs(o.get("miss_distance_au") or o.get("closest_miss_distance_au") or np.inf)
        for o in outcomes
    ]
    best = min(closest) if closest else np.inf
    tail = f"; the closest simulated approach was {best:.4f} au" if np.isfinite(best) else ""
    weak = [o for o in outcomes if o["outcome"] == "negligible"]
    close = ""
    if weak:
        close = (
            f"; {len(weak)} passed close to Earth's path but with negligible activity "
            f"(predicted peak ZHR below {weak[0]['zhr_level']:g}): "
            + ", ".join(
                f"the {o['trail']['perihelion_year']} trail in {o['year']} at "
                f"{abs(o['miss_distance_au']):.5f} au, ZHR {o['peak_zhr']:.3g} "
                f"({o['zhr_range'][0]:.3g}-{o['zhr_range'][1]:.3g})"
                for o in weak
            )
        )
    return (
        f"no encounter: {len(outcomes)} trail passages were followed ({said}){tail}{close}; "
        "see 'trails' for each one and what was tried"
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


def _add_tasks(tasks, meta, key, ti, pick, pool, ret, out_t, options, node) -> None:
    """Append one target's integration chunks (and what each holds) to the run's lists."""
    for start, sub in _chunks(pick, options):
        tasks.append(_make_task((*key, start), ret, pool.take(sub), out_t, options, node))
        meta.append((ti, sub))


def _chunks(pick: np.ndarray, options):
    """Split one target's meteoroids into chunks of at most ``chunk_size``, of near-equal size,
    their number a multiple of the workers (a lone pilot set would otherwise run on one core,
    and 750 meteoroids in 3 chunks on 2 workers leave one idle for a third of the time).
    Meteoroids are test particles: how they are chunked never changes them."""
    n = len(pick)
    w = max(1, options.workers)
    n_chunks = max(-(-n // options.chunk_size), 1)
    n_chunks = min(n, -(-n_chunks // w) * w) if n >= w else max(n, 1)
    bounds = np.linspace(0, n, n_chunks + 1).round().astype(int)
    return [(int(a), pick[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True) if b > a]


def _output_times(ret: ParentReturn, t_center, half_width, step, dt_days):
    t0 = ret.bodies_at_arc_start.t_tdb_jd
    raw = np.arange(t_center - half_width, t_center + half_width + step, step)
    return np.unique(step_grid(t0, raw, dt_days))


def _make_task(key, ret: ParentReturn, sel: Candidates, out_t, options, node) -> Task:
    t0 = ret.bodies_at_arc_start.t_tdb_jd
    return Task(
        key=key,
        bodies=ret.bodies_at_arc_start,
        release_t=step_grid(t0, sel.release_t_tdb_jd, options.dt_days),
        r=sel.r_au,
        v=sel.v_au_d,
        beta=sel.beta,
        out_t=out_t,
        integrator=options.integrator,
        dt_days=options.dt_days,
        node=node,
    )


def _concat_crossings(parts) -> Crossings:
    return Crossings(
        *(np.concatenate([getattr(p, f) for p in parts]) for f in Crossings.__dataclass_fields__)
    )


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
