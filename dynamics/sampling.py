"""Which meteoroids are integrated for each trail passage, and when to stop.

Per target (a trail's passage near Earth in a year): a pilot spread over predicted arrivals,
widened until integrated arrivals bracket Earth's passage; a targeted candidate pool where the
natural one is too thin (one-revolution dust of long-period parents); then a probe round, the
rest of the budget and refinement rounds, each picked through the arrival map with its
inclusion probability (Horvitz-Thompson weights), and the stop rule that ends a passage that
cannot be an encounter. Integration tasks are built here and run by :mod:`~dynamics.executors`.
"""

from dataclasses import dataclass, field, replace

import numpy as np

from .constants import GM_SUN_AU3_D2
from .crossings import Crossings
from .executors import Task, run_tasks
from .history import ParentReturn
from .nbody import step_grid
from .outcomes import ENCOUNTER_MAX_MISS_AU, NEAR_MISS_MAX_AU
from .release import (
    Candidates,
    EjectionEvent,
    EjectionModel,
    draw_candidates,
)
from .targeting import (
    BETA_CLASSES,
    PILOT_EXPANSION_FACTOR,
    PILOT_EXPANSION_PARTICLES,
    PILOT_EXPANSIONS,
    ArrivalMap,
    Target,
    beta_classes,
    pilot_pick,
    predicted_offset,
    select_for_window,
)

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
#: the arrival map, where days matter, not minutes. Measured here (120 meteoroids, 67 years,
#: distance from IAS15, median / 90th percentile): 1.5e-8 / 2e-5 au at 0.5 d and 6e-8 /
#: 3e-4 au at 1 d with the corrector (nbody.WHFAST_CORRECTOR_ORDER).
PILOT_DT_FACTOR = 2.0
#: Main integrations write states every MAIN_STEP_DAYS over the window plus this margin (days):
#: a crossing is computed from the state nearest it (no source).
MAIN_STEP_DAYS = 2.0
MAIN_OUTPUT_MARGIN_DAYS = 30.0
#: A target is refined when fewer than this fraction of its meteoroids met Earth's passage;
#: a refinement round integrates as many as its hits still fall short of the budget (at least
#: a probe's worth), not a whole new budget. No source: a cost rule.
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


@dataclass
class Trail:
    """One parent return's candidate pool and how it was made."""

    ret: ParentReturn
    pool: Candidates
    model: EjectionModel
    n_drawn: int
    event: EjectionEvent | None
    cls: np.ndarray = field(repr=False)
    edges: np.ndarray = field(repr=False, default_factory=lambda: np.zeros(0))


def seed_for(seed: int, tp_tdb_jd: float, batch: int = 0) -> np.random.SeedSequence:
    """Seed of a trail's draws: the user's seed and the trail's perihelion day (any date, also
    before JD 0, maps to a non-negative integer), and the batch of candidates."""
    key = [int(seed), int(round(tp_tdb_jd)) % 2**32]
    return np.random.SeedSequence(key + [batch] if batch else key)


def pilot(targets, trails, options, executor, say) -> int:
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
        x = predicted_offset(tr.pool, tg)
        if not np.any((x >= -tg.span_days) & (x <= tg.span_days)):
            # no candidate is predicted within the pilot's span: the pilot never picks one and
            # no later round can (they all start from what the pilot saw). Keep no arrays over
            # the pool for it: a short-period parent has thousands of such (trail, revolution)
            # pairs, and these arrays of the pool's size made gigabytes.
            tg.keep_prob = np.zeros(0)
            continue
        tg.keep_prob = np.ones(len(tr.pool))
        todo.append((ti, -tg.span_days, tg.span_days, per_class))
        tg.x_pool = x
    for round_ in range(1 + PILOT_EXPANSIONS):
        items = []
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
            out_t = output_times(tr.ret, tg.t_earth, half, step, pilot_options.dt_days)
            items.append((ti, pick, tr.pool, tr.ret, out_t, tg.node, tg.t_earth))
        if not items:
            break
        say(0.1 + 0.04 * round_, "pilot integration")
        tasks, meta = batched_tasks(("pilot", round_), items, pilot_options)
        results = run_tasks(tasks, executor)
        integrated += sum(len(t.beta) for t in tasks)
        for ti, sub, cr in split_results(meta, results):  # crossings, from the workers
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


def targeted_pools(targets, trails, options) -> None:
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
            rng = np.random.default_rng(seed_for(options.seed, tr.ret.tp_tdb_jd, 1000 + batch))
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


