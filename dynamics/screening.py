"""Batch screening of parent orbits: geometry first, trail forecasts only for candidates.

A survey receives many new or revised comet orbits and must know, without a person looking at
each, which could give meteors in the years asked. Screening runs in two stages:

1. **Geometry** (cheap, vectorised): for every orbit the Earth MOID (:func:`dynamics.moid.moid_many`
   against the osculating orbit of the Earth-Moon barycentre at the orbit's epoch, as
   :func:`dynamics.geometry.quick_look` uses) and the miss distances of both nodes
   (:func:`dynamics.geometry.nodes_many`). Orbits are ranked by MOID (closest first; ties by the
   nearer node's distance, then input order).
2. **Trail forecast** (expensive): only for orbits that pass the :class:`ScreeningRule`, a small
   :func:`dynamics.forecast.forecast` (:func:`screening_forecast_options`) over the years asked.

The default rule
----------------
An orbit is a *candidate* when

- its Earth MOID is below ``moid_max_au`` = :data:`dynamics.geometry.TRAIL_SIMULATION_MOID_AU`
  (0.05 au: dust released near the parent can reach Earth's orbit; rule of thumb, common practice,
  no source), **and**
- at least one of its nodes lies within ``node_max_au`` =
  :data:`dynamics.forecast.NODE_MAX_DISTANCE_AU` (0.25 au) of Earth's orbit, measured radially at
  the node's longitude. The trail forecast looks for crossings at the parent's nodes and does not
  follow a node farther than this, so an orbit whose closest approach lies far from both nodes
  (possible at low inclination) would be simulated for nothing. (Our reasoning, not a
  measurement.)

Both thresholds are settings of :class:`ScreeningRule`; the rule, its values and its reasons are
written into every result.

Resumability
------------
Each orbit's result is keyed by :func:`screening_key`, a SHA-256 over the canonical orbit, the
years, the rule, every forecast option and the model version. :func:`screen_batch` asks a
``lookup`` callable for stored results first and hands each new result to ``save`` as soon as
it exists, so an interrupted batch resumes where it stopped and finished orbits are never
recomputed. The result of an orbit does not depend on the batch it came in, the chunking or the
number of workers (the forecast's seed fixes its random draws).

Limits
------
The geometry is two-body: planetary perturbations and ejection speeds move dust trails by up to a
few hundredths of an au from the parent's orbit, which is why the MOID threshold is generous. A
parent epoch outside DE423 (1799-12-16 to 2200-02-01) gets the geometry's mean-elements fallback
(with a note) in stage 1; stage 2 then reports an error for that orbit, since the forecast needs
the planets at the epoch.
"""

from __future__ import annotations

import concurrent.futures as cf
import hashlib
import json
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np

from . import __version__
from .errors import ComputationStopped, TrailcastError
from .executors import process_pool
from .forecast import CAUTIONS, ForecastOptions, forecast
from .geometry import TRAIL_SIMULATION_MOID_AU, earth_orbit_at, moid_many_vs_earth, nodes_many
from .orbit_input import OrbitInput
from .targeting import NODE_MAX_DISTANCE_AU

__all__ = [
    "SCREENING_VERSION",
    "VERDICTS",
    "ScreeningRule",
    "ScreeningRun",
    "forecast_candidate",
    "geometry_chunk",
    "rank_orbits",
    "screen_batch",
    "screen_geometry",
    "screening_forecast_options",
    "screening_key",
    "screening_summary",
]

#: Version of the screening record layout and verdict rules; part of every result key.
#: 2: "encounter predicted" needs a crossing classified encounter by its predicted activity
#: (dynamics.activity.classify_crossing), no longer a close crossing alone.
SCREENING_VERSION = 2

#: Every verdict a screened orbit can get, with its meaning.
VERDICTS = {
    "encounter predicted": "candidate; the trail forecast finds at least one trail encounter "
    "(predicted peak ZHR at or above the encounter level)",
    "near misses only": "candidate; trails pass near Earth's path (close passes with negligible "
    "activity included) but none is an encounter",
    "no encounter": "candidate; no trail passes within the near-miss distance in these years",
    "no trails": "candidate; first passage or no active return in the span: no dust trails",
    "not a candidate": "fails the screening rule: no trail forecast run",
    "error": "the trail forecast could not be computed for this orbit (see error)",
    "invalid": "the row could not be read as an orbit (see error); skipped",
}

