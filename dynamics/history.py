"""Parent history: integrate a comet back (and forward) through its perihelia with the planets.

The parent is a test particle in an IAS15 simulation of the Sun and planets, started from DE423
at the orbit's epoch and integrated by REBOUND in both directions (outside DE423's 1800-2200 span
the planets are integrated, never extrapolated from the ephemeris). Optional Marsden-type
non-gravitational forces act on the parent (Marsden, Sekanina & Yeomans 1973, AJ 78, 211):

    a = g(r) (A1 R + A2 T + A3 N),
    g(r) = alpha (r/r0)^-m (1 + (r/r0)^n)^-k,

with R radial (from the Sun), T transverse (in the orbit plane, towards the motion) and N normal,
alpha = 0.1112620426, r0 = 2.808 au, m = 2.15, n = 5.093, k = 4.6142 (the water-ice law).
Where an orbit solution gives the asymmetric model's DT (Yeomans & Chodas 1989, AJ 98, 1083),
g is taken at the distance r(t - DT) the comet has DT days earlier on its osculating orbit.

For every perihelion passage trailcast keeps the perihelion state and the parent's states on a
one-day grid over its *active arc* (heliocentric distance below ``active_r_max_au``), together
with the planets at the start of that arc: that is where meteoroids are released.
"""

import math
from dataclasses import dataclass, field

import numpy as np

from .constants import GM_SUN_AU3_D2
from .ephemeris import EPHEMERIS_SPAN_TDB_ISO, EPHEMERIS_SPAN_TDB_JD
from .errors import ComputationStopped, OutsideTimeSpan, TrailcastError
from .nbody import MassiveBodies, ParentSimulation, massive_bodies_from_ephemeris
from .orbit_input import OrbitInput
from .orbits import Elements, elements_to_state, state_to_elements
from .timescales import format_iso

# Marsden, Sekanina & Yeomans (1973) g(r) constants for water ice.
NONGRAV_ALPHA = 0.1112620426
NONGRAV_R0_AU = 2.808
NONGRAV_M = 2.15
NONGRAV_N = 5.093
NONGRAV_K = 4.6142

#: Default heliocentric distance within which the parent releases meteoroids (au).
#: Common practice, no single source: water-driven activity switches on inside ~3 au.
DEFAULT_ACTIVE_R_MAX_AU = 3.0
#: Sampling step of the parent inside the active arc (days).
ARC_STEP_DAYS = 1.0
#: How far back to look for the previous return of a long-period comet (years).
MAX_LOOKBACK_YEARS = 30_000.0
#: Uncertainty of 1/a used to say how well a long-period parent's previous return is dated
#: (1/au): typical of a well-observed single apparition (common practice, no source).
INVERSE_A_UNCERTAINTY_PER_AU = 1e-5
#: Distance beyond which the barycentric orbit is taken as the comet's original orbit (au).
ORIGINAL_ORBIT_DISTANCE_AU = 250.0


class FirstPassage(TrailcastError):
    """The parent's original (barycentric, pre-entry) orbit is hyperbolic: this is its first
    passage through the inner Solar System, so it has left no dust trails to meet. Nothing to
    forecast; check the orbit solution if that is unexpected."""


def nongrav_g(r_au):
    """Marsden et al. (1973) g(r), normalised so that g(1 au) = 1 (approximately).

    A float gives a float by plain arithmetic (the force callback's case, once per force
    evaluation: 0.3 us against 2.6 us through numpy). Arrays go through the same arithmetic
    element by element: numpy's vectorised power differs from the C library's by an ulp on
    some processors (seen on one of our machines, not on another), and a parent's history must
    not depend on which path computed it.
    """
    if isinstance(r_au, float):
        return _nongrav_g_float(r_au)
    r = np.asarray(r_au, dtype=float)
    return np.vectorize(lambda v: _nongrav_g_float(float(v)), otypes=[float])(r)


def _nongrav_g_float(r_au: float) -> float:
    x = r_au / NONGRAV_R0_AU
    return NONGRAV_ALPHA * x ** (-NONGRAV_M) * (1.0 + x**NONGRAV_N) ** (-NONGRAV_K)


