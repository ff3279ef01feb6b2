"""Forecast jobs: run :func:`dynamics.forecast.forecast` for a canonical request, and keep each
encounter in the ``encounters`` index beside the result (for ``GET /v1/encounters``).

The stored result also carries each meteoroid's crossing (``particle_crossings``) for the
dashboard's charts.
"""

import json
import math
import sqlite3

from ..jobs import Job, format_wall_utc, parse_utc
from . import JobKind

#: Most particle crossings stored per trail crossing (evenly thinned beyond that): enough to
#: draw every meteoroid of the default 300-particle budget, small enough to keep results compact.
MAX_STORED_CROSSINGS_PER_TRAIL = 500
#: Keys of a ``zhr`` object read (in this order) as its number for the ``min_zhr`` filter.
ZHR_KEYS = ("estimate", "peak", "value", "max", "zhr")


def forecast_inputs(job: Job, workers: int):
    """The (OrbitInput, ForecastOptions) a job's canonical request describes."""
    from dynamics.orbit_input import parse_orbit

    from ..options import forecast_options

    req = job.request
    orbit = parse_orbit(req["orbit"])
    return orbit, forecast_options(req["years"][0], req["years"][1], req["options"], workers)


def solution_particle_crossings(computed) -> list[dict]:
    """:func:`particle_crossings` for a multi-solution result, indexed like its merged lists."""
    per_solution = [particle_crossings(r, r.to_json()) for r in computed.results]
    out = []
    for kind, key in (("encounter", "encounters"), ("near_miss", "near_misses")):
        for m, (si, k, row) in enumerate(computed.merged_rows(key)):
            for item in per_solution[si]:
                if item["kind"] == kind and item["index"] == k:
                    out.append(dict(item, index=m, solution=row["solution"]))
    return out


def particle_crossings(computed, result_json: dict) -> list[dict]:
    """Each trail crossing's simulated meteoroids, compact, for the dashboard's charts.

    One item per encounter and near miss (``kind`` and ``index`` point into the result's
    ``encounters`` / ``near_misses``), with the meteoroids behind it: when Earth passes each one's
    node (``t_earth_utc``), the solar longitude then (deg, geometric J2000), the signed miss
    distance (au, meteoroid minus Earth) and the radiant (RA/Dec deg, J2000). Meteoroids without
    a crossing are left out; above :data:`MAX_STORED_CROSSINGS_PER_TRAIL` they are evenly thinned.
    """
    import numpy as np

    from dynamics.timescales import format_utc

    out = []
    for kind, key, group in (
        ("encounter", "encounters", computed.encounters),
        ("near_miss", "near_misses", computed.near_misses),
    ):
        for k, enc in enumerate(group):
            c = enc.crossings
            ok = np.all(
                np.isfinite(
                    [
                        c.t_earth_tdb_jd,
                        c.miss_distance_au,
                        c.solar_longitude_deg,
                        c.ra_deg,
                        c.dec_deg,
                    ]
                ),
                axis=0,
            )
            idx = np.flatnonzero(ok)
            if len(idx) > MAX_STORED_CROSSINGS_PER_TRAIL:
                pick = np.linspace(0, len(idx) - 1, MAX_STORED_CROSSINGS_PER_TRAIL)
                idx = idx[np.unique(pick.round().astype(int))]
            trail = result_json[key][k]["trail"]
            out.append(
                {
                    "kind": kind,
                    "index": k,
                    "year": enc.year,
                    "perihelion_year": trail["perihelion_year"],
                    "revolutions": trail["revolutions"],
                    "t_earth_utc": [
                        str(t) for t in np.atleast_1d(format_utc(c.t_earth_tdb_jd[idx]))
                    ]
                    if len(idx)
                    else [],
                    "solar_longitude_deg": np.round(c.solar_longitude_deg[idx], 5).tolist(),
                    "miss_distance_au": np.round(c.miss_distance_au[idx], 7).tolist(),
                    "ra_deg": np.round(c.ra_deg[idx], 3).tolist(),
                    "dec_deg": np.round(c.dec_deg[idx], 3).tolist(),
                }
            )
    return out


def classification_of(encounter: dict, listed_as: str) -> dict:
    """An encounter's ``classification`` (label, zhr_level, reason), also for stored results.

    Results stored before crossings were classified by their predicted activity carry none:
    the label is then derived from the stored numbers by today's rule
    (:func:`dynamics.activity.classify_crossing`, the engine's distance constants), and the
    reason says so. Without a stored ZHR the crossing keeps the list it was stored in
    (``listed_as``: ``encounters`` or ``near_misses``), said to rest on distance alone.
    """
    c = encounter.get("classification")
    if isinstance(c, dict) and c.get("label"):
        return c
    from dynamics.activity import ENCOUNTER_MIN_ZHR, classify_crossing
    from dynamics.outcomes import (
        EARTH_RADIUS_AU,
        ENCOUNTER_MAX_MISS_AU,
        ENCOUNTER_SIGMAS,
        NEAR_MISS_MAX_AU,
    )

    zhr = encounter.get("zhr") if isinstance(encounter.get("zhr"), dict) else {}
    number = zhr_number(encounter)
    miss = encounter.get("miss_distance_au")
    spread = encounter.get("miss_distance_spread_au")
    if number is None or not isinstance(miss, int | float) or not isinstance(spread, int | float):
        label = "encounter" if listed_as == "encounters" else "near miss"
        return {
            "label": label,
            "zhr_level": None,
            "reason": f"stored without a predicted ZHR: called {label} by its distance alone",
        }
    lo, hi = zhr.get("low"), zhr.get("high")
    found = classify_crossing(
        number,
        miss,
        spread,
        encounter_max_miss_au=ENCOUNTER_MAX_MISS_AU,
        encounter_sigmas=ENCOUNTER_SIGMAS,
        earth_radius_au=EARTH_RADIUS_AU,
        near_miss_max_au=max(NEAR_MISS_MAX_AU, abs(float(miss))),  # it was reported: keep it
        min_zhr=ENCOUNTER_MIN_ZHR,
        zhr_range=(lo, hi) if all(isinstance(x, int | float) for x in (lo, hi)) else None,
        zhr_mode=zhr.get("mode"),
    )
    out = found.to_json()
    out["reason"] += (
        "; labelled on reading: stored before crossings were classified by predicted activity"
    )
    return out


