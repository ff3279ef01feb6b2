"""Hindcasts: run the forecast for past years of known parents and score it against observations.

A catalogue row is a plain dict in the form of ``validation/hindcasts.json`` (documented in
``validation/README.md``), e.g.::

    {"id": "leo-1999-1899", "parent": "55P/Tempel-Tuttle", "year": 1999, "kind": ["storm"],
     "trails": [{"perihelion_year": 1899}], "tolerance_min": 15,
     "observed": {"peak_utc": "1999-11-18T02:02:00Z", "zhr": 3700, "zhr_low": 3600,
                  "zhr_high": 3800, "fwhm_min": null}}

and the parent's orbit is the dict :func:`dynamics.orbit_input.parse_orbit` reads. Every row runs
:func:`dynamics.forecast.forecast` with the default options for its year and its trails
(:func:`run_row`); nothing in a row tunes the model. :func:`score` compares predictions with
observations, with and without the one calibration rule (:data:`CALIBRATION_RULE`).
"""

import math
from collections.abc import Callable, Sequence

import numpy as np

from .activity import ENCOUNTER_MIN_ZHR
from .api import (
    ForecastOptions,
    TrailcastError,
    forecast,
    format_utc,
    iso_to_tdb_jd,
    parse_orbit,
)
from .constants import DAYS_PER_JULIAN_YEAR
from .executors import process_pool
from .outcomes import EARTH_RADIUS_AU, ENCOUNTER_MAX_MISS_AU, ENCOUNTER_SIGMAS, classify
from .scope import match_trail_years
from .summaries import year_of

#: Peak offsets within this many minutes count as a timing success in the summary (the issue's
#: goal; common practice, no source: observers plan by the quarter hour).
TIMING_GOAL_MIN = 15.0
#: Predicted and observed ZHR agree when within this factor (the issue's goal; model intensities
#: are uncertain by a factor of several, see ``MODEL_UNCERTAINTY_FACTOR``).
ZHR_FACTOR_GOAL = 3.0
#: A predicted peak ZHR above this is a storm (common practice, no source: the conventional
#: threshold of a meteor storm).
STORM_ZHR = 1000.0
#: Meteoroids integrated per row and Earth passage when the caller does not say.
DEFAULT_PARTICLES = 300
#: Rows whose catalogue names no trail run every trail this many years old at most (a compute
#: budget, not physics; no source: two centuries hold the trails of the outbursts seen so far).
UNATTRIBUTED_TRAIL_AGE_YEARS = 200.0
#: Parents with a (two-body) period longer than this many years are long-period (the usual
#: division between short- and long-period comets, 200 years).
LONG_PERIOD_YEARS = 200.0
#: Crossings of other named trails within this time of the chosen one add to its ZHR (days;
#: no source: beyond a day two trails are separate events for an observer).
BLEND_DAYS = 1.0

CALIBRATION_RULE = (
    "per parent, one outburst row calibrates the dust production: among the outburst rows whose "
    "predicted crossing puts Earth inside the modelled trail (the engine's distance test: within "
    "0.005 au and within 3 cross-section widths plus Earth's radius) with predicted activity at "
    "least that of an encounter (peak ZHR 10; below it the prediction is the far tail of the "
    "visual sizes' cross-section: elsewhere the ratio measures the trail's position, not its "
    "dust), the one with the smallest relative "
    "uncertainty of its observed ZHR (ties and missing uncertainties: the most recent). Its "
    "observed/predicted ZHR ratio multiplies every other row of that parent; the "
    "calibration row itself is left out of the calibrated scores; parents with a single outburst "
    "row stay in absolute mode."
)


def _executor(workers: int):
    return process_pool(workers)


def _observed_peak_tdb(row) -> float | None:
    text = (row.get("observed") or {}).get("peak_utc")
    return None if not text else float(iso_to_tdb_jd(text))


def row_trails(row) -> tuple[int, ...] | None:
    """Perihelion years of the trails a row names (None: not attributed, run them all)."""
    years = [int(t["perihelion_year"]) for t in row.get("trails") or []]
    return tuple(years) or None