@dataclass(frozen=True)
class ParentReturn:
    """One perihelion passage of the parent and its active arc.

    Attributes
    ----------
    tp_tdb_jd : float
        Perihelion time (TDB JD).
    elements : Elements
        Osculating heliocentric elements at perihelion.
    arc_t_tdb_jd : ndarray (k,)
        Times of the parent's states inside the active arc (one-day grid).
    arc_r_au, arc_v_au_d : ndarray (k, 3)
        Heliocentric states of the parent at those times (ecliptic J2000).
    bodies_at_arc_start : MassiveBodies or None
        Sun and planets at ``arc_t_tdb_jd[0]`` (None when the arc is empty).
    """

    tp_tdb_jd: float
    elements: Elements
    arc_t_tdb_jd: np.ndarray = field(repr=False)
    arc_r_au: np.ndarray = field(repr=False)
    arc_v_au_d: np.ndarray = field(repr=False)
    bodies_at_arc_start: MassiveBodies | None = field(repr=False)

    @property
    def period_days(self) -> float:
        return float(self.elements.period_days)


@dataclass(frozen=True)
class ParentHistory:
    """Perihelion passages of a parent, oldest first, with how they were found."""

    returns: tuple[ParentReturn, ...]
    epoch_tdb_jd: float
    original_inverse_a_per_au: float | None
    notes: tuple[str, ...]


def check_epoch_in_ephemeris(orbit: OrbitInput) -> None:
    """Raise :class:`OutsideTimeSpan`, saying what to do, if the orbit's epoch lies outside DE423.

    The parent's integration starts from the planets at the orbit's epoch, read from DE423
    (Folkner 2010; 1799-12-16 to 2200-02-01 TDB), so elements at another epoch cannot be used.
    """
    first, last = EPHEMERIS_SPAN_TDB_JD
    if not first <= orbit.epoch_tdb_jd <= last:
        raise OutsideTimeSpan(
            f"the orbit's epoch (JD {orbit.epoch_tdb_jd:.1f} TDB, "
            f"{format_iso(orbit.epoch_tdb_jd, 'TDB')[:10]}) lies outside the planetary ephemeris "
            f"DE423 ({EPHEMERIS_SPAN_TDB_ISO[0]} to {EPHEMERIS_SPAN_TDB_ISO[1]} TDB), where "
            "the integration has to start: propagate the orbit to an epoch between 1800 and 2200 "
            "(DE423's span) with your orbit software, or give osculating elements at such an "
            "epoch (e.g. from an orbit solution published for a date in that span).",
            span=EPHEMERIS_SPAN_TDB_JD,
        )


def _parent_simulation(orbit: OrbitInput) -> ParentSimulation:
    check_epoch_in_ephemeris(orbit)
    bodies = massive_bodies_from_ephemeris(orbit.epoch_tdb_jd)
    r, v = elements_to_state(
        orbit.q_au,
        orbit.e,
        orbit.incl_deg,
        orbit.node_deg,
        orbit.peri_deg,
        orbit.tp_tdb_jd,
        orbit.epoch_tdb_jd,
    )
    ng = orbit.nongrav
    nongrav = None if ng is None else (ng.a1_au_d2, ng.a2_au_d2, ng.a3_au_d2, nongrav_g, ng.dt_days)
    return ParentSimulation(bodies, r, v, nongrav)


def _bodies_at(sim: ParentSimulation) -> MassiveBodies:
    """Sun and planets now: DE423's inside its span (no integration drift), else integrated."""
    t = sim.t_tdb_jd
    if EPHEMERIS_SPAN_TDB_JD[0] <= t <= EPHEMERIS_SPAN_TDB_JD[1]:
        return massive_bodies_from_ephemeris(t)
    return sim.massive_bodies()


#: Beyond the active arc, the parent is stepped one day at a time within this distance of its
#: edge (au), so that no step jumps deep into the arc (no source).
ARC_APPROACH_MARGIN_AU = 0.5
#: An observed perihelion time is matched to the integrated return whose osculating perihelion
#: time lies within this fraction of a period of it (a quarter: never the neighbouring return;
#: no source).
OBSERVED_MATCH_FRACTION = 0.25