def stored_encounter(row) -> dict:
    """The encounter JSON of an ``encounters`` index row, with its ``classification``."""
    e = json.loads(row["encounter_json"])
    return dict(e, classification=classification_of(e, "encounters"))


def read_result(result: dict) -> dict:
    """A stored forecast result with a ``classification`` on every encounter and near miss
    (see :func:`classification_of`); results that have them come back unchanged."""
    keys = ("encounters", "near_misses")
    if all(isinstance(e.get("classification"), dict) for k in keys for e in result.get(k) or []):
        return result
    out = dict(result)
    for k in keys:
        if k in result:
            out[k] = [dict(e, classification=classification_of(e, k)) for e in result[k]]
    return out


def run(job: Job, ctx) -> dict:
    """The forecast (or every orbit solution's) for ``job``, as stored JSON."""
    from dynamics.forecast import forecast
    from dynamics.uncertainty import forecast_solutions

    orbit, options = forecast_inputs(job, ctx.workers)
    if orbit.solutions or orbit.covariance is not None:
        clones = job.request["options"].get("clones", 5)
        computed = forecast_solutions(
            orbit,
            options,
            clones=clones,
            progress=ctx.progress,
            executor=ctx.executor,
            should_stop=ctx.should_stop,
        )
        result = computed.to_json()
        result["particle_crossings"] = solution_particle_crossings(computed)
    else:
        computed = forecast(
            orbit,
            options,
            progress=ctx.progress,
            executor=ctx.executor,
            should_stop=ctx.should_stop,
        )
        result = computed.to_json()
        result["particle_crossings"] = particle_crossings(computed, result)
    return result


def zhr_number(encounter: dict) -> float | None:
    """The number the ``min_zhr`` filter compares, when the encounter carries a ``zhr``."""
    z = encounter.get("zhr")
    if isinstance(z, int | float) and not isinstance(z, bool):
        return float(z) if math.isfinite(z) else None
    if isinstance(z, dict):
        for key in ZHR_KEYS:
            v = z.get(key)
            if isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v):
                return float(v)
    return None


def store_result(conn: sqlite3.Connection, job: Job, result: dict) -> None:
    """One ``encounters`` row per predicted encounter (not near misses), in the done transaction."""
    parent = str(result.get("parent", {}).get("name", "") or job.label)
    conn.execute("DELETE FROM encounters WHERE job_id = ?", (job.id,))
    conn.executemany(
        "INSERT INTO encounters (job_id, idx, parent_name, year, peak_utc, zhr, encounter_json) "
        "VALUES (?, ?, ?, ?, ?, ?, ?)",
        [
            (
                job.id,
                k,
                parent,
                int(e.get("year") or e["peak_utc"][:4]),
                format_wall_utc(parse_utc(e["peak_utc"])),  # one format: sorts as text
                zhr_number(e),
                json.dumps(e),
            )
            for k, e in enumerate(result.get("encounters", []))
        ],
    )


def list_encounters(
    store,
    from_utc: str | None,
    to_utc: str | None,
    parent: str | None,
    min_zhr: float | None,
    after: tuple[str, str, int] | None,
    limit: int,
    include_superseded: bool = False,
) -> list[sqlite3.Row]:
    """Stored encounters ordered by peak time, filtered, after the cursor, at most ``limit``.

    Unless ``include_superseded``, an encounter is listed only from the latest done forecast of
    its parent with the same options that covers its year: a forecast run again (a new orbit
    solution, a new model version) replaces the older one's encounters instead of doubling them.
    """
    where, params = [], []
    if from_utc is not None:
        where.append("e.peak_utc >= ?")
        params.append(from_utc)
    if to_utc is not None:
        where.append("e.peak_utc <= ?")
        params.append(to_utc)
    if parent:
        escaped = parent.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
        where.append("e.parent_name LIKE ? ESCAPE '\\'")
        params.append(f"%{escaped}%")
    if min_zhr is not None:
        where.append("(e.zhr IS NULL OR e.zhr >= ?)")
        params.append(min_zhr)
    if after is not None:
        where.append("(e.peak_utc, e.job_id, e.idx) > (?, ?, ?)")
        params.extend(after)
    if not include_superseded:
        where.append(
            "NOT EXISTS (SELECT 1 FROM jobs n WHERE n.kind = 'forecast' AND n.state = 'done' "
            "AND n.series_key = j.series_key AND n.first_year <= e.year "
            "AND n.last_year >= e.year AND (n.finished_utc, n.id) > (j.finished_utc, j.id))"
        )
    sql = (
        "SELECT e.job_id, e.idx, e.parent_name, e.peak_utc, e.encounter_json, "
        "j.finished_utc FROM encounters e JOIN jobs j ON j.id = e.job_id "
        + ("WHERE " + " AND ".join(where) if where else "")
        + " ORDER BY e.peak_utc, e.job_id, e.idx LIMIT ?"
    )
    return store.query(sql, (*params, int(limit)))


KIND = JobKind(
    "forecast", run, store_result, failure_title="Forecast failed", read_result=read_result
)