def _record(tg: Target, tr: Trail, idx, cr: Crossings) -> None:
    """Keep what an integration taught about a target's arrival map."""
    tg.x_seen = np.concatenate([tg.x_seen, tg.x_pool[idx]])
    tg.y_seen = np.concatenate([tg.y_seen, cr.t_cross_tdb_jd - tg.t_earth])
    tg.c_seen = np.concatenate([tg.c_seen, tg.cls[idx]])
    tg.idx_seen = np.concatenate([tg.idx_seen, idx])
    tg.miss_seen = np.concatenate([tg.miss_seen, cr.miss_distance_au])


def main_rounds(targets, trails, options, executor, say, integrated):
    """A probe round, the targeted integration, then refinement rounds for targets whose
    meteoroids mostly missed Earth's passage or of which fewer than PROBE_MIN_HITS met it.

    Returns per-target crossings, the pool indices behind them, and the running count of
    integrated meteoroids.
    """
    per_target: dict[int, list] = {}
    picked: dict[int, list] = {}
    for tg in targets:
        tg.selection_mode = "shooting"
    # targets the pilot could not reach (no arrays over the pool: see pilot) take no rounds
    active = [ti for ti, tg in enumerate(targets) if len(tg.x_pool)]
    taken = {ti: np.zeros(len(targets[ti].pool), dtype=bool) for ti in active}
    for ti in active:
        tg = targets[ti]
        if not tg.targeted_pool:  # pilot meteoroids inform the map, never the activity
            taken[ti][tg.idx_seen] = True
    probe = max(PROBE_MIN_HITS, int(np.ceil(PROBE_FRACTION * options.particles)))
    probe = min(probe, options.particles)
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
        items = []
        for ti in active:
            tg = targets[ti]
            tr = trails[tg.trail]
            n_pick = budget
            if round_ >= 2:
                n_pick = refinement_size(per_target.get(ti, []), options, probe)
            amap = ArrivalMap(tg.x_seen, tg.y_seen, tg.c_seen, BETA_CLASSES)
            pick, eligible, frac = select_for_window(
                amap, tg.x_pool, tg.cls, options.window_days, taken[ti], n_pick
            )
            fallback = tg.selection_mode.startswith("uniform")
            misled = map_misleads(round_, tg, _hits(per_target.get(ti, []), options))
            if misled:
                # two rounds of the map's picks and not one met Earth's passage: its window
                # is a smoothing artefact here (a resonant plateau or a fold between pilot
                # points); bisect, or sample the pilot span uniformly, a probe's worth
                pick = np.zeros(0, dtype=int)
                n_pick = min(n_pick, probe)
            if len(pick) == 0 and round_ >= 1:
                pick, eligible, frac = around_hits(tg, options, taken[ti], n_pick)
            if len(pick) == 0:
                # the smoothed map misses Earth's passage, but integrated arrivals on either
                # side of it (in one beta class, adjacent in prediction) enclose a root of the
                # real arrival function: bisect there, a probe's worth a round (exploration:
                # a few meteoroids a bracket narrow it; hits hand over to the map)
                pick, eligible, frac = between_brackets(tg, options, taken[ti], min(n_pick, probe))
            if len(pick) == 0 and (round_ == 0 or (fallback and round_ == 1)) and len(tg.idx_seen):
                # shooting found no branch through Earth's passage: sample the whole pilot
                # span uniformly instead, so that what is reported rests on real arrivals
                pick, eligible, frac = uniform_fallback(
                    tg, taken[ti], n_pick, "shooting found no arrival at Earth's passage"
                )
            if len(pick) == 0 and misled and len(tg.idx_seen):
                pick, eligible, frac = uniform_fallback(
                    tg, taken[ti], n_pick, "the arrival map's picks all missed Earth's passage"
                )
            if len(pick) == 0 and shooting_exhausted(
                pick, round_, tg, _hits(per_target.get(ti, []), options)
            ):
                # the map's candidates are spent and none of its meteoroids met Earth's
                # passage: the map misleads here (a folded, chaotic trail); the rest of the
                # budget goes to the whole pilot span, uniformly
                pick, eligible, frac = uniform_fallback(
                    tg, taken[ti], n_pick, "shooting's meteoroids all missed Earth's passage"
                )
            if len(pick) == 0:
                continue
            tg.keep_prob[eligible] *= 1.0 - frac
            taken[ti][pick] = True
            tg.rounds += 1
            out_t = output_times(
                tr.ret,
                tg.t_earth,
                options.window_days + MAIN_OUTPUT_MARGIN_DAYS,
                MAIN_STEP_DAYS,
                options.dt_days,
            )
            items.append((ti, pick, tg.pool, tr.ret, out_t, tg.node, tg.t_earth))
        if not items and round_ > 0:
            break
        tasks, meta = batched_tasks(("main", round_), items, options)
        results = run_tasks(
            tasks,
            executor,
            lambda k, n, lo=lo, span=span: say(lo + span * k / n, "integration"),
        )
        integrated += sum(len(t.beta) for t in tasks)
        for ti, sub, cr in split_results(meta, results):  # crossings, from the workers
            tg = targets[ti]
            per_target.setdefault(ti, []).append(cr)
            picked.setdefault(ti, []).append(sub)
            _record(tg, trails[tg.trail], sub, cr)
        for ti in active:
            targets[ti].stopped = enough_said(targets[ti], per_target.get(ti, []), options)
        active = [ti for ti in active if targets[ti].stopped is None]
        if round_ >= 1:
            active = [ti for ti in active if _needs_refinement(per_target.get(ti, []), options)]
    return per_target, picked, integrated