class _Anchors:
    """Observed perihelion times still to be applied by a backward march, and what was done."""

    def __init__(self, observed, reference_tp_tdb_jd: float):
        self.pending = sorted(observed, key=lambda o: -o.tp_tdb_jd)  # latest first
        self.reference_tp = reference_tp_tdb_jd  # the last return known to be right
        self.period_factor: float | None = None  # still to apply to the earlier revolutions
        self.applied: list[tuple] = []  # (observed, shift, period change before it; days)
        self.next_check_before = math.inf  # one look per return: after it, wait until here

    def due(self, t: float) -> bool:
        return bool(self.pending) and t < self.next_check_before

    def match(self, tp_osc: float, period_days: float):
        for k, obs in enumerate(self.pending):
            if abs(obs.tp_tdb_jd - tp_osc) <= OBSERVED_MATCH_FRACTION * period_days:
                return self.pending.pop(k)
        return None


def _hold_to_observed(sim, t: float, r, v, anchors: _Anchors):
    """Before the parent (going back in time) enters a return's active arc: when an observed
    perihelion time names that return, move the parent along its osculating orbit so that it
    reaches perihelion then. Returns the new (r, v), or None when nothing was changed.

    The shape and orientation of the orbit are kept; only the time of passage changes, which
    is what unmodelled non-gravitational forces get wrong first (they act on the period).
    Earlier returns then follow from the corrected one.
    """
    el = state_to_elements(r, v, t, GM_SUN_AU3_D2)
    if not float(el.e) < 1.0:  # no period to match by: look again a month earlier
        anchors.next_check_before = t - 30.0
        return None
    tp_osc = float(el.tp_tdb_jd)
    anchors.next_check_before = tp_osc - OBSERVED_MATCH_FRACTION * float(el.period_days)
    obs = anchors.match(tp_osc, float(el.period_days))
    if obs is None:
        return None
    shift = obs.tp_tdb_jd - tp_osc
    period = float(el.period_days)
    n_rev = max(1, round((anchors.reference_tp - obs.tp_tdb_jd) / period))
    # A steady transverse non-gravitational force changes the period by about the same amount
    # every revolution (Marsden, Sekanina & Yeomans 1973), so the period of an orbit that is
    # right at its reference return errs by one more step each revolution going back, and the
    # perihelion time drifts as the sum: shift = step n (n + 1) / 2 over n revolutions. The
    # revolution before this return errs by step (n + 1) = 2 shift / n: the revolutions before
    # it run with that removed (from when the parent has left this return's arc, going back;
    # the further growth of the error is not extrapolated).
    d_period = -2.0 * shift / n_rev
    anchors.period_factor = (period + d_period) / period
    anchors.reference_tp = obs.tp_tdb_jd
    anchors.applied.append((obs, shift, d_period))
    r_new, v_new = elements_to_state(
        el.q_au, el.e, el.incl_deg, el.node_deg, el.peri_deg, obs.tp_tdb_jd, t, GM_SUN_AU3_D2
    )
    sim.set_parent_state(r_new, v_new)
    return sim.parent_state()


def _correct_period(sim, t: float, r, v, anchors: _Anchors):
    """Going back, just outside a held return's arc on its inbound leg: scale the period of
    the revolutions before it by the drift per revolution that holding it revealed
    (perihelion distance, orientation and the held perihelion time kept; the eccentricity
    takes up the change of semi-major axis). Unmodelled non-gravitational forces change the
    period a little every revolution, so the same error continues before the held return;
    the correction extrapolates it linearly. Returns the new (r, v)."""
    el = state_to_elements(r, v, t, GM_SUN_AU3_D2)
    factor, anchors.period_factor = anchors.period_factor, None
    if not float(el.e) < 1.0:
        return r, v
    a_new = float(el.q_au) / (1.0 - float(el.e)) * factor ** (2.0 / 3.0)
    e_new = 1.0 - float(el.q_au) / a_new
    r_new, v_new = elements_to_state(
        el.q_au, e_new, el.incl_deg, el.node_deg, el.peri_deg, el.tp_tdb_jd, t, GM_SUN_AU3_D2
    )
    sim.set_parent_state(r_new, v_new)
    return sim.parent_state()