def row_revolutions(row, orbit) -> tuple[int, ...] | None:
    """Revolution counts that identify a row's trails, for a long-period parent (None: by year).

    A long-period parent's previous perihelion is known to decades at best (the published
    years of one return differ by a century), and the engine computes its own from the orbit:
    a row about such a parent's recent dust therefore names its trails by revolutions, which
    do not depend on that date. Short-period rows name trails by perihelion year.
    """
    trails = row.get("trails") or []
    revs = [t.get("revolutions") for t in trails]
    o = parse_orbit(orbit)
    long_period = not (o.period_days < LONG_PERIOD_YEARS * DAYS_PER_JULIAN_YEAR)
    if not trails or not long_period or any(r is None for r in revs):
        return None
    return tuple(int(r) for r in revs)


def is_outburst(row) -> bool:
    """False for the catalogue's no-outburst rows (a trail came near and nothing was seen)."""
    return "no-outburst" not in (row.get("kind") or [])


def _check_window(row):
    w = row.get("check_window_utc")
    return None if not w else (float(iso_to_tdb_jd(w[0])), float(iso_to_tdb_jd(w[1])))


def _zhr_at(enc, t_tdb_jd) -> float:
    p = enc.profile
    if p is None or len(p.t_tdb_jd) == 0:
        return 0.0
    return float(np.interp(t_tdb_jd, p.t_tdb_jd, p.zhr, left=0.0, right=0.0))


def _pick(row, res, revolutions=None):
    """The crossing the observation refers to, and the ZHR there; (None, 0) if there is none.

    Candidates: crossings of the row's named trails (all crossings when it names none), inside
    its ``check_window_utc`` when it has one, and of those the ones after the revolutions the row
    names, if the engine found any. The chosen one is the nearest to the observed peak, or
    without one the strongest. Its ZHR adds the profiles of the other candidates at its peak
    within :data:`BLEND_DAYS` (two trails observed as one outburst).
    """
    trails = row_trails(row)
    wanted = None
    if trails is not None:  # the named years, and the returns the engine took them as
        rets = res.history.returns
        active = [k for k, r in enumerate(rets) if len(r.arc_t_tdb_jd)]
        taken = match_trail_years(rets, active, trails)[0].values()
        wanted = set(trails) | {year_of(rets[k].tp_tdb_jd) for k in taken}
    cands = [
        e
        for e in res.encounters + res.near_misses
        if (
            e.revolutions in revolutions
            if revolutions is not None
            else wanted is None or year_of(e.trail_perihelion_tdb_jd) in wanted
        )
    ]
    window = _check_window(row)
    if window is not None:
        cands = [e for e in cands if window[0] <= e.peak_tdb_jd <= window[1]]
    if not cands:
        return None, 0.0
    # the branch the published analysis names (its revolutions) when the engine found it: a
    # nearer-in-time branch of the same trail far from Earth's path is not what was observed
    named = {t.get("revolutions") for t in row.get("trails") or []} - {None}
    chosen = [e for e in cands if e.revolutions in named] if named else []
    if revolutions is None and chosen:
        cands = chosen
    t_obs = _observed_peak_tdb(row)
    if t_obs is not None:
        enc = min(cands, key=lambda e: abs(e.peak_tdb_jd - t_obs))
    else:
        enc = max(cands, key=lambda e: e.zhr_estimate)
    zhr = enc.zhr_estimate + sum(
        _zhr_at(e, enc.peak_tdb_jd)
        for e in cands
        if e is not enc and abs(e.peak_tdb_jd - enc.peak_tdb_jd) <= BLEND_DAYS
    )
    return enc, zhr