#: Orbits per stage-1 task: large enough to amortise a task's overhead, small enough to spread
#: a few hundred orbits over two workers.
GEOMETRY_CHUNK = 64
#: Longest wait for a candidate's forecast before ``should_stop`` is asked again (s); no source:
#: short enough for a cancel to act within seconds.
STOP_POLL_S = 0.5

_SCREENING_CAUTIONS = (
    "Screening is a triage: the geometry is two-body and the trail forecasts use a small budget "
    "of simulated meteoroids; a candidate deserves a full forecast before any announcement.",
    *CAUTIONS,
)


@dataclass(frozen=True)
class ScreeningRule:
    """Which orbits get a trail forecast (see the module docstring for the reasons).

    Attributes
    ----------
    moid_max_au : float
        Earth MOID below which dust can reach Earth (au). Default
        :data:`~dynamics.geometry.TRAIL_SIMULATION_MOID_AU` = 0.05 (rule of thumb: common
        practice, no source).
    node_max_au : float
        At least one node must lie within this radial distance of Earth's orbit (au). Default
        :data:`~dynamics.forecast.NODE_MAX_DISTANCE_AU` = 0.25, the distance beyond which the
        forecast does not follow a node.
    """

    moid_max_au: float = TRAIL_SIMULATION_MOID_AU
    node_max_au: float = NODE_MAX_DISTANCE_AU

    def __post_init__(self):
        for name in ("moid_max_au", "node_max_au"):
            v = getattr(self, name)
            if not (isinstance(v, int | float) and math.isfinite(v) and 0.0 < v <= 10.0):
                raise ValueError(f"{name} must be a number in (0, 10] au, got {v!r}")

    def passes(self, moid_au, nearest_node_au):
        """Boolean array: MOID < ``moid_max_au`` and nearest node < ``node_max_au``.

        Missing values (NaN or inf: no minimum found, nodes undefined) never pass.

        Examples
        --------
        >>> ScreeningRule().passes([0.01, 0.01, 0.2], [0.02, 0.5, 0.02]).tolist()
        [True, False, False]
        """
        m = np.asarray(moid_au, dtype=float)
        n = np.asarray(nearest_node_au, dtype=float)
        with np.errstate(invalid="ignore"):
            return (m < self.moid_max_au) & (n < self.node_max_au)

    def reason(self, moid_au: float | None, nearest_node_au: float | None) -> str:
        """One sentence saying why an orbit passes or fails."""
        m = "none found" if moid_au is None else f"{moid_au:.5f} au"
        n = "undefined" if nearest_node_au is None else f"{nearest_node_au:.5f} au"
        ok_m = moid_au is not None and moid_au < self.moid_max_au
        ok_n = nearest_node_au is not None and nearest_node_au < self.node_max_au
        parts = [
            f"MOID {m} {'<' if ok_m else 'not <'} {self.moid_max_au} au",
            f"nearest node {n} {'<' if ok_n else 'not <'} {self.node_max_au} au",
        ]
        return ("candidate: " if ok_m and ok_n else "not a candidate: ") + "; ".join(parts)

    def describe(self) -> dict:
        return {
            "moid_max_au": self.moid_max_au,
            "node_max_au": self.node_max_au,
            "rule": "candidate when MOID < moid_max_au and the nearer node's radial distance from "
            "Earth's orbit < node_max_au",
            "sources": {
                "moid_max_au": "rule of thumb: common practice, no source",
                "node_max_au": "the trail forecast follows only nodes within this distance",
            },
        }