def _march(
    sim,
    t_stop: float,
    direction: int,
    active_r_max_au: float,
    stop_after_perihelia=None,
    counting_before_tdb_jd=math.inf,
    should_stop=None,
    anchors: _Anchors | None = None,
):
    """Step the parent simulation towards ``t_stop``; return samples and perihelion passages.

    Samples are taken every day inside the active arc and every few percent of the local
    orbital time scale outside it. Returns (samples, perihelia) where samples are tuples
    (t, r, v, bodies or None) and perihelia are (t_before, r, v) at the sample preceding a
    sign change of r.v. ``should_stop()``, when given, is asked before every step; True raises
    :class:`~dynamics.errors.ComputationStopped`. ``anchors`` (backward marches only): observed
    perihelion times, applied by :func:`_hold_to_observed` where the parent nears a return.
    """
    samples = []
    perihelia = []
    r, v = sim.parent_state()
    if direction > 0:  # the starting instant belongs to exactly one of the two marches
        inside = float(np.linalg.norm(r)) < active_r_max_au
        samples.append((sim.t_tdb_jd, r, v, _bodies_at(sim) if inside else None))
    prev = (sim.t_tdb_jd, r, v, float(np.dot(r, v)))
    t = sim.t_tdb_jd
    epoch = sim.t_tdb_jd
    while (t_stop - t) * direction > 0:
        if should_stop is not None and should_stop():
            raise ComputationStopped("parent history stopped on request")
        rn = float(np.linalg.norm(prev[1]))
        if (
            anchors is not None
            and direction < 0
            and anchors.due(t)
            and rn < active_r_max_au + ARC_APPROACH_MARGIN_AU
            and prev[3] > 0.0  # outbound: going back in time, the return is ahead
        ):
            moved = _hold_to_observed(sim, t, prev[1], prev[2], anchors)
            if moved is not None:
                r, v = moved
                prev = (t, r, v, float(np.dot(r, v)))
                rn = float(np.linalg.norm(r))
                if samples and samples[-1][0] == t:
                    samples[-1] = (t, r, v, samples[-1][3])
        if (
            anchors is not None
            and direction < 0
            and anchors.period_factor is not None
            and rn >= active_r_max_au + ARC_APPROACH_MARGIN_AU
            and prev[3] < 0.0  # inbound, outside the held return's arc: the revolution before
        ):
            r, v = _correct_period(sim, t, prev[1], prev[2], anchors)
            prev = (t, r, v, float(np.dot(r, v)))
            if samples and samples[-1][0] == t:
                samples[-1] = (t, r, v, samples[-1][3])
        if rn < active_r_max_au + ARC_APPROACH_MARGIN_AU:
            step = ARC_STEP_DAYS
        else:
            step = float(np.clip(0.02 * 365.25 * rn**1.5, ARC_STEP_DAYS, 20_000.0))
            # never jump deep into the active arc: move at most half the way to its edge
            speed = float(np.linalg.norm(prev[2]))
            step = min(step, max(ARC_STEP_DAYS, 0.5 * (rn - active_r_max_au) / speed))
            # land on the one-day grid anchored at the epoch, so arcs line up with it
            step = max(ARC_STEP_DAYS, math.floor(step))
        t_next = t + direction * step
        if (t_stop - t_next) * direction < 0:
            t_next = t_stop
        sim.integrate(t_next)
        t = t_next
        r, v = sim.parent_state()
        rv = float(np.dot(r, v))
        rn = float(np.linalg.norm(r))
        inside = rn < active_r_max_au
        samples.append((t, r, v, _bodies_at(sim) if inside else None))
        # perihelion between prev and now: r.v changes from - to + in forward time
        if prev[3] * rv < 0 and ((direction > 0 and rv > 0) or (direction < 0 and rv < 0)):
            perihelia.append((t, r, v))
        if (
            stop_after_perihelia is not None
            and sum(1 for p in perihelia if p[0] < counting_before_tdb_jd) >= stop_after_perihelia
            and not inside
        ):
            break  # enough returns, and the last one's active arc is complete
        if (
            direction < 0
            and rn > ORIGINAL_ORBIT_DISTANCE_AU
            and rv < 0
            and sim.barycentric_inverse_a() <= 0
        ):
            # moving away from the Sun backwards in time on an unbound barycentric orbit
            break
        if abs(t - epoch) > MAX_LOOKBACK_YEARS * 365.25:
            break
        prev = (t, r, v, rv)
    return samples, perihelia