def uniform_fallback(tg: Target, taken: np.ndarray, budget: int, why: str):
    """Up to ``budget`` free candidates drawn uniformly over the whole pilot span (the pool is
    in random order): (picked, eligible, fraction) as :func:`select_for_window` gives them."""
    inside = np.flatnonzero((np.abs(tg.x_pool) <= tg.span_days) & np.isfinite(tg.x_pool) & ~taken)
    pick = inside[:budget]
    tg.selection_mode = f"uniform fallback ({why})"
    return pick, inside, len(pick) / max(1, len(inside))


def map_misleads(round_: int, tg: Target, hits: int) -> bool:
    """True from the first refinement round on for a passage still in shooting mode none of
    whose meteoroids met Earth's passage: the probe and the selection round both sampled the
    smoothed map's window and found nothing there. Rather than spend the refinement rounds on
    the same window (a handful of candidates each round: a resonant trail's arrivals barely
    depend on the predicted offset, so the map's window is narrow and wrong), the passage goes
    to bisection of arrival brackets, else to a uniform sample of the pilot span, a probe's
    worth a round; the uniform stop rule ends it when that finds nothing either."""
    return round_ >= 2 and hits == 0 and tg.selection_mode == "shooting"


def shooting_exhausted(pick, round_: int, tg: Target, hits: int) -> bool:
    """True when a targeted passage has nothing left to integrate after the first round (the
    arrival map offers no candidate, and no hit to sample around) although none of its
    meteoroids met Earth's passage: then, rather than end 'not reached' with budget unspent,
    it falls back to uniform sampling once (the uniform stop rule ends it if that finds
    nothing either)."""
    return (
        len(pick) == 0
        and round_ >= 1
        and hits == 0
        and not tg.selection_mode.startswith("uniform")
        and len(tg.idx_seen) > 0
    )


def arrival_brackets(tg: Target, window_days: float) -> list[tuple[int, float, float]]:
    """(beta class, x_lo, x_hi) of every pair of integrated meteoroids, adjacent in predicted
    offset within one beta class, that arrived on opposite sides of Earth's passage (both
    outside the window), those whose arrivals came nearest to it first. The real arrival
    function, continuous in the ejection's 1/a offset between folds, crosses Earth's passage in
    between, or jumps there; bisection narrows both kinds, only a root gives meteoroids at
    Earth's passage."""
    found = []
    ok = np.isfinite(tg.x_seen) & np.isfinite(tg.y_seen)
    for c in np.unique(tg.c_seen[ok]):
        sel = ok & (tg.c_seen == c)
        order = np.argsort(tg.x_seen[sel], kind="stable")
        xs, ys = tg.x_seen[sel][order], tg.y_seen[sel][order]
        side = np.where(ys > window_days, 1, np.where(ys < -window_days, -1, 0))
        for i in np.flatnonzero((side[:-1] * side[1:] < 0) & (xs[1:] > xs[:-1])):
            near = min(abs(ys[i]), abs(ys[i + 1]))
            found.append((near, int(c), float(xs[i]), float(xs[i + 1])))
    found.sort()
    return [(c, lo, hi) for _, c, lo, hi in found]