def run_row(
    row: dict,
    orbit: dict,
    *,
    particles: int = DEFAULT_PARTICLES,
    seed: int = 1,
    workers: int = 1,
    executor=None,
) -> dict:
    """Forecast one catalogue row with the default model: its year, its trail only.

    Returns a dict: ``predicted`` (None when the trail gives no crossing near Earth) with peak
    time (UTC and TDB JD), miss distance (au), peak ZHR (absolute mode), the box-count
    cross-check, FWHM (hours), the crossing's label by :func:`dynamics.forecast.classify`, and ``notes``.
    """
    year = int(row["year"])
    revolutions = row_revolutions(row, orbit)
    # by revolutions: the default scope, which always holds the parent's previous return
    trails = None if revolutions is not None else row_trails(row)
    if row.get("ejection_events"):  # a break-up or outburst the row's source describes
        orbit = dict(orbit, ejection_events=list(row["ejection_events"]))
    options = ForecastOptions(
        year,
        year,
        particles=particles,
        seed=seed,
        trails=trails,
        max_trail_age_years=500.0 if trails else UNATTRIBUTED_TRAIL_AGE_YEARS,
        workers=workers,
    )
    out = {"id": row["id"], "predicted": None, "notes": [], "error": None}
    try:
        res = forecast(parse_orbit(orbit), options, executor=executor)
    except TrailcastError as exc:  # e.g. a trail older than the ephemeris: say so, go on
        out["error"] = f"{type(exc).__name__}: {exc}"
        return out
    out["notes"] = list(res.notes)
    enc, zhr = _pick(row, res, revolutions)
    if enc is None:
        return out
    label = classify(zhr, enc.miss_distance_au, enc.miss_distance_spread_au)
    prof = enc.profile
    out["predicted"] = {
        "peak_utc": format_utc(enc.peak_tdb_jd),
        "peak_tdb_jd": float(enc.peak_tdb_jd),
        "solar_longitude_deg": float(enc.solar_longitude_deg),
        "miss_distance_au": float(enc.miss_distance_au),
        "miss_distance_spread_au": float(enc.miss_distance_spread_au),
        "zhr": float(zhr),
        "trail_year": year_of(enc.trail_perihelion_tdb_jd),
        "zhr_box_count": None if prof is None else float(prof.box_zhr),
        "box_meteoroids": None if prof is None else int(prof.box_meteoroids),
        "estimators_disagree": None if prof is None else bool(prof.estimators_disagree),
        "direct_hit_zhr": None if prof is None else float(prof.direct_hit_zhr),
        "direct_hit_miss_au": None if prof is None else float(prof.direct_hit_miss_au),
        "fwhm_hours": float(enc.fwhm_hours),
        "vg_km_s": float(enc.vg_km_s),
        "revolutions": int(enc.revolutions),
        "particles": int(enc.particles),
        "label": None if label is None else label.label,
    }
    return out


def run_catalogue(
    rows: Sequence[dict],
    orbits: dict[str, dict],
    *,
    particles: int = DEFAULT_PARTICLES,
    seed: int = 1,
    workers: int = 1,
    progress: Callable[[int, int, str], None] | None = None,
    on_result: Callable[[list[dict]], None] | None = None,
) -> list[dict]:
    """:func:`run_row` for every row, sharing one pool of ``workers`` processes.

    ``orbits`` maps each row's ``parent`` to its orbit dict. ``progress(k, n, row_id)`` is called
    before each row; ``on_result(results_so_far)`` after each one (e.g. to save a partial report).
    """
    say = progress or (lambda k, n, rid: None)
    pool = _executor(workers) if workers > 1 else None
    try:
        out = []
        for k, row in enumerate(rows):
            say(k, len(rows), row["id"])
            out.append(
                run_row(
                    row,
                    orbits[row["parent"]],
                    particles=particles,
                    seed=seed,
                    workers=workers,
                    executor=pool,
                )
            )
            if on_result is not None:
                on_result(list(out))
        say(len(rows), len(rows), "")
        return out
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)


# --- scoring ------------------------------------------------------------------------------------


def _rel_uncertainty(row) -> float:
    """Half the published ZHR range over the ZHR (inf when the row gives no range)."""
    obs = row.get("observed") or {}
    z, lo, hi = obs.get("zhr"), obs.get("zhr_low"), obs.get("zhr_high")
    if not z or lo is None or hi is None:
        return math.inf
    return 0.5 * (float(hi) - float(lo)) / float(z)