#: Spans of cached histories are widened to multiples of this (days), so that forecasts of
#: nearby years share one history (50 Julian years; no source).
CACHE_SPAN_QUANTUM_DAYS = 50 * 365.25
#: Histories kept in memory per process.
CACHE_ENTRIES = 16
_memory_cache: dict[str, "ParentHistory"] = {}


def cache_dir():
    """Where parent histories are kept between runs: ``$TRAILCAST_CACHE_DIR``, else
    ``~/.cache/trailcast/history`` (None when neither can be used)."""
    import os
    from pathlib import Path

    base = os.environ.get("TRAILCAST_CACHE_DIR")
    path = Path(base) if base else Path.home() / ".cache" / "trailcast" / "history"
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return path


def _may_stay_active(orbit: OrbitInput, active_r_max_au: float) -> bool:
    """Whether the parent's aphelion lies within the active zone and its approach margin,
    where :func:`_collect_return` cuts a return's arc at half a period (bound orbits only)."""
    return orbit.e < 1.0 and orbit.aphelion_au < active_r_max_au + ARC_APPROACH_MARGIN_AU


def cached_parent_history(
    orbit: OrbitInput,
    t_min_tdb_jd: float,
    t_max_tdb_jd: float,
    *,
    active_r_max_au: float = DEFAULT_ACTIVE_R_MAX_AU,
    should_stop=None,
) -> "ParentHistory":
    """:func:`parent_history` over a span widened to :data:`CACHE_SPAN_QUANTUM_DAYS`, computed
    once per parent and span and reused: keyed by a hash of the orbit's JSON, the span, the
    active-arc limit and trailcast's version; kept in memory and in :func:`cache_dir` (files
    written atomically, so a killed run never leaves a half-written history)."""
    import hashlib
    import json
    import os
    import pickle

    from . import __version__

    q = CACHE_SPAN_QUANTUM_DAYS
    lo = math.floor(t_min_tdb_jd / q) * q
    hi = math.ceil(t_max_tdb_jd / q) * q
    # v4: every history; observed perihelia (held returns, corrected periods before them)
    # carry their own tag, so a change there never reuses a history made before it; so do
    # parents whose whole orbit may lie in the active zone (arcs cut at half a period since)
    tag = (
        ["history-v4"]
        + (["held-v2"] if orbit.observed_perihelia else [])
        + (["arc-revolution-v1"] if _may_stay_active(orbit, active_r_max_au) else [])
    )
    key_src = json.dumps(
        [orbit.to_json(), lo, hi, active_r_max_au, __version__, *tag], sort_keys=True
    )
    key = hashlib.sha256(key_src.encode()).hexdigest()[:32]
    if key in _memory_cache:
        return _memory_cache[key]
    folder = cache_dir()
    path = None if folder is None else folder / f"{key}.pickle"
    hist = None
    if path is not None and path.exists():
        try:
            with open(path, "rb") as fh:
                hist = pickle.load(fh)
        except (OSError, pickle.UnpicklingError, EOFError, AttributeError):
            hist = None  # unreadable: compute again and overwrite
    if hist is None:
        hist = parent_history(
            orbit, lo, hi, active_r_max_au=active_r_max_au, should_stop=should_stop
        )
        if path is not None:
            tmp = path.with_suffix(f".{os.getpid()}.tmp")
            try:
                with open(tmp, "wb") as fh:
                    pickle.dump(hist, fh, protocol=pickle.HIGHEST_PROTOCOL)
                os.replace(tmp, path)
            except OSError:
                tmp.unlink(missing_ok=True)
    if len(_memory_cache) >= CACHE_ENTRIES:
        _memory_cache.pop(next(iter(_memory_cache)))
    _memory_cache[key] = hist
    return hist