def screening_forecast_options(first_year: int, last_year: int, **overrides) -> ForecastOptions:
    """The small forecast budget screening uses unless told otherwise.

    30 meteoroids per trail and passage, 20 pilot meteoroids, 50,000 candidates per trail; every
    other option, the trail age limit included, at :class:`~dynamics.forecast.ForecastOptions`'s
    default (one age limit for forecasts and screenings). ``overrides`` replace any field.
    """
    base = ForecastOptions(
        first_year=int(first_year),
        last_year=int(last_year),
        particles=30,
        pilot_particles=20,
        candidates=50_000,
    )
    return replace(base, **overrides)


def _options_identity(options: ForecastOptions) -> dict:
    """Everything about the options that changes a forecast (not where it runs)."""
    d = options.describe()
    d["candidates"] = options.candidates
    d["pilot_window_days"] = options.pilot_window_days
    d["ejection"] = options.ejection.describe()
    d["calibration"] = None if options.calibration is None else vars(options.calibration)
    return d


def screening_key(orbit: OrbitInput, rule: ScreeningRule, options: ForecastOptions) -> str:
    """Content hash of one orbit's screening: canonical orbit, years, rule, options, version.

    Examples
    --------
    >>> from dynamics.orbit_input import parse_orbit
    >>> o = parse_orbit({"name": "x", "epoch": 2460000.5, "q": 1.0, "e": 0.5, "i": 10,
    ...                  "node": 20, "peri": 30, "tp": 2460000.5})
    >>> opts = screening_forecast_options(2030, 2031)
    >>> k = screening_key(o, ScreeningRule(), opts)
    >>> len(k), k == screening_key(o, ScreeningRule(), replace(opts, workers=8))
    (64, True)
    >>> k == screening_key(o, ScreeningRule(moid_max_au=0.1), opts)
    False
    """
    identity = {
        "orbit": orbit.to_json(),
        "years": [options.first_year, options.last_year],
        "rule": {"moid_max_au": rule.moid_max_au, "node_max_au": rule.node_max_au},
        "options": _options_identity(options),
        "model_version": __version__,
        "screening_version": SCREENING_VERSION,
    }
    text = json.dumps(identity, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# --------------------------------------------------------------------------------------------
# Stage 1: geometry (vectorised, chunked)
# --------------------------------------------------------------------------------------------


def geometry_chunk(epoch_tdb_jd: float, elements) -> dict:
    """Stage-1 geometry of orbits sharing one epoch (a task a worker process can run).

    Parameters
    ----------
    epoch_tdb_jd : float
        Common epoch of osculation (JD TDB): Earth's orbit is taken at this epoch.
    elements : array_like, shape (n, 5)
        q_au, e, incl_deg, node_deg, peri_deg per orbit (ecliptic J2000).

    Returns
    -------
    dict
        ``moid_au`` (inf where no minimum was found), ``ascending_miss_distance_au``,
        ``descending_miss_distance_au`` (NaN where the node is undefined), ``nearest_node_au``
        (smaller absolute miss distance, inf when both undefined): arrays of shape (n,);
        ``earth_orbit_model`` and ``notes`` for the epoch.
    """
    el = np.asarray(elements, dtype=float).reshape(-1, 5)
    earth, notes = earth_orbit_at(float(epoch_tdb_jd))
    cols = [el[:, k] for k in range(5)]
    moid_au = moid_many_vs_earth(*cols, earth)
    nd = nodes_many(*cols, earth)
    asc = nd["ascending_miss_distance_au"]
    desc = nd["descending_miss_distance_au"]
    nearest = np.fmin(np.abs(asc), np.abs(desc))
    nearest = np.where(np.isnan(nearest), np.inf, nearest)
    return {
        "moid_au": moid_au,
        "ascending_miss_distance_au": asc,
        "descending_miss_distance_au": desc,
        "nearest_node_au": nearest,
        "earth_orbit_model": earth.model,
        "notes": notes,
    }


def screen_geometry(
    orbits: Sequence[OrbitInput], *, executor=None, chunk_size: int = GEOMETRY_CHUNK
) -> list[dict]:
    """Stage-1 geometry of many orbits: one dict per orbit, in input order.

    Orbits are grouped by epoch (Earth's orbit depends on it) and split into chunks of
    ``chunk_size``; with an ``executor`` (a process pool, a Dask client's executor) the chunks
    run in parallel. The numbers do not depend on ``chunk_size`` or the executor.

    Returns
    -------
    list of dict
        Keys ``moid_au``, ``ascending_miss_distance_au``, ``descending_miss_distance_au``,
        ``nearest_node_au`` (float or None), ``earth_orbit_model`` and ``notes`` (list).
    """
    by_epoch: dict[float, list[int]] = {}
    for k, o in enumerate(orbits):
        by_epoch.setdefault(float(o.epoch_tdb_jd), []).append(k)
    tasks = []
    for epoch, idx in by_epoch.items():
        for start in range(0, len(idx), max(1, int(chunk_size))):
            part = idx[start : start + max(1, int(chunk_size))]
            el = [
                (o.q_au, o.e, o.incl_deg, o.node_deg, o.peri_deg) for o in (orbits[k] for k in part)
            ]
            tasks.append((epoch, part, np.array(el, dtype=float)))
    if executor is None:
        outs = [geometry_chunk(epoch, el) for epoch, _, el in tasks]
    else:
        futures = [executor.submit(geometry_chunk, epoch, el) for epoch, _, el in tasks]
        outs = [f.result() for f in futures]
    rows: list[dict | None] = [None] * len(orbits)
    for (_, part, _), out in zip(tasks, outs, strict=True):
        for j, k in enumerate(part):
            rows[k] = {
                "moid_au": _finite_or_none(out["moid_au"][j]),
                "ascending_miss_distance_au": _finite_or_none(out["ascending_miss_distance_au"][j]),
                "descending_miss_distance_au": _finite_or_none(
                    out["descending_miss_distance_au"][j]
                ),
                "nearest_node_au": _finite_or_none(out["nearest_node_au"][j]),
                "earth_orbit_model": out["earth_orbit_model"],
                "notes": list(out["notes"]),
            }
    return rows  # type: ignore[return-value]


def _finite_or_none(x) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def rank_orbits(moid_au, nearest_node_au) -> np.ndarray:
    """Rank (1 = closest) by MOID, then by the nearer node's distance, then input order.

    Missing values (None, NaN, inf) rank last.

    Examples
    --------
    >>> rank_orbits([0.3, 0.01, None, 0.01], [0.1, 0.2, 0.0, 0.1]).tolist()
    [3, 2, 4, 1]
    """

    def clean(a):
        x = np.array([np.nan if v is None else v for v in a], dtype=float)
        return np.where(np.isfinite(x), x, np.inf)

    m, n = clean(moid_au), clean(nearest_node_au)
    order = np.lexsort((np.arange(len(m)), n, m))
    ranks = np.empty(len(m), dtype=int)
    ranks[order] = np.arange(1, len(m) + 1)
    return ranks


# --------------------------------------------------------------------------------------------
# Stage 2: trail forecasts of candidates
# --------------------------------------------------------------------------------------------


def forecast_candidate(orbit: OrbitInput, options: ForecastOptions, should_stop=None) -> dict:
    """Stage 2 for one candidate (a task a worker process can run): verdict and encounters.

    Runs :func:`dynamics.forecast.forecast` in this process (``workers`` forced to 1: the
    parallelism of a screening is across orbits). A :class:`~dynamics.errors.TrailcastError`
    (e.g. an epoch outside DE423) becomes ``verdict = "error"`` with the message, so that one
    orbit never stops a batch.

    Returns
    -------
    dict
        ``verdict`` (see :data:`VERDICTS`), ``forecast`` (encounters, near misses, notes,
        particles integrated; None on error) and ``error`` (None, or ``{"kind", "message"}``).
    """
    try:
        res = forecast(orbit, replace(options, workers=1), should_stop=should_stop)
    except ComputationStopped:
        raise  # the caller asked to stop: not this orbit's error
    except TrailcastError as exc:
        return {
            "verdict": "error",
            "forecast": None,
            "error": {"kind": type(exc).__name__, "message": str(exc)},
        }
    out = res.to_json()
    if res.encounters:
        verdict = "encounter predicted"
    elif res.near_misses:
        verdict = "near misses only"
    elif res.particles_integrated == 0 and any("no trails" in n for n in res.notes):
        verdict = "no trails"
    else:
        verdict = "no encounter"
    return {
        "verdict": verdict,
        "forecast": {
            "encounters": out["encounters"],
            "near_misses": out["near_misses"],
            "notes": out["notes"],
            "particles_integrated": res.particles_integrated,
            "parent_returns_tdb": out["model"]["parent_returns_tdb"],
        },
        "error": None,
    }


# --------------------------------------------------------------------------------------------
# The batch
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ScreeningRun:
    """What :func:`screen_batch` returns.

    Attributes
    ----------
    records : list of dict
        One per input orbit, in input order (see :func:`screen_batch`), with ``rank`` added.
    keys : list of str
        The :func:`screening_key` of each orbit.
    reused : int
        Orbits whose stored result was found by ``lookup`` (not recomputed).
    computed : int
        Orbits computed in this run (duplicates in the batch count once).
    """

    records: list
    keys: list
    reused: int
    computed: int


def _record(orbit, geometry, rule, stage2=None) -> dict:
    def value(key):
        v = geometry[key]
        return np.inf if v is None else v

    cand = bool(rule.passes(value("moid_au"), value("nearest_node_au")))
    return {
        "name": orbit.name,
        "orbit": orbit.to_json(),
        "geometry": geometry,
        "candidate": cand,
        "rule_reason": rule.reason(geometry["moid_au"], geometry["nearest_node_au"]),
        "verdict": stage2["verdict"] if stage2 else "not a candidate",
        "forecast": stage2["forecast"] if stage2 else None,
        "error": stage2["error"] if stage2 else None,
    }


def screen_batch(
    orbits: Sequence[OrbitInput],
    rule: ScreeningRule,
    options: ForecastOptions,
    *,
    executor=None,
    workers: int = 1,
    lookup: Callable[[str], dict | None] | None = None,
    save: Callable[[str, dict], None] | None = None,
    progress: Callable[[int, int, str], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> ScreeningRun:
    """Screen many orbits: geometry for all, trail forecasts for the candidates.

    Parameters
    ----------
    orbits : sequence of OrbitInput
    rule : ScreeningRule
    options : ForecastOptions
        The forecast run for each candidate (see :func:`screening_forecast_options`); its years
        are the screening's years.
    executor : concurrent.futures.Executor, optional
        Runs stage-1 chunks and stage-2 forecasts (one task per candidate); a Dask client's
        executor works too. Default: this process, or a local spawn-based pool when
        ``workers > 1``.
    workers : int
        Local worker processes when no executor is given.
    lookup : callable, optional
        ``lookup(key)`` returns a stored record or None; found orbits are not recomputed.
    save : callable, optional
        ``save(key, record)`` is called once per newly computed orbit, as soon as its record is
        final (non-candidates right after stage 1, candidates after their forecast).
    progress : callable, optional
        ``progress(done, total, stage)`` after each finished orbit; an exception raised by it
        (a cancelled job) stops the batch after the orbits already saved.
    should_stop : callable, optional
        Asked while candidates' forecasts run (every :data:`STOP_POLL_S` seconds, and between
        integration steps of an in-process forecast); True stops the batch with
        :class:`~dynamics.errors.ComputationStopped`, keeping the orbits already saved.

    Returns
    -------
    ScreeningRun
        Records carry ``name``, ``orbit``, ``geometry`` (MOID, node miss distances, notes),
        ``candidate``, ``rule_reason``, ``verdict`` (:data:`VERDICTS`), ``forecast`` (for
        candidates: encounters, near misses, notes) and ``error``, plus ``key`` and ``rank``
        (1 = smallest MOID in this batch).
    """
    if executor is None and workers > 1:
        with process_pool(workers) as pool:
            return screen_batch(
                orbits,
                rule,
                options,
                executor=pool,
                lookup=lookup,
                save=save,
                progress=progress,
                should_stop=should_stop,
            )
    say = progress or (lambda done, total, stage: None)
    keys = [screening_key(o, rule, options) for o in orbits]
    found: dict[str, dict] = {}
    for k in dict.fromkeys(keys):
        rec = lookup(k) if lookup else None
        if rec is not None:
            found[k] = rec
    reused = sum(1 for k in keys if k in found)
    todo_keys = [k for k in dict.fromkeys(keys) if k not in found]
    first_index = {k: keys.index(k) for k in todo_keys}
    total = len(orbits)
    done = reused
    say(done, total, "geometry")

    todo_orbits = [orbits[first_index[k]] for k in todo_keys]
    geo = screen_geometry(todo_orbits, executor=executor)
    computed: dict[str, dict] = {}
    candidates = []
    for k, o, g in zip(todo_keys, todo_orbits, geo, strict=True):
        rec = _record(o, g, rule)
        if rec["candidate"]:
            candidates.append((k, o, g))
            continue
        computed[k] = rec
        if save:
            save(k, rec)
    done += sum(keys.count(k) for k in computed)
    say(done, total, "geometry")

    # Stage 2: most promising first, so an interrupted batch has its best candidates done.
    candidates.sort(key=lambda c: (c[2]["moid_au"], c[2]["nearest_node_au"], first_index[c[0]]))

    def finish(k, o, g, stage2):
        nonlocal done
        rec = _record(o, g, rule, stage2)
        computed[k] = rec
        if save:
            save(k, rec)
        done += keys.count(k)
        say(done, total, "trail forecasts")

    stop = should_stop or (lambda: False)
    if executor is None:
        for k, o, g in candidates:
            if stop():
                raise ComputationStopped("screening stopped on request")
            finish(k, o, g, forecast_candidate(o, options, should_stop=should_stop))
    else:
        opts1 = replace(options, workers=1)
        futures = {
            executor.submit(forecast_candidate, o, opts1): (k, o, g) for k, o, g in candidates
        }
        try:
            pending = set(futures)
            while pending:
                done_now, pending = cf.wait(
                    pending, timeout=STOP_POLL_S, return_when=cf.FIRST_COMPLETED
                )
                for f in sorted(done_now, key=lambda f: first_index[futures[f][0]]):
                    finish(*futures[f], f.result())
                if pending and stop():
                    raise ComputationStopped("screening stopped on request")
        except BaseException:
            for f in futures:
                f.cancel()
            raise

    by_key = {**found, **computed}
    ranks = rank_orbits(
        [by_key[k]["geometry"]["moid_au"] for k in keys],
        [by_key[k]["geometry"]["nearest_node_au"] for k in keys],
    )
    records = [{**by_key[k], "key": k, "rank": int(r)} for k, r in zip(keys, ranks, strict=True)]
    return ScreeningRun(records=records, keys=keys, reused=reused, computed=len(computed))


def screening_summary(
    records: Sequence[Mapping], rule: ScreeningRule, options: ForecastOptions
) -> dict:
    """Counts, rule, options, conventions and cautions for a finished batch (plain JSON)."""
    verdicts = {v: 0 for v in VERDICTS}
    for r in records:
        verdicts[r["verdict"]] = verdicts.get(r["verdict"], 0) + 1
    return {
        "orbits": len(records),
        "candidates": sum(1 for r in records if r.get("candidate")),
        "verdicts": verdicts,
        "years": [options.first_year, options.last_year],
        "rule": rule.describe(),
        "forecast_options": _options_identity(options),
        "model_version": __version__,
        "screening_version": SCREENING_VERSION,
        "verdict_meanings": dict(VERDICTS),
        "conventions": {
            "moid": "Earth MOID against the osculating orbit of the Earth-Moon barycentre at the "
            "orbit's epoch (DE423; mean J2000 elements outside DE423, with a note)",
            "node_miss_distance": "parent's heliocentric distance at the node minus Earth's "
            "orbit radius at the same longitude (au); positive: node outside Earth's orbit",
            "rank": "1 = smallest MOID in the batch; ties by the nearer node, then input order",
            "times": "UTC, ISO 8601; solar longitude geometric, equinox J2000",
        },
        "cautions": list(_SCREENING_CAUTIONS),
    }
