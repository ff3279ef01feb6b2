"""What each followed trail passage came to: the distance test, the activity classification
and the stated outcome of every trail in scope (encounter, negligible, near miss, distant
crossing, or not reached with the closest approach found and what was tried).
"""

from dataclasses import replace

import numpy as np

from .activity import (
    ENCOUNTER_MIN_ZHR,
    classify_crossing,
)
from .summaries import MIN_PARTICLES, TrailEncounter, year_of, zhr_value
from .targeting import Target
from .timescales import format_iso

#: |median miss distance| below which a trail crossing counts as passing close to Earth (au):
#: an encounter if its predicted ZHR reaches the level, else negligible (classify_crossing).
#: Common practice, no source: trails passing within ~0.005 au have given outbursts.
ENCOUNTER_MAX_MISS_AU = 0.005
#: ... and Earth's path must lie within this many standard deviations of the trail's
#: cross-section (the 16-84 % half-range of its meteoroids' miss distances) plus Earth's radius.
ENCOUNTER_SIGMAS = 3.0
EARTH_RADIUS_AU = 6371.0 / 149_597_870.7  # mean Earth radius (IUGG), in au
#: Trails crossing farther than this are not reported as crossings (au): their outcome is
#: "distant"; no meteoroid within the window of Earth's passage at all: "not reached".
NEAR_MISS_MAX_AU = 0.05
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


def outcome(tg: Target, tr, enc, options) -> dict:
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


def one_row_per_passage(outcomes, targets) -> list[dict]:
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


def classified(enc: TrailEncounter) -> TrailEncounter:
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
        direct_hit=None
        if enc.profile is None
        else (zhr_value(enc.profile.direct_hit_zhr), enc.profile.direct_hit_miss_au),
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
    direct_hit=None,
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
        direct_hit=direct_hit,
    )


#: Close passes with negligible activity named one by one in the note of a forecast without
#: encounters (the closest first; all of them are in its 'trails'): a parent of short period
#: has dozens (no source).
MAX_LISTED_CLOSE_PASSES = 10


def nothing_found_note(outcomes) -> str:
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
    weak = sorted(
        (o for o in outcomes if o["outcome"] == "negligible"),
        key=lambda o: abs(o["miss_distance_au"]),
    )
    close = ""
    if weak:
        listed = weak[:MAX_LISTED_CLOSE_PASSES]
        more = len(weak) - len(listed)
        close = (
            f"; {len(weak)} passed close to Earth's path but with negligible activity "
            f"(predicted peak ZHR below {weak[0]['zhr_level']:g}), the closest first: "
            + ", ".join(
                f"the {o['trail']['perihelion_year']} trail in {o['year']} after "
                f"{o['revolutions']} revolution{'' if o['revolutions'] == 1 else 's'} at "
                f"{abs(o['miss_distance_au']):.5f} au, ZHR {o['peak_zhr']:.3g} "
                f"({o['zhr_range'][0]:.3g}-{o['zhr_range'][1]:.3g})"
                for o in listed
            )
            + (f", and {more} more" if more else "")
        )
    return (
        f"no encounter: {len(outcomes)} trail "
        f"{'passage was' if len(outcomes) == 1 else 'passages were'} followed ({said})"
        f"{tail}{close}; "
        "see 'trails' for each one and what was tried"
    )