def parent_history(
    orbit: OrbitInput,
    t_min_tdb_jd: float,
    t_max_tdb_jd: float,
    *,
    active_r_max_au: float = DEFAULT_ACTIVE_R_MAX_AU,
    min_previous_returns: int = 1,
    should_stop=None,
) -> ParentHistory:
    """Integrate the parent from its epoch back to ``t_min`` and forward to ``t_max``.

    Parameters
    ----------
    orbit : OrbitInput
        Heliocentric osculating elements at ``orbit.epoch_tdb_jd`` (within DE423's span).
    t_min_tdb_jd, t_max_tdb_jd : float
        Span to cover (TDB JD). If fewer than ``min_previous_returns`` perihelia before the
        epoch's own fall in it (a long-period comet), the backward integration goes on until
        they are found, up to :data:`MAX_LOOKBACK_YEARS`.
    active_r_max_au : float
        The active arc is where the parent is closer to the Sun than this (au).
    should_stop : callable, optional
        Asked (no arguments) before every integration step; True stops the integration with
        :class:`~dynamics.errors.ComputationStopped` (a cancelled job, a time limit).

    Returns
    -------
    ParentHistory

    Raises
    ------
    FirstPassage
        When the backward integration shows an unbound original orbit before any earlier
        perihelion was found.
    """
    notes = []
    sim = _parent_simulation(orbit)
    anchors = (
        _Anchors(orbit.observed_perihelia, orbit.tp_tdb_jd) if orbit.observed_perihelia else None
    )
    back, peri_back = _march(
        sim, t_min_tdb_jd, -1, active_r_max_au, should_stop=should_stop, anchors=anchors
    )
    # The epoch's own passage and any before it within the span are in peri_back. Long-period
    # parents need the previous return even beyond t_min.
    n_before = sum(1 for (t, _, _) in peri_back if t < orbit.tp_tdb_jd - 1.0)
    original_inv_a = None
    if (
        n_before < min_previous_returns
        and sim.t_tdb_jd > orbit.epoch_tdb_jd - MAX_LOOKBACK_YEARS * 365.25 + 1
    ):
        more, peri_more = _march(
            sim,
            orbit.epoch_tdb_jd - MAX_LOOKBACK_YEARS * 365.25,
            -1,
            active_r_max_au,
            stop_after_perihelia=min_previous_returns - n_before,
            counting_before_tdb_jd=orbit.tp_tdb_jd - 1.0,
            should_stop=should_stop,
            anchors=anchors,
        )
        back += more
        peri_back += peri_more
        if not any(t < orbit.tp_tdb_jd - 1.0 for (t, _, _) in peri_back):
            inv_a = sim.barycentric_inverse_a()
            original_inv_a = inv_a
            if inv_a <= 0:
                raise FirstPassage(
                    f"{orbit.name}: the original barycentric orbit is hyperbolic (1/a = {inv_a:.3g} /au): "
                    "first passage, no earlier returns and no dust trails"
                )
            notes.append(
                "no perihelion before the epoch's own found in the "
                f"{MAX_LOOKBACK_YEARS:.0f} years before the epoch (any returns listed come "
                "after it)"
            )
        else:
            prev = max(t for (t, _, _) in peri_back if t < orbit.tp_tdb_jd - 1.0)
            years = (orbit.tp_tdb_jd - prev) / 365.25
            if years > 200.0:  # a long-period parent (Halley-type and shorter stay silent)
                # dP/d(1/a) = -1.5 P / (1/a) with 1/a = (P / 2 pi)^(-2/3) mu^(1/3) (Kepler)
                inv_a = (years * 365.25 * math.sqrt(GM_SUN_AU3_D2) / (2 * math.pi)) ** (-2 / 3)
                shift = 1.5 * years / inv_a * INVERSE_A_UNCERTAINTY_PER_AU
                notes.append(
                    f"long-period parent: integrated back to its previous return, {years:.0f} "
                    f"years before the orbit's perihelion (1/a = {inv_a:.5f} /au over that "
                    f"revolution); an error of {INVERSE_A_UNCERTAINTY_PER_AU:g} /au in 1/a moves "
                    f"that return by about {shift:.1f} years, and planetary perturbations add "
                    "more: run the orbit's alternative solutions or clones to see the spread"
                )

    if anchors is not None:
        notes += _anchor_notes(anchors, min((s[0] for s in back), default=orbit.epoch_tdb_jd))
    sim = _parent_simulation(orbit)
    fwd, peri_fwd = _march(sim, t_max_tdb_jd, +1, active_r_max_au, should_stop=should_stop)

    samples = sorted(back + fwd, key=lambda s: s[0])
    peri = sorted(peri_back + peri_fwd, key=lambda p: p[0])
    returns = []
    seen = []
    for t, r, v in peri:
        el = state_to_elements(r, v, t, GM_SUN_AU3_D2)
        tp = float(el.tp_tdb_jd)
        if any(abs(tp - s) < 5.0 for s in seen):
            continue
        seen.append(tp)
        returns.append(_collect_return(el, tp, samples))
    return ParentHistory(tuple(returns), orbit.epoch_tdb_jd, original_inv_a, tuple(notes))