def _earth_inside_trail(pred) -> bool:
    """True when a predicted crossing passes the engine's distance test for an encounter and
    its predicted peak ZHR reaches :data:`~dynamics.activity.ENCOUNTER_MIN_ZHR`.

    The distance test uses the spread of all sizes; the ZHR, the visual sizes alone, which can
    lie elsewhere and be narrower: a crossing inside the first with a ZHR of 1e-8 (Earth many
    of the visual sizes' widths away) would calibrate by a factor of 1e11.
    """
    if not pred:
        return False
    miss = abs(float(pred["miss_distance_au"]))
    spread = float(pred.get("miss_distance_spread_au") or 0.0)
    inside = miss <= min(ENCOUNTER_MAX_MISS_AU, ENCOUNTER_SIGMAS * spread + EARTH_RADIUS_AU)
    return inside and float(pred.get("zhr") or 0.0) >= ENCOUNTER_MIN_ZHR


def calibration_rows(rows: Sequence[dict], results: Sequence[dict]) -> dict[str, dict]:
    """Per parent, the calibration row and factor chosen by :data:`CALIBRATION_RULE`.

    Returns {parent: {"row": id, "factor": observed/predicted ZHR}}; a parent whose chosen row
    has no predicted ZHR above zero gets no factor (it stays absolute, the reason is given).
    """
    by_id = {r["id"]: r for r in results}
    out = {}
    parents = sorted({r["parent"] for r in rows})
    for parent in parents:
        cands = [
            r
            for r in rows
            if r["parent"] == parent and is_outburst(r) and (r.get("observed") or {}).get("zhr")
        ]
        if len(cands) < 2:
            continue
        inside = [r for r in cands if _earth_inside_trail(by_id.get(r["id"], {}).get("predicted"))]
        if not inside:
            out[parent] = {
                "row": None,
                "factor": None,
                "reason": "no outburst row puts Earth inside the modelled trail with activity "
                "at the encounter level: stays absolute",
            }
            continue
        best = min(inside, key=lambda r: (_rel_uncertainty(r), -int(r["year"])))
        pred = by_id.get(best["id"], {}).get("predicted")
        if pred is None or not pred["zhr"] > 0:
            out[parent] = {
                "row": best["id"],
                "factor": None,
                "reason": "no predicted activity for the calibration row: stays absolute",
            }
            continue
        out[parent] = {
            "row": best["id"],
            "factor": float(best["observed"]["zhr"]) / pred["zhr"],
        }
    return out


def _row_score(row, result, factor):
    obs = row.get("observed") or {}
    pred = result.get("predicted")
    s = {
        "id": row["id"],
        "parent": row["parent"],
        "year": int(row["year"]),
        "trails": list(row_trails(row) or []),
        "outburst": is_outburst(row),
        "tolerance_min": row.get("tolerance_min"),
        "observed_peak_utc": obs.get("peak_utc"),
        "observed_zhr": obs.get("zhr"),
        "observed_fwhm_min": obs.get("fwhm_min"),
        "predicted_peak_utc": None,
        "offset_min": None,
        "within_tolerance": None,
        "miss_distance_au": None,
        "predicted_zhr": None,
        "zhr_ratio": None,
        "direct_hit_zhr": None,
        "direct_hit_ratio": None,
        "fwhm_ratio": None,
        "label": None,
        "estimators_disagree": None,
        "calibration_factor": factor,
        "error": result.get("error"),
    }
    if pred is None:
        return s
    scale = factor if factor is not None else 1.0
    zhr = pred["zhr"] * scale
    s.update(
        predicted_peak_utc=pred["peak_utc"],
        miss_distance_au=pred["miss_distance_au"],
        predicted_zhr=zhr,
        label=classify(
            zhr,
            pred["miss_distance_au"],
            pred["miss_distance_spread_au"],
            near_miss_max_au=math.inf,
        ).label,
        estimators_disagree=pred.get("estimators_disagree"),
    )
    t_obs = _observed_peak_tdb(row)
    if t_obs is not None:
        s["offset_min"] = (pred["peak_tdb_jd"] - t_obs) * 1440.0
        if row.get("tolerance_min") is not None:
            s["within_tolerance"] = abs(s["offset_min"]) <= float(row["tolerance_min"])
    if obs.get("zhr"):  # no-outburst rows too: the level that was seen
        s["zhr_ratio"] = zhr / float(obs["zhr"])
    if pred.get("direct_hit_zhr") is not None:  # results written before it have none
        s["direct_hit_zhr"] = pred["direct_hit_zhr"] * scale
        if obs.get("zhr"):
            s["direct_hit_ratio"] = s["direct_hit_zhr"] / float(obs["zhr"])
    if obs.get("fwhm_min"):
        s["fwhm_ratio"] = pred["fwhm_hours"] * 60.0 / float(obs["fwhm_min"])
    return s