def between_brackets(tg: Target, options, taken: np.ndarray, budget: int):
    """Candidates inside the arrival brackets (:func:`arrival_brackets`): (picked, eligible,
    per-candidate inclusion probability) as :func:`select_for_window` gives them.

    Each bracket (at most ``budget`` of them, the nearest arrivals first) gets an equal share
    of the budget, spent on a random subset of the free candidates of its beta class strictly
    inside it (the pool is in random order), each with its bracket's inclusion probability; a
    candidate inside two brackets counts in the first. Later rounds repeat it on the narrower
    brackets the new arrivals leave: bisection shooting, for maps folded or scattered beyond
    what a running median follows (old, strongly perturbed trails).
    """
    empty = np.zeros(0, dtype=int)
    if budget <= 0:
        return empty, empty, 0.0
    brackets = arrival_brackets(tg, options.window_days)[:budget]
    free = ~taken & np.isfinite(tg.x_pool)
    assigned = np.zeros(len(tg.x_pool), dtype=bool)
    groups = []
    for c, lo, hi in brackets:
        inside = np.flatnonzero(
            free & ~assigned & (tg.cls == c) & (tg.x_pool > lo) & (tg.x_pool < hi)
        )
        if len(inside):
            assigned[inside] = True
            groups.append(inside)
    if not groups:
        return empty, empty, 0.0
    share = max(1, budget // len(groups))
    pick = np.concatenate([g[:share] for g in groups])
    eligible = np.concatenate(groups)
    prob = np.concatenate([np.full(len(g), min(share, len(g)) / len(g)) for g in groups])
    n = len(groups)
    tg.selection_mode = (
        "shooting, then bisection between arrivals on either side of Earth's passage "
        f"({n} bracket{'s' if n != 1 else ''})"
    )
    return pick, eligible, prob


def around_hits(tg: Target, options, taken: np.ndarray, budget: int):
    """Candidates next to the meteoroids that did meet Earth's passage, when the arrival map
    offers no new ones: (picked, eligible, fraction) as :func:`select_for_window` gives them.

    A running median through sparse pilot pairs cannot follow structure finer than their
    spacing: a mean-motion resonance holds a narrow range of periods at one arrival time (a
    plateau of the map a few pilot points wide), and old trails fold. Each meteoroid that met
    Earth's passage marks such a place; the candidates of its beta class whose predicted
    offsets lie closer to it than its nearest integrated neighbour (the unresolved gap), and at
    least its share of the budget of the nearest ones, are eligible, and a random subset of
    them is integrated with its inclusion probability.
    """
    lag = tg.y_seen
    hits = np.flatnonzero(np.isfinite(lag) & (np.abs(lag) <= options.window_days))
    if len(hits) == 0:
        return np.zeros(0, dtype=int), np.zeros(0, dtype=int), 0.0
    xs = tg.x_seen
    near = np.zeros(len(tg.x_pool), dtype=bool)
    free = ~taken & np.isfinite(tg.x_pool)
    per_hit = max(1, budget // len(hits))
    for h in hits:
        if not np.isfinite(xs[h]):
            continue
        others = np.abs(xs - xs[h])
        others[h] = np.inf
        gap = float(np.min(others[np.isfinite(others)], initial=np.inf))
        d = np.abs(tg.x_pool - xs[h])
        same = free & (tg.cls == tg.c_seen[h])
        if np.isfinite(gap) and gap > 0:
            near |= same & (d < gap)
        # ... and at least the budget's share of its nearest free candidates: when the hit's
        # integrated neighbours crowd it (a plateau narrower than the picks that found it),
        # the gap holds none, yet the plateau goes on right next to it
        idx = np.flatnonzero(same)
        if len(idx) > per_hit:  # the per_hit nearest, without sorting the whole pool
            idx = idx[np.argpartition(d[idx], per_hit - 1)[:per_hit]]
        near[idx] = True
    eligible = np.flatnonzero(near & free)
    if len(eligible) == 0:
        return eligible, eligible, 0.0
    pick = eligible[:budget]
    n = len(hits)
    tg.selection_mode = (
        f"shooting, then around the {n} meteoroid{'s' if n != 1 else ''} that met Earth's "
        "passage (the arrival map is unresolved there)"
    )
    return pick, eligible, len(pick) / len(eligible)


def enough_said(tg: Target, parts, options) -> str | None:
    """Why a target needs no more meteoroids (it cannot be an encounter), or None to go on."""
    if not parts:
        return None
    cr = concat_crossings(parts)
    lag = cr.t_cross_tdb_jd - cr.t_earth_tdb_jd
    hit = np.isfinite(lag) & (np.abs(lag) <= options.window_days)
    n, k = len(lag), int(hit.sum())
    # the uniform fallback looks for any arrival at Earth's passage of the trail's node (the
    # passage its outcome and activity are measured from, not each meteoroid's own node)
    at_passage = np.isfinite(cr.t_cross_tdb_jd) & (
        np.abs(cr.t_cross_tdb_jd - tg.t_earth) <= options.window_days
    )
    if (
        tg.selection_mode.startswith("uniform")
        and not at_passage.any()
        and not arrival_brackets(tg, options.window_days)
    ):
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
    """True when fewer than half the meteoroids integrated for a target met Earth's passage,
    or fewer than PROBE_MIN_HITS did however many were integrated: a narrow branch (a resonant
    plateau) offers few eligible candidates, and the few that met Earth's passage are where
    the next round samples around them (:func:`around_hits`)."""
    if not parts:
        return False
    n = sum(len(p.t_cross_tdb_jd) for p in parts)
    hits = _hits(parts, options)
    return hits < PROBE_MIN_HITS or hits < REFINE_BELOW_HIT_FRACTION * min(n, options.particles)


def refinement_size(parts, options, probe: int) -> int:
    """Meteoroids a refinement round integrates for a target: as many as its meteoroids at
    Earth's passage still fall short of the budget, at least a probe's worth."""
    return max(probe, options.particles - _hits(parts, options))


def _hits(parts, options) -> int:
    """How many of a target's integrated meteoroids met Earth's passage (within the window)."""
    if not parts:
        return 0
    lag = np.concatenate([p.t_cross_tdb_jd - p.t_earth_tdb_jd for p in parts])
    return int((np.isfinite(lag) & (np.abs(lag) <= options.window_days)).sum())


def batched_tasks(key, items, options):
    """Integration chunks for one round of several targets: (tasks, meta) for :func:`split_results`.

    ``items`` holds (target index, pool indices, pool, return, output times, node, Earth's
    passage). Targets released from the same return that meet the same Earth passage of the
    same node (the passages of one trail after different numbers of revolutions) share chunks,
    written at the union of their output times: every chunk integrates the planets once
    whatever it carries (measured here: the planets cost about as much as 9 meteoroids), so
    fewer, fuller chunks save that overhead. Meteoroids are test particles: sharing a
    simulation never changes them (beyond round-off); extra output times only put a state
    nearer each crossing.
    """
    groups: dict = {}
    for it in items:
        ti, pick, pool, ret, out_t, node, t_earth = it
        groups.setdefault((id(ret), node, float(t_earth)), []).append(it)
    tasks, meta = [], []
    for g, members in enumerate(groups.values()):
        _, _, _, ret, _, node, _ = members[0]
        out_t = members[0][4]
        for m in members[1:]:
            out_t = np.union1d(out_t, m[4])
        owner = np.concatenate([np.full(len(m[1]), j) for j, m in enumerate(members)])
        local = np.concatenate([np.arange(len(m[1])) for m in members])
        sel = _concat_candidates(*(m[2].take(m[1]) for m in members))
        for start, idx in chunks(np.arange(len(owner)), options):
            tasks.append(make_task((*key, g, start), ret, sel.take(idx), out_t, options, node))
            meta.append(
                [
                    (members[j][0], members[j][1][local[idx][owner[idx] == j]], owner[idx] == j)
                    for j in np.unique(owner[idx])
                ]
            )
    return tasks, meta


def split_results(meta, results):
    """(target index, pool indices, crossings) per target and chunk, from shared chunks."""
    out = []
    for parts, cr in zip(meta, results, strict=True):
        for ti, sub, mask in parts:
            out.append((ti, sub, cr.take(mask)))
    return out


def chunks(pick: np.ndarray, options):
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


def output_times(ret: ParentReturn, t_center, half_width, step, dt_days):
    t0 = ret.bodies_at_arc_start.t_tdb_jd
    raw = np.arange(t_center - half_width, t_center + half_width + step, step)
    return np.unique(step_grid(t0, raw, dt_days))


def make_task(key, ret: ParentReturn, sel: Candidates, out_t, options, node) -> Task:
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


def concat_crossings(parts) -> Crossings:
    return Crossings(
        *(np.concatenate([getattr(p, f) for p in parts]) for f in Crossings.__dataclass_fields__)
    )