def _date(t_tdb_jd: float) -> str:
    """The calendar date (TDB) of a Julian date, years before 1 included.

    >>> _date(1259000.5), _date(2415351.5)
    ('-1266-12-05', '1900-11-28')
    """
    return format_iso(t_tdb_jd, "TDB").split("T")[0]


def _anchor_notes(anchors: _Anchors, earliest_tdb_jd: float) -> list[str]:
    """What the observed perihelion times did: each applied shift, each one not matched."""
    out = []
    for obs, shift, d_period in sorted(anchors.applied, key=lambda a: a[0].tp_tdb_jd):
        src = f" ({obs.source})" if obs.source else ""
        out.append(
            f"return of {_date(obs.tp_tdb_jd)}: perihelion held to the observed "
            f"time{src}; the integrated orbit alone put it {abs(shift):.2f} d "
            f"{'earlier' if shift > 0 else 'later'}; the revolutions before it run with their "
            f"period changed by {d_period:+.2f} d (the drift it revealed, continued)"
        )
    for obs in anchors.pending:
        if obs.tp_tdb_jd >= earliest_tdb_jd:
            out.append(
                f"observed perihelion {_date(obs.tp_tdb_jd)} not used: no "
                f"integrated return within {OBSERVED_MATCH_FRACTION:g} of a period of it"
            )
    return out


def _collect_return(el: Elements, tp: float, samples) -> ParentReturn:
    """Gather the contiguous active-arc samples around perihelion ``tp``.

    The arc ends where the parent leaves the active zone, and in any case half an osculating
    period from perihelion: a parent whose aphelion lies inside the zone (a near-Sun asteroid,
    a comet of a few years' period) would otherwise stay "active" for its whole history, and
    every return would release its trail over all of it.
    """
    times = np.array([s[0] for s in samples])
    active = np.array([s[3] is not None for s in samples])
    i0 = int(np.argmin(np.abs(times - tp)))
    if not active[i0]:
        return ParentReturn(tp, el, np.zeros(0), np.zeros((0, 3)), np.zeros((0, 3)), None)
    half = 0.5 * float(el.period_days) if el.e < 1.0 else math.inf
    lo = i0
    while (
        lo > 0
        and active[lo - 1]
        and times[lo] - times[lo - 1] <= ARC_STEP_DAYS + 1e-6
        and times[lo - 1] > tp - half
    ):
        lo -= 1
    hi = i0
    while (
        hi < len(samples) - 1
        and active[hi + 1]
        and times[hi + 1] - times[hi] <= ARC_STEP_DAYS + 1e-6
        and times[hi + 1] <= tp + half
    ):
        hi += 1
    arc = samples[lo : hi + 1]
    return ParentReturn(
        tp_tdb_jd=tp,
        elements=el,
        arc_t_tdb_jd=np.array([s[0] for s in arc]),
        arc_r_au=np.array([s[1] for s in arc]),
        arc_v_au_d=np.array([s[2] for s in arc]),
        bodies_at_arc_start=arc[0][3],
    )