def _summary(scores: list[dict]) -> dict:
    outbursts = [s for s in scores if s["outburst"]]
    quiet = [s for s in scores if not s["outburst"]]
    timed = [s for s in scores if s["offset_min"] is not None]  # every row with a peak
    offsets = np.array([abs(s["offset_min"]) for s in timed])
    tol = [s for s in timed if s["within_tolerance"] is not None]
    ratios = [s["zhr_ratio"] for s in outbursts if s["zhr_ratio"] is not None]
    hits = [s["direct_hit_ratio"] for s in outbursts if s.get("direct_hit_ratio") is not None]
    fwhm = [s["fwhm_ratio"] for s in outbursts if s["fwhm_ratio"] is not None]

    def frac(k, n):
        return None if n == 0 else k / n

    return {
        "rows": len(scores),
        "outburst_rows": len(outbursts),
        "no_outburst_rows": len(quiet),
        "outbursts_without_prediction": sum(s["predicted_peak_utc"] is None for s in outbursts),
        "rows_failed": sum(s["error"] is not None for s in scores),
        "median_abs_offset_min": float(np.median(offsets)) if len(offsets) else None,
        "fraction_within_15_min": frac(int((offsets <= TIMING_GOAL_MIN).sum()), len(offsets)),
        "fraction_within_row_tolerance": frac(sum(s["within_tolerance"] for s in tol), len(tol)),
        "fraction_zhr_within_x3": frac(
            sum(1.0 / ZHR_FACTOR_GOAL <= r <= ZHR_FACTOR_GOAL for r in ratios), len(ratios)
        ),
        "median_zhr_ratio": float(np.median(ratios)) if ratios else None,
        # the trail's dust apart from its position: the ZHR on its densest line (a diagnostic;
        # the prediction is the ZHR above)
        "fraction_direct_hit_within_x3": frac(
            sum(1.0 / ZHR_FACTOR_GOAL <= r <= ZHR_FACTOR_GOAL for r in hits), len(hits)
        ),
        "median_direct_hit_ratio": float(np.median(hits)) if hits else None,
        "median_fwhm_ratio": float(np.median(fwhm)) if fwhm else None,
        "storms_predicted_where_none_seen": sum(
            (s["predicted_zhr"] or 0.0) > STORM_ZHR for s in quiet
        ),
        "no_outburst_rows_over_x3_observed": sum(
            s["zhr_ratio"] is not None and s["zhr_ratio"] > ZHR_FACTOR_GOAL for s in quiet
        ),
    }


def score(rows: Sequence[dict], results: Sequence[dict]) -> dict:
    """Predicted vs observed per row and the summary, without and with the calibration rule.

    Returns {"absolute": {"rows": [...], "summary": {...}}, "calibrated": {...},
    "calibration": {parent: {"row", "factor"}}, "rule": CALIBRATION_RULE, "goals": {...}}.
    ``offset_min`` is predicted minus observed peak (minutes); ratios are predicted/observed.
    """
    by_id = {r["id"]: r for r in results}
    cal = calibration_rows(rows, results)
    absolute = [_row_score(r, by_id[r["id"]], None) for r in rows if r["id"] in by_id]
    calibrated = []
    for r in rows:
        if r["id"] not in by_id:
            continue
        c = cal.get(r["parent"])
        if c is not None and c["row"] == r["id"]:
            continue  # the calibration outburst is not scored against itself
        calibrated.append(_row_score(r, by_id[r["id"]], None if c is None else c["factor"]))
    return {
        "absolute": {"rows": absolute, "summary": _summary(absolute)},
        "calibrated": {"rows": calibrated, "summary": _summary(calibrated)},
        "calibration": cal,
        "rule": CALIBRATION_RULE,
        "goals": {
            "timing_min": TIMING_GOAL_MIN,
            "zhr_factor": ZHR_FACTOR_GOAL,
            "storm_zhr": STORM_ZHR,
            "encounter_min_zhr": ENCOUNTER_MIN_ZHR,
        },
    }
